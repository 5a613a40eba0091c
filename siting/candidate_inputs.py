"""Checks of the tables and parameters given to the candidate and demand builders (:mod:`siting.candidates`,
:mod:`siting.walls`, :mod:`siting.demand`): footprints (projected, polygonal, finite heights), point tables and
numeric parameters.  Each failure raises an error that names the key or the column and the fix.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import shapely

from . import tables
from .errors import InputDataError, JobError

__all__: list[str] = []

_POLYGON, _MULTIPOLYGON = 3, 6  # shapely.get_type_id codes


def _param(name: str, value, *, low: float = 0.0, strict: bool = True, job_key: str = "") -> float:
    """Validate one numeric parameter; raise :class:`JobError` naming the key and the fix."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        v = float("nan")
    ok = math.isfinite(v) and (v > low if strict else v >= low)
    if not ok:
        rel = ">" if strict else ">="
        key = job_key or name
        raise JobError(f"{key}: expected a finite number {rel} {low:g} [m], got {value!r}; set it in the job "
                       f"file or pass a valid {name}", source="candidate parameters")
    return v


def _buildings(buildings, where: str):
    """Check the buildings table and return (geometries as a shapely array, height_m array, building_id array)."""
    if buildings is None or len(buildings) == 0:
        raise InputDataError(f"{where}: the buildings table is empty; expected at least one footprint. Check the "
                             "buildings layer and the area of interest (bbox / polygon) of the job")
    if not hasattr(buildings, "geometry"):
        raise InputDataError(f"{where}: expected a GeoDataFrame with a geometry column, got "
                             f"{type(buildings).__name__}; load footprints with siting.district")
    tables.check(buildings, "buildings", where)
    crs = getattr(buildings, "crs", None)
    if crs is not None and getattr(crs, "is_geographic", False):
        raise InputDataError(f"{where}: buildings are in geographic CRS {crs.to_string()} (degrees); expected a "
                             "projected CRS in metres. Project them first (district loader, job key inputs.crs)")
    geoms = np.asarray(buildings.geometry.array, dtype=object)
    ids = buildings["building_id"].astype(str).to_numpy()
    type_id = shapely.get_type_id(geoms)
    bad = ~np.isin(type_id, (_POLYGON, _MULTIPOLYGON)) | shapely.is_empty(geoms)
    if bad.any():
        some = ", ".join(ids[bad][:5])
        raise InputDataError(f"{where}: expected Polygon footprints, got {int(bad.sum())} empty or non-polygon "
                             f"geometries (building_id {some}); drop or repair these features")
    height = buildings["height_m"].to_numpy(float)
    badh = ~np.isfinite(height) | (height < 0)
    if badh.any():
        some = ", ".join(ids[badh][:5])
        raise InputDataError(f"{where}: expected finite height_m >= 0, got {int(badh.sum())} bad heights "
                             f"(building_id {some}); fix the height column or set inputs.default_height_m")
    return geoms, height, ids


def _points_table(df, ref_col: str, where: str, required=("x", "y")) -> pd.DataFrame:
    if df is None:
        raise InputDataError(f"{where}: expected a point table with columns {ref_col}, x, y, got None")
    df = pd.DataFrame(df).reset_index(drop=True)
    missing = [c for c in (ref_col, *required) if c not in df.columns]
    if missing:
        raise InputDataError(f"{where}: expected columns {[ref_col, *required]}, missing {missing} (found "
                             f"{list(df.columns)}); rename the columns of the point layer")
    for c in required:
        v = pd.to_numeric(df[c], errors="coerce").to_numpy(float)
        bad = ~np.isfinite(v)
        if bad.any():
            refs = ", ".join(df[ref_col].astype(str).to_numpy()[bad][:5])
            raise InputDataError(f"{where}: column '{c}' must be a finite number, got {int(bad.sum())} bad "
                                 f"values ({ref_col} {refs}); fix or remove these points")
    return df


