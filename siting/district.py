"""Reading a district: building footprints, base stations, optional given sites and users, one metric CRS.

:func:`load_district` is the only entry point the runner needs.  It takes plain keyword arguments (it never
reads the job file) and returns a :class:`District` whose tables follow the contracts of
:mod:`siting.tables`.

Formats
-------
* Any OGR vector format through pyogrio: GeoJSON, GeoPackage, Shapefile, FlatGeobuf, ...
* GeoParquet (``.parquet`` / ``.geoparquet``) through geopandas.
* OpenStreetMap extracts (``.osm.pbf``) through pyrosm, for buildings only; pyrosm is imported lazily and is
  the ``osm`` extra of the package.  OSM building ids become ``"<osm_type>/<id>"`` (``way/123``,
  ``relation/45``) because way and relation ids may collide.

Decisions (documented here and in the README)
---------------------------------------------
* Building height, per building, first rule that gives a value: the caller's ``height_column`` (rule
  ``column``); the ``height`` tag, parsed from "12", "12 m", "12.5m", "12,5", "40 ft" (rule ``height``);
  ``building:levels`` (or ``levels``) x ``storey_height_m`` (rule ``levels``); ``default_height_m`` (rule
  ``default``, with a warning giving the count).  Values that cannot be parsed fall through to the next rule
  with a note.  Heights <= 0 m or > 1000 m, negative levels, and buildings left without a height when
  ``default_height_m=None`` are errors naming the ids.
* CRS: the one named by the caller (must be projected, in metres), else the UTM zone of the data centroid
  (mean of the footprints' bounding-box centres; ``pyproj.database.query_utm_crs_info``).  Every layer is
  reprojected to it, with a note.
* GeoJSON is longitude/latitude by RFC 7946; a GeoJSON whose coordinates leave |x| <= 180, |y| <= 90 is refused.
* Other layers without a CRS: taken to be in the caller's CRS if one is named, else in EPSG:4326 if their
  coordinates fit longitude/latitude (both with a note), else refused.
* Geometry: invalid polygons are repaired with ``shapely.make_valid`` keeping the polygonal parts (note with
  the ids); holes are kept (courtyards are real); multipolygons are exploded into parts sharing the building
  id (``part`` column, 0-based); parts under 1 m2 are dropped with a count.
* Non-polygon building features (points, lines): if the layer has no polygon at all it is refused (wrong
  layer); if polygons and non-polygons are mixed (OSM building nodes, stray lines) the non-polygons are
  dropped with a note naming their ids and types.  Features with no geometry are dropped with a note.
* Duplicate building ids are an error (the parts of one multipolygon are not duplicates).
* An area of interest (lon/lat bbox and/or a polygon file; both given: their intersection) keeps the whole
  buildings that intersect it, and the given sites and users inside it.  Base stations are all kept: a
  station outside the area may still serve it.
"""

from __future__ import annotations

import json
import warnings
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import shapely
from pyproj.aoi import AreaOfInterest
from pyproj.database import query_utm_crs_info

from . import tables
from .cache import file_sha256
from .errors import InputDataError, JobError

__all__ = ["District", "load_district", "summary", "to_lonlat", "parse_height_m", "read_layer"]

MIN_PART_AREA_M2 = 1.0
MAX_HEIGHT_M = 1000.0
FT_M = 0.3048
_GEOJSON_SUFFIXES = (".geojson", ".json", ".geojsonl", ".geojsons")
_PARQUET_SUFFIXES = (".parquet", ".geoparquet")
_MAX_LISTED = 10


@dataclass
class District:
    """Everything the pipeline needs about the place, in one projected CRS (metres).

    Attributes
    ----------
    crs : pyproj.CRS
        The job's projected CRS; every x, y and geometry below is in it [m].
    crs_rule : str
        How the CRS was chosen: ``"named in job"`` or ``"local UTM zone from data centroid"``.
    buildings : geopandas.GeoDataFrame
        ``buildings`` contract (building_id, part, height_m [m], height_rule, name, address, geometry),
        one row per polygon part, index 0..n-1.
    base_stations : pandas.DataFrame
        ``base_stations`` contract (bs_id, x [m], y [m], z_m [m], tx_power_dbm, max_gain_dbi, azimuth_deg,
        downtilt_deg, pattern), index 0..n-1.
    given_sites : pandas.DataFrame or None
        site_ref (str), x [m], y [m], z_m [m] (NaN when the layer gives none).
    given_users : pandas.DataFrame or None
        user_ref (str), x [m], y [m], z_m [m] (NaN when absent), weight (>= 0).
    area : shapely.Polygon or shapely.MultiPolygon or None
        Area of interest in ``crs``.
    notes : list of str
        Repairs, defaults used, reprojections: one sentence each.
    input_hashes : dict
        Path of each input file -> sha256 hex digest of its bytes.
    """

    crs: pyproj.CRS
    crs_rule: str
    buildings: gpd.GeoDataFrame
    base_stations: pd.DataFrame
    given_sites: pd.DataFrame | None = None
    given_users: pd.DataFrame | None = None
    area: shapely.Geometry | None = None
    notes: list[str] = field(default_factory=list)
    input_hashes: dict[str, str] = field(default_factory=dict)


# ----------------------------------------------------------------------------------------------- helpers


