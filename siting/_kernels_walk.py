"""Compiled ray walks behind :mod:`siting.visibility` (numba, ``cache=True``, ``nogil=True``, serial).

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
building's edges, for the roof point-in-polygon test).  The clearance walk is compiled once, in
:func:`clear_rays`, and only when a job uses the clearance rule (the bare walk never calls it).

Compile cost: no function here is ``parallel=True`` (the parallel loops are Python threads over chunks, in
:mod:`siting._kernels_visibility`), so each kernel is compiled once, for one signature, and stored in numba's
cache on first use.  The helpers called per edge, per grid step or per ray are inlined at the numba IR level
(``inline="always"``): without it the first compile of the line-of-sight groups takes 13.4 instead of 17.7
CPU-seconds, but the clearance walk runs 20-30 % slower on every later run (measured on the real district with
``benchmarks/bench_visibility.py``).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from numba import njit

# Bounding boxes of edges are padded by this much when assigned to cells, so that a crossing lying on (or
# within rounding of) a cell boundary is found from either side [m].
EDGE_PAD_M = 1e-6
# A cell is only skipped when the ray passes at least this far above its tallest building [m].
HMAX_MARGIN_M = 1e-6

_JIT: dict[str, Any] = {"cache": True, "nogil": True}
# the helpers called per edge or per pair are inlined at the numba IR level: a call per edge costs ~30 %
_JIT_INLINE: dict[str, Any] = {**_JIT, "inline": "always"}


@njit(**_JIT)
def _cell_span(lo, hi, pad, cs, n):
    """First and last cell index (clipped to [0, n - 1]) touched by the interval [lo - pad, hi + pad] [m]."""
    return max(0, int(math.floor((lo - pad) / cs))), min(n - 1, int(math.floor((hi + pad) / cs)))


@njit(**_JIT)
def build_edge_grid(ex0, ey0, ex1, ey1, eh, cs, nx, ny, pad):
    """Bin edges into the grid cells their bounding boxes, padded by ``pad`` [m], touch; returns the CSR arrays."""
    n = ex0.shape[0]
    counts = np.zeros(nx * ny + 1, np.int64)
    for e in range(n):
        ix0, ix1 = _cell_span(min(ex0[e], ex1[e]), max(ex0[e], ex1[e]), pad, cs, nx)
        iy0, iy1 = _cell_span(min(ey0[e], ey1[e]), max(ey0[e], ey1[e]), pad, cs, ny)
        for iy in range(iy0, iy1 + 1):
            for ix in range(ix0, ix1 + 1):
                counts[iy * nx + ix + 1] += 1
    start = np.empty(nx * ny + 1, np.int64)  # (loops rather than np.cumsum / np.full: quicker to compile)
    fill = np.empty(nx * ny, np.int64)
    hmax = np.empty(nx * ny, np.float64)
    acc = 0
    for c in range(nx * ny + 1):
        acc += counts[c]
        start[c] = acc
        if c < nx * ny:
            fill[c] = acc
            hmax[c] = -np.inf
    m = start[nx * ny]
    cx0 = np.empty(m, np.float64)
    cy0 = np.empty(m, np.float64)
    cx1 = np.empty(m, np.float64)
    cy1 = np.empty(m, np.float64)
    ch = np.empty(m, np.float64)
    for e in range(n):
        ix0, ix1 = _cell_span(min(ex0[e], ex1[e]), max(ex0[e], ex1[e]), pad, cs, nx)
        iy0, iy1 = _cell_span(min(ey0[e], ey1[e]), max(ey0[e], ey1[e]), pad, cs, ny)
        for iy in range(iy0, iy1 + 1):
            for ix in range(ix0, ix1 + 1):
                c = iy * nx + ix
                k = fill[c]
                cx0[k] = ex0[e]
                cy0[k] = ey0[e]
                cx1[k] = ex1[e]
                cy1[k] = ey1[e]
                ch[k] = eh[e]
                hmax[c] = max(hmax[c], eh[e])
                fill[c] = k + 1
    return start, cx0, cy0, cx1, cy1, ch, hmax


@njit(**_JIT_INLINE)
def edge_crossing(k, ax, ay, az, dx, dy, dz, cx0, cy0, cx1, cy1, ch):
    """0: the track a + t (dx, dy), t in [0, 1], misses grid entry k (or runs parallel to it); 1: it crosses
    below the building's height; 2: it crosses at or above the roof.

    Parallel (collinear) edges never block: a track running along a wall stays on the footprint's boundary.
    """
    ex = cx1[k] - cx0[k]
    ey = cy1[k] - cy0[k]
    den = dx * ey - dy * ex
    if den == 0.0:
        return 0
    qx = cx0[k] - ax
    qy = cy0[k] - ay
    t = (qx * ey - qy * ex) / den
    u = (qx * dy - qy * dx) / den
    if t < 0.0 or t > 1.0 or u < 0.0 or u > 1.0:
        return 0
    return 1 if az + t * dz < ch[k] else 2


@njit(**_JIT_INLINE)
def edge_blocks(k, ax, ay, az, dx, dy, dz, cx0, cy0, cx1, cy1, ch):
    """True when the track a + t (dx, dy), t in [0, 1], crosses grid entry k below its building's height."""
    return edge_crossing(k, ax, ay, az, dx, dy, dz, cx0, cy0, cx1, cy1, ch) == 1


