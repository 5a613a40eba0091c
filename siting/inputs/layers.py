"""Layer checks: building footprints (ids, repair, parts), base stations, given sites and users, the area.

Each reader takes a layer already in the job's CRS and returns a table of the :mod:`siting.tables` contracts,
or raises an :class:`~siting.errors.InputDataError` naming the file, the features and the fix.
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import shapely

from ..errors import InputDataError
from .common import _MAX_LISTED, _feature_names, _listing
from .heights import _resolve_heights

MIN_PART_AREA_M2 = 1.0

#: Plausible ranges of point-layer properties: (low, high, unit, meaning).  Common practice, not a standard:
#: the tallest structures stand below 1,000 m; transmit powers of radio equipment span about -30 dBm (a
#: low-power test source) to 80 dBm (100 kW, broadcast); antenna gains from -30 dBi to 60 dBi (a large dish).
#: A weight counts households, subscribers or a traffic share at one point: 1e9 is beyond any one point.
RANGES: dict[str, tuple[float, float, str, str]] = {
    "z_m": (0.0, 1000.0, "m", "height above ground"),
    "tx_power_dbm": (-30.0, 80.0, "dBm", "transmit power"),
    "max_gain_dbi": (-30.0, 60.0, "dBi", "antenna gain"),
    "weight": (0.0, 1e9, "", "demand weight: households, subscribers or traffic share"),
}


def _ids_to_str(s: pd.Series) -> np.ndarray:
    """Ids as strings (integral floats without '.0'); None where the value is missing."""
    isna = s.isna().to_numpy()
    if pd.api.types.is_float_dtype(s):
        v = s.to_numpy(float)
        fin = np.isfinite(v)
        if np.all(v[fin] == np.round(v[fin])):
            s = s.astype("Int64")
    out = s.astype(str).to_numpy(dtype=object, copy=True)
    out[isna] = None
    blank = np.array([v is not None and not v.strip() for v in out], dtype=bool)  # "" or "  " is no id
    out[blank] = None
    return out


def _more(n: int) -> str:
    return f" and {n - _MAX_LISTED} more" if n > _MAX_LISTED else ""


def _booleans(s: pd.Series) -> np.ndarray:
    """Where a column holds booleans (true/false), which are not numbers."""
    if pd.api.types.is_bool_dtype(s):
        return s.notna().to_numpy()
    if s.dtype == object:
        return s.map(lambda v: isinstance(v, (bool, np.bool_))).to_numpy(bool)
    return np.zeros(len(s), bool)


def _text_column(df: pd.DataFrame, col: str) -> pd.Series:
    if col not in df.columns:
        return pd.Series("", index=df.index, dtype=object)
    s = df[col].astype(object)
    return s.where(s.notna(), "").astype(str).str.strip()


def _address(df: pd.DataFrame) -> np.ndarray:
    street = _text_column(df, "addr:street")
    number = _text_column(df, "addr:housenumber")
    joined = (street + " " + number).str.strip()
    given = _text_column(df, "address")
    return np.where(given != "", given, joined).astype(object)


# ------------------------------------------------------------------------------------------- buildings


def _polygonal_parts(geoms: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Flatten (multi)polygons and collections into polygon parts with the row index of their source."""
    parts, idx = shapely.get_parts(geoms, return_index=True)
    # make_valid may nest a MultiPolygon inside a GeometryCollection: flatten once more
    nested = shapely.get_type_id(parts) >= 4
    if nested.any():
        sub, sidx = shapely.get_parts(parts[nested], return_index=True)
        parts = np.concatenate([parts[~nested], sub])
        idx = np.concatenate([idx[~nested], idx[nested][sidx]])
        order = np.argsort(idx, kind="stable")
        parts, idx = parts[order], idx[order]
    keep = (shapely.get_type_id(parts) == 3) & ~shapely.is_empty(parts)
    return parts[keep], idx[keep]