def _listing(values, limit: int = _MAX_LISTED) -> str:
    values = [str(v) for v in values]
    head = ", ".join(repr(v) for v in values[:limit])
    more = f" and {len(values) - limit} more" if len(values) > limit else ""
    return head + more


def _hash_inputs(path: Path, hashes: dict[str, str]) -> None:
    if path.is_dir():  # e.g. a FileGDB folder
        for p in sorted(q for q in path.rglob("*") if q.is_file()):
            hashes[str(p)] = file_sha256(p)
        return
    hashes[str(path)] = file_sha256(path)
    if path.suffix.lower() == ".shp":
        for ext in (".shx", ".dbf", ".prj", ".cpg"):
            for side in (path.with_suffix(ext), path.with_suffix(ext.upper())):
                if side.exists():
                    hashes[str(side)] = file_sha256(side)


def _is_geojson(path: Path) -> bool:
    return path.suffix.lower() in _GEOJSON_SUFFIXES


def _is_pbf(path: Path) -> bool:
    return path.name.lower().endswith(".pbf")


def read_layer(path, *, layer: str | None = None, role: str = "layer", bbox_lonlat=None) -> gpd.GeoDataFrame:
    """Read one vector layer, turning every failure into an :class:`InputDataError` naming the file.

    Parameters
    ----------
    path : str or Path
        Vector file (any OGR format, GeoParquet, or ``.osm.pbf`` for buildings).
    layer : str, optional
        Layer name for multi-layer files.  Without it a single-layer file is read; a multi-layer file is read
        from the layer named like ``role`` if there is one, else refused with the list of layers.
    role : str
        What the layer is for ("buildings", "base_stations", ...), used in messages and layer choice.
    bbox_lonlat : sequence of 4 floats, optional
        Only used for ``.osm.pbf``: passed to pyrosm as its bounding box.
    """
    path = Path(path)
    if not path.exists():
        raise InputDataError(
            f"{role} file '{path}' not found; check the path (relative paths in a job file resolve against "
            "the job file's folder)"
        )
    if _is_pbf(path):
        if role != "buildings":
            raise InputDataError(
                f"{role} file '{path}' is an OSM extract; only buildings can be read from .osm.pbf. "
                "Give the layer as GeoJSON, GeoPackage, Shapefile, FlatGeobuf or GeoParquet"
            )
        gdf = _read_osm_pbf(path, bbox_lonlat)
    elif path.suffix.lower() in _PARQUET_SUFFIXES:
        try:
            gdf = gpd.read_parquet(path)
        except Exception as exc:  # noqa: BLE001 - any reader failure becomes a clear message
            raise InputDataError(
                f"{role} file '{path}' could not be read as GeoParquet ({type(exc).__name__}: {exc}); "
                "check that it is a GeoParquet file with a geometry column"
            ) from exc
    else:
        import pyogrio

        try:
            layers = pyogrio.list_layers(path)
        except Exception as exc:  # noqa: BLE001
            raise InputDataError(
                f"{role} file '{path}' could not be opened ({type(exc).__name__}: {exc}); expected a vector "
                "file GDAL reads (GeoJSON, GeoPackage, Shapefile, FlatGeobuf) or GeoParquet; check the file "
                "is complete and in one of these formats"
            ) from exc
        names = [str(n) for n in layers[:, 0]] if len(layers) else []
        if layer is None and len(names) > 1:
            if role in names:
                layer = role
            else:
                raise InputDataError(
                    f"{role} file '{path}' has {len(names)} layers ({_listing(names)}); name the one to use "
                    f"(e.g. buildings_layer = '{names[0]}')"
                )
        if layer is not None and layer not in names:
            raise InputDataError(
                f"{role} file '{path}' has no layer '{layer}'; its layers are {_listing(names)}"
            )
        try:
            with warnings.catch_warnings():
                # mixed-type properties (e.g. height 12 and "12 m") come back as strings: that is what we parse
                warnings.filterwarnings("ignore", message="Could not parse column", category=UserWarning)
                gdf = pyogrio.read_dataframe(path, layer=layer)
        except Exception as exc:  # noqa: BLE001
            raise InputDataError(
                f"{role} file '{path}' could not be read ({type(exc).__name__}: {exc}); check the file is a "
                "complete, valid vector file"
            ) from exc
    if not isinstance(gdf, gpd.GeoDataFrame) or gdf.geometry is None:
        raise InputDataError(f"{role} file '{path}' has no geometry column; give a layer with geometries")
    if len(gdf) == 0:
        where = f" (layer '{layer}')" if layer else ""
        raise InputDataError(
            f"{role} file '{path}'{where} has no features; check that the right file or layer was named and "
            "that the export did not filter everything out"
        )
    gdf = gdf.reset_index(drop=True)
    return gdf


