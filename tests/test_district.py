"""District loading: real footprints shipped in registry packages, every kind of bad input, the demo district.

Sources of the checks are named beside them.  Real footprints: the ``buildings`` layer of momepy's
``datasets/bubenec.gpkg`` (EPSG:3857) and pyrosm's ``data/test.osm.pbf``, both read here independently with
pyogrio / pyrosm; areas are compared with geodesic areas from ``pyproj.Geod(ellps="WGS84")``.
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import sys
import warnings
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pyproj
import pytest
import shapely
from shapely.geometry import Point, Polygon, box, mapping

from siting import tables
from siting.district import District, load_district, parse_height_m, summary, to_lonlat
from siting.errors import InputDataError, JobError, SitingError

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "demo_district"
GEOD = pyproj.Geod(ellps="WGS84")

# an invented spot (lon/lat) for the small hand-made layers; UTM zone 31N
LON0, LAT0 = 2.35, 46.5
UTM = pyproj.CRS.from_epsg(32631)
_TO_UTM = pyproj.Transformer.from_crs(4326, UTM, always_xy=True)
_TO_LL = pyproj.Transformer.from_crs(UTM, 4326, always_xy=True)
E0, N0 = _TO_UTM.transform(LON0, LAT0)


def _pkg_file(pkg: str, *parts: str) -> Path:
    spec = importlib.util.find_spec(pkg)
    if spec is None:
        pytest.skip(f"{pkg} not installed")
    return Path(spec.submodule_search_locations[0], *parts)


def _ll(geom):
    """Local metres (relative to E0, N0 in UTM 31N) -> lon/lat geometry."""
    return shapely.transform(geom, lambda xy: np.column_stack(_TO_LL.transform(xy[:, 0] + E0, xy[:, 1] + N0)))


def _write_fc(path: Path, features: list[tuple[object, dict]], *, lonlat: bool = True) -> Path:
    fc = {
        "type": "FeatureCollection",
        "features": [
            {"type": "Feature", "properties": props,
             "geometry": None if g is None else mapping(_ll(g) if lonlat else g)}
            for g, props in features
        ],
    }
    path.write_text(json.dumps(fc))
    return path


def _bs_file(tmp_path: Path, x=-50.0, y=-50.0, z=8.0, name="bs.geojson", **extra) -> Path:
    props = {"bs_id": "bs1", "z_m": z, "tx_power_dbm": 30.0, "max_gain_dbi": 0.0, "pattern": "omni", **extra}
    return _write_fc(tmp_path / name, [(Point(x, y), props)])


def _load(tmp_path, buildings, bs=None, **kw) -> District:
    bs = bs if bs is not None else _bs_file(tmp_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        return load_district(buildings_path=buildings, base_stations_path=bs, **kw)


def _geodesic_area_m2(geoms_lonlat) -> np.ndarray:
    # pyproj's signed ring areas need shells counter-clockwise and holes clockwise to subtract the holes
    geoms = shapely.orient_polygons(np.asarray(geoms_lonlat, dtype=object), exterior_cw=False)
    return np.array([abs(GEOD.geometry_area_perimeter(g)[0]) for g in geoms])


# --------------------------------------------------------------------------------------- real footprints


@pytest.fixture(scope="module")
def bubenec(tmp_path_factory):
    path = _pkg_file("momepy", "datasets", "bubenec.gpkg")
    tmp = tmp_path_factory.mktemp("bubenec")
    # a base station inside the extent, in lon/lat, at a spot that is not inside any footprint
    raw = pyogrio.read_dataframe(path, layer="buildings")
    free = raw.to_crs(4326).union_all().envelope.centroid
    while raw.to_crs(4326).contains(free).any():
        free = Point(free.x + 1e-4, free.y)
    bs = tmp / "bs.geojson"
    bs.write_text(json.dumps({"type": "FeatureCollection", "features": [{"type": "Feature", "geometry": mapping(free),
                              "properties": {"bs_id": "x", "z_m": 10, "tx_power_dbm": 30, "max_gain_dbi": 0, "pattern": "omni"}}]}))
    with pytest.warns(UserWarning, match="default height"):
        d = load_district(buildings_path=path, buildings_layer="buildings", building_id_column="uID",
                          base_stations_path=bs)
    return path, raw, d


def test_bubenec_counts_ids_and_crs(bubenec):
    path, raw, d = bubenec
    info = pyogrio.read_info(path, layer="buildings")  # independent count (pyogrio)
    assert d.buildings["building_id"].nunique() == info["features"] == len(raw)
    assert sorted(d.buildings["building_id"]) == sorted(raw["uID"].astype(str))
    # UTM zone as geopandas estimates it (independent of pyproj.database.query_utm_crs_info)
    assert d.crs.equals(raw.estimate_utm_crs()) and d.crs_rule == "local UTM zone from data centroid"
    assert any("EPSG:3857" in n and "reprojected" in n for n in d.notes)
    tables.check(d.buildings, "buildings")
    assert (d.buildings.index == np.arange(len(d.buildings))).all()


def test_bubenec_areas_match_geodesic(bubenec):
    _, raw, d = bubenec
    ll = raw.to_crs(4326)
    geodesic = pd.Series(_geodesic_area_m2(ll.geometry), index=raw["uID"].astype(str))
    got = d.buildings.groupby("building_id").geometry.apply(lambda s: s.area.sum())
    rel = (got / geodesic.loc[got.index] - 1).abs()
    assert rel.max() < 0.005  # UTM scale error inside a zone is < 0.1 % (pyproj.Geod reference)


def test_bubenec_heights_default_rule(bubenec):
    _, _, d = bubenec  # the layer has no height columns: every building gets the default with a note
    assert (d.buildings["height_rule"] == "default").all() and (d.buildings["height_m"] == 9.0).all()
    assert any("144 of 144" in n and "default height" in n for n in d.notes)


@pytest.fixture(scope="module")
def osm_pbf(tmp_path_factory):
    pyrosm = pytest.importorskip("pyrosm")
    path = _pkg_file("pyrosm", "data", "test.osm.pbf")
    raw = pyrosm.OSM(str(path)).get_buildings()
    tmp = tmp_path_factory.mktemp("osm")
    bs = tmp / "bs.geojson"
    bs.write_text(json.dumps({"type": "FeatureCollection", "features": [{"type": "Feature", "geometry": mapping(
        Point(26.90, 60.50)), "properties": {"bs_id": "far", "z_m": 20, "tx_power_dbm": 40, "max_gain_dbi": 0, "pattern": "omni"}}]}))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        d = load_district(buildings_path=path, base_stations_path=bs)
    return raw, d


def test_osm_counts_and_ids(osm_pbf):
    raw, d = osm_pbf
    ids = raw["osm_type"].astype(str) + "/" + raw["id"].astype(str)
    valid = raw.is_valid.to_numpy()
    big = _geodesic_area_m2(raw.geometry) >= 1.0  # pyproj.Geod reference
    loaded = set(d.buildings["building_id"])
    must = set(ids[valid & big])
    assert must <= loaded <= set(ids)  # every valid footprint over 1 m2 is kept, nothing is invented
    assert len(loaded - must) == len(loaded) - len(must)
    assert len(must) > 2000
    assert any("invalid building polygon" in n for n in d.notes)  # the extract has clipped, self-touching ways
    assert d.crs.equals(raw.estimate_utm_crs())  # geopandas' UTM estimate (zone 35N)


def test_osm_areas_match_geodesic(osm_pbf):
    raw, d = osm_pbf
    raw = raw[raw.is_valid].copy()
    raw["bid"] = raw["osm_type"].astype(str) + "/" + raw["id"].astype(str)
    geodesic = pd.Series(_geodesic_area_m2(raw.geometry), index=raw["bid"])
    geodesic = geodesic[geodesic > 20.0]  # tiny sheds: relative error is dominated by rounding
    got = d.buildings.groupby("building_id").geometry.apply(lambda s: s.area.sum())
    rel = (got.loc[geodesic.index] / geodesic - 1).abs()
    assert rel.max() < 0.005


def test_osm_heights_from_levels(osm_pbf):
    raw, d = osm_pbf
    lv = pd.to_numeric(raw["building:levels"], errors="coerce")
    ids = (raw["osm_type"].astype(str) + "/" + raw["id"].astype(str))[lv.notna()]
    per = d.buildings.drop_duplicates("building_id").set_index("building_id")
    assert len(ids) > 0
    # OSM building:levels x storey height (default 3 m, common practice)
    np.testing.assert_allclose(per.loc[ids, "height_m"], lv[lv.notna()].to_numpy() * 3.0)
    assert (per.loc[ids, "height_rule"] == "levels").all()
    assert (per.drop(ids)["height_rule"] == "default").all()


def test_osm_without_pyrosm_names_the_extra(tmp_path, monkeypatch):
    path = _pkg_file("pyrosm", "data", "test.osm.pbf")
    monkeypatch.setitem(sys.modules, "pyrosm", None)  # import now fails
    with pytest.raises(InputDataError, match=r"osm.*extra|extra.*osm"):
        _load(tmp_path, path)


# ----------------------------------------------------------------------------------------- formats & CRS


def _two_boxes():
    return [(box(0, 0, 20, 10), {"id": "a", "height": 12}), (box(40, 0, 50, 30), {"id": "b", "height": "20 m"})]


@pytest.mark.parametrize("driver,suffix", [("GPKG", ".gpkg"), ("ESRI Shapefile", ".shp"), ("FlatGeobuf", ".fgb"),
                                           (None, ".parquet")])
def test_formats_read_alike(tmp_path, driver, suffix):
    gdf = gpd.GeoDataFrame({"id": ["a", "b"], "height": [12.0, 20.0]},
                           geometry=[box(E0, N0, E0 + 20, N0 + 10), box(E0 + 40, N0, E0 + 50, N0 + 30)], crs=UTM)
    path = tmp_path / f"b{suffix}"
    if driver is None:
        gdf.to_parquet(path)
    else:
        pyogrio.write_dataframe(gdf, path, driver=driver)
    d = _load(tmp_path, path)
    b = d.buildings.sort_values("building_id")  # FlatGeobuf returns features in spatial-index order
    assert list(b["building_id"]) == ["a", "b"]
    np.testing.assert_allclose(b.area, [200.0, 300.0], rtol=1e-9)  # same CRS: areas unchanged
    assert d.crs.equals(UTM)
    assert str(path) in d.input_hashes
    assert d.input_hashes[str(path)] == hashlib.sha256(path.read_bytes()).hexdigest()  # hashlib reference


def test_layers_in_different_crs_are_reprojected(tmp_path):
    gdf = gpd.GeoDataFrame({"id": ["a"], "height": [30.0]}, geometry=[box(E0, N0, E0 + 20, N0 + 20)], crs=UTM)
    merc = tmp_path / "b.gpkg"
    pyogrio.write_dataframe(gdf.to_crs(3857), merc, driver="GPKG")
    bs = _bs_file(tmp_path, x=-30.0, y=5.0)  # lon/lat GeoJSON
    d = _load(tmp_path, merc, bs, crs="EPSG:32631")
    assert d.crs_rule == "named in job"
    assert sum("reprojected" in n for n in d.notes) == 2  # buildings from 3857, stations from 4326
    # the station lands where pyproj puts it
    np.testing.assert_allclose([d.base_stations.x[0], d.base_stations.y[0]], [E0 - 30.0, N0 + 5.0], atol=1e-3)
    np.testing.assert_allclose(d.buildings.area[0], 400.0, rtol=1e-6)


def test_named_crs_must_be_projected_metres(tmp_path):
    b = _write_fc(tmp_path / "b.geojson", _two_boxes())
    with pytest.raises(JobError, match="projected"):
        _load(tmp_path, b, crs="EPSG:4326")
    with pytest.raises(JobError, match="not a CRS"):
        _load(tmp_path, b, crs="EPSG:999999")


def test_geojson_with_projected_coordinates_refused(tmp_path):
    b = _write_fc(tmp_path / "b.geojson", [(box(E0, N0, E0 + 10, N0 + 10), {"id": "a"})], lonlat=False)
    with pytest.raises(InputDataError, match=r"RFC 7946.*EPSG:4326"):
        _load(tmp_path, b)


@pytest.mark.parametrize("crs,far", [(4326, None), (32631, 1e15), (3857, 1e12)])
def test_coordinates_a_crs_cannot_place_are_refused_in_any_format(tmp_path, crs, far):
    """A GeoPackage whose features the layer's CRS cannot place on Earth is refused, naming the features: metres
    labelled EPSG:4326 (beyond |lon| <= 180, |lat| <= 90), and a corrupt feature at 1e15 m in UTM 31N or 1e12 m
    in Web Mercator (where pyproj's inverse gives infinity, or wraps the longitude so the point loaded at a
    wrong place before).  Valid features in the same CRS still load (the last case)."""
    good = box(E0, N0, E0 + 20, N0 + 10)
    geoms = [good] if far is None else [good, box(far, far, far + 20, far + 10)]
    gdf = gpd.GeoDataFrame({"id": [f"b{i}" for i in range(len(geoms))], "height": 12.0}, geometry=geoms, crs=UTM)
    if far is None:
        gdf = gdf.set_crs(4326, allow_override=True)  # metres, mislabelled as degrees
    else:
        gdf = gdf.set_crs(crs, allow_override=True)
    path = tmp_path / "b.gpkg"
    pyogrio.write_dataframe(gdf, path, driver="GPKG")
    bad = "'0'" if far is None else "'1'"
    with pytest.raises(InputDataError, match=rf"b\.gpkg': features {bad} have coordinates EPSG:{crs} .*cannot place"):
        _load(tmp_path, path)
    ok = tmp_path / "ok.gpkg"
    pyogrio.write_dataframe(gpd.GeoDataFrame({"id": ["a"], "height": [12.0]}, geometry=[good], crs=UTM).to_crs(
        crs), ok, driver="GPKG")
    np.testing.assert_allclose(_load(tmp_path, ok).buildings.area, [200.0], rtol=1e-6)


def test_to_lonlat_roundtrip():
    x, y = _TO_UTM.transform(np.array([2.3, 2.4]), np.array([46.4, 46.6]))  # pyproj reference
    lon, lat = to_lonlat(x, y, UTM)
    np.testing.assert_allclose(lon, [2.3, 2.4], atol=1e-9)
    np.testing.assert_allclose(lat, [46.4, 46.6], atol=1e-9)


# ------------------------------------------------------------------------------------------- bad files


def test_missing_file(tmp_path):
    with pytest.raises(InputDataError, match=r"nope\.geojson.*not found"):
        _load(tmp_path, tmp_path / "nope.geojson")


def test_unreadable_file(tmp_path):
    p = tmp_path / "broken.geojson"
    p.write_text('{"type": "FeatureCollection", "features": [ {')
    with pytest.raises(InputDataError, match="broken.geojson"):
        _load(tmp_path, p)


def test_empty_layer(tmp_path):
    p = tmp_path / "empty.geojson"
    p.write_text('{"type": "FeatureCollection", "features": []}')
    with pytest.raises(InputDataError, match="no features"):
        _load(tmp_path, p)


def test_multilayer_file_needs_layer_name(tmp_path):
    p = tmp_path / "two.gpkg"
    g = gpd.GeoDataFrame({"id": ["a"]}, geometry=[box(E0, N0, E0 + 9, N0 + 9)], crs=UTM)
    pyogrio.write_dataframe(g, p, layer="walls")
    pyogrio.write_dataframe(g, p, layer="roofs", append=True)
    with pytest.raises(InputDataError, match=r"2 layers.*walls.*roofs|2 layers.*roofs.*walls"):
        _load(tmp_path, p)
    assert len(_load(tmp_path, p, buildings_layer="roofs").buildings) == 1
    with pytest.raises(InputDataError, match="no layer 'attic'"):
        _load(tmp_path, p, buildings_layer="attic")


# ------------------------------------------------------------------------------------------- geometry


def test_all_points_layer_refused(tmp_path):
    p = _write_fc(tmp_path / "b.geojson", [(Point(0, 0), {"id": "n1"}), (Point(5, 5), {"id": "n2"})])
    with pytest.raises(InputDataError, match=r"no polygons.*id 'n1'\) \(Point\)"):
        _load(tmp_path, p)


def test_mixed_non_polygons_refused_by_name(tmp_path):
    """README, Inputs: non-polygon buildings are refused (exit code 2), not dropped."""
    feats = _two_boxes() + [(Point(100, 100), {"id": "node7"}), (shapely.LineString([(0, 50), (9, 50)]), {"id": "l8"})]
    with pytest.raises(InputDataError, match=r"2 feature\(s\) that are not polygons: feature 2 \(id 'node7'\) "
                                             r"\(Point\); feature 3 \(id 'l8'\) \(LineString\)"):
        _load(tmp_path, _write_fc(tmp_path / "b.geojson", feats))


def test_self_intersecting_polygon_repaired(tmp_path):
    bowtie = Polygon([(0, 0), (10, 10), (10, 0), (0, 10)])  # crosses itself at (5, 5)
    assert not bowtie.is_valid  # shapely agrees it is invalid
    d = _load(tmp_path, _write_fc(tmp_path / "b.geojson", [(bowtie, {"id": "bow", "height": 10})]))
    parts = d.buildings
    assert (parts["building_id"] == "bow").all() and sorted(parts["part"]) == [0, 1]
    np.testing.assert_allclose(parts.area.sum(), 50.0, rtol=1e-4)  # two triangles of 25 m2 (hand check)
    assert any("repaired" in n and "bow" in n for n in d.notes)
    assert shapely.is_valid(parts.geometry.values).all()


def test_holes_kept_multipolygon_exploded_slivers_dropped(tmp_path):
    court = Polygon(box(0, 0, 60, 60).exterior.coords, [box(15, 15, 45, 45).exterior.coords])
    multi = shapely.MultiPolygon([box(100, 0, 110, 10), box(120, 0, 130, 10)])
    sliver = box(200, 0, 200.5, 0.5)  # 0.25 m2
    feats = [(court, {"id": "court"}), (multi, {"id": "twins"}), (sliver, {"id": "crumb"})]
    d = _load(tmp_path, _write_fc(tmp_path / "b.geojson", feats))
    b = d.buildings.set_index(["building_id", "part"])
    np.testing.assert_allclose(b.loc[("court", 0)].geometry.area, 3600 - 900, rtol=1e-4)
    assert len(b.loc[("court", 0)].geometry.interiors) == 1
    assert sorted(d.buildings.loc[d.buildings.building_id == "twins", "part"]) == [0, 1]
    assert "crumb" not in set(d.buildings["building_id"])
    assert any("sliver" in n and "crumb" in n for n in d.notes)


def test_duplicate_ids_refused(tmp_path):
    feats = _two_boxes() + [(box(80, 0, 90, 10), {"id": "a"})]
    with pytest.raises(InputDataError, match=r"'a'.*more than once"):
        _load(tmp_path, _write_fc(tmp_path / "b.geojson", feats))


def test_id_fallbacks(tmp_path):
    feats = [(box(0, 0, 10, 10), {"osm_id": 7}), (box(20, 0, 30, 10), {"osm_id": 9})]
    d = _load(tmp_path, _write_fc(tmp_path / "b.geojson", feats))
    assert list(d.buildings["building_id"]) == ["7", "9"] and any("osm_id" in n for n in d.notes)
    feats = [(box(0, 0, 10, 10), {"kind": "x"}), (box(20, 0, 30, 10), {"kind": "y"})]
    d = _load(tmp_path, _write_fc(tmp_path / "c.geojson", feats))
    assert list(d.buildings["building_id"]) == ["0", "1"] and any("feature numbers" in n for n in d.notes)


# --------------------------------------------------------------------------------------------- heights


def test_parse_height_strings():
    got, unparsed = parse_height_m(pd.Series(["12", "12 m", "12.5m", "12,5", "40 ft", " 7 metres", "tall", None]))
    # 1 ft = 0.3048 m exactly (international foot, 1959 agreement; common practice)
    np.testing.assert_allclose(got[:6], [12.0, 12.0, 12.5, 12.5, 40 * 0.3048, 7.0])
    assert np.isnan(got[6:]).all() and list(unparsed) == [False] * 6 + [True, False]


def test_height_rules_in_order(tmp_path):
    feats = [
        (box(0, 0, 10, 10), {"id": "c", "h_survey": 31.0, "height": "12 m", "building:levels": 5}),
        (box(20, 0, 30, 10), {"id": "h", "height": "12,5", "building:levels": 5}),
        (box(40, 0, 50, 10), {"id": "l", "building:levels": "4"}),
        (box(60, 0, 70, 10), {"id": "d"}),
        (box(80, 0, 90, 10), {"id": "u", "height": "unknown", "building:levels": 2}),
    ]
    p = _write_fc(tmp_path / "b.geojson", feats)
    with pytest.warns(UserWarning, match="1 of 5"):
        d = load_district(buildings_path=p, base_stations_path=_bs_file(tmp_path), height_column="h_survey",
                          storey_height_m=3.5, default_height_m=7.0)
    b = d.buildings.set_index("building_id")
    assert list(b.loc[["c", "h", "l", "d", "u"], "height_rule"]) == ["column", "height", "levels", "default", "levels"]
    np.testing.assert_allclose(b.loc[["c", "h", "l", "d", "u"], "height_m"], [31.0, 12.5, 14.0, 7.0, 7.0])
    assert any("could not be read" in n and "'u'" in n for n in d.notes)


@pytest.mark.parametrize("props,match", [
    ({"height": -4}, r"zero or negative.*'bad'"),
    ({"height": "1500 m"}, r"exceeds 1000 m.*'bad'"),
    ({"building:levels": -2}, r"negative.*'bad'"),
])
def test_bad_heights(tmp_path, props, match):
    feats = _two_boxes() + [(box(80, 0, 90, 10), {"id": "bad", **props})]
    with pytest.raises(InputDataError, match=match):
        _load(tmp_path, _write_fc(tmp_path / "b.geojson", feats))


def test_no_height_without_default_is_an_error(tmp_path):
    feats = _two_boxes() + [(box(80, 0, 90, 10), {"id": "bare"})]
    with pytest.raises(InputDataError, match=r"no height.*'bare'.*default_height_m"):
        _load(tmp_path, _write_fc(tmp_path / "b.geojson", feats), default_height_m=None)


def test_missing_height_column_named(tmp_path):
    with pytest.raises(InputDataError, match="no column 'roof_m'"):
        _load(tmp_path, _write_fc(tmp_path / "b.geojson", _two_boxes()), height_column="roof_m")


# -------------------------------------------------------------------------------------- base stations


def test_base_station_contract(tmp_path):
    bs = _write_fc(tmp_path / "bs.geojson", [
        (Point(-20, 0), {"bs_id": 1, "z_m": 6, "tx_power_dbm": 33, "max_gain_dbi": 22, "azimuth_deg": -90,
                         "downtilt_deg": 4, "pattern": "Sector"}),
        (Point(-40, 0), {"bs_id": 2, "z_m": 9, "tx_power_dbm": 30, "max_gain_dbi": 5, "pattern": "omni"}),
    ])
    d = _load(tmp_path, _write_fc(tmp_path / "b.geojson", _two_boxes()), bs)
    s = tables.check(d.base_stations, "base_stations")
    assert list(s.bs_id) == ["1", "2"] and list(s.pattern) == ["sector", "omni"]
    np.testing.assert_allclose(s.azimuth_deg, [270.0, 0.0])  # clockwise from north, wrapped into [0, 360)
    np.testing.assert_allclose(s.downtilt_deg, [4.0, 0.0])  # an omni antenna has no aim: 0, unused
    np.testing.assert_allclose(s.max_gain_dbi, [22.0, 5.0])


@pytest.mark.parametrize("props,match", [
    ({"bs_id": "x", "tx_power_dbm": 30}, "no property 'z_m'"),
    ({"bs_id": "x", "z_m": 8, "tx_power_dbm": 30, "max_gain_dbi": 0, "pattern": "yagi"}, "'sector' or 'omni'"),
    ({"bs_id": "x", "z_m": "tall", "tx_power_dbm": 30}, "not a finite number"),
    ({"z_m": 8, "tx_power_dbm": 30}, "no property 'bs_id'"),
])
def test_bad_base_stations(tmp_path, props, match):
    bs = _write_fc(tmp_path / "bs.geojson", [(Point(-20, 0), props)])
    with pytest.raises(InputDataError, match=match):
        _load(tmp_path, _write_fc(tmp_path / "b.geojson", _two_boxes()), bs)


def test_duplicate_bs_ids(tmp_path):
    bs = _write_fc(tmp_path / "bs.geojson", [(Point(-20, 0), {"bs_id": "q", "z_m": 5, "tx_power_dbm": 30}),
                                             (Point(-30, 0), {"bs_id": "q", "z_m": 5, "tx_power_dbm": 30})])
    with pytest.raises(InputDataError, match=r"'q'.*more than once"):
        _load(tmp_path, _write_fc(tmp_path / "b.geojson", _two_boxes()), bs)


def test_station_inside_footprint_below_roof_refused(tmp_path):
    b = _write_fc(tmp_path / "b.geojson", _two_boxes())  # 'b' is 20 m tall, x 40..50, y 0..30
    with pytest.raises(InputDataError, match=r"'bs1' at z_m = 8 m inside building 'b' \(roof 20 m\)"):
        _load(tmp_path, b, _bs_file(tmp_path, x=45, y=15, z=8.0))


def test_rooftop_station_above_roof_works(tmp_path):
    b = _write_fc(tmp_path / "b.geojson", _two_boxes())
    d = _load(tmp_path, b, _bs_file(tmp_path, x=45, y=15, z=23.0))
    assert d.base_stations.z_m[0] == 23.0


# -------------------------------------------------------------------------------------- sites and users


def test_given_sites_and_users(tmp_path):
    b = _write_fc(tmp_path / "b.geojson", _two_boxes())
    sites = _write_fc(tmp_path / "s.geojson", [(Point(20.05, 5), {"site_id": "north-1", "z_m": 6}),
                                               (Point(40, 10), {})])
    users = _write_fc(tmp_path / "u.geojson", [(Point(30, 5), {"id": "u1", "hh": 3}), (Point(30, 20), {"hh": 0})])
    d = _load(tmp_path, b, sites_path=sites, users_path=users, user_weight_column="hh")
    assert list(d.given_sites.site_ref) == ["north-1", "1"]
    assert d.given_sites.z_m[0] == 6 and np.isnan(d.given_sites.z_m[1])
    assert list(d.given_users.user_ref) == ["u1", "1"] and list(d.given_users.weight) == [3.0, 0.0]
    np.testing.assert_allclose(d.given_users.x, [E0 + 30, E0 + 30], atol=1e-3)
    d = _load(tmp_path, b, users_path=users)  # default column 'weight' is absent: weight 1, with a note
    assert list(d.given_users.weight) == [1.0, 1.0] and any("weighs 1" in n for n in d.notes)


def test_negative_user_weight_refused(tmp_path):
    b = _write_fc(tmp_path / "b.geojson", _two_boxes())
    users = _write_fc(tmp_path / "u.geojson", [(Point(30, 5), {"id": "u9", "weight": -2})])
    with pytest.raises(InputDataError, match=r"negative.*u9"):
        _load(tmp_path, b, users_path=users)


def test_area_bbox_keeps_whole_intersecting_buildings(tmp_path):
    feats = _two_boxes() + [(box(300, 0, 310, 10), {"id": "far"})]
    b = _write_fc(tmp_path / "b.geojson", feats)
    lon0, lat0 = _TO_LL.transform(E0 + 15, N0 - 5)
    lon1, lat1 = _TO_LL.transform(E0 + 45, N0 + 5)  # cuts into 'a' and 'b', misses 'far'
    d = _load(tmp_path, b, area_bbox_lonlat=[lon0, lat0, lon1, lat1])
    assert sorted(d.buildings.building_id) == ["a", "b"]
    np.testing.assert_allclose(d.buildings.area.sum(), 500.0, rtol=1e-6)  # whole footprints kept
    assert d.area is not None and d.area.contains(Point(E0 + 30, N0))
    with pytest.raises(JobError, match="longitude/latitude"):
        _load(tmp_path, b, area_bbox_lonlat=[E0, N0, E0 + 10, N0 + 10])


def test_summary_mentions_counts_and_crs(tmp_path):
    d = _load(tmp_path, _write_fc(tmp_path / "b.geojson", _two_boxes()))
    text = summary(d)
    assert "buildings: 2" in text and "EPSG:32631" in text and "height" in text


def test_all_errors_are_siting_errors():
    assert issubclass(InputDataError, SitingError) and issubclass(JobError, SitingError)


# ----------------------------------------------------------------------------------------------- demo


def _make_demo_module():
    spec = importlib.util.spec_from_file_location("make_demo", DEMO / "make_demo.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_demo_files_match_generator(tmp_path):
    _make_demo_module().write_demo(tmp_path)
    for name in ("buildings.geojson", "base_stations.geojson"):
        committed = json.loads((DEMO / name).read_text())
        fresh = json.loads((tmp_path / name).read_text())
        assert len(committed["features"]) == len(fresh["features"])
        for a, b in zip(committed["features"], fresh["features"]):
            assert a["properties"] == b["properties"]
            np.testing.assert_array_equal(np.asarray(shapely.get_coordinates(shapely.geometry.shape(a["geometry"]))),
                                          shapely.get_coordinates(shapely.geometry.shape(b["geometry"])))


@pytest.fixture(scope="module")
def demo():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        return load_district(buildings_path=DEMO / "buildings.geojson",
                             base_stations_path=DEMO / "base_stations.geojson")


def test_demo_loads_with_expected_counts(demo):
    fc = json.loads((DEMO / "buildings.geojson").read_text())
    assert 200 <= len(fc["features"]) <= 400
    assert demo.buildings["building_id"].nunique() == len(fc["features"])  # independent count (json)
    h = demo.buildings["height_m"].to_numpy()
    assert np.isfinite(h).all() and (h > 0).all()
    assert set(demo.buildings["height_rule"]) == {"height", "levels", "default"}
    assert len(demo.base_stations) == len(json.loads((DEMO / "base_stations.geojson").read_text())["features"])
    assert (demo.buildings.geometry.interiors.apply(len) > 0).any()  # courtyard holes survive
    x0, y0, x1, y1 = demo.buildings.total_bounds
    assert 500 <= x1 - x0 <= 700 and 400 <= y1 - y0 <= 600


def test_demo_is_rfc7946(demo):
    fc = json.loads((DEMO / "buildings.geojson").read_text())
    geoms = [shapely.geometry.shape(f["geometry"]) for f in fc["features"]]
    assert all(shapely.is_ccw(g.exterior) for g in geoms)  # RFC 7946 section 3.1.6: shells counter-clockwise
    assert all(not shapely.is_ccw(r) for g in geoms for r in g.interiors)  # holes clockwise
    xy = np.concatenate([shapely.get_coordinates(g) for g in geoms])
    assert (np.abs(xy[:, 0]) <= 180).all() and (np.abs(xy[:, 1]) <= 90).all()
    assert any(isinstance(f["properties"].get("height"), str) and f["properties"]["height"].endswith(" m")
               for f in fc["features"])


def test_demo_has_rooftop_and_street_sites(demo):
    bs, b = demo.base_stations, demo.buildings
    pts = shapely.points(bs.x.to_numpy(), bs.y.to_numpy())
    inside = np.array([b.geometry.contains(p).any() for p in pts])
    assert inside.sum() == 1  # exactly one rooftop site, above its roof (load_district accepted it)
    street = bs[~inside]
    assert ((street.z_m >= 6) & (street.z_m <= 10)).all()
    assert ((bs.max_gain_dbi >= 20) & (bs.max_gain_dbi <= 25)).all()
    assert ((bs.tx_power_dbm >= 30) & (bs.tx_power_dbm <= 35)).all()


def test_demo_job_file_parses():
    from siting.job import load_job

    job = load_job(DEMO / "job.toml")
    assert Path(job["inputs"]["buildings"]).is_file() and Path(job["inputs"]["base_stations"]).is_file()
    assert job["radio"]["frequency_ghz"] == 28.0 and len(job["surfaces"]["panels"]) == 3
    cost = sorted(p["cost"] + p["install_cost"] for p in job["surfaces"]["panels"])
    assert 8 <= job["budget"]["max_cost"] / np.mean(cost) <= 15  # roughly 8-15 panels of a mixed catalogue


def test_osm_area_bbox_passed_to_reader(tmp_path):
    pyrosm = pytest.importorskip("pyrosm")
    path = _pkg_file("pyrosm", "data", "test.osm.pbf")
    bbox = [26.940, 60.525, 26.950, 60.530]
    raw = pyrosm.OSM(str(path), bounding_box=bbox).get_buildings()  # pyrosm's own clip as the reference
    bs = tmp_path / "bs.geojson"
    bs.write_text(json.dumps({"type": "FeatureCollection", "features": [{"type": "Feature", "geometry": mapping(
        Point(26.90, 60.50)), "properties": {"bs_id": "far", "z_m": 20, "tx_power_dbm": 40, "max_gain_dbi": 0, "pattern": "omni"}}]}))
    d = _load(tmp_path, path, bs, area_bbox_lonlat=bbox)
    area_ll = shapely.box(*bbox)
    hits = raw.intersects(area_ll) & raw.is_valid  # whole buildings that touch the box are kept
    expected = set(raw["osm_type"].astype(str)[hits] + "/" + raw["id"].astype(str)[hits])
    loaded = set(d.buildings["building_id"])
    assert expected and expected <= loaded
    assert len(loaded - expected) <= (~raw.is_valid).sum()  # at most the repaired ones differ


def test_layer_without_crs(tmp_path):
    metres = gpd.GeoDataFrame({"id": ["a"], "height": [10.0]}, geometry=[box(E0, N0, E0 + 10, N0 + 10)])
    p = tmp_path / "nocrs.shp"
    pyogrio.write_dataframe(metres, p)
    assert not p.with_suffix(".prj").exists()
    with pytest.raises(InputDataError, match=r"no CRS.*\.prj"):
        _load(tmp_path, p)
    d = _load(tmp_path, p, crs="EPSG:32631")  # a named CRS is taken as the layer's, with a note
    np.testing.assert_allclose(d.buildings.area, [100.0])
    assert any("no CRS" in n for n in d.notes)
    lonlat = gpd.GeoDataFrame({"id": ["a"]}, geometry=[_ll(box(0, 0, 10, 10))])
    q = tmp_path / "ll.shp"
    pyogrio.write_dataframe(lonlat, q)
    d = _load(tmp_path, q)
    assert d.crs.equals(UTM) and any("EPSG:4326" in n and "no CRS" in n for n in d.notes)
    np.testing.assert_allclose(d.buildings.area, [100.0], rtol=1e-3)


def test_feature_without_geometry_refused(tmp_path):
    """A building feature with "geometry": null (RFC 7946 section 3.2 allows it for an unlocated feature) has no
    footprint to plan with: refused by name, not dropped."""
    with pytest.raises(InputDataError, match=r"have no geometry \(null or empty\): feature 2 \(id 'ghost'\)"):
        _load(tmp_path, _write_fc(tmp_path / "b.geojson", _two_boxes() + [(None, {"id": "ghost"})]))
