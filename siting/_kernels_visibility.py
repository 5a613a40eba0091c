"""Pair search and element-wise LOS behind :mod:`siting.visibility`: compiled chunk kernels run on threads.

The ray walks live in :mod:`siting._kernels_walk` (data layout there).  Here:

- :func:`pairs_in_range`: two-pass (count, then fill) search of the ``b`` points within range of each ``a``
  point, fused with the bare-ray LOS test; under the clearance rule (``kl`` > 0) a third pass tests the rays
  the bare test left clear.  Point grid: the ``b`` points sorted by cell of a uniform grid (side ``pcs``);
  ``pstart`` is the CSR offset of each cell, ``porder`` maps a sorted position to the local ``b`` row.
- :func:`los_elementwise`: LOS flags for pairs (a[i], b[i]).
- :func:`output_offsets`, :func:`write_pairs`: decode the keys into the pair table's columns.

Parallelism and compile cost
----------------------------
The kernels are serial numba functions compiled with ``nogil=True``; the public functions split the work
into chunks of ``a`` points (dynamic scheduling: each of ``numba.get_num_threads()`` threads takes the next
chunk, the chunk size is ``numba.get_parallel_chunksize()`` or larger for big inputs).  Numba's
``parallel=True`` would compile every ``prange`` body (and every kernel it calls, once per distinct index
type) again; serial kernels with plain arguments compile once, for one signature (the wrappers normalise
dtypes and contiguity), and only when used: the clearance kernels compile only for jobs with the clearance
rule.  Every kernel is stored in numba's on-disk cache (``cache=True``).
"""

from __future__ import annotations

import itertools
import math
from concurrent.futures import ThreadPoolExecutor
from typing import Any

import numba
import numpy as np
from numba import njit

from . import _kernels_walk as _kw
from ._kernels_walk import EDGE_PAD_M, HMAX_MARGIN_M, clear_rays, edge_blocks, segment_blocked
from ._warmup import wait as _wait_compile

__all__ = ["EDGE_PAD_M", "HMAX_MARGIN_M", "build_edge_grid", "pairs_in_range", "los_elementwise", "output_offsets",
           "write_pairs"]

_JIT: dict[str, Any] = {"cache": True, "nogil": True}
# the helpers called per edge or per pair are inlined at the numba IR level: a call per edge costs ~30 %
_JIT_INLINE: dict[str, Any] = {**_JIT, "inline": "always"}
_MAX_CHUNKS = 4096  # the chunk size grows beyond the configured one so that no call makes more chunks