def _read_osm_pbf(path: Path, bbox_lonlat) -> gpd.GeoDataFrame:
    try:
        import pyrosm
    except ImportError as exc:
        raise InputDataError(
            f"reading buildings from the OSM extract '{path}' needs pyrosm, which is not installed; install "
            "the 'osm' extra (pip install 'siting[osm]') or convert the extract to GeoPackage first"
        ) from exc
    try:
        osm = pyrosm.OSM(str(path), bounding_box=list(bbox_lonlat) if bbox_lonlat is not None else None)
        gdf = osm.get_buildings()
    except Exception as exc:  # noqa: BLE001
        raise InputDataError(
            f"OSM extract '{path}' could not be read by pyrosm ({type(exc).__name__}: {exc}); check the file "
            "is a complete .osm.pbf"
        ) from exc
    if gdf is None or len(gdf) == 0:
        raise InputDataError(f"OSM extract '{path}' holds no buildings (in the area asked for); check the extract")
    gdf = gdf.reset_index(drop=True)
    # Tags pyrosm does not expand into columns stay in the JSON 'tags' column: pull out the ones we use.
    if "tags" in gdf.columns:
        tags = gdf["tags"]
        for key in ("height", "building:levels", "levels", "name", "address", "addr:street", "addr:housenumber"):
            if key in gdf.columns:
                continue
            hit = tags.notna() & tags.astype(str).str.contains(f'"{key}"', regex=False)
            if hit.any():
                col = pd.Series(None, index=gdf.index, dtype=object)
                col[hit] = [json.loads(t).get(key) for t in tags[hit]]
                gdf[key] = col
    if "osm_type" in gdf.columns and "id" in gdf.columns:
        gdf["id"] = gdf["osm_type"].astype(str) + "/" + gdf["id"].astype(str)
    if gdf.crs is None:
        gdf = gdf.set_crs(4326)
    return gdf


def _check_geojson_lonlat(gdf: gpd.GeoDataFrame, path: Path, role: str) -> None:
    geoms = gdf.geometry.values
    ok = ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))
    if not ok.any():
        return
    b = shapely.bounds(geoms[ok])
    xmax = np.nanmax(np.abs(b[:, [0, 2]]))
    ymax = np.nanmax(np.abs(b[:, [1, 3]]))
    if xmax > 180.0 or ymax > 90.0:
        bad = np.flatnonzero(ok)[(np.abs(b[:, [0, 2]]).max(1) > 180.0) | (np.abs(b[:, [1, 3]]).max(1) > 90.0)]
        raise InputDataError(
            f"{role} file '{path}' is GeoJSON, whose coordinates must be longitude/latitude in degrees "
            f"(RFC 7946), but features {_listing(bad.tolist())} reach |x| = {xmax:.6g}, |y| = {ymax:.6g}: "
            "they look like projected metres. Reproject the file to EPSG:4326 (e.g. "
            "'ogr2ogr -t_srs EPSG:4326 out.geojson in.geojson') or save it as GeoPackage, which keeps its CRS"
        )


def _fits_lonlat(gdf: gpd.GeoDataFrame) -> bool:
    geoms = gdf.geometry.values
    ok = ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))
    if not ok.any():
        return True
    b = shapely.bounds(geoms[ok])
    return bool(np.nanmax(np.abs(b[:, [0, 2]])) <= 180.0 and np.nanmax(np.abs(b[:, [1, 3]])) <= 90.0)


def _assign_crs(gdf, path: Path, role: str, named_crs, notes: list[str]) -> gpd.GeoDataFrame:
    """Give a layer its source CRS (GeoJSON rule, missing CRS rule)."""
    if _is_geojson(path):
        _check_geojson_lonlat(gdf, path, role)
        if gdf.crs is None:
            gdf = gdf.set_crs(4326)
        return gdf
    if gdf.crs is not None:
        return gdf
    if named_crs is not None:
        notes.append(f"{role} file '{path.name}' has no CRS; taken to be in the job's CRS {_crs_name(named_crs)}.")
        return gdf.set_crs(named_crs)
    if _fits_lonlat(gdf):
        notes.append(f"{role} file '{path.name}' has no CRS; its coordinates fit longitude/latitude, taken as EPSG:4326.")
        return gdf.set_crs(4326)
    raise InputDataError(
        f"{role} file '{path}' has no CRS and its coordinates are not longitude/latitude; add the CRS to the "
        "file (e.g. a .prj next to a shapefile, or 'ogr2ogr -a_srs EPSG:xxxx') or name the CRS in the job"
    )


def _crs_name(crs: pyproj.CRS) -> str:
    epsg = crs.to_epsg()
    return f"EPSG:{epsg} ({crs.name})" if epsg else crs.name


def _project(gdf, crs: pyproj.CRS, path: Path, role: str, notes: list[str]) -> gpd.GeoDataFrame:
    src = pyproj.CRS.from_user_input(gdf.crs)
    if src.equals(crs):
        return gdf
    notes.append(f"{role} file '{path.name}' reprojected from {_crs_name(src)} to {_crs_name(crs)}.")
    try:
        return gdf.to_crs(crs)
    except Exception as exc:  # noqa: BLE001
        raise InputDataError(
            f"{role} file '{path}' could not be reprojected from {_crs_name(src)} to {_crs_name(crs)} "
            f"({type(exc).__name__}: {exc}); check the layer's CRS"
        ) from exc


