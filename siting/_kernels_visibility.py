"""Compiled kernels behind :mod:`siting.visibility` (numba, ``cache=True``, ``parallel=True``).

All coordinates reaching these kernels are already shifted to the obstacle grid's local origin, so the
crossing arithmetic works on numbers of a few kilometres at most (no loss of precision from UTM eastings).

Data layout
-----------
Wall-edge grid: a uniform grid of square cells of side ``cs`` with origin ``(0, 0)`` and ``nx * ny`` cells.
Every footprint edge (exterior and hole rings) is listed in each cell its (slightly padded) bounding box
touches; the per-cell lists are stored contiguously (CSR: ``cell_start``) as copies of the edge coordinates
``ex0, ey0, ex1, ey1`` and the height ``eh`` of the owning building, so a cell's edges are read sequentially.
``cell_hmax`` is the tallest building among a cell's edges, used to skip cells the ray passes above.

Clearance (first-Fresnel-zone tube, ``kl`` = k^2 lambda > 0): the same layout built with edges padded by the
largest tube radius and its own origin, plus ``bld`` (building bounding boxes binned into the cells and each
building's edges, for the roof point-in-polygon test).  ``kl`` = 0 runs the bare-ray walk unchanged; the
clearance walk is compiled once, in :func:`clear_rays`.

Point grid: the ``b`` points sorted by cell of a uniform grid (side ``pcs``); ``pstart`` is the CSR offset of
each cell, ``porder`` maps a sorted position to the local ``b`` row.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

# Bounding boxes of edges are padded by this much when assigned to cells, so that a crossing lying on (or
# within rounding of) a cell boundary is found from either side [m].
EDGE_PAD_M = 1e-6
# A cell is only skipped when the ray passes at least this far above its tallest building [m].
HMAX_MARGIN_M = 1e-6


@njit(cache=True)
def build_edge_grid(ex0, ey0, ex1, ey1, eh, cs, nx, ny, pad):
    """Bin edges into the grid cells their bounding boxes, padded by ``pad`` [m], touch; returns the CSR arrays."""
    n = ex0.shape[0]
    counts = np.zeros(nx * ny + 1, np.int64)
    for e in range(n):
        ix0 = max(0, int(math.floor((min(ex0[e], ex1[e]) - pad) / cs)))
        ix1 = min(nx - 1, int(math.floor((max(ex0[e], ex1[e]) + pad) / cs)))
        iy0 = max(0, int(math.floor((min(ey0[e], ey1[e]) - pad) / cs)))
        iy1 = min(ny - 1, int(math.floor((max(ey0[e], ey1[e]) + pad) / cs)))
        for iy in range(iy0, iy1 + 1):
            for ix in range(ix0, ix1 + 1):
                counts[iy * nx + ix + 1] += 1
    start = np.cumsum(counts)
    m = start[-1]
    cx0 = np.empty(m, np.float64)
    cy0 = np.empty(m, np.float64)
    cx1 = np.empty(m, np.float64)
    cy1 = np.empty(m, np.float64)
    ch = np.empty(m, np.float64)
    hmax = np.full(nx * ny, -np.inf)
    fill = start[:-1].copy()
    for e in range(n):
        ix0 = max(0, int(math.floor((min(ex0[e], ex1[e]) - pad) / cs)))
        ix1 = min(nx - 1, int(math.floor((max(ex0[e], ex1[e]) + pad) / cs)))
        iy0 = max(0, int(math.floor((min(ey0[e], ey1[e]) - pad) / cs)))
        iy1 = min(ny - 1, int(math.floor((max(ey0[e], ey1[e]) + pad) / cs)))
        for iy in range(iy0, iy1 + 1):
            for ix in range(ix0, ix1 + 1):
                c = iy * nx + ix
                k = fill[c]
                cx0[k] = ex0[e]
                cy0[k] = ey0[e]
                cx1[k] = ex1[e]
                cy1[k] = ey1[e]
                ch[k] = eh[e]
                if eh[e] > hmax[c]:
                    hmax[c] = eh[e]
                fill[c] = k + 1
    return start, cx0, cy0, cx1, cy1, ch, hmax


@njit(cache=True, inline="always")
def edge_blocks(k, ax, ay, az, dx, dy, dz, cx0, cy0, cx1, cy1, ch):
    """True when the track a + t (dx, dy), t in [0, 1], crosses grid entry k below its building's height.

    Parallel (collinear) edges never block: a track running along a wall stays on the footprint's boundary.
    """
    ex = cx1[k] - cx0[k]
    ey = cy1[k] - cy0[k]
    den = dx * ey - dy * ex
    if den == 0.0:
        return False
    qx = cx0[k] - ax
    qy = cy0[k] - ay
    t = (qx * ey - qy * ex) / den
    if t < 0.0 or t > 1.0:
        return False
    u = (qx * dy - qy * dx) / den
    if u < 0.0 or u > 1.0:
        return False
    return az + t * dz < ch[k]


@njit(cache=True, inline="always")
def edge_crossing(k, ax, ay, az, dx, dy, dz, cx0, cy0, cx1, cy1, ch):
    """0: the track a + t (dx, dy), t in [0, 1], misses grid entry k (or runs parallel to it); 1: it crosses
    below the building's height (:func:`edge_blocks`); 2: it crosses at or above the roof."""
    ex = cx1[k] - cx0[k]
    ey = cy1[k] - cy0[k]
    den = dx * ey - dy * ex
    if den == 0.0:
        return 0
    qx = cx0[k] - ax
    qy = cy0[k] - ay
    t = (qx * ey - qy * ex) / den
    if t < 0.0 or t > 1.0:
        return 0
    u = (qx * dy - qy * dx) / den
    if u < 0.0 or u > 1.0:
        return 0
    return 1 if az + t * dz < ch[k] else 2


