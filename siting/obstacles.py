"""Building footprints and heights compiled into a uniform grid of wall edges for the line-of-sight kernels.

:class:`Obstacles` bins every footprint edge (exterior and hole rings) into a uniform grid once per district;
:func:`siting.visibility.visible_pairs` and :func:`siting.visibility.line_of_sight` traverse it.  With the
first-Fresnel-zone clearance rule a second grid, padded by the largest tube radius, is built once per padding
and kept, with a grid of building bounding boxes for the roof test.  The rule itself is stated in
:mod:`siting.visibility`.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import shapely

from . import _kernels_visibility as _k
from .errors import InputDataError, JobError, SitingError

__all__ = ["Obstacles"]

_MAX_GRID_CELLS = 4_000_000
_E = np.zeros(0)
_NO_BUILDINGS = (np.zeros(0, np.int64), _E, _E, _E, _E, _E, np.zeros(0, np.int64), _E, _E, _E, _E, _E)


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
