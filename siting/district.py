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
  (median of the footprints' bounding-box centres, so one misplaced footprint does not move it;
  ``pyproj.database.query_utm_crs_info``).  Every layer is reprojected to it, with a note.  The CRS must keep
  lengths at every footprint within 0.1 % (:data:`siting.inputs.crs.MAX_SCALE_ERROR`): a named CRS that
  distorts the data (Web Mercator, a UTM zone far away) is refused with the local UTM zone as the fix (not
  replaced: the job named it), and footprints where the CRS distorts (far from the others) are refused by name.
* GeoJSON is longitude/latitude by RFC 7946; a GeoJSON whose coordinates leave |x| <= 180, |y| <= 90 is refused
  (longitudes just past 180 as crossing the antimeridian).  Before GDAL reads a GeoJSON file, every feature is
  checked against RFC 7946 (:mod:`siting.inputs.geojson`): a feature GDAL would skip ("type" missing or not
  "Feature") or misread (coordinates that are strings, null, NaN, one number, nested wrongly, an unknown
  geometry type, an unclosed ring) is refused by index and id, and a JSON boolean given for a number is refused
  (GDAL reads it as 1).
* Other layers without a CRS: taken to be in the caller's CRS if one is named, else in EPSG:4326 if their
  coordinates fit longitude/latitude (both with a note), else refused.
* Geometry: invalid polygons are repaired with ``shapely.make_valid`` keeping the polygonal parts (note with
  the ids), except a polygon with an interior ring outside its exterior ring (RFC 7946 section 3.1.6: holes lie
  inside), which is refused by building and ring: ``make_valid`` would make that ring a second part of the
  building wherever it lies; holes are kept (courtyards are real); multipolygons are exploded into parts sharing
  the building id (``part`` column, 0-based); parts under 1 m2 are dropped with a count.
* Non-polygon building features (points, lines, collections holding them) and features without geometry are
  refused by index and id (the README promises exit code 2 for non-polygon buildings): nothing is dropped.
* Duplicate building ids are an error (the parts of one multipolygon are not duplicates).
* An area of interest (lon/lat bbox and/or a polygon file; both given: their intersection) keeps the whole
  buildings that intersect it, and the given sites and users inside it.  Base stations are all kept: a
  station outside the area may still serve it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import shapely

from . import tables
from .errors import InputDataError, JobError
from .inputs.common import _listing
from .inputs.crs import (
    _assign_crs,
    _bbox_polygon,
    _check_scale,
    _crs_name,
    _named_crs,
    _project,
    _utm_from_centroid,
    to_lonlat,
)
from .inputs.heights import FT_M, MAX_HEIGHT_M, parse_height_m
from .inputs.layers import (
    MIN_PART_AREA_M2,
    _area_from_file,
    _base_stations,
    _building_ids,
    _buildings,
    _check_bs_not_indoors,
    _clip_points,
    _footprint_geometries,
    _given_sites,
    _given_users,
    _inside_buildings,
)
from .inputs.vector import _hash_inputs, read_layer

# The readers live in siting.inputs (vector, crs, heights, layers); these names stay importable from here.
__all__ = ["FT_M", "MAX_HEIGHT_M", "MIN_PART_AREA_M2", "District", "load_district", "parse_height_m", "read_layer",
           "summary", "to_lonlat"]


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
        Point layer with ``bs_id``, ``z_m`` [m above ground], ``tx_power_dbm``, ``max_gain_dbi`` and ``pattern``
        ('sector' or 'omni'), all required; ``azimuth_deg`` and ``downtilt_deg`` required for sector stations
        (not used for omni ones).  The README documents no default, so none is taken.
    sites_path, users_path : str or Path, optional
        Given facade spots / demand points (point layers).
    buildings_layer : str, optional
        Layer of a multi-layer buildings file.
    building_id_column : str
        Id column; when absent, ``id``/``osm_id``/``@id`` or the feature number is used, with a note.  A null or
        empty id is refused.
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
    raw_b = read_layer(bpath, layer=buildings_layer, role="buildings", bbox_lonlat=area_bbox_lonlat,
                       id_keys=tuple(dict.fromkeys((building_id_column, "id", "osm_id", "@id"))))
    _hash_inputs(bpath, hashes)
    ids = _building_ids(raw_b, bpath, building_id_column, notes)
    _footprint_geometries(raw_b, bpath, ids)  # no geometry, points, lines: refused before any CRS work
    raw_b = _assign_crs(raw_b, bpath, "buildings", named, notes)

    if named is not None:
        target, crs_rule = named, "named in job"
    else:
        target, crs_rule = _utm_from_centroid(raw_b), "local UTM zone from data centroid"
    _check_scale(raw_b, target, named is not None, bpath, ids)
    if not pyproj.CRS.from_user_input(raw_b.crs).equals(target):
        notes.append(f"buildings file '{bpath.name}' reprojected from {_crs_name(pyproj.CRS.from_user_input(raw_b.crs))} to {_crs_name(target)}.")

    buildings = _buildings(
        raw_b, path=bpath, crs=target, ids=ids, height_column=height_column,
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
    raw_s = _assign_crs(read_layer(spath, role="base_stations", id_keys=("bs_id",)), spath, "base_stations", named,
                        notes)
    _hash_inputs(spath, hashes)
    bs = _base_stations(_project(raw_s, target, spath, "base_stations", notes), spath)
    _check_bs_not_indoors(bs, buildings, spath)
    tables.check(bs, "base_stations", where=str(spath))

    given_sites = given_users = None
    if sites_path is not None:
        p = Path(sites_path)
        raw = _assign_crs(read_layer(p, role="sites", id_keys=("site_id", "id")), p, "sites", named, notes)
        _hash_inputs(p, hashes)
        given_sites = _given_sites(_project(raw, target, p, "sites", notes), p)
        given_sites = _clip_points(given_sites, area, "given site(s)", notes)
    if users_path is not None:
        p = Path(users_path)
        raw = _assign_crs(read_layer(p, role="users", id_keys=("user_id", "id")), p, "users", named, notes)
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