@njit(cache=True, inline="always")
def segment_blocked(ax, ay, az, bx, by, bz, cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax):
    """Grid entry of a blocking edge crossing of the 3-D segment a->b, or -1 when nothing blocks it.

    DDA traversal (Amanatides & Woo) of the edge-grid cells along the horizontal track; in each visited cell
    whose tallest building reaches above the ray, every edge is intersected with the track and the ray's
    height at the crossing compared with the building height.  Parallel (collinear) edges are skipped: a
    track running along a wall stays on the footprint's boundary, not inside it.  Endpoints inside a footprint
    are handled by the caller (``buried`` flags).
    """
    dx = bx - ax
    dy = by - ay
    dz = bz - az
    if dx == 0.0 and dy == 0.0:
        return -1
    # Liang-Barsky clip of the track to the grid box [0, nx*cs] x [0, ny*cs]
    t0 = 0.0
    t1 = 1.0
    xmax = nx * cs
    ymax = ny * cs
    if dx != 0.0:
        ta = (0.0 - ax) / dx
        tb = (xmax - ax) / dx
        if ta > tb:
            ta, tb = tb, ta
        t0 = max(t0, ta)
        t1 = min(t1, tb)
    elif ax < 0.0 or ax > xmax:
        return -1
    if dy != 0.0:
        ta = (0.0 - ay) / dy
        tb = (ymax - ay) / dy
        if ta > tb:
            ta, tb = tb, ta
        t0 = max(t0, ta)
        t1 = min(t1, tb)
    elif ay < 0.0 or ay > ymax:
        return -1
    if t0 > t1:
        return -1
    px = ax + t0 * dx
    py = ay + t0 * dy
    ix = min(nx - 1, max(0, int(math.floor(px / cs))))
    iy = min(ny - 1, max(0, int(math.floor(py / cs))))
    inf = np.inf
    if dx > 0.0:
        stepx = 1
        tmaxx = ((ix + 1) * cs - ax) / dx
        tdx = cs / dx
    elif dx < 0.0:
        stepx = -1
        tmaxx = (ix * cs - ax) / dx
        tdx = -cs / dx
    else:
        stepx = 0
        tmaxx = inf
        tdx = inf
    if dy > 0.0:
        stepy = 1
        tmaxy = ((iy + 1) * cs - ay) / dy
        tdy = cs / dy
    elif dy < 0.0:
        stepy = -1
        tmaxy = (iy * cs - ay) / dy
        tdy = -cs / dy
    else:
        stepy = 0
        tmaxy = inf
        tdy = inf
    t_enter = t0
    while True:
        t_exit = min(tmaxx, tmaxy, t1)
        c = iy * nx + ix
        za = az + t_enter * dz
        zb = az + t_exit * dz
        zmin = za if za < zb else zb
        if zmin < hmax[c] + HMAX_MARGIN_M:
            for k in range(start[c], start[c + 1]):
                if edge_blocks(k, ax, ay, az, dx, dy, dz, cx0, cy0, cx1, cy1, ch):
                    return k
        if t_exit >= t1:
            break
        if tmaxx < tmaxy:
            ix += stepx
            t_enter = tmaxx
            tmaxx += tdx
        else:
            iy += stepy
            t_enter = tmaxy
            tmaxy += tdy
        if ix < 0 or ix >= nx or iy < 0 or iy >= ny:
            break
    return -1


