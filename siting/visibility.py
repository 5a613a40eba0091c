"""2.5-D line of sight between point sets, as sparse pair tables with distances and angles.

The rule
--------
Buildings are flat-roofed prisms: a footprint (Polygon or MultiPolygon; holes are courtyards, open air) and a
roof height ``h_k`` above flat ground.  The straight 3-D segment between two points is **blocked** when, over
any part of its horizontal track lying inside footprint ``k``, its height is below ``h_k``.

Because the height along the track is linear, its minimum over each inside interval is reached at an end of
the interval: a crossing of the track with a footprint edge (exterior or hole ring) or a segment endpoint
lying inside the footprint.  The exact test used here is therefore

    blocked  <=>  some crossing with an edge of building k has ray height < h_k
                  or an endpoint lies strictly inside footprint k below h_k.

"Inside" is the open interior: a track running exactly along a wall (collinear with an edge) is on the
boundary and does not enter; such grazing cases, and crossings within rounding of a corner or of the roof
height, are decided by floating-point arithmetic and are documented as unspecified within 1 cm (the tests
exclude them from the comparison with the brute-force reference and count them).

First-Fresnel-zone clearance (optional)
--------------------------------------
With ``clearance_fraction`` k > 0 and ``wavelength_m`` lambda, the segment P(t) = A + t (B - A), t in [0, 1],
of 3-D length L is **clear** only when, for every t, no point of any building solid (footprint incl. holes as
open air, extruded from the ground to its roof) lies strictly within distance k F1(t) of P(t), where

    F1(t) = sqrt(lambda t (1 - t) L)

is the first Fresnel zone radius sqrt(lambda d1 d2 / (d1 + d2)) with d1 = tL, d2 = (1 - t) L (ITU-R P.530,
"Propagation data and prediction methods required for the design of terrestrial line-of-sight systems",
and ITU-R P.526, definition of the first Fresnel zone radius).  k = 0.6 is the usual planning rule (common
practice).  This is a "tube of balls" approximation of the Fresnel ellipsoid, and the rule is exact as
stated: the distance from P(t) to a prism is hypot(horizontal distance to the footprint, max(0, z - h)), so

* a roof under the ray blocks when z(t) - h - k F1(t) < 0 at a point of the track inside the footprint;
  this function is convex in t, so its minimum over the inside intervals is at the stationary point t* of
  z - k F1 (closed form, tested with a point-in-polygon query) or at a crossing of the track with an edge;
* a wall face (edge x [0, h]) blocks when d_e(t)^2 + max(0, z(t) - h)^2 - (k F1(t))^2 < 0 for some t; this
  is convex and piecewise quadratic in t, and its minimum is found exactly (root of its piecewise linear
  derivative);
* the bare rule above still applies (it is the limit k -> 0, and k = 0 runs exactly the bare code path).

The ground is not an obstacle.  The radius is zero at the endpoints, so a facade spot's own wall (a few
centimetres behind it) blocks only rays that graze it: with F1 ~ sqrt(lambda s) at a distance s << L from the
spot, a ray leaving at angle phi to the wall plane is blocked when k^2 lambda / (4 sin phi) exceeds the
offset (3.5 GHz, k = 0.6, 5 cm: phi below about 9 deg).  Only the decision is returned (no clearance
margin column: finding the smallest margin would need a full walk instead of the early exit).

Facade ends
-----------
A point with a finite ``normal_az_deg`` is a facade end (a candidate spot, or a home terminal on a wall).  It
sits a few centimetres outside its wall and looks along its horizontal outward normal
``n = (sin az, cos az)``.  For such an end the 3-D angle between ``n`` and the direction to the other end is
reported (``angle_a_deg`` / ``angle_b_deg``); pairs whose angle is ``>= steer_limit_deg`` (90 deg: behind the
wall) are dropped **before** any LOS test.

Decision: the host building is not exempt from blocking.  A ray from a spot in the re-entrant corner of an
L-shaped building through the other wing is blocked, as it physically is.  The outward offset plus the
front-half-space filter already keep a spot's own wall from blocking its front (a ray leaving at an angle
below 90 deg moves away from the wall line), so the ``host`` column of :class:`~siting.tables.Points` is not
used by the test.

Range
-----
Only pairs with 3-D distance ``0 < distance_m <= max_range_m`` are returned (same-position pairs are
dropped).

Implementation
--------------
:class:`Obstacles` (:mod:`siting.obstacles`) bins every footprint edge into a uniform grid once per district.
:func:`visible_pairs` runs one compiled two-pass kernel (numba, ``parallel=True`` over the ``a`` points, ``cache=True``): a uniform
grid of the ``b`` points finds the pairs within range (count pass, then fill pass) and, in the fill pass, the
edge grid is traversed cell by cell along each track (DDA) with early exit at the first blocking crossing.
Cells whose tallest building stays below the ray are skipped.  Whether an endpoint is inside a footprint
below its roof is decided once per point with shapely (``STRtree.query(..., predicate="within")``).  With
clearance, a second edge grid whose edges are padded by the largest tube radius k sqrt(lambda L_max) / 2 is
built once per padding and kept on the :class:`Obstacles`, along with a grid of building bounding boxes for
the roof test; a cell is skipped when the minimum of z(t) - k F1(t) over its part of the track is above its
tallest building.

Output dtypes: ``a``, ``b`` int64; ``los`` bool; float columns float64 by default (``float_dtype=np.float32``
halves their memory at city scale, with ~1e-5 relative precision).
"""