def _named_crs(crs) -> pyproj.CRS:
    try:
        out = pyproj.CRS.from_user_input(crs)
    except pyproj.exceptions.CRSError as exc:
        raise JobError(f"crs: '{crs}' is not a CRS pyproj knows ({exc}); give e.g. 'EPSG:32633'", "crs") from exc
    units = {a.unit_name for a in out.axis_info}
    if not out.is_projected or not units <= {"metre", "meter"}:
        raise JobError(
            f"crs: {_crs_name(out)} is not a projected CRS in metres (axes in {sorted(units)}); name a metric "
            "CRS such as the local UTM zone (e.g. 'EPSG:32633'), or leave crs unset to pick the UTM zone",
            "crs",
        )
    return out


def _utm_from_centroid(gdf: gpd.GeoDataFrame) -> pyproj.CRS:
    geoms = gdf.geometry.values
    ok = ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))
    # centre of each feature's bounding box: robust to invalid rings (a bow-tie's centroid is undefined)
    b = shapely.bounds(geoms[ok])
    to_ll = pyproj.Transformer.from_crs(gdf.crs, 4326, always_xy=True)
    lon, lat = to_ll.transform((b[:, 0] + b[:, 2]) / 2, (b[:, 1] + b[:, 3]) / 2)
    lon0, lat0 = float(np.nanmean(lon)), float(np.nanmean(lat))
    infos = query_utm_crs_info(datum_name="WGS 84", area_of_interest=AreaOfInterest(lon0, lat0, lon0, lat0))
    if not infos:
        raise InputDataError(
            f"no UTM zone covers the data centroid (lon {lon0:.4f}, lat {lat0:.4f}); name a projected CRS in the job"
        )
    # prefer the plain 'WGS 84 / UTM zone NNx' entries (EPSG 326xx/327xx)
    infos = sorted(infos, key=lambda i: (not i.name.startswith("WGS 84 / UTM zone"), i.code))
    return pyproj.CRS.from_authority(infos[0].auth_name, infos[0].code)


@lru_cache(maxsize=32)
def _to_lonlat_transformer(crs: pyproj.CRS) -> pyproj.Transformer:
    return pyproj.Transformer.from_crs(crs, 4326, always_xy=True)


def to_lonlat(x, y, crs) -> tuple[np.ndarray, np.ndarray]:
    """Easting/northing [m] in ``crs`` to WGS84 longitude/latitude [deg] (RFC 7946 order: lon, lat)."""
    t = _to_lonlat_transformer(pyproj.CRS.from_user_input(crs))
    return t.transform(np.asarray(x, float), np.asarray(y, float))


# --------------------------------------------------------------------------------------- height parsing

_LENGTH_RE = r"^\s*([-+]?\d+(?:[.,]\d+)?|[-+]?[.,]\d+)\s*(m|meters?|metres?|ft|feet|foot|')?\s*$"
_NUMBER_RE = r"^\s*([-+]?\d+(?:[.,]\d+)?)\s*$"


def parse_height_m(values) -> tuple[np.ndarray, np.ndarray]:
    """Parse height tags into metres, vectorised.

    Accepts numbers and strings such as "12", "12 m", "12.5m", "12,5" (decimal comma), "40 ft", "40'".

    Returns
    -------
    height_m : ndarray of float
        Parsed height [m]; NaN where absent or unparseable.
    unparsed : ndarray of bool
        True where a value was present but could not be read (so callers can report it).
    """
    s = pd.Series(values, dtype=object) if not isinstance(values, pd.Series) else values
    if pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s):
        out = s.to_numpy(float)
        return out, np.zeros(len(out), bool)
    present = s.notna().to_numpy() & (s.astype(str).str.strip() != "").to_numpy()
    parts = s.astype(str).str.lower().str.extract(_LENGTH_RE)
    num = pd.to_numeric(parts[0].str.replace(",", ".", regex=False), errors="coerce").to_numpy(float)
    feet = parts[1].isin(["ft", "feet", "foot", "'"]).to_numpy()
    num = np.where(feet, num * FT_M, num)
    num = np.where(present, num, np.nan)
    return num, present & np.isnan(num)


def _parse_levels(values) -> tuple[np.ndarray, np.ndarray]:
    s = values
    if pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s):
        out = s.to_numpy(float)
        return out, np.zeros(len(out), bool)
    present = s.notna().to_numpy() & (s.astype(str).str.strip() != "").to_numpy()
    parts = s.astype(str).str.extract(_NUMBER_RE)
    num = pd.to_numeric(parts[0].str.replace(",", ".", regex=False), errors="coerce").to_numpy(float)
    num = np.where(present, num, np.nan)
    return num, present & np.isnan(num)