@njit(cache=True, inline="always")
def _tube_gprime(t, ax, ay, az, dx, dy, dz, c, ex0, ey0, evx, evy, h, u0, u1):
    """Derivative in t of g(t) = d_e(t)^2 + max(0, z(t) - h)^2 - c t (1 - t) (see ``wall_blocks``)."""
    u = u0 + t * u1
    u = 0.0 if u < 0.0 else (1.0 if u > 1.0 else u)
    rx = ax + t * dx - ex0 - u * evx
    ry = ay + t * dy - ey0 - u * evy
    w = az + t * dz - h
    w = w if w > 0.0 else 0.0
    return 2.0 * (rx * dx + ry * dy) + 2.0 * w * dz - c * (1.0 - 2.0 * t)


@njit(cache=True, inline="always")
def _tube_g(t, ax, ay, az, dx, dy, dz, c, ex0, ey0, evx, evy, h, u0, u1):
    """g(t): squared 3-D distance from P(t) to the wall face minus the squared tube radius c t (1 - t)."""
    u = u0 + t * u1
    u = 0.0 if u < 0.0 else (1.0 if u > 1.0 else u)
    rx = ax + t * dx - ex0 - u * evx
    ry = ay + t * dy - ey0 - u * evy
    w = az + t * dz - h
    w = w if w > 0.0 else 0.0
    return rx * rx + ry * ry + w * w - c * t * (1.0 - t)


@njit(cache=True, inline="always")
def edge_blocks_clear(k, ax, ay, az, dx, dy, dz, c, rad, rl, dd, zlo, cx0, cy0, cx1, cy1, ch):
    """Clearance test of grid entry k: the bare crossing below the roof, or the tube of radius
    sqrt(c t (1 - t)) around P(t) = a + t d, t in [0, 1], reaching strictly inside the distance of the
    entry's wall face (edge e x [0, h]).

    g(t) = d_e(t)^2 + max(0, z(t) - h)^2 - c t (1 - t), with d_e the horizontal distance from the track to
    the edge segment, is the squared distance from P(t) to the wall face minus the squared radius.  It is
    convex and continuously differentiable, and its derivative is piecewise linear with breaks where the
    projection of the track onto the edge line leaves the segment (u = 0, 1) and where z(t) = h.  The
    minimum is found exactly: the bracket where g' changes sign, then the root of that linear piece.

    Per-ray constants: ``rad`` = sqrt(c) / 2 the largest radius, ``dd`` = |d_xy|^2, ``rl`` = rad sqrt(dd),
    ``zlo`` = min(z_a, z_b).  Edges the tube cannot reach are rejected first (they cannot be crossed below
    the roof either): the ray stays ``rad`` above the roof, or both edge ends lie ``rad`` or more to the
    same side of the track's line.

    Returns 1 when the entry blocks, 2 when it does not but the track crosses it in plan view above the roof
    (the footprint is entered or left there: the roof test of the walk is then needed), 0 otherwise.  A
    rejected entry (0) either is not crossed in plan view or lies ``rad`` or more below the ray, so that its
    footprint's roof cannot reach the tube anywhere.
    """
    h = ch[k]
    ex0 = cx0[k]
    ey0 = cy0[k]
    evx = cx1[k] - ex0
    evy = cy1[k] - ey0
    qx = ex0 - ax
    qy = ey0 - ay
    s0 = dx * qy - dy * qx  # |d| x signed distance of each edge end from the track's line
    s1 = s0 + dx * evy - dy * evx
    # (branch-free) the ray stays rad above the roof, or both ends lie rl or more to one side of the line
    far = (zlo - h >= rad) | ((s0 * s1 > 0.0) & (min(abs(s0), abs(s1)) >= rl) & (dd > 0.0))
    if far:
        return 0
    cross = edge_crossing(k, ax, ay, az, dx, dy, dz, cx0, cy0, cx1, cy1, ch)
    if cross == 1:
        return 1
    p0 = dx * qx + dy * qy  # |d| x position of each edge end along the track
    p1 = p0 + dx * evx + dy * evy
    # lower bound through the distance to the edge's line: (sg0 + t sg1)^2 - |e|^2 c t (1 - t) without a
    # root in (0, 1) means the tube misses the wall
    ee = evx * evx + evy * evy
    sg0 = evy * qx - evx * qy
    sg1 = evx * dy - evy * dx
    qa = sg1 * sg1 + c * ee
    qb = 2.0 * sg0 * sg1 - c * ee
    miss = (qb * qb < 4.0 * qa * sg0 * sg0) | (qb >= 0.0) | (-qb >= 2.0 * qa)
    beyond = (cross == 0) & (dd > 0.0) & (((p0 <= -rl) & (p1 <= -rl)) | ((p0 >= dd + rl) & (p1 >= dd + rl)))
    if miss | beyond:
        return cross
    if _tube_min_negative(ax, ay, az, dx, dy, dz, c, ex0, ey0, evx, evy, h, qx, qy):
        return 1
    return cross


