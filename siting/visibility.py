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
:class:`Obstacles` bins every footprint edge into a uniform grid once per district.  :func:`visible_pairs`
runs one compiled two-pass kernel (numba, ``parallel=True`` over the ``a`` points, ``cache=True``): a uniform
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
from typing import Any

import numba
import numpy as np
import pandas as pd
import shapely

from . import _kernels_visibility as _k
from .errors import InputDataError, JobError, SitingError
from .tables import Points

__all__ = ["Obstacles", "visible_pairs", "line_of_sight", "los_graph", "degree_stats"]

_MAX_GRID_CELLS = 4_000_000
# Points per work item of the parallel pair search (dynamic scheduling; numba.set_parallel_chunksize).
_SCAN_CHUNK = 16
_E = np.zeros(0)
_NO_BUILDINGS = (np.zeros(0, np.int64), _E, _E, _E, _E, _E, np.zeros(0, np.int64), _E, _E, _E, _E, _E)


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


def _as_geometry_array(geometries) -> tuple[np.ndarray, Any]:
    crs = getattr(geometries, "crs", None)
    if hasattr(geometries, "geometry") and not isinstance(geometries, np.ndarray):
        geometries = geometries.geometry
    geoms = np.asarray(getattr(geometries, "values", geometries), dtype=object)
    if geoms.ndim == 0:
        geoms = geoms.reshape(1)
    return geoms, crs