def _building_ids(df: gpd.GeoDataFrame, path: Path, building_id_column: str, notes: list[str]) -> np.ndarray:
    """Building ids as strings: the id column, else id/osm_id/@id, else the feature numbers (with a note)."""
    id_col: str | None = building_id_column
    if building_id_column in df.columns:
        id_col = building_id_column
    else:
        id_col = next((c for c in ("id", "osm_id", "@id") if c in df.columns), None)
        if id_col is None:
            notes.append(
                f"buildings file '{path.name}' has no id column ({_listing(dict.fromkeys([building_id_column, 'id', 'osm_id', '@id']))}); "
                "feature numbers (0-based) are used as building ids."
            )
        else:
            notes.append(f"buildings file '{path.name}' has no column '{building_id_column}'; ids taken from '{id_col}'.")
    if id_col is None:
        ids = np.arange(len(df)).astype(str).astype(object)
    else:
        ids = _ids_to_str(df[id_col])
        none = np.array([i is None for i in ids])
        if none.any():
            raise InputDataError(
                f"buildings file '{path}': features {', '.join(str(i) for i in np.flatnonzero(none)[:_MAX_LISTED])}"
                f"{_more(int(none.sum()))} (0-based) have no "
                f"value in the id column '{id_col}' (null or an empty string); fill the ids, or name another "
                "building_id_column"
            )
    dup = pd.Series(ids).duplicated(keep=False).to_numpy()
    if dup.any():
        raise InputDataError(
            f"buildings file '{path}': building ids {_listing(sorted(set(ids[dup])))} occur more than once in "
            f"column '{id_col}'; ids must be unique (merge multi-part buildings into one MultiPolygon feature "
            "or give each its own id)"
        )
    return ids


_TYPE_NAMES = dict(enumerate(["Point", "LineString", "LinearRing", "Polygon", "MultiPoint", "MultiLineString",
                               "MultiPolygon", "GeometryCollection"]))


def _footprint_geometries(raw: gpd.GeoDataFrame, path: Path, ids: np.ndarray) -> None:
    """Refuse building features without a footprint: no geometry, an empty one, or points and lines.

    The README promises that non-polygon buildings are refused (exit code 2), so nothing is dropped: a feature
    without geometry, a Point or LineString (an OSM building node, a traced outline left open) and a
    GeometryCollection holding anything but polygons are named with the fix.
    """
    geoms = raw.geometry.values
    missing = shapely.is_missing(geoms) | shapely.is_empty(geoms)
    if missing.all():
        raise InputDataError(
            f"buildings file '{path}': none of its {len(geoms)} features has a geometry (all null or empty); "
            "check the export (the geometry column may have been dropped) and give the footprints as polygons"
        )
    if missing.any():
        raise InputDataError(
            f"buildings file '{path}': {int(missing.sum())} feature(s) have no geometry (null or empty): "
            f"{_feature_names(np.flatnonzero(missing), ids)}; every building needs its footprint polygon: give "
            "it, or remove these features"
        )
    tid = shapely.get_type_id(geoms)
    nonpoly = ~np.isin(tid, (3, 6))
    coll = np.flatnonzero(tid == 7)
    if len(coll):
        cparts, cidx = shapely.get_parts(geoms[coll], return_index=True)
        nonpoly[coll] = False
        nonpoly[coll[np.unique(cidx[~np.isin(shapely.get_type_id(cparts), (3, 6))])]] = True
    if not nonpoly.any():
        return
    bad = np.flatnonzero(nonpoly)
    described = [f"{_feature_names([i], ids)} ({_TYPE_NAMES.get(int(tid[i]), '?')})" for i in bad]
    what = "holds no polygons" if nonpoly.all() else f"has {len(bad)} feature(s) that are not polygons"
    raise InputDataError(
        f"buildings file '{path}' {what}: {'; '.join(described[:_MAX_LISTED])}{_more(len(described))}; footprints must be Polygons or MultiPolygons "
        "(for OSM data, the building areas, not nodes or open ways): correct these features or remove them "
        "(e.g. ogr2ogr -where \"OGR_GEOMETRY IN ('POLYGON', 'MULTIPOLYGON')\" out.geojson in.geojson)"
    )