@njit(cache=True)
def _tube_min_negative(ax, ay, az, dx, dy, dz, c, ex0, ey0, evx, evy, h, qx, qy):
    """Exact part of :func:`edge_blocks_clear` (scalars only, kept out of the hot loop): min over t of g < 0?"""
    ee = evx * evx + evy * evy
    # lower bound: the distance to the edge's line, |sg0 + t sg1| / |e|, instead of the distance to the
    # wall face; when (sg0 + t sg1)^2 - |e|^2 c t (1 - t) has no root inside (0, 1) the tube misses the wall
    sg0 = evy * qx - evx * qy
    sg1 = evx * dy - evy * dx
    qa = sg1 * sg1 + c * ee
    qb = 2.0 * sg0 * sg1 - c * ee
    if qb * qb < 4.0 * qa * sg0 * sg0 or qb >= 0.0 or -qb >= 2.0 * qa:
        return False
    u0 = -(qx * evx + qy * evy) / ee
    u1 = (dx * evx + dy * evy) / ee
    # breakpoints of g' inside (0, 1), sorted (at most three)
    b0 = 2.0
    b1 = 2.0
    b2 = 2.0
    if u1 != 0.0:
        b0 = -u0 / u1
        b1 = (1.0 - u0) / u1
    if dz != 0.0:
        b2 = (h - az) / dz
    if b0 > b1:
        b0, b1 = b1, b0
    if b1 > b2:
        b1, b2 = b2, b1
    if b0 > b1:
        b0, b1 = b1, b0
    tl = 0.0
    gl = _tube_gprime(0.0, ax, ay, az, dx, dy, dz, c, ex0, ey0, evx, evy, h, u0, u1)
    if gl >= 0.0:
        return False  # minimum at t = 0, where the radius is zero and g >= 0
    for j in range(4):
        tr = b0 if j == 0 else (b1 if j == 1 else (b2 if j == 2 else 1.0))
        if tr <= tl or tr > 1.0:
            continue
        gr = _tube_gprime(tr, ax, ay, az, dx, dy, dz, c, ex0, ey0, evx, evy, h, u0, u1)
        if gr >= 0.0:
            tm = tl - gl * (tr - tl) / (gr - gl)
            return _tube_g(tm, ax, ay, az, dx, dy, dz, c, ex0, ey0, evx, evy, h, u0, u1) < 0.0
        tl = tr
        gl = gr
    return False  # g decreasing on [0, 1]: minimum at t = 1, radius zero


@njit(cache=True, inline="always")
def roof_over(qx, qy, zthr, cs, nx, ny, bld):
    """True when the ground point (qx, qy) lies strictly inside a footprint whose roof is above ``zthr``.

    ``bld`` = (gstart, gx0, gy0, gx1, gy1, gid, bstart, bh, ex0, ey0, ex1, ey1): the buildings' bounding
    boxes binned into the grid (CSR, ``gid`` the building index as float), the per-building CSR of its edges
    and its height.  Inside: crossing number over all rings of the building (holes and parts included).
    """
    gstart, gx0, gy0, gx1, gy1, gid, bstart, bh, ex0, ey0, ex1, ey1 = bld
    ix = int(math.floor(qx / cs))
    iy = int(math.floor(qy / cs))
    if ix < 0 or ix >= nx or iy < 0 or iy >= ny:
        return False
    c = iy * nx + ix
    for j in range(gstart[c], gstart[c + 1]):
        b = int(gid[j])
        if bh[b] <= zthr:
            continue
        if qx < gx0[j] or qx > gx1[j] or qy < gy0[j] or qy > gy1[j]:
            continue
        inside = False
        for e in range(bstart[b], bstart[b + 1]):
            y0 = ey0[e]
            y1 = ey1[e]
            if (y0 > qy) != (y1 > qy):
                xi = ex0[e] + (qy - y0) * (ex1[e] - ex0[e]) / (y1 - y0)
                if qx < xi:
                    inside = not inside
        if inside:
            return True
    return False