def _resolve_heights(
    df: pd.DataFrame,
    ids: np.ndarray,
    *,
    path: Path,
    height_column: str | None,
    storey_height_m: float,
    default_height_m: float | None,
    notes: list[str],
) -> tuple[np.ndarray, np.ndarray]:
    n = len(df)
    height = np.full(n, np.nan)
    rule = np.full(n, "", dtype=object)
    if height_column is not None and height_column not in df.columns:
        raise InputDataError(
            f"buildings file '{path}' has no column '{height_column}' (named as height_column); its columns are "
            f"{_listing([c for c in df.columns if c != df.geometry.name], 40)}; fix the name or leave it unset"
        )
    sources = []
    if height_column is not None:
        sources.append((height_column, "column"))
    if "height" in df.columns and height_column != "height":
        sources.append(("height", "height"))
    for col, name in sources:
        val, unparsed = parse_height_m(df[col])
        if unparsed.any():
            notes.append(
                f"{int(unparsed.sum())} value(s) of '{col}' could not be read as a height (buildings "
                f"{_listing(ids[unparsed])}, e.g. {df[col][unparsed].iloc[0]!r}); the next rule was used."
            )
        _check_range(val, ids, f"'{col}'", path)
        take = np.isnan(height) & ~np.isnan(val)
        height[take] = val[take]
        rule[take] = name
    lev_col = next((c for c in ("building:levels", "levels") if c in df.columns), None)
    if lev_col is not None:
        lev, unparsed = _parse_levels(df[lev_col])
        if unparsed.any():
            notes.append(
                f"{int(unparsed.sum())} value(s) of '{lev_col}' could not be read as a number of storeys "
                f"(buildings {_listing(ids[unparsed])}); the next rule was used."
            )
        neg = lev < 0
        if neg.any():
            raise InputDataError(
                f"buildings file '{path}': '{lev_col}' is negative for buildings {_listing(ids[neg])}; storey "
                "counts must be >= 0: correct or remove these values"
            )
        val = lev * float(storey_height_m)
        val[lev == 0] = np.nan  # zero storeys says nothing about the height
        take = np.isnan(height) & ~np.isnan(val)
        height[take] = val[take]
        rule[take] = "levels"
    missing = np.isnan(height)
    if missing.any():
        if default_height_m is None or not np.isfinite(default_height_m):
            raise InputDataError(
                f"buildings file '{path}': {int(missing.sum())} building(s) have no height from any rule "
                f"(height column, 'height', 'building:levels'): {_listing(ids[missing])}; add heights or "
                "set default_height_m"
            )
        height[missing] = float(default_height_m)
        rule[missing] = "default"
        msg = (
            f"{int(missing.sum())} of {n} buildings had no height tag; the default height "
            f"{float(default_height_m):g} m was used."
        )
        notes.append(msg)
        warnings.warn(msg, UserWarning, stacklevel=4)  # points at the caller of load_district
    _check_range(height, ids, "the resolved height", path)
    return height, rule


def _check_range(val: np.ndarray, ids: np.ndarray, what: str, path: Path) -> None:
    low = val <= 0
    if low.any():
        raise InputDataError(
            f"buildings file '{path}': {what} is zero or negative for buildings {_listing(ids[low])} "
            f"(e.g. {val[low][0]:g} m); heights must be > 0 m above ground: correct or remove these values"
        )
    high = val > MAX_HEIGHT_M
    if high.any():
        raise InputDataError(
            f"buildings file '{path}': {what} exceeds {MAX_HEIGHT_M:g} m for buildings {_listing(ids[high])} "
            f"(e.g. {val[high][0]:g} m); check the unit (feet? centimetres?) and correct these values"
        )


# ------------------------------------------------------------------------------------------- attributes


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
    return out


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


def _buildings(
    raw: gpd.GeoDataFrame,
    *,
    path: Path,
    crs: pyproj.CRS,
    building_id_column: str,
    height_column: str | None,
    storey_height_m: float,
    default_height_m: float | None,
    notes: list[str],
) -> gpd.GeoDataFrame:
    df = raw
    # ids
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
                f"buildings file '{path}': features {_listing(np.flatnonzero(none).tolist())} (0-based) have no "
                f"value in the id column '{id_col}'; fill the ids, or name another building_id_column"
            )
    dup = pd.Series(ids).duplicated(keep=False).to_numpy()
    if dup.any():
        raise InputDataError(
            f"buildings file '{path}': building ids {_listing(sorted(set(ids[dup])))} occur more than once in "
            f"column '{id_col}'; ids must be unique (merge multi-part buildings into one MultiPolygon feature "
            "or give each its own id)"
        )
    # geometry types
    geoms = df.geometry.values
    missing = shapely.is_missing(geoms) | shapely.is_empty(geoms)
    if missing.all():
        raise InputDataError(f"buildings file '{path}': no feature has a geometry; check the export")
    if missing.any():
        notes.append(f"{int(missing.sum())} building feature(s) without geometry dropped: ids {_listing(ids[missing])}.")
    tid = np.where(missing, -1, shapely.get_type_id(np.where(missing, None, geoms)))
    has_poly = np.isin(tid, (3, 6))
    coll = tid == 7
    if coll.any():
        cparts, cidx = shapely.get_parts(geoms[coll], return_index=True)
        with_poly = np.zeros(int(coll.sum()), bool)
        with_poly[cidx[np.isin(shapely.get_type_id(cparts), (3, 6))]] = True
        has_poly[np.flatnonzero(coll)[with_poly]] = True
    nonpoly = ~missing & ~has_poly
    if nonpoly.any():
        types = shapely.get_type_id(geoms[nonpoly])
        type_names = pd.Series(types).map(dict(enumerate(
            ["Point", "LineString", "LinearRing", "Polygon", "MultiPoint", "MultiLineString", "MultiPolygon",
             "GeometryCollection"]))).to_numpy()
        described = [f"{i} ({t})" for i, t in zip(ids[nonpoly], type_names)]
        if not has_poly.any():
            raise InputDataError(
                f"buildings file '{path}' holds no polygons: features {_listing(described)} are not footprints; "
                "give a polygon layer of building footprints (for OSM data, the building areas, not nodes)"
            )
        notes.append(
            f"{int(nonpoly.sum())} non-polygon building feature(s) dropped (footprints must be polygons): "
            f"{_listing(described)}."
        )
    keep = has_poly
    df = df.loc[keep].reset_index(drop=True)
    ids = ids[keep]
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