def _stray_holes(geoms: np.ndarray, ids: np.ndarray, path: Path) -> None:
    """Refuse polygons with an interior ring outside their exterior ring, naming the building and the ring.

    RFC 7946 section 3.1.6 (and the OGC simple-feature model): the interior rings of a polygon are holes inside
    its exterior ring.  A ring outside cannot be a courtyard; ``make_valid`` would turn it into a second part of
    the building wherever it lies (kilometres away), so the intent is unknown: a misplaced courtyard, or another
    footprint written as a hole.  ``geoms`` are the invalid footprints (projected, metres).
    """
    parts, src = _polygonal_parts(geoms)
    found = []
    for poly, i in zip(parts, src):
        n = shapely.get_num_interior_rings(poly)
        if not n:
            continue
        shell = shapely.make_valid(shapely.Polygon(poly.exterior))
        for k in range(n):
            hole = shapely.make_valid(shapely.Polygon(poly.interiors[k]))
            if not shapely.relate_pattern(shell, hole, "T********"):  # the interiors do not meet
                found.append(f"building {ids[i]!r} interior ring {k + 1} ({shapely.distance(shell, hole):,.0f} m "
                             "outside its exterior ring)")
    if found:
        raise InputDataError(
            f"buildings file '{path}': {len(found)} hole(s) lie outside their footprint: "
            f"{'; '.join(found[:_MAX_LISTED])}{_more(len(found))}. The "
            "interior rings of a polygon are holes inside its exterior ring (RFC 7946 section 3.1.6); a ring "
            "outside is no courtyard. If it is a courtyard, correct its coordinates; if it is another footprint, "
            "make the feature a MultiPolygon or give it a feature of its own"
        )


def _buildings(
    raw: gpd.GeoDataFrame,
    *,
    path: Path,
    crs: pyproj.CRS,
    ids: np.ndarray,
    height_column: str | None,
    storey_height_m: float,
    default_height_m: float | None,
    notes: list[str],
) -> gpd.GeoDataFrame:
    """The ``buildings`` table from a layer whose ids (:func:`_building_ids`) and geometry kinds
    (:func:`_footprint_geometries`) are checked already."""
    df = raw
    # heights, names, addresses (per input feature)
    height, rule = _resolve_heights(
        df, ids, path=path, height_column=height_column, storey_height_m=storey_height_m,
        default_height_m=default_height_m, notes=notes,
    )
    name = _text_column(df, "name").to_numpy(object)
    address = _address(df)
    # project, repair, explode
    src = pyproj.CRS.from_user_input(df.crs)
    gs = df.geometry if src.equals(crs) else df.geometry.to_crs(crs)
    geoms = np.array(gs.values, dtype=object)
    invalid = ~shapely.is_valid(geoms)
    if invalid.any():
        _stray_holes(geoms[invalid], ids[invalid], path)
        geoms[invalid] = shapely.make_valid(geoms[invalid])
    parts, src_idx = _polygonal_parts(geoms)
    if invalid.any():
        degenerate = np.setdiff1d(np.flatnonzero(invalid), src_idx)
        msg = (
            f"{int(invalid.sum())} invalid building polygon(s) repaired (self-intersections, bad rings), keeping "
            f"their polygonal parts: ids {_listing(ids[invalid])}"
        )
        if len(degenerate):
            msg += f"; {len(degenerate)} of them had no area left and were dropped: {_listing(ids[degenerate])}"
        notes.append(msg + ".")
    area = shapely.area(parts)
    sliver = area < MIN_PART_AREA_M2
    if sliver.any():
        before = np.unique(src_idx)
        parts, src_idx = parts[~sliver], src_idx[~sliver]
        gone = np.setdiff1d(before, src_idx)
        msg = f"{int(sliver.sum())} polygon part(s) under {MIN_PART_AREA_M2:g} m2 dropped as slivers"
        msg += f" (buildings left with no part: {_listing(ids[gone])})." if len(gone) else "."
        notes.append(msg)
    if len(parts) == 0:
        raise InputDataError(
            f"buildings file '{path}': no footprint of at least {MIN_PART_AREA_M2:g} m2 remains after repair; "
            "check the layer and its CRS"
        )
    part_no = pd.Series(src_idx).groupby(src_idx).cumcount().to_numpy(np.int64)
    out = gpd.GeoDataFrame(
        {
            "building_id": pd.Series(ids[src_idx], dtype=object),
            "part": part_no,
            "height_m": height[src_idx].astype(float),
            "height_rule": pd.Series(rule[src_idx], dtype=object),
            "name": pd.Series(name[src_idx], dtype=object),
            "address": pd.Series(address[src_idx], dtype=object),
        },
        geometry=gpd.GeoSeries(parts, crs=crs).values,
        crs=crs,
    )
    return out