@njit(cache=True, inline="always")
def segment_blocked_clear(ax, ay, az, bx, by, bz, inside, kl, cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax, bld):
    """Clearance version of :func:`segment_blocked`: grid entry of a blocking edge, -2 when the tube reaches a
    roof away from every edge, -1 when clear.

    The tube radius is r(t) = sqrt(c t (1 - t)), c = kl * L (kl = k^2 lambda, L the 3-D length).  The grid
    must list every edge in each cell its bounding box padded by at least sqrt(c) / 2 touches, and extend
    that far beyond the edges.  A cell is visited when min over its track interval of z(t) - r(t) (convex:
    reached at the clamp of the stationary point t*) is below its tallest building.  After the walk, the roof
    under the stationary point t* of z - r is tested (point in polygon): the minimum of the convex z - r - h
    over the track's inside intervals of a footprint is at t* or at an interval end (a crossing, covered by
    the wall test with d = 0, or an endpoint, where r = 0).

    The roof test is skipped when the track cannot be over a footprint at t*: neither end lies inside a
    footprint (``inside``, from the caller), no visited edge is crossed in plan view and no cell holding
    edges was passed over without visiting it.  Otherwise the track enters every footprint it passes over
    through an edge, and that edge is either tested (crossed: flagged) or in a skipped cell (flagged).
    """
    dx = bx - ax
    dy = by - ay
    dz = bz - az
    c = kl * math.sqrt(dx * dx + dy * dy + dz * dz)
    if c <= 0.0:
        return segment_blocked(ax, ay, az, bx, by, bz, cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax)
    sc = math.sqrt(c)
    rad = 0.5 * sc
    dd = dx * dx + dy * dy
    rl = rad * math.sqrt(dd)
    zlo = az if dz > 0.0 else az + dz
    m = dz / sc
    ts = 0.5 * (1.0 - m / math.sqrt(1.0 + m * m))  # stationary point of z(t) - sqrt(c t (1 - t))
    t0 = 0.0
    t1 = 1.0
    xmax = nx * cs
    ymax = ny * cs
    if dx != 0.0:
        ta = (0.0 - ax) / dx
        tb = (xmax - ax) / dx
        if ta > tb:
            ta, tb = tb, ta
        t0 = max(t0, ta)
        t1 = min(t1, tb)
    elif ax < 0.0 or ax > xmax:
        return -1
    if dy != 0.0:
        ta = (0.0 - ay) / dy
        tb = (ymax - ay) / dy
        if ta > tb:
            ta, tb = tb, ta
        t0 = max(t0, ta)
        t1 = min(t1, tb)
    elif ay < 0.0 or ay > ymax:
        return -1
    if t0 > t1:
        return -1
    px = ax + t0 * dx
    py = ay + t0 * dy
    ix = min(nx - 1, max(0, int(math.floor(px / cs))))
    iy = min(ny - 1, max(0, int(math.floor(py / cs))))
    inf = np.inf
    if dx > 0.0:
        stepx = 1
        tmaxx = ((ix + 1) * cs - ax) / dx
        tdx = cs / dx
    elif dx < 0.0:
        stepx = -1
        tmaxx = (ix * cs - ax) / dx
        tdx = -cs / dx
    else:
        stepx = 0
        tmaxx = inf
        tdx = inf
    if dy > 0.0:
        stepy = 1
        tmaxy = ((iy + 1) * cs - ay) / dy
        tdy = cs / dy
    elif dy < 0.0:
        stepy = -1
        tmaxy = (iy * cs - ay) / dy
        tdy = -cs / dy
    else:
        stepy = 0
        tmaxy = inf
        tdy = inf
    t_enter = t0
    roof = inside
    while True:
        t_exit = min(tmaxx, tmaxy, t1)
        cell = iy * nx + ix
        za = az + t_enter * dz
        zb = az + t_exit * dz
        zmin = za if za < zb else zb
        hm = hmax[cell] + HMAX_MARGIN_M
        visit = zmin - rad < hm
        if visit and zmin >= hm:  # the ray is above the roofs: exact minimum of z - r over the cell
            tc = ts if ts > t_enter else t_enter
            tc = tc if tc < t_exit else t_exit
            visit = az + tc * dz - sc * math.sqrt(max(0.0, tc * (1.0 - tc))) < hm
        if visit:
            for k in range(start[cell], start[cell + 1]):
                # edge_blocks_clear written out in the loop, sharing the plan-view crossing's products:
                # the edge ends' signed distances from the track's line (times |d|) are -un and den - un
                ex0 = cx0[k]
                ey0 = cy0[k]
                evx = cx1[k] - ex0
                evy = cy1[k] - ey0
                h = ch[k]
                qx = ex0 - ax
                qy = ey0 - ay
                den = dx * evy - dy * evx
                un = qx * dy - qy * dx
                if den != 0.0:
                    tc = (qx * evy - qy * evx) / den
                    uc = un / den
                    if 0.0 <= tc <= 1.0 and 0.0 <= uc <= 1.0:   # crossed in plan view
                        if az + tc * dz < h:
                            return k
                        roof = True
                s0 = -un
                s1 = den - un
                lo = s0 if s0 < s1 else s1
                hi = s1 if s0 < s1 else s0
                # the ray stays rad above the roof, or both ends lie rl or more to one side of the line
                if (zlo - h >= rad) | ((dd > 0.0) & ((lo >= rl) | (hi <= -rl))):
                    continue
                p0 = dx * qx + dy * qy  # |d| x position of each edge end along the track
                p1 = p0 + dx * evx + dy * evy
                lo = p0 if p0 < p1 else p1
                hi = p1 if p0 < p1 else p0
                if (dd > 0.0) & ((hi <= -rl) | (lo >= dd + rl)):
                    continue
                # lower bound through the distance to the edge's line (see edge_blocks_clear)
                ee = evx * evx + evy * evy
                sg0 = evy * qx - evx * qy
                sg1 = evx * dy - evy * dx
                qa = sg1 * sg1 + c * ee
                qb = 2.0 * sg0 * sg1 - c * ee
                if (qb * qb < 4.0 * qa * sg0 * sg0) | (qb >= 0.0) | (-qb >= 2.0 * qa):
                    continue
                if _tube_min_negative(ax, ay, az, dx, dy, dz, c, ex0, ey0, evx, evy, h, qx, qy):
                    return k
        elif start[cell + 1] > start[cell]:
            roof = True
        if t_exit >= t1:
            break
        if tmaxx < tmaxy:
            ix += stepx
            t_enter = tmaxx
            tmaxx += tdx
        else:
            iy += stepy
            t_enter = tmaxy
            tmaxy += tdy
        if ix < 0 or ix >= nx or iy < 0 or iy >= ny:
            break
    if not roof:
        return -1
    fs = az + ts * dz - sc * math.sqrt(ts * (1.0 - ts))
    if roof_over(ax + ts * dx, ay + ts * dy, fs, cs, nx, ny, bld):
        return -2
    return -1