@njit(**_JIT_INLINE)
def _clip_axis(a, d, amax, t0, t1):
    """Liang-Barsky clip of a + t d, t in [t0, t1], to [0, amax] along one axis (empty: t0 > t1)."""
    if d != 0.0:
        ta = (0.0 - a) / d
        tb = (amax - a) / d
        if ta > tb:
            ta, tb = tb, ta
        return max(t0, ta), min(t1, tb)
    if a < 0.0 or a > amax:
        return 1.0, 0.0
    return t0, t1


@njit(**_JIT_INLINE)
def _dda_axis(a, d, i, cs):
    """(step, t of the next cell boundary, t per cell) of the DDA along one axis from cell i."""
    if d > 0.0:
        return 1, ((i + 1) * cs - a) / d, cs / d
    if d < 0.0:
        return -1, (i * cs - a) / d, -cs / d
    return 0, np.inf, np.inf


@njit(**_JIT_INLINE)
def _walk_start(ax, ay, dx, dy, cs, nx, ny):
    """Clip the track to the grid box [0, nx cs] x [0, ny cs] and set up the DDA (Amanatides & Woo).

    Returns (t0, t1, ix, iy, stepx, tmaxx, tdx, stepy, tmaxy, tdy); t0 > t1 when the track misses the box.
    """
    t0, t1 = _clip_axis(ax, dx, nx * cs, 0.0, 1.0)
    t0, t1 = _clip_axis(ay, dy, ny * cs, t0, t1)
    ix = min(nx - 1, max(0, int(math.floor((ax + t0 * dx) / cs))))
    iy = min(ny - 1, max(0, int(math.floor((ay + t0 * dy) / cs))))
    stepx, tmaxx, tdx = _dda_axis(ax, dx, ix, cs)
    stepy, tmaxy, tdy = _dda_axis(ay, dy, iy, cs)
    return t0, t1, ix, iy, stepx, tmaxx, tdx, stepy, tmaxy, tdy


@njit(**_JIT_INLINE)
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
    t_enter, t1, ix, iy, stepx, tmaxx, tdx, stepy, tmaxy, tdy = _walk_start(ax, ay, dx, dy, cs, nx, ny)
    if t_enter > t1:
        return -1
    while True:
        t_exit = min(tmaxx, tmaxy, t1)
        c = iy * nx + ix
        if min(az + t_enter * dz, az + t_exit * dz) < hmax[c] + HMAX_MARGIN_M:
            for k in range(start[c], start[c + 1]):
                if edge_crossing(k, ax, ay, az, dx, dy, dz, cx0, cy0, cx1, cy1, ch) == 1:
                    return k
        if t_exit >= t1:
            return -1
        if tmaxx < tmaxy:
            ix += stepx
            t_enter = tmaxx
            tmaxx += tdx
        else:
            iy += stepy
            t_enter = tmaxy
            tmaxy += tdy
        if ix < 0 or ix >= nx or iy < 0 or iy >= ny:
            return -1


_segment_blocked_call = njit(**_JIT)(segment_blocked.py_func)  # the same walk, called (not inlined)


@njit(**_JIT)
def _tube_gprime(t, ax, ay, az, dx, dy, dz, c, ex0, ey0, evx, evy, h, u0, u1):
    """Derivative in t of g(t) = d_e(t)^2 + max(0, z(t) - h)^2 - c t (1 - t) (see ``edge_blocks_clear``)."""
    u = min(1.0, max(0.0, u0 + t * u1))
    rx = ax + t * dx - ex0 - u * evx
    ry = ay + t * dy - ey0 - u * evy
    w = max(0.0, az + t * dz - h)
    return 2.0 * (rx * dx + ry * dy) + 2.0 * w * dz - c * (1.0 - 2.0 * t)


@njit(**_JIT)
def _tube_g(t, ax, ay, az, dx, dy, dz, c, ex0, ey0, evx, evy, h, u0, u1):
    """g(t): squared 3-D distance from P(t) to the wall face minus the squared tube radius c t (1 - t)."""
    u = min(1.0, max(0.0, u0 + t * u1))
    rx = ax + t * dx - ex0 - u * evx
    ry = ay + t * dy - ey0 - u * evy
    w = max(0.0, az + t * dz - h)
    return rx * rx + ry * ry + w * w - c * t * (1.0 - t)