from __future__ import annotations

import math

import numba
import numpy as np
import pandas as pd

from . import _kernels_visibility as _k
from .errors import InputDataError, JobError, SitingError
from .obstacles import _MAX_GRID_CELLS, Obstacles
from .tables import Points

__all__ = ["Obstacles", "visible_pairs", "line_of_sight", "los_graph", "degree_stats"]

# Points per work item of the parallel pair search (dynamic scheduling; numba.set_parallel_chunksize).
_SCAN_CHUNK = 16


def _clearance_kl(clearance_fraction, wavelength_m) -> float:
    """k^2 lambda [m] of the clearance rule (0 for the bare ray), after checking the two parameters."""
    k = clearance_fraction
    if not (isinstance(k, (int, float, np.integer, np.floating)) and np.isfinite(k) and k >= 0):
        raise JobError(
            f"clearance_fraction must be a finite number >= 0 (0 = bare ray, 0.6 = the usual 0.6 F1 rule), "
            f"got {k!r}",
            source="visibility",
        )
    if k == 0:
        return 0.0
    lam = wavelength_m
    if lam is None:
        raise JobError(
            f"clearance_fraction = {k} needs wavelength_m (the carrier wavelength c / f in metres, e.g. "
            "0.0107 at 28 GHz); pass it or set clearance_fraction = 0",
            source="visibility",
        )
    if not (isinstance(lam, (int, float, np.integer, np.floating)) and np.isfinite(lam) and lam > 0):
        raise JobError(f"wavelength_m must be a positive number of metres, got {lam!r}", source="visibility")
    return float(k) ** 2 * float(lam)


def _as_points(p, name: str) -> Points:
    if isinstance(p, pd.DataFrame):
        p = Points.from_table(p)
    if not isinstance(p, Points):
        raise SitingError(f"{name} must be a siting.tables.Points or a table with x, y, z_m; got {type(p).__name__}")
    arrays = [np.asarray(v, float) for v in (p.x, p.y, p.z_m, p.normal_az_deg)]
    n = len(arrays[0])
    if any(len(v) != n for v in arrays):
        raise InputDataError(f"point set '{name}': x, y, z_m and normal_az_deg have different lengths")
    bad = np.flatnonzero(~(np.isfinite(arrays[0]) & np.isfinite(arrays[1]) & np.isfinite(arrays[2])))
    if len(bad):
        raise InputDataError(
            f"point set '{name}': rows {bad[:10].tolist()} have missing or non-finite x, y or z_m "
            f"({len(bad)} rows); drop or fix these points"
        )
    return p


def _subset(idx, n: int, name: str) -> np.ndarray:
    if idx is None:
        return np.arange(n, dtype=np.int64)
    idx = np.asarray(idx)
    if idx.dtype == bool:
        if len(idx) != n:
            raise SitingError(f"{name} is a boolean mask of length {len(idx)}, expected {n}")
        return np.flatnonzero(idx).astype(np.int64)
    idx = np.unique(idx.astype(np.int64))
    if len(idx) and (idx[0] < 0 or idx[-1] >= n):
        raise SitingError(f"{name} holds row positions outside 0..{n - 1} (got {idx[0]}..{idx[-1]})")
    return idx


