"""Coordinate reference systems: the job's projected CRS, the local UTM zone, reprojection, lon/lat checks.

The CRS is the one named by the job (projected, metres), else the UTM zone of the data centroid (mean of the
footprints' bounding-box centres, ``pyproj.database.query_utm_crs_info``).  Layers without a CRS are taken to
be in the named CRS, else in EPSG:4326 when their coordinates fit longitude/latitude, else refused.
"""

from __future__ import annotations

from functools import lru_cache
from pathlib import Path

import geopandas as gpd
import numpy as np
import pyproj
import shapely
from pyproj.aoi import AreaOfInterest
from pyproj.database import query_utm_crs_info

from ..errors import InputDataError, JobError
from .common import _listing
from .vector import _is_geojson


def _feature_bounds(gdf: gpd.GeoDataFrame) -> tuple[np.ndarray, np.ndarray]:
    """(rows with a geometry, their bounding boxes [xmin, ymin, xmax, ymax])."""
    geoms = gdf.geometry.values
    ok = np.flatnonzero(~(shapely.is_missing(geoms) | shapely.is_empty(geoms)))
    return ok, shapely.bounds(geoms[ok])


def _beyond_lonlat(b: np.ndarray) -> np.ndarray:
    """Per bounding box: True when it reaches beyond |lon| <= 180 or |lat| <= 90 (NaN is not beyond)."""
    return (np.abs(b[:, [0, 2]]) > 180.0).any(1) | (np.abs(b[:, [1, 3]]) > 90.0).any(1)


def _check_geojson_lonlat(gdf: gpd.GeoDataFrame, path: Path, role: str) -> None:
    ok, b = _feature_bounds(gdf)
    beyond = _beyond_lonlat(b)
    if beyond.any():
        bad = ok[beyond]
        xmax = np.nanmax(np.abs(b[:, [0, 2]]))
        ymax = np.nanmax(np.abs(b[:, [1, 3]]))
        raise InputDataError(
            f"{role} file '{path}' is GeoJSON, whose coordinates must be longitude/latitude in degrees "
            f"(RFC 7946), but features {_listing(bad.tolist())} reach |x| = {xmax:.6g}, |y| = {ymax:.6g}: "
            "they look like projected metres. Reproject the file to EPSG:4326 (e.g. "
            "'ogr2ogr -t_srs EPSG:4326 out.geojson in.geojson') or save it as GeoPackage, which keeps its CRS"
        )


def _fits_lonlat(gdf: gpd.GeoDataFrame) -> bool:
    return not _beyond_lonlat(_feature_bounds(gdf)[1]).any()


def _check_places(gdf: gpd.GeoDataFrame, path: Path, role: str) -> None:
    """Refuse features whose coordinates the layer's CRS cannot place on Earth, naming them.

    A geographic CRS needs |lon| <= 180 and |lat| <= 90 on each feature's bounding box.  A projected CRS must map
    both corners of each bounding box to finite longitude/latitude and back to within 1 cm (pyproj): outside
    the projection's domain the inverse gives infinity, or wraps the longitude so that the forward projection
    lands elsewhere (Web Mercator at 1e12 m).  Without this a mislabelled file fails later with an unrelated
    message, or loads at a wrong place.
    """
    ok, b = _feature_bounds(gdf)
    if not len(ok):
        return
    crs = pyproj.CRS.from_user_input(gdf.crs)
    x, y = b[:, [0, 2]].ravel(), b[:, [1, 3]].ravel()
    if crs.is_geographic:
        beyond = _beyond_lonlat(b) | ~np.isfinite(b).all(1)
        need = "a geographic CRS needs |longitude| <= 180 and |latitude| <= 90"
    else:
        with np.errstate(invalid="ignore", over="ignore"):
            lon, lat = pyproj.Transformer.from_crs(crs, 4326, always_xy=True).transform(x, y)
            x2, y2 = pyproj.Transformer.from_crs(4326, crs, always_xy=True).transform(lon, lat)
            bad_pt = ~(np.isfinite(lon) & np.isfinite(lat) & (np.abs(x2 - x) <= 0.01) & (np.abs(y2 - y) <= 0.01))
        beyond = bad_pt.reshape(-1, 2).any(axis=1)
        need = "they are outside the area this projection maps"
    if beyond.any():
        bad = ok[beyond]
        raise InputDataError(
            f"{role} file '{path}': features {_listing(bad.tolist())} have coordinates {_crs_name(crs)} cannot "
            f"place on Earth (|x| up to {np.nanmax(np.abs(x)):.6g}, |y| up to {np.nanmax(np.abs(y)):.6g}; {need}): "
            "the file's CRS is wrong or those coordinates are corrupt. Set the right CRS (e.g. 'ogr2ogr -a_srs "
            "EPSG:xxxx out.gpkg in.gpkg') or correct those features"
        )


def _assign_crs(gdf, path: Path, role: str, named_crs, notes: list[str]) -> gpd.GeoDataFrame:
    """Give a layer its source CRS (GeoJSON rule, missing CRS rule); refuse coordinates it cannot place."""
    gdf = _source_crs(gdf, path, role, named_crs, notes)
    _check_places(gdf, path, role)
    return gdf


def _source_crs(gdf, path: Path, role: str, named_crs, notes: list[str]) -> gpd.GeoDataFrame:
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