@njit(cache=True)
def clear_rays(ax, ay, az, ia, bx, by, bz, ib, inside_a, inside_b, kl, cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax,
               bld):  # fmt: skip
    """LOS flags under the clearance rule (kl = k^2 lambda > 0) for the rays a[ia[q]] -> b[ib[q]].

    The only compiled copy of the clearance walk: both entry points call it for a batch of rays (all rays
    of one ``a`` point, or a chunk of element-wise pairs), so the per-call cost is paid once per batch.  The
    grid entry that blocked the previous ray from the same ``a`` is tried first.  Buried endpoints are the
    caller's business.
    """
    n = ia.shape[0]
    out = np.empty(n, np.bool_)
    last = -1
    prev = -1
    for q in range(n):
        i = ia[q]
        j = ib[q]
        if i != prev:
            last = -1
            prev = i
        x = ax[i]
        y = ay[i]
        z = az[i]
        if last >= 0 and _last_blocks(last, x, y, z, bx[j], by[j], bz[j], kl, cx0, cy0, cx1, cy1, ch):
            out[q] = False
            continue
        k = segment_blocked_clear(x, y, z, bx[j], by[j], bz[j], inside_a[i] or inside_b[j], kl, cs, nx, ny, start,
                                  cx0, cy0, cx1, cy1, ch, hmax, bld)  # fmt: skip
        out[q] = k == -1
        if k >= 0:
            last = k
    return out


