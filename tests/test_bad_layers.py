"""Malformed features inside the input layers: refused by name (file, feature index and id, what is wrong, the fix),
never dropped or read wrongly (README, Inputs: "Bad input gets one message naming the file, the feature or key
and the fix (exit code 2 ...)").

Each test writes its own small layers in ``tmp_path`` (an invented district at 2.35 E, 46.5 N, UTM zone 31N) and
names the rule it checks: RFC 7946 (GeoJSON) by section, the README's base-station schema, and for the CRS the
scale factor of the Transverse Mercator and Mercator projections (Snyder, *Map Projections - A Working Manual*,
USGS Professional Paper 1395, 1987).
"""

from __future__ import annotations

import json
import math
import re
import warnings
from pathlib import Path

import numpy as np
import pyproj
import pytest
from shapely.geometry import Point, box, mapping

from siting.cli import main
from siting.district import load_district
from siting.errors import InputDataError, JobError

LON0, LAT0 = 2.35, 46.5
UTM = pyproj.CRS.from_epsg(32631)
_TO_LL = pyproj.Transformer.from_crs(UTM, 4326, always_xy=True)
_TO_UTM = pyproj.Transformer.from_crs(4326, UTM, always_xy=True)
E0, N0 = _TO_UTM.transform(LON0, LAT0)

SECTOR = {"z_m": 8.0, "tx_power_dbm": 30.0, "max_gain_dbi": 20.0, "azimuth_deg": 90.0, "downtilt_deg": 4.0,
          "pattern": "sector"}


def _ring(x0, y0, x1, y1) -> list[list[float]]:
    """A closed counter-clockwise ring (lon/lat) of the local box x0..x1, y0..y1 [m] (RFC 7946 section 3.1.6)."""
    pts = [(x0, y0), (x1, y0), (x1, y1), (x0, y1), (x0, y0)]
    return [list(_TO_LL.transform(E0 + x, N0 + y)) for x, y in pts]


def _building(i: int, **geometry) -> dict:
    geom = geometry or {"type": "Polygon", "coordinates": [_ring(30 * i, 0, 30 * i + 20, 10)]}
    return {"type": "Feature", "properties": {"id": f"B{i}", "height": 12}, "geometry": geom}


def _write(path: Path, features: list) -> Path:
    path.write_text(json.dumps({"type": "FeatureCollection", "features": features}), encoding="utf-8")
    return path


def _stations(tmp_path: Path, **props) -> Path:
    lon, lat = _TO_LL.transform(E0 - 40.0, N0 - 40.0)
    p = {"bs_id": "S1", **SECTOR, **props}
    p = {k: v for k, v in p.items() if v is not _GONE}
    return _write(tmp_path / "bs.geojson", [{"type": "Feature", "properties": p,
                                              "geometry": {"type": "Point", "coordinates": [lon, lat]}}])


_GONE = object()  # a property left out of the station


def _buildings(tmp_path: Path, bad=_GONE, at: int = 2, n: int = 4) -> Path:
    feats: list = [_building(i) for i in range(n)]
    if bad is not _GONE:
        feats[at] = bad
    return _write(tmp_path / "b.geojson", feats)