@njit(**_JIT_INLINE)
def _line_bound_misses(qx, qy, dx, dy, evx, evy, c):
    """True when the tube misses even the edge's infinite line (so it misses the wall face).

    Lower bound through the distance to the edge's line, |sg0 + t sg1| / |e|: when
    (sg0 + t sg1)^2 - |e|^2 c t (1 - t) has no root inside (0, 1) the tube misses the wall.
    """
    ee = evx * evx + evy * evy
    sg0 = evy * qx - evx * qy
    sg1 = evx * dy - evy * dx
    qa = sg1 * sg1 + c * ee
    qb = 2.0 * sg0 * sg1 - c * ee
    return (qb * qb < 4.0 * qa * sg0 * sg0) | (qb >= 0.0) | (-qb >= 2.0 * qa)


@njit(**_JIT)
def _sorted3(b0, b1, b2):
    """The three numbers in ascending order."""
    if b0 > b1:
        b0, b1 = b1, b0
    if b1 > b2:
        b1, b2 = b2, b1
    if b0 > b1:
        b0, b1 = b1, b0
    return b0, b1, b2


@njit(**_JIT)
def _tube_min_negative(ax, ay, az, dx, dy, dz, c, ex0, ey0, evx, evy, h, qx, qy):
    """Exact part of :func:`edge_blocks_clear`: is the minimum over t in [0, 1] of g negative?

    g is convex and continuously differentiable, and g' is piecewise linear with breaks where the projection
    of the track onto the edge line leaves the segment (u = 0, 1) and where z(t) = h: the bracket where g'
    changes sign is found, then the root of that linear piece.
    """
    if _line_bound_misses(qx, qy, dx, dy, evx, evy, c):
        return False
    ee = evx * evx + evy * evy
    u0 = -(qx * evx + qy * evy) / ee
    u1 = (dx * evx + dy * evy) / ee
    # breakpoints of g' inside (0, 1), sorted (at most three)
    b0 = -u0 / u1 if u1 != 0.0 else 2.0
    b1 = (1.0 - u0) / u1 if u1 != 0.0 else 2.0
    b2 = (h - az) / dz if dz != 0.0 else 2.0
    b0, b1, b2 = _sorted3(b0, b1, b2)
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


@njit(**_JIT_INLINE)
def edge_blocks_clear(k, ax, ay, az, dx, dy, dz, c, rad, rl, dd, zlo, cx0, cy0, cx1, cy1, ch):
    """Clearance test of grid entry k: the bare crossing below the roof, or the tube of radius
    sqrt(c t (1 - t)) around P(t) = a + t d, t in [0, 1], reaching strictly inside the distance of the
    entry's wall face (edge e x [0, h]).

    g(t) = d_e(t)^2 + max(0, z(t) - h)^2 - c t (1 - t), with d_e the horizontal distance from the track to
    the edge segment, is the squared distance from P(t) to the wall face minus the squared radius; its
    minimum is found exactly (:func:`_tube_min_negative`).

    Per-ray constants: ``rad`` = sqrt(c) / 2 the largest radius, ``dd`` = |d_xy|^2, ``rl`` = rad sqrt(dd),
    ``zlo`` = min(z_a, z_b).  Edges the tube cannot reach are rejected first (they cannot be crossed below
    the roof either): the ray stays ``rad`` above the roof, both edge ends lie ``rl`` / |d| or more to the
    same side of the track's line, or both lie that far beyond the same end of the track.

    Returns 1 when the entry blocks, 2 when it does not but the track crosses it in plan view above the roof
    (the footprint is entered or left there: the roof test of the walk is then needed), 0 otherwise.
    """
    h = ch[k]
    ex0 = cx0[k]
    ey0 = cy0[k]
    evx = cx1[k] - ex0
    evy = cy1[k] - ey0
    qx = ex0 - ax
    qy = ey0 - ay
    cross = edge_crossing(k, ax, ay, az, dx, dy, dz, cx0, cy0, cx1, cy1, ch)
    if cross == 1:
        return 1
    s0 = dx * qy - dy * qx  # |d| x signed distance of each edge end from the track's line
    s1 = s0 + dx * evy - dy * evx
    p0 = dx * qx + dy * qy  # |d| x position of each edge end along the track
    p1 = p0 + dx * evx + dy * evy
    side = (dd > 0.0) & ((min(s0, s1) >= rl) | (max(s0, s1) <= -rl))
    beyond = (dd > 0.0) & ((max(p0, p1) <= -rl) | (min(p0, p1) >= dd + rl))
    if (zlo - h >= rad) | side | beyond:
        return cross
    if _tube_min_negative(ax, ay, az, dx, dy, dz, c, ex0, ey0, evx, evy, h, qx, qy):
        return 1
    return cross