@njit(cache=True, parallel=True)
def los_elementwise(
    ax, ay, az, bx, by, bz, buried_a, buried_b, inside_a, inside_b, kl, cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax,
    bld,
):  # fmt: skip
    """Element-wise LOS flags for pairs (a[i], b[i])."""
    n = ax.shape[0]
    out = np.empty(n, np.bool_)
    if kl > 0.0:
        chunk = 512
        for c in prange((n + chunk - 1) // chunk):
            lo = c * chunk
            hi = min(n, lo + chunk)
            idx = np.arange(lo, hi)
            vis = clear_rays(ax, ay, az, idx, bx, by, bz, idx, inside_a, inside_b, kl, cs, nx, ny, start, cx0, cy0, cx1,
                             cy1, ch, hmax, bld)  # fmt: skip
            for q in range(hi - lo):
                out[lo + q] = vis[q] and not (buried_a[lo + q] or buried_b[lo + q])
        return out
    for i in prange(n):
        if buried_a[i] or buried_b[i]:
            out[i] = False
        else:
            out[i] = (
                segment_blocked(ax[i], ay[i], az[i], bx[i], by[i], bz[i], cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax)
                < 0
            )
    return out


@njit(cache=True, inline="always")
def _accept(ax, ay, az, bx, by, bz, r2, ha, nax, nay, thr_a, hb, nbx, nby, thr_b):
    """Range (3-D distance <= R, > 0) and facade filters (front half-space / steering limit)."""
    dx = bx - ax
    dy = by - ay
    dz = bz - az
    d2 = dx * dx + dy * dy + dz * dz
    if d2 > r2 or d2 == 0.0:
        return False
    if ha or hb:
        d = math.sqrt(d2)
        if ha and (nax * dx + nay * dy) <= thr_a * d:
            return False
        if hb and -(nbx * dx + nby * dy) <= thr_b * d:
            return False
    return True


@njit(cache=True, parallel=True)
def pairs_in_range(
    ax, ay, az, a_has, anx, any_, thr_a,
    bx, by, bz, b_has, bnx, bny, thr_b,
    r, px0, py0, pcs, pnx, pny, pstart, porder,
    with_los, buried_a, buried_b, inside_a, inside_b, kl,
    cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax, bld,
):  # fmt: skip
    """Two-pass (count, then fill) search of the b points within range of each a point, fused with LOS.

    Returns ``counts`` (per a), ``b_local`` (int64, sorted ascending within each a) and ``los`` (bool).
    """
    na = ax.shape[0]
    r2 = r * r
    counts = np.zeros(na, np.int64)
    for i in prange(na):
        counts[i] = _scan(
            i, False, counts, ax, ay, az, a_has, anx, any_, thr_a, bx, by, bz, b_has, bnx, bny, thr_b,
            r, r2, px0, py0, pcs, pnx, pny, pstart, porder, np.empty(0, np.int64),
            False, buried_a, buried_b, inside_a, inside_b, kl, cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax, bld,
        )  # fmt: skip
    offsets = np.zeros(na + 1, np.int64)
    for i in range(na):
        offsets[i + 1] = offsets[i] + counts[i]
    key = np.empty(offsets[na], np.int64)
    for i in prange(na):
        _scan(
            i, True, offsets, ax, ay, az, a_has, anx, any_, thr_a, bx, by, bz, b_has, bnx, bny, thr_b,
            r, r2, px0, py0, pcs, pnx, pny, pstart, porder, key,
            with_los, buried_a, buried_b, inside_a, inside_b, kl, cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax, bld,
        )  # fmt: skip
    return offsets, key


@njit(cache=True, inline="always")
def _last_blocks(k, x, y, z, bx, by, bz, kl, cx0, cy0, cx1, cy1, ch):
    """Does grid entry k (it blocked the previous ray from this point) block the ray to (bx, by, bz)?"""
    dx = bx - x
    dy = by - y
    dz = bz - z
    if edge_blocks(k, x, y, z, dx, dy, dz, cx0, cy0, cx1, cy1, ch):  # cheap, and enough under either rule
        return True
    if kl == 0.0:
        return False
    dd = dx * dx + dy * dy
    c = kl * math.sqrt(dd + dz * dz)
    rad = 0.5 * math.sqrt(c)
    zlo = z if dz > 0.0 else z + dz
    return edge_blocks_clear(k, x, y, z, dx, dy, dz, c, rad, rad * math.sqrt(dd), dd, zlo, cx0, cy0, cx1, cy1, ch) == 1


@njit(cache=True)
def _scan(
    i, fill, offsets, ax, ay, az, a_has, anx, any_, thr_a, bx, by, bz, b_has, bnx, bny, thr_b,
    r, r2, px0, py0, pcs, pnx, pny, pstart, porder, key,
    with_los, buried_a, buried_b, inside_a, inside_b, kl, cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax, bld,
):  # fmt: skip
    """Count (fill=False) or write (fill=True) the accepted b of point i; keys are 2*b + los, sorted."""
    x = ax[i]
    y = ay[i]
    z = az[i]
    ha = a_has[i]
    iy0 = max(0, int(math.floor((y - r - py0) / pcs)))
    iy1 = min(pny - 1, int(math.floor((y + r - py0) / pcs)))
    pos = offsets[i] if fill else 0
    n = 0
    last = -1  # grid entry that blocked the previous ray from this point: nearby rays usually share it
    for iy in range(iy0, iy1 + 1):
        # horizontal half-width of the disc over this row of cells
        ylo = py0 + iy * pcs
        yhi = ylo + pcs
        dyr = 0.0
        if y < ylo:
            dyr = ylo - y
        elif y > yhi:
            dyr = y - yhi
        hw2 = r2 - dyr * dyr
        if hw2 < 0.0:
            continue
        hw = math.sqrt(hw2)
        ix0 = max(0, int(math.floor((x - hw - px0) / pcs)))
        ix1 = min(pnx - 1, int(math.floor((x + hw - px0) / pcs)))
        if ix1 < ix0:
            continue
        for s in range(pstart[iy * pnx + ix0], pstart[iy * pnx + ix1 + 1]):
            j = porder[s]
            if not _accept(x, y, z, bx[j], by[j], bz[j], r2, ha, anx[i], any_[i], thr_a, b_has[j], bnx[j], bny[j], thr_b):
                continue
            if fill:
                vis = False
                if with_los and not (buried_a[i] or buried_b[j]):
                    # bare ray first (under either rule: the tube contains the ray, so a blocked ray stays
                    # blocked); with clearance the grid is the padded one, a superset of the bare lists
                    if last >= 0 and edge_blocks(last, x, y, z, bx[j] - x, by[j] - y, bz[j] - z, cx0, cy0, cx1, cy1, ch):
                        vis = False
                    else:
                        k = segment_blocked(x, y, z, bx[j], by[j], bz[j], cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax)
                        vis = k < 0
                        if k >= 0:
                            last = k
                key[pos + n] = 2 * j + (1 if vis else 0)
            n += 1
    if fill and with_los and kl > 0.0 and n > 0 and not buried_a[i]:
        # clearance rule on the rays the bare test left clear, in one batch (scan order)
        m = 0
        for q in range(n):
            m += key[pos + q] & 1
        if m > 0:
            qs = np.empty(m, np.int64)
            m = 0
            for q in range(n):
                if key[pos + q] & 1:
                    qs[m] = q
                    m += 1
            js = key[pos + qs] >> 1
            vis = clear_rays(ax, ay, az, np.full(m, i, np.int64), bx, by, bz, js, inside_a, inside_b, kl, cs, nx, ny,
                             start, cx0, cy0, cx1, cy1, ch, hmax, bld)  # fmt: skip
            for r in range(m):
                if not vis[r]:
                    key[pos + qs[r]] -= 1
    if fill and n > 1:
        key[pos : pos + n] = np.sort(key[pos : pos + n])
    return n


@njit(cache=True, parallel=True)
def output_offsets(offsets, key, los_only):
    """Per-a output offsets: all accepted pairs, or only those whose key carries the LOS bit."""
    na = offsets.shape[0] - 1
    counts = np.empty(na, np.int64)
    for i in prange(na):
        if los_only:
            c = 0
            for k in range(offsets[i], offsets[i + 1]):
                c += key[k] & 1
            counts[i] = c
        else:
            counts[i] = offsets[i + 1] - offsets[i]
    out = np.zeros(na + 1, np.int64)
    for i in range(na):
        out[i + 1] = out[i] + counts[i]
    return out


@njit(cache=True, parallel=True)
def write_pairs(
    offsets, key, out_off, los_only, a_rows, b_rows,
    ax, ay, az, a_has, anx, any_, bx, by, bz, b_has, bnx, bny,
    o_a, o_b, o_d3, o_d2, o_los, o_ang_a, o_ang_b, o_elev,
):  # fmt: skip
    """Decode the sorted keys of each a point and write the pair table columns in place.

    ``a_rows``/``b_rows`` map local rows to row positions in the full point sets; the float outputs may be
    float32 or float64 (the caller allocates them).  Metrics: 3-D and horizontal distance, 3-D angle between
    a facade end's horizontal outward normal and the direction to the other end, elevation of b from a.
    """
    na = offsets.shape[0] - 1
    rad = 180.0 / math.pi
    for i in prange(na):
        w = out_off[i]
        for k in range(offsets[i], offsets[i + 1]):
            vis = (key[k] & 1) == 1
            if los_only and not vis:
                continue
            j = key[k] >> 1
            dx = bx[j] - ax[i]
            dy = by[j] - ay[i]
            dz = bz[j] - az[i]
            h = math.sqrt(dx * dx + dy * dy)
            d = math.sqrt(dx * dx + dy * dy + dz * dz)
            o_a[w] = a_rows[i]
            o_b[w] = b_rows[j]
            o_los[w] = vis
            o_d3[w] = d
            o_d2[w] = h
            o_elev[w] = math.atan2(dz, h) * rad
            if a_has[i]:
                c = (anx[i] * dx + any_[i] * dy) / d
                o_ang_a[w] = math.acos(min(1.0, max(-1.0, c))) * rad
            else:
                o_ang_a[w] = np.nan
            if b_has[j]:
                c = -(bnx[j] * dx + bny[j] * dy) / d
                o_ang_b[w] = math.acos(min(1.0, max(-1.0, c))) * rad
            else:
                o_ang_b[w] = np.nan
            w += 1