def _load(tmp_path: Path, buildings: Path, bs: Path | None = None, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        return load_district(buildings_path=buildings, base_stations_path=bs or _stations(tmp_path), **kw)


def test_the_good_layers_load(tmp_path):
    d = _load(tmp_path, _buildings(tmp_path))
    assert list(d.buildings.building_id) == ["B0", "B1", "B2", "B3"] and d.crs.equals(UTM)


# ----------------------------------------------------------------- 1. malformed building features (exit 2)


def _geom(**g) -> dict:
    return {"type": "Feature", "properties": {"id": "B2", "height": 12}, "geometry": g}


RING = _ring(60, 0, 80, 10)


@pytest.mark.parametrize("bad,what", [
    # RFC 7946 section 3.2: a Feature object has "type": "Feature"; GDAL skips any other without a word
    ({**_geom(type="Polygon", coordinates=[RING]), "type": "Featur"}, r'has "type": "Featur"; a feature needs'),
    ({k: v for k, v in _geom(type="Polygon", coordinates=[RING]).items() if k != "type"}, r'has no "type" member'),
    (None, r"feature 2 is null, not a Feature object"),
    ([1, 2], r"feature 2 is \[1, 2\], not a Feature object"),
    ({"type": "Polygon", "coordinates": [RING]}, r'feature 2 has "type": "Polygon"; a feature needs'),
])
def test_feature_that_is_not_a_feature_refused_by_index_and_id(tmp_path, bad, what):
    with pytest.raises(InputDataError, match=r"b\.geojson': 1 feature\(s\) are not valid GeoJSON.*" + what):
        _load(tmp_path, _buildings(tmp_path, bad))


@pytest.mark.parametrize("geometry,what", [
    # RFC 7946 section 3.1.1: a position is an array of two or more numbers
    ({"type": "Polygon", "coordinates": [[[str(v) for v in RING[0]], *RING[1:]]]},
     r'coordinates\[0\]\[0\]\[0\] is "2\.35.*", not a number'),
    ({"type": "Polygon", "coordinates": [[[None, RING[0][1]], *RING[1:]]]}, r"\[0\]\[0\]\[0\] is null, not a number"),
    ({"type": "Polygon", "coordinates": [[[RING[0][0]], *RING[1:]]]}, r"a position with 1 number\(s\)"),
    ({"type": "Polygon", "coordinates": [[[True, RING[0][1]], *RING[1:]]]}, r"is true, not a number"),
    # RFC 7946 section 3.1.6: Polygon coordinates are an array of rings; 3.1.7: a MultiPolygon an array of those
    ({"type": "Polygon", "coordinates": RING}, r"coordinates\[0\]\[0\] is .* a nesting level is missing \(Polygon"),
    ({"type": "MultiPolygon", "coordinates": [RING]}, r"a nesting level is missing \(MultiPolygon"),
    ({"type": "Polygon", "coordinates": [[RING]]}, r"one nesting level too many"),
    # RFC 7946 section 3.1: the geometry types
    ({"type": "Polgon", "coordinates": [RING]}, r'has "type": "Polgon"; a geometry.s type is one of'),
    ({"type": "Polygon", "coordinates": None}, r"coordinates is null, but Polygon coordinates are"),
    ({"type": "Polygon", "coordinates": []}, r"coordinates is an empty array"),
    ({"type": "Polygon"}, r'has no "coordinates" member'),
])
def test_malformed_coordinates_refused_by_index_and_id(tmp_path, geometry, what):
    """Before, GDAL read each of these as a building without geometry (dropped with a note, exit 0) or as a
    Polygon type error; now the feature, the member and the fix are named."""
    with pytest.raises(InputDataError, match=r"feature 2 \(id 'B2'\): geometry.*" + what):
        _load(tmp_path, _buildings(tmp_path, _geom(**geometry)))


@pytest.mark.parametrize("geometry,kind", [
    ({"type": "Point", "coordinates": RING[0]}, "Point"),
    ({"type": "LineString", "coordinates": RING}, "LineString"),
    ({"type": "GeometryCollection", "geometries": [{"type": "Polygon", "coordinates": [RING]},
                                                   {"type": "Point", "coordinates": RING[0]}]}, "GeometryCollection"),
])
def test_point_and_line_footprints_refused(tmp_path, geometry, kind):
    """README, Inputs: non-polygon buildings are refused with exit code 2 (they were dropped with a note)."""
    with pytest.raises(InputDataError, match=rf"1 feature\(s\) that are not polygons: feature 2 \(id 'B2'\) \({kind}\)"):
        _load(tmp_path, _buildings(tmp_path, _geom(**geometry)))


def test_building_without_geometry_refused(tmp_path):
    """RFC 7946 section 3.2 allows "geometry": null (an unlocated feature), but a building needs its footprint."""
    bad = {"type": "Feature", "properties": {"id": "B2"}, "geometry": None}
    with pytest.raises(InputDataError, match=r"1 feature\(s\) have no geometry \(null or empty\): feature 2 \(id 'B2'\)"):
        _load(tmp_path, _buildings(tmp_path, bad))


def test_typo_feature_exits_2_on_the_command_line(tmp_path, capsys):
    bad = {**_geom(type="Polygon", coordinates=[RING]), "type": "Featur"}
    _buildings(tmp_path, bad)
    _stations(tmp_path)
    (tmp_path / "job.toml").write_text('[inputs]\nbuildings = "b.geojson"\nbase_stations = "bs.geojson"\n'
                                       '[budget]\nmax_panels = 2\n[[surfaces.panels]]\nsize_id = "M"\nwidth_m = 1.0\n'
                                       'height_m = 1.0\ncost = 100.0\n[output]\nfolder = "out"\n')
    code = main(["validate", str(tmp_path / "job.toml")])
    err = capsys.readouterr().err
    assert code == 2 and "feature 2 (id 'B2')" in err and "Traceback" not in err, err


# ------------------------------------------------------------------------------- 2. a hole outside its shell


def test_hole_outside_its_shell_refused(tmp_path):
    """RFC 7946 section 3.1.6: the interior rings of a polygon are holes inside its exterior ring.  A "hole" 1 km
    away was repaired into a second part of the building there (make_valid); now the building is named."""
    shell = _ring(60, 0, 80, 20)
    far = _ring(1060, 0, 1070, 10)[::-1]  # clockwise, as a hole should be, but 980 m east of the shell
    bad = _geom(type="Polygon", coordinates=[shell, far])
    with pytest.raises(InputDataError, match=r"1 hole\(s\) lie outside their footprint: building 'B2' interior ring 1 "
                                             r"\(980 m outside its exterior ring\).*RFC 7946 section 3\.1\.6"):
        _load(tmp_path, _buildings(tmp_path, bad))


def test_courtyard_inside_its_shell_kept(tmp_path):
    court = _geom(type="Polygon", coordinates=[_ring(60, 0, 100, 40), _ring(70, 10, 90, 30)[::-1]])
    d = _load(tmp_path, _buildings(tmp_path, court))
    b2 = d.buildings.set_index("building_id").loc["B2"]
    np.testing.assert_allclose(b2.geometry.area, 1600 - 400, rtol=1e-6)  # 40 x 40 m less the 20 x 20 m court


# ------------------------------------------------------------ 3. base-station properties: no silent defaults


@pytest.mark.parametrize("props,what", [
    # README, Inputs: the base-station layer carries max_gain_dbi, azimuth_deg, downtilt_deg, pattern (no default)
    ({"max_gain_dbi": _GONE}, r"has no property 'max_gain_dbi' \(required\)"),
    ({"max_gain_dbi": None}, r"'max_gain_dbi' \(required\) is empty or NaN for bs_id 'S1'"),
    ({"pattern": _GONE}, r"has no property 'pattern' \(required: 'sector' or 'omni'\)"),
    ({"pattern": None}, r"'pattern' \(required\) is empty or null for bs_id 'S1'"),
    ({"azimuth_deg": _GONE}, r"has no property 'azimuth_deg', required for the sector stations bs_id 'S1'"),
    ({"azimuth_deg": None}, r"'azimuth_deg' is empty or null for the sector stations bs_id 'S1'"),
    ({"downtilt_deg": _GONE}, r"has no property 'downtilt_deg', required for the sector stations bs_id 'S1'"),
])
def test_missing_station_properties_refused(tmp_path, props, what):
    """They became 0 dBi, an omni pattern (24 dBi in every direction) or an aim at north, without a note."""
    with pytest.raises(InputDataError, match=r"bs\.geojson.*" + what):
        _load(tmp_path, _buildings(tmp_path), _stations(tmp_path, **props))


def test_omni_station_needs_no_aim(tmp_path):
    bs = _stations(tmp_path, pattern="omni", azimuth_deg=_GONE, downtilt_deg=_GONE)
    s = _load(tmp_path, _buildings(tmp_path), bs).base_stations
    assert list(s.pattern) == ["omni"] and s.azimuth_deg[0] == 0.0 and s.downtilt_deg[0] == 0.0


@pytest.mark.parametrize("key", ["tx_power_dbm", "z_m", "max_gain_dbi", "azimuth_deg"])
def test_boolean_for_a_number_refused(tmp_path, key):
    """JSON true is not a number (RFC 8259 section 3); GDAL read it as 1 in a column of numbers (1 dBm)."""
    lon, lat = _TO_LL.transform(E0 - 60.0, N0 - 40.0)
    other = {"type": "Feature", "properties": {"bs_id": "S2", **SECTOR},
             "geometry": {"type": "Point", "coordinates": [lon, lat]}}
    bs = _stations(tmp_path, **{key: True})
    fc = json.loads(bs.read_text())
    fc["features"].append(other)  # a number in the same column: GDAL makes it a column of numbers
    bs.write_text(json.dumps(fc))
    with pytest.raises(InputDataError, match=rf"property '{key}' is true \(a boolean, not a number\) for bs_id 'S1'"):
        _load(tmp_path, _buildings(tmp_path), bs)


# -------------------------------------------------------------------- 4. a job CRS that distorts the data


def test_web_mercator_as_job_crs_refused(tmp_path):
    """Web Mercator scales lengths by about sec(latitude) (Snyder 1987, eq. 7-8).  It applies the spherical
    formulas to WGS84 latitudes, so against ground (geodesic) lengths its meridian scale is
    sec(phi) (1 - e^2 sin^2 phi)^(3/2) / (1 - e^2) (NGA.SIG.0011_1.0.0_WEBMERC, 2014): 1.455 at 46.5 N; every
    length and the demand grid would be 45 % off.  (pyproj's Proj.get_factors gives the spherical sec(phi).)"""
    e2 = pyproj.Geod(ellps="WGS84").es
    phi = math.radians(LAT0)
    k = (1 - e2 * math.sin(phi) ** 2) ** 1.5 / (1 - e2) / math.cos(phi)
    f = pyproj.Proj("EPSG:3857").get_factors(LON0, LAT0)
    assert abs(f.parallel_scale - 1 / math.cos(phi)) < 1e-6 and abs(k - 1.4548) < 1e-3
    with pytest.raises(JobError, match=r"EPSG:3857 .*Leave inputs\.crs unset to use the local UTM zone, "
                                       r"EPSG:32631") as info:
        _load(tmp_path, _buildings(tmp_path), crs="EPSG:3857")
    got = float(re.search(r"scales lengths by ([\d.]+)", str(info.value)).group(1))
    assert abs(got - k) < 2e-3


def test_far_utm_zone_as_job_crs_refused(tmp_path):
    """UTM zone 60N (central meridian 177 E) for data at 2.35 E: the Transverse Mercator is used 175 degrees off
    its central meridian, where it no longer keeps lengths (Snyder 1987, eq. 8-13 holds near the meridian)."""
    with pytest.raises(JobError, match=r"EPSG:32660 .*(scales lengths|cannot project)"):
        _load(tmp_path, _buildings(tmp_path), crs="EPSG:32660")


def test_local_projected_crs_accepted(tmp_path):
    """UTM 31N at 0.65 deg from its central meridian: k = 0.9996 (1 + (lambda cos phi)^2 / 2) ~ 0.99966
    (Snyder 1987, eq. 8-11), within 0.1 %."""
    d = _load(tmp_path, _buildings(tmp_path), crs="EPSG:32631")
    assert d.crs_rule == "named in job"
    np.testing.assert_allclose(d.buildings.area, 200.0, rtol=1e-6)


# ------------------------------------------------------------------------ 5. clear errors naming the feature


def test_all_geometries_null_is_a_clear_error(tmp_path):
    feats = [{"type": "Feature", "properties": {"id": f"B{i}"}, "geometry": None} for i in range(3)]
    with pytest.raises(InputDataError, match=r"b\.geojson': none of its 3 features has a geometry"):
        _load(tmp_path, _write(tmp_path / "b.geojson", feats))


@pytest.mark.parametrize("ring,what", [
    ([[float("nan"), RING[0][1]], *RING[1:]], r"coordinates\[0\]\[0\]\[0\] is NaN, not a finite number"),
    ([[float("inf"), RING[0][1]], *RING[1:]], r"is Infinity, not a finite number"),
    (RING[:-1], r"coordinates\[0\] is not closed.*RFC 7946 section 3\.1\.6"),  # a linear ring is closed
    (RING[:2], r"coordinates\[0\] is a ring of 2 position\(s\); a linear ring needs four or more"),
])
def test_geos_failures_named_by_feature(tmp_path, ring, what):
    """These failed inside GDAL/GEOS with "Points of LinearRing do not form a closed linestring", naming nothing."""
    path = _buildings(tmp_path, _geom(type="Polygon", coordinates=[ring]))
    with pytest.raises(InputDataError, match=r"feature 2 \(id 'B2'\): geometry\..*" + what):
        _load(tmp_path, path)


@pytest.mark.parametrize("n", [4, 40])
def test_one_far_building_named(tmp_path, n):
    """One footprint shifted by 20 degrees of longitude: UTM 31N scales lengths there by about 1.025
    (k = k0 (1 + (lambda cos phi)^2 / 2 + ...), Snyder 1987, eq. 8-11); it used to end in a street-grid size
    error naming no feature.  The zone comes from the median centre, so one stray footprint in four does not
    move it."""
    far = [[x + 20.0, y] for x, y in RING]
    with pytest.raises(InputDataError, match=r"1 footprint\(s\) lie where the job's CRS EPSG:32631.*feature 2 "
                                             r"\(id 'B2'\) at lon 22\.\d+, lat 46\.\d+, 1,53\d km from the others"):
        _load(tmp_path, _buildings(tmp_path, _geom(type="Polygon", coordinates=[far]), n=n))


def test_longitudes_past_the_antimeridian_named_as_such(tmp_path):
    """RFC 7946 sections 3.1.9 and 4: longitudes lie in [-180, 180]; 180.01 is not 'projected metres'."""
    feats = [_building(i) for i in range(3)]
    for f in feats:
        f["geometry"]["coordinates"] = [[[x + 177.7, y] for x, y in r] for r in f["geometry"]["coordinates"]]
    with pytest.raises(InputDataError, match=r"longitudes beyond \+/-180 degrees.*antimeridian.*L - 360") as info:
        _load(tmp_path, _write(tmp_path / "b.geojson", feats))
    assert "projected metres" not in str(info.value)


def test_symlink_loop_named(tmp_path):
    loop = tmp_path / "b.geojson"
    loop.symlink_to(loop)
    with pytest.raises(InputDataError, match=r"b\.geojson' is a symbolic link that leads back to itself"):
        _load(tmp_path, loop)


def test_no_raw_gdal_warning_for_a_one_number_position(tmp_path):
    """pyogrio printed "RuntimeWarning: OGRGeoJSONReadRawPoint(): Invalid coord dimension" on stderr and the
    building was dropped; now it is refused by name and no raw warning escapes."""
    bad = _geom(type="Polygon", coordinates=[[[RING[0][0]], *RING[1:]]])
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        with pytest.raises(InputDataError, match=r"feature 2 \(id 'B2'\)"):
            load_district(buildings_path=_buildings(tmp_path, bad), base_stations_path=_stations(tmp_path))
    assert not [w for w in caught if issubclass(w.category, RuntimeWarning)]


# ---------------------------------------------------------------------------------------- 6. empty ids


@pytest.mark.parametrize("value", ["", "   "])
def test_empty_building_id_refused(tmp_path, value):
    bad = _building(2)
    bad["properties"]["id"] = value
    with pytest.raises(InputDataError, match=r"features 2 \(0-based\) have no value in the id column 'id' \(null or "
                                             r"an empty string\)"):
        _load(tmp_path, _buildings(tmp_path, bad))


def test_empty_station_id_refused(tmp_path):
    with pytest.raises(InputDataError, match=r"bs\.geojson': features 0 \(0-based\) have no bs_id \(null or an empty string\)"):
        _load(tmp_path, _buildings(tmp_path), _stations(tmp_path, bs_id=""))


def test_station_point_drawn_as_polygon_still_named(tmp_path):
    """The generic GeoJSON pass leaves role checks to the layer: a polygon station is refused as before."""
    bs = _write(tmp_path / "bs.geojson", [{"type": "Feature", "properties": {"bs_id": "S1", **SECTOR},
                                           "geometry": mapping(box(0, 0, 1e-4, 1e-4))}])
    with pytest.raises(InputDataError, match=r"bs_id 'S1'.* are not single points"):
        _load(tmp_path, _buildings(tmp_path), bs)


def test_point_helper_is_lonlat():
    lon, lat = _TO_LL.transform(E0, N0)
    assert Point(lon, lat).distance(Point(LON0, LAT0)) < 1e-9