@njit(**_JIT)
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
        if bh[b] <= zthr or qx < gx0[j] or qx > gx1[j] or qy < gy0[j] or qy > gy1[j]:
            continue
        inside = False
        for e in range(bstart[b], bstart[b + 1]):
            y0 = ey0[e]
            y1 = ey1[e]
            if (y0 > qy) != (y1 > qy) and qx < ex0[e] + (qy - y0) * (ex1[e] - ex0[e]) / (y1 - y0):
                inside = not inside
        if inside:
            return True
    return False


@njit(**_JIT_INLINE)
def _visit_clear(t_enter, t_exit, az, dz, hm, rad, ts, sc):
    """Does the tube reach below ``hm`` over the track interval [t_enter, t_exit] of a cell?

    min over the interval of z(t) - r(t) is convex in t and reached at the clamp of its stationary point ts.
    """
    zmin = min(az + t_enter * dz, az + t_exit * dz)
    if zmin - rad >= hm:
        return False
    if zmin < hm:
        return True
    tc = min(t_exit, max(ts, t_enter))
    return az + tc * dz - sc * math.sqrt(max(0.0, tc * (1.0 - tc))) < hm


@njit(**_JIT)
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
        return _segment_blocked_call(ax, ay, az, bx, by, bz, cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax)
    sc = math.sqrt(c)
    rad = 0.5 * sc
    dd = dx * dx + dy * dy
    rl = rad * math.sqrt(dd)
    zlo = min(az, bz)
    m = dz / sc
    ts = 0.5 * (1.0 - m / math.sqrt(1.0 + m * m))  # stationary point of z(t) - sqrt(c t (1 - t))
    t_enter, t1, ix, iy, stepx, tmaxx, tdx, stepy, tmaxy, tdy = _walk_start(ax, ay, dx, dy, cs, nx, ny)
    if t_enter > t1:
        return -1
    roof = inside
    while True:
        t_exit = min(tmaxx, tmaxy, t1)
        cell = iy * nx + ix
        if _visit_clear(t_enter, t_exit, az, dz, hmax[cell] + HMAX_MARGIN_M, rad, ts, sc):
            for k in range(start[cell], start[cell + 1]):
                code = edge_blocks_clear(k, ax, ay, az, dx, dy, dz, c, rad, rl, dd, zlo, cx0, cy0, cx1, cy1, ch)
                if code == 1:
                    return k
                roof |= code == 2
        else:
            roof |= start[cell + 1] > start[cell]
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
    if roof and roof_over(ax + ts * dx, ay + ts * dy, az + ts * dz - sc * math.sqrt(ts * (1.0 - ts)), cs, nx, ny,
                          bld):  # fmt: skip
        return -2
    return -1


@njit(**_JIT)
def last_blocks(k, x, y, z, bx, by, bz, kl, cx0, cy0, cx1, cy1, ch):
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
    zlo = min(z, bz)
    return edge_blocks_clear(k, x, y, z, dx, dy, dz, c, rad, rad * math.sqrt(dd), dd, zlo, cx0, cy0, cx1, cy1, ch) == 1


@njit(**_JIT)
def clear_rays(ax, ay, az, ia, bx, by, bz, ib, inside_a, inside_b, kl, cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax,
               bld):  # fmt: skip
    """LOS flags under the clearance rule (kl = k^2 lambda > 0) for the rays a[ia[q]] -> b[ib[q]].

    The only compiled copy of the clearance walk: both entry points call it for a batch of rays (the rays
    of one ``a`` point, or a chunk of element-wise pairs), so the per-call cost is paid once per batch.  The
    grid entry that blocked the previous ray from the same ``a`` is tried first.  Buried endpoints are the
    caller's business.
    """
    n = ia.shape[0]
    out = np.empty(n, np.bool_)
    last = np.int64(-1)
    prev = -1
    for q in range(n):
        i = ia[q]
        j = ib[q]
        if i != prev:
            last = np.int64(-1)
            prev = i
        if last >= 0 and last_blocks(last, ax[i], ay[i], az[i], bx[j], by[j], bz[j], kl, cx0, cy0, cx1, cy1, ch):
            out[q] = False
            continue
        k = segment_blocked_clear(ax[i], ay[i], az[i], bx[j], by[j], bz[j], inside_a[i] or inside_b[j], kl, cs, nx,
                                  ny, start, cx0, cy0, cx1, cy1, ch, hmax, bld)  # fmt: skip
        out[q] = k == -1
        last = k if k >= 0 else last
    return out
