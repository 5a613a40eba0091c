"""Coordinate reference systems: the job's projected CRS, the local UTM zone, reprojection, lon/lat checks.

The CRS is the one named by the job (projected, metres), else the UTM zone of the data centroid (median of the
footprints' bounding-box centres, robust to a misplaced footprint; ``pyproj.database.query_utm_crs_info``).  Layers without a CRS are taken to
be in the named CRS, else in EPSG:4326 when their coordinates fit longitude/latitude, else refused.

Every length of the pipeline (link distances, grid spacing, wall lengths, areas) is measured in that CRS, so it
must not distort lengths at the data: :func:`_check_scale` measures its scale error at every footprint (a 10 m
geodesic step east and north, projected) and refuses more than :data:`MAX_SCALE_ERROR` (0.1 %, about the
largest error of a UTM zone inside its own 6 degrees).  A named CRS that distorts the data (Web Mercator:
1/cos(latitude), 1.46 at 47 degrees; a UTM zone far away) is a job error with the fix; footprints where the
local UTM zone distorts lie far from the others (a shifted or mistyped feature) and are named.
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
from .common import _feature_names, _listing
from .vector import _is_geojson

#: Largest relative length error of the job's CRS at a footprint: 0.1 %.  A UTM zone stays within it over its own
#: 6 degrees of longitude (scale 0.9996 on the central meridian, about 1.0010 at the zone edge on the equator;
#: Snyder, Map Projections - A Working Manual, USGS PP 1395, 1987, p. 57-58).
MAX_SCALE_ERROR = 1e-3


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
        if xmax <= 360.0 and ymax <= 90.0:  # degrees, but longitudes past the antimeridian
            raise InputDataError(
                f"{role} file '{path}': features {_listing(bad.tolist())} have longitudes beyond +/-180 degrees "
                f"(up to {xmax:.6g}): they cross the antimeridian. RFC 7946 (sections 3.1.9 and 4) wants "
                "longitudes in [-180, 180]: write a longitude L > 180 as L - 360 (and L < -180 as L + 360), or "
                "give the layer in a projected CRS as GeoPackage"
            )
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


def _centres_lonlat(gdf: gpd.GeoDataFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(rows with a geometry, longitude, latitude [deg]) of the centre of each feature's bounding box (robust to
    invalid rings: a bow-tie's centroid is undefined)."""
    ok, b = _feature_bounds(gdf)
    to_ll = pyproj.Transformer.from_crs(gdf.crs, 4326, always_xy=True)
    with np.errstate(invalid="ignore"):
        lon, lat = to_ll.transform((b[:, 0] + b[:, 2]) / 2, (b[:, 1] + b[:, 3]) / 2)
    return ok, np.asarray(lon, float), np.asarray(lat, float)


def _utm_from_centroid(gdf: gpd.GeoDataFrame) -> pyproj.CRS:
    _, lon, lat = _centres_lonlat(gdf)
    fin = np.isfinite(lon) & np.isfinite(lat)
    if not fin.any():
        raise InputDataError("no feature of the buildings layer has a usable location, so no UTM zone can be "
                             "chosen; check the layer, or name a projected CRS in the job (inputs.crs)")
    # the median centre: one misplaced footprint (or a few) does not move the zone, and is then named by
    # _check_scale; for a compact city it is the mean centre's zone
    lon0, lat0 = float(np.median(lon[fin])), float(np.median(lat[fin]))
    infos = query_utm_crs_info(datum_name="WGS 84", area_of_interest=AreaOfInterest(lon0, lat0, lon0, lat0))
    if not infos:
        raise InputDataError(
            f"no UTM zone covers the data centroid (lon {lon0:.4f}, lat {lat0:.4f}); name a projected CRS in the job"
        )
    # prefer the plain 'WGS 84 / UTM zone NNx' entries (EPSG 326xx/327xx)
    infos = sorted(infos, key=lambda i: (not i.name.startswith("WGS 84 / UTM zone"), i.code))
    return pyproj.CRS.from_authority(infos[0].auth_name, infos[0].code)