def _numeric(gdf, col, path, role, labels, *, required: bool, default: float | None = None) -> np.ndarray:
    if col not in gdf.columns:
        if required:
            raise InputDataError(
                f"{role} file '{path}' has no property '{col}' (required); its properties are "
                f"{_listing([c for c in gdf.columns if c != gdf.geometry.name], 40)}; add '{col}' to every feature"
            )
        return np.full(len(gdf), float(default))
    raw = gdf[col]
    val = pd.to_numeric(raw, errors="coerce").to_numpy(float, copy=True)
    absent = raw.isna().to_numpy()
    unreadable = ~absent & ~np.isfinite(val)
    if unreadable.any():
        raise InputDataError(
            f"{role} file '{path}': property '{col}' is not a finite number for {_listing(labels[unreadable])} "
            f"(e.g. {raw[unreadable].iloc[0]!r}); give plain numbers"
        )
    if absent.any():
        if required:
            raise InputDataError(
                f"{role} file '{path}': property '{col}' (required) is empty for {_listing(labels[absent])}; fill it"
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
        raise InputDataError(f"{role} file '{path}': features {_listing(np.flatnonzero(none).tolist())} have no bs_id; fill it")
    labels = np.array([f"bs_id '{i}'" for i in ids], dtype=object)
    dup = pd.Series(ids).duplicated(keep=False).to_numpy()
    if dup.any():
        raise InputDataError(
            f"{role} file '{path}': bs_id {_listing(sorted(set(ids[dup])))} occur more than once; give each "
            "base station a unique bs_id"
        )
    x, y = _points_xy(gdf, path, role, labels)
    z = _numeric(gdf, "z_m", path, role, labels, required=True)
    neg = z < 0
    if neg.any():
        raise InputDataError(
            f"{role} file '{path}': z_m (antenna height above ground) is negative for {_listing(labels[neg])}; "
            "give heights above ground in metres"
        )
    tx = _numeric(gdf, "tx_power_dbm", path, role, labels, required=True)
    gain = _numeric(gdf, "max_gain_dbi", path, role, labels, required=False, default=0.0)
    az = _numeric(gdf, "azimuth_deg", path, role, labels, required=False, default=0.0) % 360.0
    tilt = _numeric(gdf, "downtilt_deg", path, role, labels, required=False, default=0.0)
    bad = np.abs(tilt) > 90.0
    if bad.any():
        raise InputDataError(
            f"{role} file '{path}': downtilt_deg must lie in [-90, 90] degrees below horizontal; got "
            f"{tilt[bad][0]:g} for {_listing(labels[bad])}"
        )
    if "pattern" in gdf.columns:
        pat = gdf["pattern"].astype(object).where(gdf["pattern"].notna(), "omni").astype(str).str.strip().str.lower()
        pat = pat.to_numpy(object)
    else:
        pat = np.full(len(gdf), "omni", dtype=object)
    badp = ~np.isin(pat, ["sector", "omni"])
    if badp.any():
        raise InputDataError(
            f"{role} file '{path}': pattern must be 'sector' or 'omni'; got {pat[badp][0]!r} for "
            f"{_listing(labels[badp])}"
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


def _given_sites(gdf: gpd.GeoDataFrame, path: Path) -> pd.DataFrame:
    refs = _refs(gdf, ("site_id", "id"))
    labels = np.array([f"site '{r}'" for r in refs], dtype=object)
    dup = pd.Series(refs).duplicated(keep=False).to_numpy()
    if dup.any():
        raise InputDataError(
            f"sites file '{path}': site ids {_listing(sorted(set(refs[dup])))} occur more than once; make them unique"
        )
    x, y = _points_xy(gdf, path, "sites", labels)
    z = _numeric(gdf, "z_m", path, "sites", labels, required=False, default=np.nan)
    neg = z < 0
    if neg.any():
        raise InputDataError(f"sites file '{path}': z_m is negative for {_listing(labels[neg])}; give heights above ground")
    return pd.DataFrame({"site_ref": pd.Series(refs, dtype=object), "x": x, "y": y, "z_m": z})


def _given_users(gdf: gpd.GeoDataFrame, path: Path, weight_column: str, notes: list[str]) -> pd.DataFrame:
    refs = _refs(gdf, ("user_id", "id"))
    labels = np.array([f"user '{r}'" for r in refs], dtype=object)
    x, y = _points_xy(gdf, path, "users", labels)
    z = _numeric(gdf, "z_m", path, "users", labels, required=False, default=np.nan)
    neg = z < 0
    if neg.any():
        raise InputDataError(f"users file '{path}': z_m is negative for {_listing(labels[neg])}; give heights above ground")
    if weight_column not in gdf.columns:
        notes.append(f"users file '{path.name}' has no weight column '{weight_column}'; every user weighs 1.")
        w = np.ones(len(gdf))
    else:
        w = _numeric(gdf, weight_column, path, "users", labels, required=True)
        neg = w < 0
        if neg.any():
            raise InputDataError(
                f"users file '{path}': weight column '{weight_column}' is negative for {_listing(labels[neg])} "
                f"(e.g. {w[neg][0]:g}); weights are demand (households, subscribers, traffic share) and must be >= 0"
            )
    return pd.DataFrame({"user_ref": pd.Series(refs, dtype=object), "x": x, "y": y, "z_m": z, "weight": w})


# ----------------------------------------------------------------------------------------------- area


def _bbox_polygon(area_bbox_lonlat, crs: pyproj.CRS) -> shapely.Geometry:
    try:
        b = [float(v) for v in area_bbox_lonlat]
    except (TypeError, ValueError) as exc:
        raise JobError(f"area bbox: expected 4 numbers [min_lon, min_lat, max_lon, max_lat], got {area_bbox_lonlat!r}", "area") from exc
    if len(b) != 4 or not np.all(np.isfinite(b)):
        raise JobError(f"area bbox: expected 4 numbers [min_lon, min_lat, max_lon, max_lat], got {area_bbox_lonlat!r}", "area")
    lo0, la0, lo1, la1 = b
    if not (-180 <= lo0 < lo1 <= 180 and -90 <= la0 < la1 <= 90):
        raise JobError(
            f"area bbox: expected longitude/latitude [min_lon, min_lat, max_lon, max_lat] with min < max, "
            f"|lon| <= 180, |lat| <= 90; got {b}; (metres? give degrees)",
            "area",
        )
    poly = shapely.segmentize(shapely.box(lo0, la0, lo1, la1), max_segment_length=1e-3)
    t = pyproj.Transformer.from_crs(4326, crs, always_xy=True)
    return shapely.transform(poly, lambda xy: np.column_stack(t.transform(xy[:, 0], xy[:, 1])))


def _area_from_file(gdf: gpd.GeoDataFrame, path: Path) -> shapely.Geometry:
    parts, _ = _polygonal_parts(shapely.make_valid(np.asarray(gdf.geometry.values, dtype=object)))
    if len(parts) == 0:
        raise InputDataError(f"area file '{path}' holds no polygon; give a polygon layer for the area of interest")
    return shapely.union_all(parts)


# ----------------------------------------------------------------------------------------------- main


def load_district(
    *,
    buildings_path,
    base_stations_path,
    sites_path=None,
    users_path=None,
    buildings_layer: str | None = None,
    building_id_column: str = "id",
    height_column: str | None = None,
    storey_height_m: float = 3.0,
    default_height_m: float | None = 9.0,
    crs=None,
    area_bbox_lonlat=None,
    area_path=None,
    user_weight_column: str = "weight",
) -> District:
    """Read and check a district's layers and bring them into one metric CRS.

    Parameters
    ----------
    buildings_path : str or Path
        Building footprints (polygons), any OGR format, GeoParquet, or an OSM ``.osm.pbf`` extract.
    base_stations_path : str or Path
        Point layer with ``bs_id``, ``z_m`` [m above ground], ``tx_power_dbm`` (required) and
        ``max_gain_dbi`` (0), ``azimuth_deg`` (0), ``downtilt_deg`` (0), ``pattern`` ('omni').
    sites_path, users_path : str or Path, optional
        Given facade spots / demand points (point layers).
    buildings_layer : str, optional
        Layer of a multi-layer buildings file.
    building_id_column : str
        Id column; when absent, ``id``/``osm_id``/``@id`` or the feature number is used, with a note.
    height_column : str, optional
        Column with the height [m], tried before ``height`` and ``building:levels``.
    storey_height_m : float
        Height of one storey for the ``building:levels`` rule [m].
    default_height_m : float or None
        Height of buildings no rule resolves [m]; ``None`` makes them an error.
    crs : anything pyproj accepts, optional
        The job's projected CRS; default: the UTM zone of the buildings' centroid.
    area_bbox_lonlat : [min_lon, min_lat, max_lon, max_lat], optional
    area_path : str or Path, optional
        Polygon layer of the area of interest.
    user_weight_column : str
        Weight column of the users layer (absent: weight 1 with a note).

    Returns
    -------
    District
    """
    notes: list[str] = []
    hashes: dict[str, str] = {}
    if not (np.isfinite(storey_height_m) and storey_height_m > 0):
        raise JobError(f"storey_height_m: expected a positive number of metres, got {storey_height_m!r}", "inputs")
    if default_height_m is not None and not (np.isfinite(default_height_m) and 0 < default_height_m <= MAX_HEIGHT_M):
        raise JobError(f"default_height_m: expected metres in (0, {MAX_HEIGHT_M:g}], got {default_height_m!r}", "inputs")
    named = _named_crs(crs) if crs is not None else None

    bpath = Path(buildings_path)
    raw_b = read_layer(bpath, layer=buildings_layer, role="buildings", bbox_lonlat=area_bbox_lonlat)
    _hash_inputs(bpath, hashes)
    raw_b = _assign_crs(raw_b, bpath, "buildings", named, notes)

    if named is not None:
        target, crs_rule = named, "named in job"
    else:
        target, crs_rule = _utm_from_centroid(raw_b), "local UTM zone from data centroid"
    if not pyproj.CRS.from_user_input(raw_b.crs).equals(target):
        notes.append(f"buildings file '{bpath.name}' reprojected from {_crs_name(pyproj.CRS.from_user_input(raw_b.crs))} to {_crs_name(target)}.")

    buildings = _buildings(
        raw_b, path=bpath, crs=target, building_id_column=building_id_column, height_column=height_column,
        storey_height_m=storey_height_m, default_height_m=default_height_m, notes=notes,
    )

    # area of interest
    area = None
    if area_bbox_lonlat is not None:
        area = _bbox_polygon(area_bbox_lonlat, target)
    if area_path is not None:
        apath = Path(area_path)
        raw_a = _assign_crs(read_layer(apath, role="area"), apath, "area", named, notes)
        _hash_inputs(apath, hashes)
        a2 = _area_from_file(_project(raw_a, target, apath, "area", notes), apath)
        if area is not None:
            notes.append("both an area bbox and an area file were given; their intersection is the area.")
            area = shapely.intersection(area, a2)
        else:
            area = a2
    if area is not None:
        if area.is_empty:
            raise JobError("area: the area of interest is empty (bbox and file do not overlap?)", "area")
        hit = shapely.intersects(buildings.geometry.values, area)
        keep_ids = set(buildings["building_id"].to_numpy()[hit])
        keep = buildings["building_id"].isin(keep_ids).to_numpy()
        if not keep.any():
            raise InputDataError(
                f"no building of '{bpath}' intersects the area of interest; check the area (lon/lat order: "
                "[min_lon, min_lat, max_lon, max_lat]) and the layer"
            )
        if (~keep).any():
            notes.append(
                f"{len(set(buildings['building_id']) - keep_ids)} building(s) outside the area of interest left out; "
                f"{len(keep_ids)} kept whole."
            )
        buildings = buildings.loc[keep].reset_index(drop=True)
    buildings = buildings.reset_index(drop=True)
    tables.check(buildings, "buildings", where=str(bpath))

    # base stations
    spath = Path(base_stations_path)
    raw_s = _assign_crs(read_layer(spath, role="base_stations"), spath, "base_stations", named, notes)
    _hash_inputs(spath, hashes)
    bs = _base_stations(_project(raw_s, target, spath, "base_stations", notes), spath)
    _check_bs_not_indoors(bs, buildings, spath)
    tables.check(bs, "base_stations", where=str(spath))

    given_sites = given_users = None
    if sites_path is not None:
        p = Path(sites_path)
        raw = _assign_crs(read_layer(p, role="sites"), p, "sites", named, notes)
        _hash_inputs(p, hashes)
        given_sites = _given_sites(_project(raw, target, p, "sites", notes), p)
        given_sites = _clip_points(given_sites, area, "given site(s)", notes)
    if users_path is not None:
        p = Path(users_path)
        raw = _assign_crs(read_layer(p, role="users"), p, "users", named, notes)
        _hash_inputs(p, hashes)
        given_users = _given_users(_project(raw, target, p, "users", notes), p, user_weight_column, notes)
        given_users = _clip_points(given_users, area, "given user(s)", notes)
        inside = _inside_buildings(given_users, buildings)
        if inside.any():
            notes.append(
                f"{int(inside.sum())} given user(s) lie inside building footprints (indoor users): "
                f"{_listing(given_users['user_ref'].to_numpy()[inside])}."
            )

    return District(
        crs=target, crs_rule=crs_rule, buildings=buildings, base_stations=bs, given_sites=given_sites,
        given_users=given_users, area=area, notes=notes, input_hashes=hashes,
    )


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


def summary(district: District) -> str:
    """A plain-text overview for ``siting validate``: counts, CRS and rule, heights by rule, bounding box."""
    b = district.buildings
    lines = []
    n_ids = b["building_id"].nunique()
    lines.append(f"buildings: {n_ids} ({len(b)} polygon parts)")
    lines.append(f"base stations: {len(district.base_stations)}")
    if district.given_sites is not None:
        lines.append(f"given sites: {len(district.given_sites)}")
    if district.given_users is not None:
        u = district.given_users
        lines.append(f"given users: {len(u)} (total weight {u['weight'].sum():g})")
    lines.append(f"CRS: {_crs_name(district.crs)} ({district.crs_rule})")
    per = b.drop_duplicates("building_id")
    lines.append("heights by rule:")
    for rule in ("column", "height", "levels", "default"):
        h = per.loc[per["height_rule"] == rule, "height_m"]
        if len(h):
            lines.append(
                f"  {rule:<8} {len(h):>6} buildings, {h.min():.1f} / {h.median():.1f} / {h.max():.1f} m (min/median/max)"
            )
    x0, y0, x1, y1 = b.total_bounds
    lines.append(f"extent: {x1 - x0:.0f} m x {y1 - y0:.0f} m; x {x0:.1f} .. {x1:.1f}, y {y0:.1f} .. {y1:.1f} m")
    bb = b.to_crs(4326).total_bounds
    lines.append(f"extent lon/lat: {bb[0]:.6f}, {bb[1]:.6f} .. {bb[2]:.6f}, {bb[3]:.6f}")
    if district.area is not None:
        lines.append(f"area of interest: {district.area.area / 1e6:.3f} km2")
    if district.notes:
        lines.append("notes:")
        lines.extend(f"  - {n}" for n in district.notes)
    return "\n".join(lines)
