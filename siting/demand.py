"""Demand points: where the coverage is wanted (the ``users`` table of :mod:`siting.tables`):
:func:`given_users` (kind 'given' / 'indoor'), :func:`street_grid` (kind 'street'), :func:`facade_homes`
(kind 'home'); :func:`combine_users` stacks them and renumbers ``user_id``.

All functions are pure: tables and parameters in, tables out.  Nothing here reads the job file or writes files.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import shapely

from . import tables
from .candidate_inputs import _MULTIPOLYGON, _POLYGON, _buildings, _param, _points_table
from .errors import InputDataError, SitingWarning
from .walls import _EPS, SIMPLIFY_M, _azimuth_deg, _pieces, _positions

__all__ = ["combine_users", "facade_homes", "given_users", "street_grid"]

_USER_COLS = ["user_id", "x", "y", "z_m", "weight", "kind", "building_idx", "normal_az_deg", "user_ref"]


def _users(x, y, z, weight, kind, building_idx=None, normal=None, ref=None, where="") -> pd.DataFrame:
    n = len(x)
    out = pd.DataFrame({
        "user_id": np.arange(n, dtype=np.int64),
        "x": np.asarray(x, float),
        "y": np.asarray(y, float),
        "z_m": np.broadcast_to(np.asarray(z, float), (n,)).copy(),
        "weight": np.broadcast_to(np.asarray(weight, float), (n,)).copy(),
        "kind": np.broadcast_to(np.asarray(kind, dtype=object), (n,)).copy(),
        "building_idx": (np.full(n, -1, np.int64) if building_idx is None
                         else np.asarray(building_idx, np.int64)),
        "normal_az_deg": np.full(n, np.nan) if normal is None else np.asarray(normal, float),
        "user_ref": np.full(n, "", dtype=object) if ref is None else np.asarray(ref, dtype=object),
    })
    return tables.check(out, "users", where)


def street_grid(buildings, area=None, *, grid_m: float = 5.0, height_m: float = 1.5, clearance_m: float = 0.5,
                weight_per_point: float = 1.0, margin_m: float = 20.0) -> pd.DataFrame:
    """Outdoor demand on a regular grid over the streets (kind 'street').

    Grid points are the integer multiples of ``grid_m`` in the CRS (anchored, so the same point set comes out
    whatever the area or tiling) that lie inside ``area`` (a shapely polygon in the same CRS; default: the
    buildings' bounding box grown by ``margin_m``) and farther than ``clearance_m`` from every footprint
    (exactly the complement of the footprints buffered by ``clearance_m``, via STRtree 'dwithin').  Each point
    carries ``weight_per_point`` (a point stands for one grid cell of ``grid_m**2``; to weight by area use
    ``weight_per_point = grid_m**2 / reference_area_m2``).

    Returns
    -------
    DataFrame with the 'users' contract, kind 'street', building_idx -1, normal_az_deg NaN, z_m = height_m.
    """
    where = "street_grid"
    geoms, _, _ = _buildings(buildings, where)
    grid_m = _param("grid_m", grid_m, job_key="demand.grid_m")
    height_m = _param("height_m", height_m, strict=False, job_key="demand.street_height_m")
    clearance_m = _param("clearance_m", clearance_m, strict=False)
    weight_per_point = _param("weight_per_point", weight_per_point, strict=False, job_key="demand.street_weight")
    margin_m = _param("margin_m", margin_m, strict=False)
    if area is None:
        x0, y0, x1, y1 = shapely.total_bounds(geoms)
        area = shapely.box(x0 - margin_m, y0 - margin_m, x1 + margin_m, y1 + margin_m)
    elif not isinstance(area, shapely.Geometry) or shapely.get_type_id(area) not in (_POLYGON, _MULTIPOLYGON) \
            or area.is_empty:
        raise InputDataError(f"{where}: expected the area of interest as a shapely Polygon or MultiPolygon in the "
                             f"buildings' CRS, got {type(area).__name__}; check the area.polygon layer")
    x0, y0, x1, y1 = area.bounds
    ix = np.arange(math.ceil(x0 / grid_m), math.floor(x1 / grid_m) + 1, dtype=np.int64)
    iy = np.arange(math.ceil(y0 / grid_m), math.floor(y1 / grid_m) + 1, dtype=np.int64)
    if len(ix) * len(iy) > 50_000_000:
        raise InputDataError(f"{where}: the area of interest holds {len(ix) * len(iy):,} grid points at grid_m = "
                             f"{grid_m:g} m; expected at most 50,000,000. Tile the city or raise demand.grid_m")
    gx, gy = np.meshgrid(ix * grid_m, iy * grid_m)
    shapely.prepare(area)
    inside = shapely.contains_xy(area, gx, gy)
    # grid cells under some building's bounding box grown by the clearance (2-D difference array, no loop):
    # only those points need an exact distance test, the rest are free
    if len(ix) and len(iy):
        c = clearance_m
        bx0, by0, bx1, by1 = shapely.bounds(geoms).T
        jx0 = np.clip(np.ceil((bx0 - c) / grid_m) - ix[0], 0, len(ix)).astype(np.int64)
        jx1 = np.clip(np.floor((bx1 + c) / grid_m) - ix[0] + 1, 0, len(ix)).astype(np.int64)
        jy0 = np.clip(np.ceil((by0 - c) / grid_m) - iy[0], 0, len(iy)).astype(np.int64)
        jy1 = np.clip(np.floor((by1 + c) / grid_m) - iy[0] + 1, 0, len(iy)).astype(np.int64)
        ok = (jx1 > jx0) & (jy1 > jy0)
        diff = np.zeros((len(iy) + 1, len(ix) + 1), np.int32)
        for r, cc, v in ((jy0, jx0, 1), (jy0, jx1, -1), (jy1, jx0, -1), (jy1, jx1, 1)):
            np.add.at(diff, (r[ok], cc[ok]), v)
        near = diff.cumsum(0).cumsum(1)[:-1, :-1] > 0
    else:
        near = np.zeros(gx.shape, bool)
    free = inside & ~near
    cand_i = np.flatnonzero(inside & near)
    pts = shapely.points(gx.ravel()[cand_i], gy.ravel()[cand_i])
    tree = shapely.STRtree(geoms)
    if clearance_m > 0:
        pi, _ = tree.query(pts, predicate="dwithin", distance=clearance_m)
    else:
        pi, _ = tree.query(pts, predicate="intersects")
    ok_c = np.ones(len(cand_i), bool)
    ok_c[pi] = False
    free.ravel()[cand_i[ok_c]] = True
    sel = np.flatnonzero(free.ravel())  # row-major: sorted by y, then x, as before
    return _users(gx.ravel()[sel], gy.ravel()[sel], height_m, weight_per_point, "street", where=where)


def facade_homes(buildings, *, storey_height_m: float = 3.0, window_height_m: float = 1.5,
                 home_spacing_m: float = 10.0, area_per_household_m2: float = 80.0, offset_m: float = 0.05,
                 party_gap_m: float = 0.5, min_wall_m: float = 1.0, simplify_m: float = SIMPLIFY_M) -> pd.DataFrame:
    """Fixed-wireless terminals at windows on every floor of every facade (kind 'home').

    ``levels = max(1, floor(height_m / storey_height_m))``; floor ``k`` (0-based) has its windows at
    ``k * storey_height_m + window_height_m``.  Along each usable wall piece (same walls as the spots, party walls
    cut out, pieces shorter than ``min_wall_m`` skipped) windows follow the centred placement rule with spacing
    ``home_spacing_m``, offset ``offset_m`` outward and facing the outward normal.  A building holds
    ``levels * footprint_area / area_per_household_m2`` households (footprint area without courtyards), spread
    evenly over all its window points; a building with no usable facade loses its households (warning).

    Returns
    -------
    DataFrame with the 'users' contract, kind 'home', building_idx the host row, normal_az_deg set.
    """
    where = "facade_homes"
    geoms, height, _ = _buildings(buildings, where)
    storey_height_m = _param("storey_height_m", storey_height_m, job_key="inputs.storey_height_m")
    window_height_m = _param("window_height_m", window_height_m, strict=False)
    home_spacing_m = _param("home_spacing_m", home_spacing_m, job_key="demand.home_spacing_m")
    area_per_household_m2 = _param("area_per_household_m2", area_per_household_m2,
                                   job_key="demand.area_per_household_m2")
    offset_m = _param("offset_m", offset_m, strict=False, job_key="candidates.offset_m")
    w = _pieces(geoms, party_gap_m=party_gap_m, min_wall_m=min_wall_m, simplify_m=simplify_m)
    levels = np.maximum(1, np.floor(height / storey_height_m * (1 + _EPS))).astype(np.int64)
    households = levels * shapely.area(geoms) / area_per_household_m2

    piece, t = _positions(w["length"], home_spacing_m)
    b = w["b"][piece]
    floors = levels[b]
    rep = np.repeat(np.arange(len(piece)), floors)
    k = np.arange(len(rep)) - np.repeat(np.cumsum(floors) - floors, floors)
    piece, t, b = piece[rep], t[rep], b[rep]
    nrm = w["normal"][piece]
    xy = w["q0"][piece] + t[:, None] * w["unit"][piece] + offset_m * nrm
    z = k * storey_height_m + window_height_m
    per_building = np.bincount(b, minlength=len(geoms))
    lost = (per_building == 0) & (households > 0)
    if lost.any():
        warnings.warn(f"{where}: {int(lost.sum())} building(s) have no usable facade for home terminals (party "
                      f"walls or walls shorter than {min_wall_m:g} m); their {households[lost].sum():.1f} estimated "
                      "households are not in the demand", SitingWarning, stacklevel=2)
    weight = households[b] / per_building[b] if len(b) else np.zeros(0)
    return _users(xy[:, 0], xy[:, 1], z, weight, "home", building_idx=b,
                  normal=_azimuth_deg(nrm[:, 0], nrm[:, 1]), where=where)


def given_users(buildings, given, *, allow_indoor: bool = False, default_z_m: float = 1.5) -> tuple[pd.DataFrame, int]:
    """Given demand points (user_ref, x, y, optional z_m, optional weight) as kind 'given'.

    Points inside or on a footprint are kept as kind 'indoor' with building_idx set to the lowest such building
    row when ``allow_indoor`` is true; otherwise they are dropped (warning) and counted.  Missing z_m -> default_z_m;
    missing weight column -> 1.0 per point; weights must be finite and >= 0.

    Returns
    -------
    (users, n_dropped_indoor)
    """
    where = "given_users"
    geoms, _, _ = _buildings(buildings, where)
    given = _points_table(given, "user_ref", where)
    default_z_m = _param("default_z_m", default_z_m, strict=False)
    refs = given["user_ref"].astype(str).to_numpy()
    x = given["x"].to_numpy(float)
    y = given["y"].to_numpy(float)
    z = pd.to_numeric(given["z_m"], errors="coerce").to_numpy(float) if "z_m" in given else np.full(len(x), np.nan)
    z = np.where(np.isfinite(z), z, default_z_m)
    if "weight" in given:
        wgt = pd.to_numeric(given["weight"], errors="coerce").to_numpy(float)
        bad = ~np.isfinite(wgt) | (wgt < 0)
        if bad.any():
            raise InputDataError(f"{where}: expected weight >= 0, got {int(bad.sum())} missing or negative weights "
                                 f"(user_ref {', '.join(refs[bad][:5])}); fix the weight column "
                                 "(inputs.user_weight_column)")
    else:
        wgt = np.ones(len(x))
    host = np.full(len(x), -1, np.int64)
    if len(x):
        pi, bj = shapely.STRtree(geoms).query(shapely.points(x, y), predicate="intersects")
        o = np.lexsort((-bj, pi))  # per point, the lowest building row is written last
        host[pi[o]] = bj[o]
    indoor = host >= 0
    n_indoor = int(indoor.sum())
    kind = np.where(indoor, "indoor", "given").astype(object)
    if not allow_indoor:
        keep = ~indoor
        if n_indoor:
            warnings.warn(f"{where}: {n_indoor} given user(s) inside buildings were dropped ("
                          f"{', '.join(refs[indoor][:10])}{' ...' if n_indoor > 10 else ''}); set "
                          "demand.allow_indoor = true to keep them as indoor users", SitingWarning, stacklevel=2)
        x, y, z, wgt, kind, host, refs = x[keep], y[keep], z[keep], wgt[keep], kind[keep], host[keep], refs[keep]
        dropped = n_indoor
    else:
        dropped = 0
    return _users(x, y, z, wgt, kind, building_idx=host, ref=refs, where=where), dropped


def combine_users(*tables_) -> pd.DataFrame:
    """Stack users tables (any of the demand sources) and renumber ``user_id`` as 0..n-1.

    Extra columns are kept; a missing ``user_ref`` becomes ''.
    """
    frames = [t for t in tables_ if t is not None]
    for i, t in enumerate(frames):
        tables.check(t, "users", f"combine_users argument {i}")
    if not frames:
        return _users(np.zeros(0), np.zeros(0), 0.0, 0.0, "given", where="combine_users")
    out = pd.concat([f for f in frames if len(f)] or frames[:1], ignore_index=True)
    out["user_id"] = np.arange(len(out), dtype=np.int64)
    out["building_idx"] = out["building_idx"].astype(np.int64)
    out["user_ref"] = out["user_ref"].fillna("").astype(object) if "user_ref" in out else ""
    for c in ("x", "y", "z_m", "weight", "normal_az_deg"):
        out[c] = out[c].astype(float)
    out["kind"] = out["kind"].astype(object)
    return tables.check(out, "users", "combine_users")