def for_chunks(kernel, n: int, *args) -> None:
    """Run ``kernel(lo, hi, *args)`` over [0, n) in chunks, on ``numba.get_num_threads()`` threads.

    Dynamic scheduling: every thread takes the next chunk when done (the work per point is uneven).  The
    kernels must release the GIL (``nogil=True``) and write disjoint parts of their outputs.
    """
    chunk = max(numba.get_parallel_chunksize() or 16, -(-n // _MAX_CHUNKS), 1)
    n_chunks = -(-n // chunk)
    n_threads = min(max(1, numba.get_num_threads()), n_chunks)
    if n_threads <= 1:
        if n > 0:
            kernel(0, n, *args)
        return
    counter = itertools.count()

    def work() -> None:
        for c in iter(counter.__next__, None):
            if c >= n_chunks:
                return
            kernel(c * chunk, min(n, (c + 1) * chunk), *args)

    with ThreadPoolExecutor(n_threads - 1) as pool:
        futures = [pool.submit(work) for _ in range(n_threads - 1)]
        work()
        for f in futures:
            f.result()


def build_edge_grid(ex0, ey0, ex1, ey1, eh, cs, nx, ny, pad):
    """Bin edges into the grid cells their bounding boxes, padded by ``pad`` [m], touch; returns the CSR arrays
    ``(start, cx0, cy0, cx1, cy1, ch, hmax)`` (see :mod:`siting._kernels_walk`)."""
    _wait_compile("rays")
    return _kw.build_edge_grid(*_f64(ex0, ey0, ex1, ey1, eh), float(cs), int(nx), int(ny), float(pad))


def _f64(*arrays):
    return tuple(np.require(a, np.float64, ["C", "W"]) for a in arrays)


def _flags(*arrays):
    return tuple(np.require(a, np.bool_, ["C", "W"]) for a in arrays)


def _grid(cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax):
    """The edge grid as one tuple of fixed types (one compiled signature)."""
    return (float(cs), int(nx), int(ny), np.require(start, np.int64, ["C", "W"])) + _f64(cx0, cy0, cx1, cy1, ch, hmax)


def _bld(bld):
    gstart, gx0, gy0, gx1, gy1, gid, bstart, bh, ex0, ey0, ex1, ey1 = bld
    i64 = lambda a: np.require(a, np.int64, ["C", "W"])  # noqa: E731
    return (i64(gstart), *_f64(gx0, gy0, gx1, gy1, gid), i64(bstart), *_f64(bh, ex0, ey0, ex1, ey1))


@njit(**_JIT_INLINE)
def _accept(ax, ay, az, bx, by, bz, r2, ha, nax, nay, thr_a, hb, nbx, nby, thr_b):
    """Range (3-D distance <= R, > 0) and facade filters (front half-space / steering limit)."""
    dx = bx - ax
    dy = by - ay
    dz = bz - az
    d2 = dx * dx + dy * dy + dz * dz
    if d2 > r2 or d2 == 0.0:
        return False
    if not (ha or hb):
        return True
    d = math.sqrt(d2)
    return not ((ha and (nax * dx + nay * dy) <= thr_a * d) or (hb and -(nbx * dx + nby * dy) <= thr_b * d))


@njit(**_JIT_INLINE)
def _row_span(iy, x, y, r2, pg):
    """Sorted ``b`` positions [s0, s1) in the cells of row iy of the point grid that meet the disc of range r."""
    px0, py0, pcs, pnx, pny, pstart, porder = pg
    ylo = py0 + iy * pcs
    dyr = max(0.0, ylo - y, y - (ylo + pcs))
    hw2 = r2 - dyr * dyr
    if hw2 < 0.0:
        return 0, 0
    hw = math.sqrt(hw2)
    ix0 = max(0, int(math.floor((x - hw - px0) / pcs)))
    ix1 = min(pnx - 1, int(math.floor((x + hw - px0) / pcs)))
    if ix1 < ix0:
        return 0, 0
    return pstart[iy * pnx + ix0], pstart[iy * pnx + ix1 + 1]


@njit(**_JIT_INLINE)
def _bare_los(x, y, z, bx, by, bz, last, grid):
    """(LOS bit under the bare-ray rule, grid entry to try first for the next ray from the same point)."""
    cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax = grid
    if last >= 0 and edge_blocks(last, x, y, z, bx - x, by - y, bz - z, cx0, cy0, cx1, cy1, ch):
        return 0, last
    k = segment_blocked(x, y, z, bx, by, bz, cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax)
    return (0, k) if k >= 0 else (1, last)


@njit(**_JIT)
def _scan(i, fill, pos, key, a, b, thr, r, pg, with_los, buried_a, buried_b, grid, sort):
    """Count (fill=False) or write (fill=True, from ``key[pos]``) the accepted b of point i.

    Keys are 2*b + LOS bit (bare-ray rule), in scan order, sorted when ``sort``.  Returns the number of
    accepted b.
    """
    ax, ay, az, a_has, anx, any_ = a
    bx, by, bz, b_has, bnx, bny = b
    thr_a, thr_b = thr
    py0, pcs, pny, porder = pg[1], pg[2], pg[4], pg[6]
    x, y, z = ax[i], ay[i], az[i]
    r2 = r * r
    los_ok = with_los and not buried_a[i]
    n = 0
    last = np.int64(-1)  # grid entry that blocked the previous ray from this point: nearby rays usually share it
    for iy in range(max(0, int(math.floor((y - r - py0) / pcs))), min(pny - 1, int(math.floor((y + r - py0) / pcs))) + 1):
        s0, s1 = _row_span(iy, x, y, r2, pg)
        for s in range(s0, s1):
            j = porder[s]
            if not _accept(x, y, z, bx[j], by[j], bz[j], r2, a_has[i], anx[i], any_[i], thr_a, b_has[j], bnx[j],
                           bny[j], thr_b):  # fmt: skip
                continue
            if fill:
                vis = 0
                if los_ok and not buried_b[j]:
                    vis, last = _bare_los(x, y, z, bx[j], by[j], bz[j], last, grid)
                key[pos + n] = 2 * j + vis
            n += 1
    if fill and sort and n > 1:
        _shell_sort(key, pos, pos + n)
    return n


@njit(**_JIT)
def _shell_sort(a, lo, hi):
    """Sort a[lo:hi] in place ascending (Shell sort, Ciura's gap sequence extended by x2.25; a few lines that
    compile in a fraction of the time of ``np.sort``, and fast on the short, partly ordered runs of one point)."""
    n = hi - lo
    gap = 1
    while gap * 9 // 4 + 1 < n:
        gap = gap * 9 // 4 + 1
    while gap > 0:
        for i in range(lo + gap, hi):
            v = a[i]
            j = i
            while j - gap >= lo and a[j - gap] > v:
                a[j] = a[j - gap]
                j -= gap
            a[j] = v
        gap = 1 if gap in (2, 3) else gap * 4 // 9
    return a


@njit(**_JIT)
def _scan_range(lo, hi, fill, offsets, key, a, b, thr, r, pg, with_los, buried_a, buried_b, grid, sort):
    """Count pass (``fill`` False: ``offsets[i]`` = accepted b of point i) or fill pass (the keys of point i
    from ``key[offsets[i]]``, sorted when ``sort``) for the points [lo, hi).  One kernel for both passes."""
    for i in range(lo, hi):
        n = _scan(i, fill, offsets[i] if fill else 0, key, a, b, thr, r, pg, with_los, buried_a, buried_b, grid,
                  sort)  # fmt: skip
        if not fill:
            offsets[i] = n


@njit(**_JIT)
def _clear_range(lo, hi, offsets, key, a, b, buried_a, inside_a, inside_b, kl, grid, bld):
    """Clearance rule on the rays of the points [lo, hi) that the bare test left clear (the LOS bit is cleared
    where the tube is obstructed), in scan order (neighbouring rays share blockers); then the keys are sorted."""
    ax, ay, az = a[0], a[1], a[2]
    bx, by, bz = b[0], b[1], b[2]
    cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax = grid
    for i in range(lo, hi):
        o = offsets[i]
        n = offsets[i + 1] - o
        m = 0
        for q in range(n):
            m += key[o + q] & 1
        if m > 0 and not buried_a[i]:
            # plain loops rather than np.flatnonzero / fancy indexing: the same work, less to compile
            ia = np.empty(m, np.int64)
            jb = np.empty(m, np.int64)
            qs = np.empty(m, np.int64)
            t = 0
            for q in range(n):
                if key[o + q] & 1:
                    ia[t] = i
                    jb[t] = key[o + q] >> 1
                    qs[t] = q
                    t += 1
            vis = clear_rays(ax, ay, az, ia, bx, by, bz, jb, inside_a, inside_b, kl, cs, nx, ny, start, cx0, cy0, cx1,
                             cy1, ch, hmax, bld)  # fmt: skip
            for t in range(m):
                if not vis[t]:
                    key[o + qs[t]] -= 1
        _shell_sort(key, o, o + n)


def pairs_in_range(
    ax, ay, az, a_has, anx, any_, thr_a,
    bx, by, bz, b_has, bnx, bny, thr_b,
    r, px0, py0, pcs, pnx, pny, pstart, porder,
    with_los, buried_a, buried_b, inside_a, inside_b, kl,
    cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax, bld,
):  # fmt: skip
    """Search the b points within range of each a point, with the LOS bit of each pair.

    Returns ``offsets`` (int64, na + 1: the CSR offsets per a) and ``key`` (int64, 2*b + LOS, sorted
    ascending within each a).  LOS follows the bare-ray rule when ``kl`` = 0, the clearance rule otherwise.
    """
    _wait_compile("rays")
    a = (*_f64(ax, ay, az), *_flags(a_has), *_f64(anx, any_))
    b = (*_f64(bx, by, bz), *_flags(b_has), *_f64(bnx, bny))
    thr = (float(thr_a), float(thr_b))
    pg = (float(px0), float(py0), float(pcs), int(pnx), int(pny), np.require(pstart, np.int64, ["C", "W"]),
          np.require(porder, np.int64, ["C", "W"]))  # fmt: skip
    buried_a, buried_b, inside_a, inside_b = _flags(buried_a, buried_b, inside_a, inside_b)
    grid = _grid(cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax)
    na = a[0].shape[0]
    counts = np.zeros(na, np.int64)
    clear = bool(with_los) and kl > 0.0
    for_chunks(_scan_range, na, False, counts, np.empty(0, np.int64), a, b, thr, float(r), pg, bool(with_los),
               buried_a, buried_b, grid, True)  # fmt: skip
    offsets = np.zeros(na + 1, np.int64)
    np.cumsum(counts, out=offsets[1:])
    key = np.empty(offsets[-1], np.int64)
    for_chunks(_scan_range, na, True, offsets, key, a, b, thr, float(r), pg, bool(with_los), buried_a, buried_b,
               grid, not clear)  # fmt: skip
    if clear:
        _wait_compile("clearance")
        for_chunks(_clear_range, na, offsets, key, a, b, buried_a, inside_a, inside_b, float(kl), grid, _bld(bld))
    return offsets, key


@njit(**_JIT)
def _los_bare_range(lo, hi, out, a, b, buried_a, buried_b, grid):
    """Element-wise bare-ray LOS for the pairs [lo, hi)."""
    cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax = grid
    for i in range(lo, hi):
        out[i] = not (buried_a[i] or buried_b[i]) and segment_blocked(
            a[0][i], a[1][i], a[2][i], b[0][i], b[1][i], b[2][i], cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax
        ) < 0  # fmt: skip


@njit(**_JIT)
def _los_clear_range(lo, hi, out, a, b, buried_a, buried_b, inside_a, inside_b, kl, grid, bld):
    """Element-wise clearance-rule LOS for the pairs [lo, hi) (one batch of rays)."""
    cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax = grid
    idx = np.empty(hi - lo, np.int64)
    for q in range(hi - lo):
        idx[q] = lo + q
    vis = clear_rays(a[0], a[1], a[2], idx, b[0], b[1], b[2], idx, inside_a, inside_b, kl, cs, nx, ny, start, cx0, cy0,
                     cx1, cy1, ch, hmax, bld)  # fmt: skip
    for q in range(hi - lo):
        out[lo + q] = vis[q] and not (buried_a[lo + q] or buried_b[lo + q])


def los_elementwise(
    ax, ay, az, bx, by, bz, buried_a, buried_b, inside_a, inside_b, kl, cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax,
    bld,
):  # fmt: skip
    """Element-wise LOS flags for pairs (a[i], b[i]) (bare-ray rule when ``kl`` = 0, clearance rule otherwise)."""
    _wait_compile("clearance" if kl > 0.0 else "rays")
    a = _f64(ax, ay, az)
    b = _f64(bx, by, bz)
    buried_a, buried_b = _flags(buried_a, buried_b)
    grid = _grid(cs, nx, ny, start, cx0, cy0, cx1, cy1, ch, hmax)
    out = np.empty(a[0].shape[0], np.bool_)
    if kl > 0.0:
        for_chunks(_los_clear_range, out.shape[0], out, a, b, buried_a, buried_b, *_flags(inside_a, inside_b),
                   float(kl), grid, _bld(bld))  # fmt: skip
    else:
        for_chunks(_los_bare_range, out.shape[0], out, a, b, buried_a, buried_b, grid)
    return out


def output_offsets(offsets, key, los_only):
    """Per-a output offsets: all accepted pairs, or only those whose key carries the LOS bit."""
    if not los_only:
        return np.asarray(offsets, np.int64).copy()
    cum = np.zeros(len(key) + 1, np.int64)
    np.cumsum(np.asarray(key) & 1, out=cum[1:])
    return cum[np.asarray(offsets)]


@njit(**_JIT)
def _write_range(lo, hi, offsets, key, out_off, los_only, a_rows, b_rows, a, b, out):
    """Pair table rows of the a points [lo, hi) (see :func:`write_pairs`)."""
    ax, ay, az, a_has, anx, any_ = a
    bx, by, bz, b_has, bnx, bny = b
    o_a, o_b, o_d3, o_d2, o_los, o_ang_a, o_ang_b, o_elev = out
    deg = 180.0 / math.pi
    for i in range(lo, hi):
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
            o_elev[w] = math.atan2(dz, h) * deg
            ca = min(1.0, max(-1.0, (anx[i] * dx + any_[i] * dy) / d))
            cb = min(1.0, max(-1.0, -(bnx[j] * dx + bny[j] * dy) / d))
            o_ang_a[w] = math.acos(ca) * deg if a_has[i] else np.nan
            o_ang_b[w] = math.acos(cb) * deg if b_has[j] else np.nan
            w += 1


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
    _wait_compile("rays")
    i64 = lambda v: np.require(v, np.int64, ["C", "W"])  # noqa: E731
    a = (*_f64(ax, ay, az), *_flags(a_has), *_f64(anx, any_))
    b = (*_f64(bx, by, bz), *_flags(b_has), *_f64(bnx, bny))
    out = (o_a, o_b, o_d3, o_d2, o_los, o_ang_a, o_ang_b, o_elev)
    for_chunks(_write_range, len(offsets) - 1, i64(offsets), i64(key), i64(out_off), bool(los_only), i64(a_rows),
               i64(b_rows), a, b, out)  # fmt: skip


def compile_kernels(clearance: bool) -> None:
    """Compile (or load from numba's cache) the kernels of one rule with zero-length work (first-run warm-up).

    The dummy arguments pass through the same normalisation as the real ones, so the compiled signature is
    the one jobs use.
    """
    e, i, f = np.zeros(0), np.zeros(0, np.int64), np.zeros(0, np.bool_)
    grid = _grid(1.0, 1, 1, np.zeros(2, np.int64), e, e, e, e, e, np.zeros(1))
    a = (e, e, e, f, e, e)
    if clearance:
        bld = _bld((np.zeros(2, np.int64), e, e, e, e, e, np.zeros(1, np.int64), e, e, e, e, e))
        _clear_range(0, 0, i, i, a, a, f, f, f, 1.0, grid, bld)
        _los_clear_range(0, 0, f, a[:3], a[:3], f, f, f, f, 1.0, grid, bld)
        return
    _kw.build_edge_grid(e, e, e, e, e, 1.0, 1, 1, 0.0)
    pg = (0.0, 0.0, 1.0, 1, 1, np.zeros(2, np.int64), i)
    _scan_range(0, 0, False, i, i, a, a, (0.0, 0.0), 1.0, pg, False, f, f, grid, True)
    _write_range(0, 0, i, i, i, False, i, i, a, a, (i, i, e, e, f, e, e, e))


# kernel groups for :mod:`siting._warmup`: [bare rule, clearance rule]
KERNELS = ((_kw.build_edge_grid, _scan_range, _write_range), (_clear_range, _los_clear_range))