def _normal_arrays(p: Points, idx: np.ndarray, origin):
    x = np.ascontiguousarray(np.asarray(p.x, float)[idx] - origin[0])
    y = np.ascontiguousarray(np.asarray(p.y, float)[idx] - origin[1])
    z = np.ascontiguousarray(np.asarray(p.z_m, float)[idx])
    az = np.asarray(p.normal_az_deg, float)[idx]
    has = np.isfinite(az)
    rad = np.radians(np.where(has, az, 0.0))
    return x, y, z, np.ascontiguousarray(has), np.sin(rad), np.cos(rad)


def _cos_threshold(limit_deg: float, name: str) -> float:
    if not (np.isfinite(limit_deg) and 0.0 < limit_deg <= 180.0):
        raise JobError(f"{name} must be in (0, 180] degrees, got {limit_deg!r}", source="visibility")
    if limit_deg == 90.0:
        return 0.0
    return float(np.cos(np.radians(limit_deg)))


def _point_grid(x, y, r):
    """Uniform grid of points: cells of about r/4 (at most _MAX_GRID_CELLS); CSR offsets and order."""
    n = len(x)
    if n == 0:
        return 0.0, 0.0, 1.0, 1, 1, np.zeros(2, np.int64), np.zeros(0, np.int64)
    x0, y0 = float(x.min()), float(y.min())
    span = max(float(x.max()) - x0, float(y.max()) - y0, 1e-9)
    pcs = max(r / 4.0, span / math.sqrt(_MAX_GRID_CELLS), 1e-6)
    pnx = int(span // pcs) + 2
    pny = pnx
    ix = np.minimum(((x - x0) // pcs).astype(np.int64), pnx - 1)
    iy = np.minimum(((y - y0) // pcs).astype(np.int64), pny - 1)
    cell = iy * pnx + ix
    order = np.argsort(cell, kind="stable").astype(np.int64)
    start = np.zeros(pnx * pny + 1, np.int64)
    np.cumsum(np.bincount(cell, minlength=pnx * pny), out=start[1:])
    return x0, y0, pcs, pnx, pny, start, order


def visible_pairs(
    obstacles: Obstacles,
    a,
    b,
    max_range_m: float,
    *,
    steer_limit_deg: float = 90.0,
    steer_limit_b_deg: float | None = None,
    a_index=None,
    b_index=None,
    los_only: bool = False,
    float_dtype=np.float64,
    clearance_fraction: float = 0.0,
    wavelength_m: float | None = None,
) -> pd.DataFrame:
    """Pairs of points within range, with line of sight, distances and facade angles.

    Parameters
    ----------
    obstacles : Obstacles
        The district's compiled footprints.
    a, b : siting.tables.Points (or a table with x, y, z_m[, normal_az_deg, building_idx])
        The two point sets.  A finite ``normal_az_deg`` makes a point a facade end.
    max_range_m : float
        Largest 3-D distance of a returned pair [m].
    steer_limit_deg : float, default 90
        Pairs whose angle from a facade end's outward normal is ``>= steer_limit_deg`` are dropped before
        the LOS test (90 deg drops exactly the pairs behind the wall).  Applies to facade ends in ``a`` and,
        unless ``steer_limit_b_deg`` is given, in ``b``.
    steer_limit_b_deg : float, optional
        Separate limit for facade ends in ``b`` (e.g. 90 for home terminals while spots use 60).
    a_index, b_index : array_like of int or bool mask, optional
        Only these rows take part (pruning: e.g. only spots that see a base station).  Output ``a``/``b``
        are still row positions in the full sets.  Duplicates are ignored.
    los_only : bool, default False
        Return only the pairs with line of sight.
    float_dtype : numpy float dtype, default float64
        dtype of the float columns.
    clearance_fraction : float, default 0
        k >= 0: ``los`` also requires every building solid to stay farther than k F1(t) from the ray
        (first-Fresnel-zone clearance, see the module docstring).  0 is the bare ray.
    wavelength_m : float, optional
        Carrier wavelength [m] for F1; required when ``clearance_fraction > 0``.

    Returns
    -------
    pandas.DataFrame
        The ``pairs`` contract of :mod:`siting.tables`: ``a``, ``b`` (int64), ``distance_m`` (3-D),
        ``d2d_m``, ``los`` (bool), ``angle_a_deg``, ``angle_b_deg`` (NaN for non-facade ends),
        ``elevation_deg`` (of b seen from a); sorted by (a, b).
    """
    a = _as_points(a, "a")
    b = _as_points(b, "b")
    if not (np.isfinite(max_range_m) and max_range_m > 0):
        raise JobError(f"max_range_m must be a positive number of metres, got {max_range_m!r}", source="visibility")
    kl = _clearance_kl(clearance_fraction, wavelength_m)
    if kl > 0:
        o, kargs = obstacles._clearance_args(kl, float(max_range_m))
    else:
        o, kargs = obstacles._kernel_args()
    thr_a = _cos_threshold(steer_limit_deg, "steer_limit_deg")
    thr_b = thr_a if steer_limit_b_deg is None else _cos_threshold(steer_limit_b_deg, "steer_limit_b_deg")
    ia = _subset(a_index, len(a), "a_index")
    ib = _subset(b_index, len(b), "b_index")
    ax, ay, az, ahas, anx, any_ = _normal_arrays(a, ia, o)
    bx, by, bz, bhas, bnx, bny = _normal_arrays(b, ib, o)
    roof_a = obstacles.roof_above(ax + o[0], ay + o[1])
    roof_b = obstacles.roof_above(bx + o[0], by + o[1])
    buried_a, buried_b = az < roof_a, bz < roof_b
    inside_a, inside_b = roof_a > -np.inf, roof_b > -np.inf
    r = float(max_range_m)
    px0, py0, pcs, pnx, pny, pstart, porder = _point_grid(bx, by, r)
    # dynamic scheduling in small chunks of points: the LOS work per point is uneven (clear rays walk their
    # whole length, more so under the clearance rule); set here, as setting it inside the kernel stops caching
    chunk = numba.set_parallel_chunksize(_SCAN_CHUNK)
    try:
        offsets, key = _k.pairs_in_range(
            ax, ay, az, ahas, anx, any_, thr_a,
            bx, by, bz, bhas, bnx, bny, thr_b,
            r, px0, py0, pcs, pnx, pny, pstart, porder,
            True, buried_a, buried_b, inside_a, inside_b, *kargs,
        )  # fmt: skip
    finally:
        numba.set_parallel_chunksize(chunk)
    out_off = _k.output_offsets(offsets, key, bool(los_only))
    n_out = out_off[-1]
    fdt = np.dtype(float_dtype)
    if fdt.kind != "f":
        raise SitingError(f"float_dtype must be a numpy float dtype such as float64 or float32, got {fdt}")
    cols = {
        "a": np.empty(n_out, np.int64),
        "b": np.empty(n_out, np.int64),
        "distance_m": np.empty(n_out, fdt),
        "d2d_m": np.empty(n_out, fdt),
        "los": np.empty(n_out, bool),
        "angle_a_deg": np.empty(n_out, fdt),
        "angle_b_deg": np.empty(n_out, fdt),
        "elevation_deg": np.empty(n_out, fdt),
    }
    _k.write_pairs(
        offsets, key, out_off, bool(los_only), ia, ib,
        ax, ay, az, ahas, anx, any_, bx, by, bz, bhas, bnx, bny,
        *cols.values(),
    )  # fmt: skip
    return pd.DataFrame(cols, copy=False)


def line_of_sight(obstacles: Obstacles, a_xyz, b_xyz, clearance_fraction: float = 0.0,
                  wavelength_m: float | None = None) -> np.ndarray:  # fmt: skip
    """Element-wise LOS between ``a_xyz[i]`` and ``b_xyz[i]`` (arrays of shape (n, 3): x, y, z_m [m]).

    No range or facade filter is applied; see the module docstring for the rule.  With
    ``clearance_fraction`` k > 0 (``wavelength_m`` [m] then required) a pair is clear only when every building
    solid stays farther than k F1(t) from the ray (first-Fresnel-zone clearance).
    """
    kl = _clearance_kl(clearance_fraction, wavelength_m)
    a_xyz = np.asarray(a_xyz, float)
    b_xyz = np.asarray(b_xyz, float)
    if a_xyz.ndim != 2 or a_xyz.shape[1] != 3 or a_xyz.shape != b_xyz.shape:
        raise SitingError(
            f"line_of_sight expects two (n, 3) arrays of x, y, z_m with the same n; got {a_xyz.shape} and "
            f"{b_xyz.shape}"
        )
    if not (np.isfinite(a_xyz).all() and np.isfinite(b_xyz).all()):
        bad = np.flatnonzero(~(np.isfinite(a_xyz).all(1) & np.isfinite(b_xyz).all(1)))
        raise InputDataError(f"line_of_sight: rows {bad[:10].tolist()} have non-finite coordinates; drop them")
    if kl > 0:
        lmax = float(np.sqrt(((b_xyz - a_xyz) ** 2).sum(1)).max()) if len(a_xyz) else 0.0
        o, kargs = obstacles._clearance_args(kl, lmax)
    else:
        o, kargs = obstacles._kernel_args()
    roof_a = obstacles.roof_above(a_xyz[:, 0], a_xyz[:, 1])
    roof_b = obstacles.roof_above(b_xyz[:, 0], b_xyz[:, 1])
    c = lambda v: np.ascontiguousarray(v)  # noqa: E731
    return _k.los_elementwise(
        c(a_xyz[:, 0] - o[0]), c(a_xyz[:, 1] - o[1]), c(a_xyz[:, 2]),
        c(b_xyz[:, 0] - o[0]), c(b_xyz[:, 1] - o[1]), c(b_xyz[:, 2]),
        a_xyz[:, 2] < roof_a, b_xyz[:, 2] < roof_b, roof_a > -np.inf, roof_b > -np.inf, *kargs,
    )  # fmt: skip


def los_graph(pairs: pd.DataFrame, a_prefix: str = "a", b_prefix: str = "b", n_a: int | None = None,
              n_b: int | None = None):  # fmt: skip
    """The LOS pairs as a :class:`networkx.Graph` (export with ``networkx.write_graphml``).

    Nodes are ``f"{a_prefix}{a}"`` and ``f"{b_prefix}{b}"`` with attributes ``set`` (the prefix) and
    ``index`` (row position); edges are the pairs with ``los`` True, with ``distance_m`` as a float
    attribute.  Give ``n_a``/``n_b`` to include the isolated points as nodes too.
    """
    import networkx as nx

    g = nx.Graph()
    if n_a is not None:
        g.add_nodes_from((f"{a_prefix}{i}", {"set": a_prefix, "index": i}) for i in range(n_a))
    if n_b is not None:
        g.add_nodes_from((f"{b_prefix}{i}", {"set": b_prefix, "index": i}) for i in range(n_b))
    p = pairs[pairs["los"].to_numpy(bool)]
    av = p["a"].to_numpy(np.int64)
    bv = p["b"].to_numpy(np.int64)
    for i in np.unique(av):
        g.add_node(f"{a_prefix}{i}", set=a_prefix, index=int(i))
    for i in np.unique(bv):
        g.add_node(f"{b_prefix}{i}", set=b_prefix, index=int(i))
    g.add_edges_from(
        (f"{a_prefix}{i}", f"{b_prefix}{j}", {"distance_m": float(d)})
        for i, j, d in zip(av.tolist(), bv.tolist(), p["distance_m"].to_numpy(float).tolist())
    )
    return g


def degree_stats(pairs: pd.DataFrame, n_a: int, n_b: int) -> dict:
    """Degree statistics of the LOS graph for run.json.

    Returns ``{"a": {...}, "b": {...}}``, each with ``n``, ``min``, ``median``, ``mean``, ``max`` (number of
    LOS partners per point, over all ``n`` points of the set) and ``isolated_share`` (share of points with
    no LOS partner).  Plain Python numbers (JSON-ready).
    """
    los = pairs["los"].to_numpy(bool)
    out = {}
    for name, col, n in (("a", "a", n_a), ("b", "b", n_b)):
        idx = pairs[col].to_numpy(np.int64)[los]
        if len(idx) and (idx.min() < 0 or idx.max() >= n):
            raise SitingError(f"degree_stats: column '{col}' holds rows outside 0..{n - 1}; pass the full set size")
        deg = np.bincount(idx, minlength=n) if n else np.zeros(0, np.int64)
        if n == 0:
            out[name] = {"n": 0, "min": 0, "median": 0.0, "mean": 0.0, "max": 0, "isolated_share": 0.0}
            continue
        out[name] = {
            "n": int(n),
            "min": int(deg.min()),
            "median": float(np.median(deg)),
            "mean": float(deg.mean()),
            "max": int(deg.max()),
            "isolated_share": float(np.mean(deg == 0)),
        }
    return out