def _scale_error(crs: pyproj.CRS, lon: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Relative length error |k - 1| of ``crs`` at each longitude/latitude [deg]: the larger of a 10 m geodesic
    step east and north, projected (an equivalent of ``pyproj.Proj.get_factors`` for any CRS pyproj can
    transform to, conformal or not); infinity where the CRS cannot project the point."""
    step_m = 10.0
    geod = pyproj.Geod(ellps="WGS84")
    to = pyproj.Transformer.from_crs(4326, crs, always_xy=True)
    err = np.zeros(len(lon))
    with np.errstate(invalid="ignore", over="ignore"):
        x0, y0 = to.transform(lon, lat)
        for az in (90.0, 0.0):
            lon1, lat1, _ = geod.fwd(lon, lat, np.full(len(lon), az), np.full(len(lon), step_m))
            x1, y1 = to.transform(lon1, lat1)
            err = np.maximum(err, np.abs(np.hypot(np.subtract(x1, x0), np.subtract(y1, y0)) / step_m - 1.0))
    return np.where(np.isfinite(err), err, np.inf)


def _check_scale(gdf: gpd.GeoDataFrame, crs: pyproj.CRS, named: bool, path: Path, ids: np.ndarray) -> None:
    """Refuse a job CRS that distorts lengths at the footprints by more than :data:`MAX_SCALE_ERROR`.

    A named CRS that distorts at most footprints is a job error: say by how much and name the local UTM zone.
    Otherwise the footprints where it distorts lie far from the rest (a shifted or mistyped feature, or a layer
    wider than one job): they are named with their distance from the others' median centre.
    """
    ok, lon, lat = _centres_lonlat(gdf)
    err = _scale_error(crs, lon, lat)
    bad = err > MAX_SCALE_ERROR
    if not bad.any():
        return
    if named and bad.mean() > 0.5:
        fin = np.isfinite(lon) & np.isfinite(lat)
        lon0, lat0 = float(np.median(lon[fin])), float(np.median(lat[fin]))
        med = float(np.median(err))
        by = "cannot project them" if not np.isfinite(med) else f"scales lengths by {1 + med:.4g} ({med:.2%} off)"
        try:
            utm = f"the local UTM zone, {_crs_name(_utm_from_centroid(gdf))}"
        except InputDataError:
            utm = "the local UTM zone"
        raise JobError(
            f"crs: {_crs_name(crs)} {by} at the data (around lon {lon0:.4f}, lat {lat0:.4f}); every distance, "
            f"area and grid spacing of the plan would be off by as much (more than {MAX_SCALE_ERROR:.1%} is "
            f"refused). Leave inputs.crs unset to use {utm}, or name a projected CRS made for this area (its "
            "UTM zone or national grid); the layers themselves may stay in any CRS",
            "crs",
        )
    geod = pyproj.Geod(ellps="WGS84")
    good = ~bad & np.isfinite(lon) & np.isfinite(lat)
    ref = good if good.any() else np.isfinite(lon) & np.isfinite(lat)
    lon0, lat0 = float(np.median(lon[ref])), float(np.median(lat[ref]))
    rows = np.flatnonzero(bad)
    with np.errstate(invalid="ignore"):
        _, _, dist = geod.inv(np.full(len(rows), lon0), np.full(len(rows), lat0), lon[rows], lat[rows])
    described = [f"{_feature_names([ok[r]], ids)} at lon {lon[r]:.4f}, lat {lat[r]:.4f}, {d / 1000:,.0f} km from "
                 f"the others ({'cannot be projected' if not np.isfinite(e) else f'{e:.2%} off'})"
                 for r, d, e in zip(rows, np.asarray(dist), err[rows])]
    more = f"; and {len(rows) - 5} more" if len(rows) > 5 else ""
    raise InputDataError(
        f"buildings file '{path}': {len(rows)} footprint(s) lie where the job's CRS {_crs_name(crs)} "
        f"({'named in job' if named else 'the local UTM zone of the data'}) distorts lengths by more than "
        f"{MAX_SCALE_ERROR:.1%}, far from the other footprints: {'; '.join(described[:5])}{more}. Their coordinates are "
        "probably wrong (a shifted or mistyped feature, longitude and latitude swapped): correct or remove them; "
        "if the layer really covers that much ground, split it into jobs of one city each"
    )


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