class Obstacles:
    """Building footprints and heights compiled into a uniform grid of wall edges (plain numpy arrays).

    Build once per district with :meth:`from_buildings` and reuse for every :func:`visible_pairs` call.

    Attributes
    ----------
    origin : (float, float)
        Grid origin (x, y) [m]; the kernels work in coordinates relative to it.
    cell_m : float
        Side of the square grid cells [m].
    nx, ny : int
        Grid size in cells.
    n_edges : int
        Number of footprint edges (exterior and hole rings).
    polygons : numpy.ndarray of shapely geometries
        The footprints, used for the endpoint-inside test.
    heights_m : numpy.ndarray
        Roof height of each footprint [m].
    """

    def __init__(self, polygons, heights_m, origin, cell_m, nx, ny, grid, n_edges, edges=None):
        self.polygons = polygons
        self.heights_m = heights_m
        self.origin = origin
        self.cell_m = float(cell_m)
        self.nx = int(nx)
        self.ny = int(ny)
        self._grid = grid  # start, cx0, cy0, cx1, cy1, ch, hmax
        self.n_edges = int(n_edges)
        self._tree = None
        # edges relative to origin (x0, y0, x1, y1, building row), for the clearance grids built on demand
        self._edges = edges
        self._clear_grids = {}

    def __getstate__(self):
        state = self.__dict__.copy()
        state["_tree"] = None  # rebuilt lazily
        state["_clear_grids"] = {}
        return state

    @classmethod
    def from_buildings(cls, geometries, heights_m, cell_m: float | None = None) -> Obstacles:
        """Compile footprints and roof heights.

        Parameters
        ----------
        geometries : sequence of shapely Polygon/MultiPolygon, GeoSeries or GeoDataFrame
            Footprints in a projected CRS [m].  Holes are courtyards (open air).
        heights_m : array_like
            Roof height above ground of each footprint [m], finite and >= 0.
        cell_m : float, optional
            Grid cell side [m].  Default: half the mean edge spacing, ``0.5 sqrt(area / n_edges)`` over the
            footprints' bounding box, clipped to [2, 50] m (about 10 m in a dense European district; run
            times vary little between 4 and 20 m there, see benchmarks/bench_visibility.py).

        Raises
        ------
        InputDataError
            A geometry that is not a valid non-empty (Multi)Polygon, a height that is missing, negative or
            not finite, a length mismatch, or a geographic (degree) CRS.
        """
        geoms, crs = _as_geometry_array(geometries)
        if crs is not None and getattr(crs, "is_geographic", False):
            raise InputDataError(
                f"building footprints are in a geographic CRS ({crs}), expected metres in a projected CRS; "
                "project them first, e.g. gdf.to_crs(gdf.estimate_utm_crs())"
            )
        heights = np.asarray(heights_m, dtype=float).reshape(-1)
        if len(heights) != len(geoms):
            raise InputDataError(
                f"got {len(geoms)} building footprints but {len(heights)} heights; pass one height per footprint"
            )
        bad = np.flatnonzero(~np.isfinite(heights) | (heights < 0))
        if len(bad):
            raise InputDataError(
                f"building heights must be finite and >= 0 m; footprint row(s) {bad[:10].tolist()} have "
                f"{heights[bad[:10]].tolist()}; fill or fix the heights (e.g. from building levels) before visibility"
            )
        if len(geoms):
            is_geom = np.array([isinstance(g, shapely.Geometry) for g in geoms])
            kind = np.full(len(geoms), -1)
            kind[is_geom] = shapely.get_type_id(geoms[is_geom].astype(object))
            bad = np.flatnonzero(~np.isin(kind, (3, 6)))  # Polygon, MultiPolygon
            if len(bad):
                i = int(bad[0])
                got = geoms[i].geom_type if is_geom[i] else type(geoms[i]).__name__
                raise InputDataError(
                    f"building footprint row {i} is a {got}, expected a Polygon or MultiPolygon "
                    f"({len(bad)} such rows: {bad[:10].tolist()}); drop or repair these features"
                )
            geoms = geoms.astype(object)
            bad = np.flatnonzero(shapely.is_empty(geoms) | ~shapely.is_valid(geoms))
            if len(bad):
                i = int(bad[0])
                reason = shapely.is_valid_reason(geoms[i])
                raise InputDataError(
                    f"building footprint row {i} is empty or invalid ({reason}); {len(bad)} such rows: "
                    f"{bad[:10].tolist()}; repair them (shapely.make_valid) or drop them before visibility"
                )
        geoms = np.asarray(geoms, dtype=object)

        # edges of every ring (exterior and holes): consecutive coordinates within a ring
        if len(geoms):
            parts, part_of = shapely.get_parts(geoms, return_index=True)
            rings, ring_of = shapely.get_rings(parts, return_index=True)
            coords, coord_ring = shapely.get_coordinates(rings, return_index=True)
            same = coord_ring[1:] == coord_ring[:-1]
            ex0, ey0 = coords[:-1][same, 0], coords[:-1][same, 1]
            ex1, ey1 = coords[1:][same, 0], coords[1:][same, 1]
            eb = part_of[ring_of[coord_ring[:-1][same]]].astype(np.int64)
            eh = heights[eb]
            keep = (ex0 != ex1) | (ey0 != ey1)
            ex0, ey0, ex1, ey1, eh, eb = ex0[keep], ey0[keep], ex1[keep], ey1[keep], eh[keep], eb[keep]
        else:
            ex0 = ey0 = ex1 = ey1 = eh = np.zeros(0)
            eb = np.zeros(0, np.int64)
        n_edges = len(ex0)
        if n_edges:
            xmin, ymin = min(ex0.min(), ex1.min()), min(ey0.min(), ey1.min())
            xmax, ymax = max(ex0.max(), ex1.max()), max(ey0.max(), ey1.max())
        else:
            xmin = ymin = 0.0
            xmax = ymax = 1.0
        if cell_m is None:
            area = max((xmax - xmin) * (ymax - ymin), 1.0)
            cell_m = float(np.clip(0.5 * math.sqrt(area / max(n_edges, 1)), 2.0, 50.0))
        elif not (np.isfinite(cell_m) and cell_m > 0):
            raise JobError(f"cell_m must be a positive number of metres, got {cell_m!r}", source="visibility")
        # grid must stay a sane size: enlarge cells when the extent is huge
        span = max(xmax - xmin, ymax - ymin)
        cell_m = max(cell_m, span / math.sqrt(_MAX_GRID_CELLS))
        origin = (float(xmin - cell_m), float(ymin - cell_m))
        nx = int(math.ceil((xmax - origin[0]) / cell_m)) + 1
        ny = int(math.ceil((ymax - origin[1]) / cell_m)) + 1
        grid = _k.build_edge_grid(
            np.ascontiguousarray(ex0 - origin[0]),
            np.ascontiguousarray(ey0 - origin[1]),
            np.ascontiguousarray(ex1 - origin[0]),
            np.ascontiguousarray(ey1 - origin[1]),
            np.ascontiguousarray(eh, dtype=np.float64),
            float(cell_m),
            nx,
            ny,
            _k.EDGE_PAD_M,
        )
        edges = (ex0 - origin[0], ey0 - origin[1], ex1 - origin[0], ey1 - origin[1], eb)
        return cls(geoms, heights, origin, cell_m, nx, ny, grid, n_edges, edges)

    # ------------------------------------------------------------------ helpers
    @property
    def tree(self) -> shapely.STRtree:
        if self._tree is None:
            self._tree = shapely.STRtree(self.polygons)
        return self._tree

    def roof_above(self, x, y) -> np.ndarray:
        """Tallest roof [m] among the footprints strictly containing each point (x, y); -inf outside all.

        Repeated positions are looked up once (``line_of_sight`` on pair lists repeats them a lot).
        """
        xy = np.ascontiguousarray(np.c_[np.asarray(x, float), np.asarray(y, float)])
        out = np.full(len(xy), -np.inf)
        if len(xy) == 0 or len(self.polygons) == 0:
            return out
        uniq, inv = np.unique(xy.view(np.complex128).ravel(), return_inverse=True)
        ip, ib = self.tree.query(shapely.points(uniq.real, uniq.imag), predicate="within")
        top = np.full(len(uniq), -np.inf)
        np.maximum.at(top, ip, self.heights_m[ib])
        return top[inv.ravel()]

    def buried(self, x, y, z_m) -> np.ndarray:
        """True where a point lies strictly inside a footprint and below that building's roof.

        Such an endpoint blocks every segment from it (the rule in the module docstring).  A rooftop point at or above
        its roof is not buried.
        """
        return np.asarray(z_m, float) < self.roof_above(x, y)

    def _kernel_args(self):
        """(origin, kernel arguments) of the bare-ray rule: the edge grid as built, no clearance data."""
        return self.origin, (0.0, self.cell_m, self.nx, self.ny) + tuple(self._grid) + (_NO_BUILDINGS,)

    def _clearance_args(self, kl: float, max_length_m: float):
        """(origin, kernel arguments) of the clearance rule for segments up to ``max_length_m`` long.

        The tube radius is at most rad = sqrt(kl L) / 2, so the grid lists every edge in the cells its
        bounding box padded by rad touches and extends that far beyond the edges (a few more whole cells,
        hence its own origin).  Built once per padding (rounded up to 0.5 m) and kept.
        """
        rad = 0.5 * math.sqrt(kl * max_length_m)
        pad = max(0.5, math.ceil(rad / 0.5) * 0.5)
        if pad not in self._clear_grids:
            self._clear_grids[pad] = self._build_clear_grid(pad)
        origin, args = self._clear_grids[pad]
        return origin, (float(kl),) + args

    def _build_clear_grid(self, pad: float):
        cs = self.cell_m
        m = int(math.ceil((pad + _k.EDGE_PAD_M) / cs))
        shift = m * cs
        origin = (self.origin[0] - shift, self.origin[1] - shift)
        nx, ny = self.nx + 2 * m, self.ny + 2 * m
        if self._edges is None:  # pragma: no cover - built by from_buildings
            raise SitingError("Obstacles built without edges; use Obstacles.from_buildings")
        ex0, ey0, ex1, ey1, eb = self._edges
        ex0, ey0, ex1, ey1 = (np.ascontiguousarray(v + shift) for v in (ex0, ey0, ex1, ey1))
        grid = _k.build_edge_grid(ex0, ey0, ex1, ey1, np.ascontiguousarray(self.heights_m[eb], dtype=np.float64),
                                  cs, nx, ny, pad + _k.EDGE_PAD_M)  # fmt: skip
        # buildings: bounding boxes binned into the same cells, and each building's edges (CSR by row)
        nb = len(self.polygons)
        order = np.argsort(eb, kind="stable")
        ex0, ey0, ex1, ey1, eb = ex0[order], ey0[order], ex1[order], ey1[order], eb[order]
        bstart = np.searchsorted(eb, np.arange(nb + 1)).astype(np.int64)
        if nb:
            bb = shapely.bounds(self.polygons) - np.array([origin[0], origin[1], origin[0], origin[1]])
        else:
            bb = np.zeros((0, 4))
        c = np.ascontiguousarray
        gstart, gx0, gy0, gx1, gy1, gid, _ = _k.build_edge_grid(
            c(bb[:, 0]), c(bb[:, 1]), c(bb[:, 2]), c(bb[:, 3]), np.arange(nb, dtype=np.float64), cs, nx, ny,
            _k.EDGE_PAD_M,
        )  # fmt: skip
        bld = (gstart, gx0, gy0, gx1, gy1, gid, bstart, c(self.heights_m, dtype=np.float64), c(ex0), c(ey0),
               c(ex1), c(ey1))  # fmt: skip
        return origin, (cs, nx, ny) + tuple(grid) + (bld,)

    def __repr__(self) -> str:
        return (
            f"Obstacles({len(self.polygons)} footprints, {self.n_edges} edges, grid {self.nx}x{self.ny} "
            f"of {self.cell_m:.1f} m)"
        )


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