# ------------------------------------------------------------------------------------- point layers


def _points_xy(gdf: gpd.GeoDataFrame, path: Path, role: str, labels: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    geoms = gdf.geometry.values
    bad = shapely.is_missing(geoms) | shapely.is_empty(geoms)
    tid = np.where(bad, -1, shapely.get_type_id(np.where(bad, None, geoms)))
    multi1 = (tid == 4) & (shapely.get_num_geometries(np.where(bad, None, geoms)) == 1)
    bad |= ~((tid == 0) | multi1)
    if bad.any():
        raise InputDataError(
            f"{role} file '{path}': features {_listing(labels[bad])} are not single points (empty, lines, "
            "polygons or multi-points); give one point per feature"
        )
    pts = np.where(multi1, shapely.get_geometry(np.where(multi1, geoms, None), 0), geoms)
    return shapely.get_x(pts).astype(float), shapely.get_y(pts).astype(float)


def _names(labels: np.ndarray) -> str:
    """Feature labels such as ``bs_id 'A'`` joined for a message (the first ten, then a count)."""
    more = f" and {len(labels) - _MAX_LISTED} more" if len(labels) > _MAX_LISTED else ""
    return ", ".join(str(x) for x in labels[:_MAX_LISTED]) + more


def _shown(value) -> str:
    return f"{value:g}" if isinstance(value, (float, np.floating)) else repr(value)


def _valid_text(kind: str) -> str:
    lo, hi, unit, meaning = RANGES[kind]
    return f"{meaning}: {lo:g} .. {hi:g}{' ' + unit if unit else ''} (common practice)"


def _check_range(val: np.ndarray, labels: np.ndarray, path: Path, role: str, col: str, kind: str) -> None:
    """Refuse values outside :data:`RANGES` ``[kind]``, naming the file, the features, the column and the range."""
    lo, hi, unit, _ = RANGES[kind]
    bad = (val < lo) | (val > hi)
    if bad.any():
        raise InputDataError(
            f"{role} file '{path}': property '{col}' is {val[bad][0]:g}{' ' + unit if unit else ''} for "
            f"{_names(labels[bad])}, outside the valid range ({_valid_text(kind)}); correct the value "
            f"(check its unit) in the file"
        )


def _numeric(gdf, col, path, role, labels, *, required: bool, default: float | None = None,
             kind: str | None = None) -> np.ndarray:
    """Column ``col`` as floats; refuses words, ``Infinity`` and (when required) empty or NaN values, naming the
    features; ``kind`` (a key of :data:`RANGES`) adds the valid range to those messages."""
    if col not in gdf.columns:
        if required:
            raise InputDataError(
                f"{role} file '{path}' has no property '{col}' (required); its properties are "
                f"{_listing([c for c in gdf.columns if c != gdf.geometry.name], 40)}; add '{col}' to every feature"
            )
        return np.full(len(gdf), np.nan if default is None else float(default))
    raw = gdf[col]
    isbool = _booleans(raw)
    if isbool.any():
        raise InputDataError(
            f"{role} file '{path}': property '{col}' is {str(raw[isbool].iloc[0]).lower()} (a boolean, not a "
            f"number) for {_names(labels[isbool])}; give a plain number"
            + (f" ({_valid_text(kind)})" if kind else "")
        )
    val = pd.to_numeric(raw, errors="coerce").to_numpy(float, copy=True)
    absent = raw.isna().to_numpy()
    unreadable = ~absent & ~np.isfinite(val)
    if unreadable.any():
        raise InputDataError(
            f"{role} file '{path}': property '{col}' is not a finite number for {_names(labels[unreadable])} "
            f"(e.g. {_shown(raw[unreadable].iloc[0])}); give plain numbers"
            + (f" ({_valid_text(kind)})" if kind else "")
        )
    if absent.any():
        if required:
            raise InputDataError(
                f"{role} file '{path}': property '{col}' (required) is empty or NaN for {_names(labels[absent])}; "
                "fill it with a number" + (f" ({_valid_text(kind)})" if kind else "")
            )
        val[absent] = float(default) if default is not None else np.nan
    return val


def _refs(gdf: gpd.GeoDataFrame, candidates: tuple[str, ...]) -> np.ndarray:
    col = next((c for c in candidates if c in gdf.columns), None)
    index = np.arange(len(gdf)).astype(str).astype(object)
    if col is None:
        return index
    ids = _ids_to_str(gdf[col])
    return np.where(pd.isna(ids), index, ids).astype(object)


def _base_stations(gdf: gpd.GeoDataFrame, path: Path, role: str = "base_stations") -> pd.DataFrame:
    labels = np.array([f"feature {i}" for i in range(len(gdf))], dtype=object)
    if "bs_id" not in gdf.columns:
        raise InputDataError(
            f"{role} file '{path}' has no property 'bs_id' (required, unique); its properties are "
            f"{_listing([c for c in gdf.columns if c != gdf.geometry.name], 40)}; add a 'bs_id' to every feature"
        )
    ids = _ids_to_str(gdf["bs_id"])
    none = np.array([i is None for i in ids])
    if none.any():
        raise InputDataError(
            f"{role} file '{path}': features {', '.join(str(i) for i in np.flatnonzero(none)[:_MAX_LISTED])}"
            f"{_more(int(none.sum()))} (0-based) have no bs_id (null or an empty string); give every base station "
            "a unique bs_id"
        )
    labels = np.array([f"bs_id '{i}'" for i in ids], dtype=object)
    dup = pd.Series(ids).duplicated(keep=False).to_numpy()
    if dup.any():
        raise InputDataError(
            f"{role} file '{path}': bs_id {_listing(sorted(set(ids[dup])))} occur more than once; give each "
            "base station a unique bs_id"
        )
    x, y = _points_xy(gdf, path, role, labels)
    z = _numeric(gdf, "z_m", path, role, labels, required=True, kind="z_m")
    neg = z < 0
    if neg.any():
        raise InputDataError(
            f"{role} file '{path}': z_m (antenna height above ground) is negative for {_listing(labels[neg])}; "
            "give heights above ground in metres"
        )
    _check_range(z, labels, path, role, "z_m", "z_m")
    tx = _numeric(gdf, "tx_power_dbm", path, role, labels, required=True, kind="tx_power_dbm")
    gain = _numeric(gdf, "max_gain_dbi", path, role, labels, required=True, kind="max_gain_dbi")
    _check_range(tx, labels, path, role, "tx_power_dbm", "tx_power_dbm")
    _check_range(gain, labels, path, role, "max_gain_dbi", "max_gain_dbi")
    pat = _patterns(gdf, path, role, labels)
    sector = pat == "sector"
    az = _sector_angle(gdf, "azimuth_deg", sector, path, role, labels) % 360.0
    tilt = _sector_angle(gdf, "downtilt_deg", sector, path, role, labels)
    bad = np.abs(tilt) > 90.0
    if bad.any():
        raise InputDataError(
            f"{role} file '{path}': downtilt_deg must lie in [-90, 90] degrees below horizontal; got "
            f"{tilt[bad][0]:g} for {_listing(labels[bad])}"
        )
    out = pd.DataFrame(
        {
            "bs_id": pd.Series(ids, dtype=object),
            "x": x,
            "y": y,
            "z_m": z,
            "tx_power_dbm": tx,
            "max_gain_dbi": gain,
            "azimuth_deg": az,
            "downtilt_deg": tilt,
            "pattern": pd.Series(pat, dtype=object),
        }
    )
    return out


def _patterns(gdf: gpd.GeoDataFrame, path: Path, role: str, labels: np.ndarray) -> np.ndarray:
    """The required ``pattern`` of each station, 'sector' or 'omni' (case and spaces ignored).

    The README lists it among the base-station properties without a default, and either default would be
    wrong for many stations (an omni pattern spreads a sector's gain in every direction), so a missing or empty
    pattern is refused, naming the stations."""
    if "pattern" not in gdf.columns:
        raise InputDataError(
            f"{role} file '{path}' has no property 'pattern' (required: 'sector' or 'omni'); its properties are "
            f"{_listing([c for c in gdf.columns if c != gdf.geometry.name], 40)}; add 'pattern' to every station"
        )
    raw = gdf["pattern"].astype(object)
    absent = (raw.isna() | (raw.astype(str).str.strip() == "")).to_numpy()
    if absent.any():
        raise InputDataError(
            f"{role} file '{path}': property 'pattern' (required) is empty or null for {_names(labels[absent])}; "
            "give 'sector' or 'omni'"
        )
    pat = raw.map(lambda v: str(v).lower() if isinstance(v, (bool, np.bool_)) else str(v)).str.strip().str.lower()
    pat = pat.to_numpy(object)
    badp = ~np.isin(pat, ["sector", "omni"])
    if badp.any():
        raise InputDataError(
            f"{role} file '{path}': pattern must be 'sector' or 'omni'; got {pat[badp][0]!r} for "
            f"{_listing(labels[badp])}"
        )
    return pat


def _sector_angle(gdf: gpd.GeoDataFrame, col: str, sector: np.ndarray, path: Path, role: str,
                  labels: np.ndarray) -> np.ndarray:
    """``azimuth_deg`` or ``downtilt_deg`` [deg]: required for sector stations (where they aim the beam), not
    used for omni stations (0 there when not given); words, booleans and ``Infinity`` refused by name."""
    if col not in gdf.columns:
        if sector.any():
            raise InputDataError(
                f"{role} file '{path}' has no property '{col}', required for the sector stations "
                f"{_names(labels[sector])} (degrees clockwise from north for azimuth_deg, below the horizontal "
                f"for downtilt_deg); add '{col}' to them, or give 'pattern': 'omni' where the antenna is omni"
            )
        return np.zeros(len(gdf))
    val = _numeric(gdf, col, path, role, labels, required=False, default=np.nan)
    absent = np.isnan(val) & sector
    if absent.any():
        raise InputDataError(
            f"{role} file '{path}': property '{col}' is empty or null for the sector stations "
            f"{_names(labels[absent])}; a sector antenna needs it (degrees): fill it in"
        )
    return np.where(np.isnan(val), 0.0, val)


def _check_bs_not_indoors(bs: pd.DataFrame, buildings: gpd.GeoDataFrame, path: Path) -> None:
    pts = shapely.points(bs["x"].to_numpy(), bs["y"].to_numpy())
    tree = shapely.STRtree(buildings.geometry.values)
    pi, bi = tree.query(pts, predicate="within")
    if len(pi) == 0:
        return
    z = bs["z_m"].to_numpy()[pi]
    h = buildings["height_m"].to_numpy()[bi]
    low = z < h
    if not low.any():
        return
    cases = [
        f"'{bs['bs_id'].iat[p]}' at z_m = {zz:g} m inside building '{buildings['building_id'].iat[b]}' "
        f"(roof {hh:g} m)"
        for p, b, zz, hh in zip(pi[low], bi[low], z[low], h[low])
    ]
    raise InputDataError(
        f"base_stations file '{path}': base station(s) stand inside a building footprint below its roof: "
        f"{'; '.join(cases[:_MAX_LISTED])}{' ...' if len(cases) > _MAX_LISTED else ''}. Move the station "
        "outside the footprint (a street pole or a facade mount), or, for a rooftop site, give z_m as the "
        "antenna height above ground, above the roof"
    )


def _optional_z(gdf: gpd.GeoDataFrame, path: Path, role: str, labels: np.ndarray) -> np.ndarray:
    """The optional ``z_m`` column of a point layer [m] (NaN where not given), refused when negative or absurd."""
    z = _numeric(gdf, "z_m", path, role, labels, required=False, default=np.nan, kind="z_m")
    neg = z < 0
    if neg.any():
        raise InputDataError(f"{role} file '{path}': z_m is negative for {_listing(labels[neg])}; give heights above ground")
    given = ~np.isnan(z)
    _check_range(z[given], labels[given], path, role, "z_m", "z_m")
    return z


def _given_sites(gdf: gpd.GeoDataFrame, path: Path) -> pd.DataFrame:
    refs = _refs(gdf, ("site_id", "id"))
    labels = np.array([f"site '{r}'" for r in refs], dtype=object)
    dup = pd.Series(refs).duplicated(keep=False).to_numpy()
    if dup.any():
        raise InputDataError(
            f"sites file '{path}': site ids {_listing(sorted(set(refs[dup])))} occur more than once; make them unique"
        )
    x, y = _points_xy(gdf, path, "sites", labels)
    z = _optional_z(gdf, path, "sites", labels)
    return pd.DataFrame({"site_ref": pd.Series(refs, dtype=object), "x": x, "y": y, "z_m": z})


def _given_users(gdf: gpd.GeoDataFrame, path: Path, weight_column: str, notes: list[str]) -> pd.DataFrame:
    refs = _refs(gdf, ("user_id", "id"))
    labels = np.array([f"user '{r}'" for r in refs], dtype=object)
    x, y = _points_xy(gdf, path, "users", labels)
    z = _optional_z(gdf, path, "users", labels)
    if weight_column not in gdf.columns:
        notes.append(f"users file '{path.name}' has no weight column '{weight_column}'; every user weighs 1.")
        w = np.ones(len(gdf))
    else:
        w = _numeric(gdf, weight_column, path, "users", labels, required=True, kind="weight")
        neg = w < 0
        if neg.any():
            raise InputDataError(
                f"users file '{path}': weight column '{weight_column}' is negative for {_listing(labels[neg])} "
                f"(e.g. {w[neg][0]:g}); weights are demand (households, subscribers, traffic share) and must be "
                f">= 0: correct them in the file (valid {_valid_text('weight')})"
            )
        _check_range(w, labels, path, "users", weight_column, "weight")
    return pd.DataFrame({"user_ref": pd.Series(refs, dtype=object), "x": x, "y": y, "z_m": z, "weight": w})




def _area_from_file(gdf: gpd.GeoDataFrame, path: Path) -> shapely.Geometry:
    parts, _ = _polygonal_parts(shapely.make_valid(np.asarray(gdf.geometry.values, dtype=object)))
    if len(parts) == 0:
        raise InputDataError(f"area file '{path}' holds no polygon; give a polygon layer for the area of interest")
    return shapely.union_all(parts)



def _clip_points(df: pd.DataFrame, area, what: str, notes: list[str]) -> pd.DataFrame:
    if area is None:
        return df
    inside = shapely.intersects(shapely.points(df["x"].to_numpy(), df["y"].to_numpy()), area)
    if (~inside).any():
        notes.append(f"{int((~inside).sum())} {what} outside the area of interest left out.")
    return df.loc[inside].reset_index(drop=True)


def _inside_buildings(df: pd.DataFrame, buildings: gpd.GeoDataFrame) -> np.ndarray:
    pts = shapely.points(df["x"].to_numpy(), df["y"].to_numpy())
    pi, _ = shapely.STRtree(buildings.geometry.values).query(pts, predicate="within")
    out = np.zeros(len(df), bool)
    out[pi] = True
    return out
