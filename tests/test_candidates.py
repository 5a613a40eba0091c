"""Candidate facade spots and demand points (siting.candidates).

References used by the checks below:
- hand geometry of the canonical fixtures (tests/canonical.py) with the placement rule documented in
  siting/candidates.py (piece length L -> max(1, floor(L / spacing)) spots at (k + 1/2) L / n);
- shapely 2 as an independent reference (distance, contains_xy, boundary difference, buffer, simplify, area);
- pyproj/geopandas for projection of the real footprints (momepy's bubenec, pyrosm's test.osm.pbf).
"""

from __future__ import annotations

import importlib.util
import math
import warnings

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
import shapely.affinity
from hypothesis import given, settings
from hypothesis import strategies as st
from shapely.geometry import Polygon, box

from siting import candidates as cand
from siting import tables
from siting.errors import InputDataError, JobError, SitingError
from tests import canonical
from tests.canonical import X0, Y0

HYP = settings(derandomize=True, max_examples=25, deadline=None)


def _close(a, b):
    return np.isclose(a, b, rtol=0, atol=1e-6)  # absolute: coordinates are ~1e6 m, a relative test is too loose


def _allclose(a, b, atol=1e-6):
    return np.allclose(a, b, rtol=0, atol=atol)


def _unit(az_deg):
    a = np.radians(np.asarray(az_deg, float))
    return np.stack([np.sin(a), np.cos(a)], axis=1)  # clockwise from north: (east, north)


# ----------------------------------------------------------------------------------------- canonical shapes
def test_single_box_spots_per_wall_and_normals():
    # hand check: 20 m walls -> floor(20/5) = 4 spots at 2.5, 7.5, 12.5, 17.5 m; 10 m walls -> 2 at 2.5, 7.5 m;
    # height 12 m - 1 m margin = 11 m >= 8 m, so both mounting heights are used.
    s = cand.facade_spots(canonical.single_box())
    tables.check(s, "sites")
    assert len(s) == 2 * (4 + 2 + 4 + 2)
    assert s["site_id"].tolist() == list(range(len(s)))
    assert (s["source"] == "generated").all()
    counts = s.groupby("normal_az_deg").size().to_dict()
    assert counts == {0.0: 8, 90.0: 4, 180.0: 8, 270.0: 4}
    north = s[s.normal_az_deg == 0.0]
    assert _allclose(np.sort(north.x.unique()) - X0, [2.5, 7.5, 12.5, 17.5])
    assert _allclose(north.y, Y0 + 10 + 0.05)  # offset 5 cm outward from the north wall
    east = s[s.normal_az_deg == 90.0]
    assert _allclose(east.x, X0 + 20 + 0.05)
    assert _allclose(np.sort(east.y.unique()) - Y0, [2.5, 7.5])
    assert set(s.z_m) == {4.0, 8.0}
    assert _allclose(s.groupby("normal_az_deg").wall_free_m.first().to_numpy(), [20, 10, 20, 10])
    assert s.wall_id.nunique() == 4


def test_spacing_rule_centres_spots_and_keeps_one_on_short_walls():
    # hand check of the documented rule: L = 12 m, spacing 5 -> n = 2 at 3 and 9 m; L = 3 m -> 1 at 1.5 m.
    b = canonical.single_box(width_m=12.0, depth_m=3.0)
    s = cand.facade_spots(b, mount_heights_m=[4.0])
    south = s[s.normal_az_deg == 180.0]
    assert _allclose(np.sort(south.x) - X0, [3.0, 9.0])
    west = s[s.normal_az_deg == 270.0]
    assert _allclose(west.y - Y0, [1.5])


def test_courtyard_inner_walls_face_into_the_courtyard():
    b = canonical.courtyard_block()  # 60 m block, 30 m courtyard from 15 to 45 m
    w = cand.wall_segments(b)
    assert w.is_hole.sum() == 4 and (~w.is_hole).sum() == 4
    s = cand.facade_spots(b)
    holes = s[s.wall_id.isin(w.wall_id[w.is_hole])]
    assert len(holes) == 4 * 6 * 2  # floor(30/5) = 6 per wall, two heights
    courtyard = box(X0 + 15, Y0 + 15, X0 + 45, Y0 + 45)
    step = _unit(holes.normal_az_deg) * 5.0
    # 5 m along the normal lands in the open courtyard, 5 m against it lands in the building material
    assert shapely.contains_xy(courtyard, holes.x + step[:, 0], holes.y + step[:, 1]).all()
    assert shapely.contains_xy(b.geometry[0], holes.x - step[:, 0], holes.y - step[:, 1]).all()
    west_inner = holes[_close(holes.x, X0 + 15 + 0.05)]
    assert len(west_inner) == 12 and (west_inner.normal_az_deg == 90.0).all()


def test_touching_boxes_have_no_spot_on_the_shared_wall():
    b = canonical.touching_boxes()
    s = cand.facade_spots(b)
    shared = shapely.LineString([(X0 + 10, Y0), (X0 + 10, Y0 + 10)])
    assert (shapely.distance(shared, shapely.points(s.x, s.y)) > 0.5).all()
    assert not ((s.building_idx == 0) & (s.normal_az_deg == 90.0)).any()
    assert not ((s.building_idx == 1) & (s.normal_az_deg == 270.0)).any()
    # the N/S walls lose only the 0.5 m party gap next to the neighbour: 9.5 m pieces, floor(9.5/5) = 1 spot
    w = cand.wall_segments(b)
    assert _allclose(np.sort(w.length_m), [9.5, 9.5, 9.5, 9.5, 10, 10])
    assert len(s) == 2 * 2 * (1 + 1 + 2)
    # with no gap only the shared wall itself goes: 10 m N/S walls, no E wall on b0, no W wall on b1
    w0 = cand.wall_segments(b, party_gap_m=0.0)
    assert len(w0) == 6 and _allclose(w0.length_m, 10.0)
    assert sorted(w0.normal_az_deg[w0.building_idx == 0]) == [0.0, 180.0, 270.0]


def test_l_shape_re_entrant_corner_normals():
    s = cand.facade_spots(canonical.l_shape())
    # inner wall along y = 10 from x = 10..30 faces north; inner wall along x = 10 from y = 10..30 faces east
    inner_n = s[_close(s.y, Y0 + 10.05)]
    inner_e = s[_close(s.x, X0 + 10.05)]
    assert len(inner_n) == 8 and (inner_n.normal_az_deg == 0.0).all()
    assert len(inner_e) == 8 and (inner_e.normal_az_deg == 90.0).all()
    assert ((inner_n.x > X0 + 10) & (inner_n.x < X0 + 30)).all()
    assert ((inner_e.y > Y0 + 10) & (inner_e.y < Y0 + 30)).all()
    assert len(s) == 2 * (6 + 2 + 4 + 4 + 2 + 6)  # walls 30, 10, 20, 20, 10, 30 m


def test_roof_margin_drops_heights_above_the_roof():
    s = cand.facade_spots(canonical.low_and_tall(low_m=6.0, tall_m=40.0))
    assert set(s[s.building_idx == 0].z_m) == {4.0}  # 8 m > 6 - 1
    assert set(s[s.building_idx == 1].z_m) == {4.0, 8.0}


def test_front_clearance_drops_spots_facing_a_close_building():
    # two boxes 0.8 m apart: outside the 0.5 m party gap, inside the 1 m front clearance
    b = canonical._frame([box(X0, Y0, X0 + 10, Y0 + 10), box(X0 + 10.8, Y0, X0 + 20.8, Y0 + 10)], [12, 12])
    s = cand.facade_spots(b)
    facing = ((s.building_idx == 0) & (s.normal_az_deg == 90.0)) | ((s.building_idx == 1) & (s.normal_az_deg == 270.0))
    assert not facing.any()
    s2 = cand.facade_spots(b, front_clear_m=0.5)
    facing2 = ((s2.building_idx == 0) & (s2.normal_az_deg == 90.0))
    assert facing2.sum() == 4


def test_front_clearance_applies_to_the_own_building_in_a_narrow_notch():
    # a 20 x 10 box with a 0.6 m wide, 6 m deep notch cut from the north side at x = 9.7..10.3: the notch's side
    # walls face each other 0.6 m apart (< front_clear_m = 1 m) and carry no spot; without the clearance they do
    notch = Polygon([(X0, Y0), (X0 + 20, Y0), (X0 + 20, Y0 + 10), (X0 + 10.3, Y0 + 10), (X0 + 10.3, Y0 + 4),
                     (X0 + 9.7, Y0 + 4), (X0 + 9.7, Y0 + 10), (X0, Y0 + 10)])
    b = canonical._frame([notch], [12])
    in_notch = lambda s: (s.x > X0 + 9.7) & (s.x < X0 + 10.3) & (s.y > Y0 + 4) & (s.y < Y0 + 10)  # noqa: E731
    s = cand.facade_spots(b, mount_heights_m=[4.0])
    assert set(s[in_notch(s)].normal_az_deg) == {0.0}  # only the notch's end wall, facing out of the notch
    s0 = cand.facade_spots(b, mount_heights_m=[4.0], front_clear_m=0.0)
    assert set(s0[in_notch(s0)].normal_az_deg) == {0.0, 90.0, 270.0}


def test_near_collinear_vertices_are_simplified_away():
    # a 20 m wall with a 0.1 m kink in the middle is one wall at simplify_m = 0.2, two walls without simplifying
    kinked = Polygon([(X0, Y0), (X0 + 10, Y0 - 0.1), (X0 + 20, Y0), (X0 + 20, Y0 + 10), (X0, Y0 + 10)])
    b = canonical._frame([kinked], [12])
    assert len(cand.wall_segments(b)) == 4
    assert len(cand.wall_segments(b, simplify_m=0.0)) == 5


def test_min_wall_drops_short_pieces():
    b = canonical.single_box(width_m=20.0, depth_m=3.0)
    s = cand.facade_spots(b, min_wall_m=4.0)
    assert set(s.normal_az_deg) == {0.0, 180.0}
    assert (s.wall_free_m >= 4.0).all()


# ----------------------------------------------------------------------------------------- properties
@st.composite
def box_districts(draw):
    n = draw(st.integers(1, 4))
    polys = []
    for _ in range(n):
        cx, cy = draw(st.floats(0, 60)), draw(st.floats(0, 60))
        w, d = draw(st.floats(2, 25)), draw(st.floats(2, 25))
        ang = draw(st.floats(0, 180))
        p = shapely.affinity.rotate(box(-w / 2, -d / 2, w / 2, d / 2), ang, origin=(0, 0))
        polys.append(shapely.affinity.translate(p, X0 + cx, Y0 + cy))
    if draw(st.booleans()):  # a non-convex building: the first box plus an arm from its centre at any angle
        c = polys[0].centroid
        arm = shapely.affinity.rotate(box(0, -1.5, draw(st.floats(8, 20)), 1.5), draw(st.floats(0, 360)),
                                      origin=(0, 0))
        u = shapely.union(polys[0], shapely.affinity.translate(arm, c.x, c.y))
        if u.geom_type == "Polygon":
            polys[0] = shapely.set_precision(u, 1e-6)
    return canonical._frame(polys, [20.0] * len(polys))


@HYP
@given(box_districts())
def test_property_spots_outside_all_footprints_facing_away(b):
    try:
        s = cand.facade_spots(b, simplify_m=0.0)
    except InputDataError:
        return  # every wall is a party wall
    geoms = np.asarray(b.geometry.array)
    pts = shapely.points(s.x, s.y)
    # outside every footprint (shapely as reference)
    assert not shapely.STRtree(geoms).query(pts, predicate="intersects")[0].size
    own = geoms[s.building_idx.to_numpy()]
    d = shapely.distance(own, pts)
    assert _allclose(d, 0.05)  # offset from its own wall
    n = _unit(s.normal_az_deg)
    # the normal points away from the own building: a 2 cm step along it increases the distance by 2 cm (the
    # nearest point stays on the same wall), stepping back by the offset plus 1 cm lands inside the material
    ahead = shapely.distance(own, shapely.points(s.x + 0.02 * n[:, 0], s.y + 0.02 * n[:, 1]))
    assert _allclose(ahead, d + 0.02)
    assert shapely.contains_xy(own, s.x - 0.06 * n[:, 0], s.y - 0.06 * n[:, 1]).all()


@HYP
@given(st.floats(1.0, 60.0), st.floats(1.0, 60.0), st.floats(1.0, 10.0))
def test_property_box_spot_count_follows_rule(w, d, spacing):
    b = canonical.single_box(width_m=w, depth_m=d)
    s = cand.facade_spots(b, spacing_m=spacing, mount_heights_m=[4.0])
    expect = 2 * (max(1, math.floor(w / spacing + 1e-9)) + max(1, math.floor(d / spacing + 1e-9)))
    assert len(s) == expect


# ----------------------------------------------------------------------------------------- real footprints
def _contract(gdf: gpd.GeoDataFrame, height: np.ndarray) -> gpd.GeoDataFrame:
    gdf = gdf.assign(height_m=height).explode(index_parts=False).reset_index(drop=True)
    ids = gdf["bid"].astype(str)
    return gpd.GeoDataFrame({
        "building_id": ids, "part": gdf.groupby("bid").cumcount().astype(np.int64), "height_m": gdf.height_m,
        "height_rule": "column", "name": "", "address": "",
    }, geometry=gdf.geometry.values, crs=gdf.crs)


@pytest.fixture(scope="module")
def bubenec():
    path = importlib.util.find_spec("momepy").submodule_search_locations[0] + "/datasets/bubenec.gpkg"
    g = gpd.read_file(path, layer="buildings")
    g = g.to_crs(g.estimate_utm_crs()).assign(bid=lambda d: d["uID"].astype(str))
    rng = np.random.default_rng(7)
    return _contract(g, rng.uniform(6, 30, len(g)).round(1))


@pytest.fixture(scope="module")
def osm_test_area():
    pyrosm = pytest.importorskip("pyrosm")
    path = importlib.util.find_spec("pyrosm").submodule_search_locations[0] + "/data/test.osm.pbf"
    g = pyrosm.OSM(path).get_buildings()
    g = g[g.geom_type.isin(["Polygon", "MultiPolygon"])]
    g = g.to_crs(g.estimate_utm_crs()).assign(bid=lambda d: d["id"].astype(str))
    levels = pd.to_numeric(g["building:levels"], errors="coerce").fillna(3).clip(1, 30).to_numpy()
    g["geometry"] = shapely.make_valid(g.geometry.values)
    g = g[g.geom_type.isin(["Polygon", "MultiPolygon"])]
    return _contract(g, 3.0 * levels[: len(g)])


def _reference_free_length(b, party_gap_m, simplify_m):
    """Per building: simplified ring length minus the part within party_gap_m of any other building."""
    geoms = np.asarray(b.geometry.array)
    simple = shapely.simplify(geoms, simplify_m, preserve_topology=True)
    zone = shapely.buffer(geoms, party_gap_m)
    tree = shapely.STRtree(zone)
    out = np.zeros(len(geoms))
    for i, g in enumerate(simple):  # reference: plain per-building loop with shapely overlay
        nb = [j for j in tree.query(g.boundary, predicate="intersects") if j != i]
        ring = g.boundary
        out[i] = (ring.difference(shapely.union_all(zone[nb])) if nb else ring).length
    return out


@pytest.mark.parametrize("fixture", ["bubenec", "osm_test_area"])
def test_real_footprints_wall_length_matches_shapely_overlay(fixture, request):
    b = request.getfixturevalue(fixture)
    w = cand.wall_segments(b, party_gap_m=0.5, min_wall_m=0.0)
    got = np.bincount(w.building_idx, weights=w.length_m, minlength=len(b))
    ref = _reference_free_length(b, 0.5, cand.SIMPLIFY_M)
    # Both sides cut the same GEOS geometry; the only difference is our projection of the intersection points on
    # the wall direction versus GEOS's own overlay noding, i.e. double rounding on coordinates of ~1e6 m
    # (ulp ~1e-10 m) times a handful of cut ends per building: 1e-6 m per building is ample.
    assert _allclose(got, ref, atol=1e-6)
    assert ref.sum() < shapely.length(shapely.boundary(np.asarray(b.geometry.array))).sum()  # some party walls


def test_real_footprints_spots_outside_buildings(bubenec):
    s = cand.facade_spots(bubenec)
    geoms = np.asarray(bubenec.geometry.array)
    assert not shapely.STRtree(geoms).query(shapely.points(s.x, s.y), predicate="intersects")[0].size
    assert s.wall_id.max() < len(cand.wall_segments(bubenec))


# ----------------------------------------------------------------------------------------- given spots
def test_snap_given_spots_to_nearest_wall_and_report_far_ones():
    b = canonical.single_box()
    given = pd.DataFrame({"site_ref": ["n1", "far", "e1"], "x": [X0 + 6, X0 + 50, X0 + 21.5],
                          "y": [Y0 + 11, Y0 + 50, Y0 + 3], "z_m": [np.nan, 5.0, 6.0]})
    with pytest.warns(UserWarning, match="far"):
        s, dropped = cand.snap_given_spots(b, given, start_id=10)
    assert dropped == ["far"]
    tables.check(s, "sites")
    assert s.site_id.tolist() == [10, 11] and (s.source == "given").all()
    assert s.site_ref.tolist() == ["n1", "e1"]
    # hand check: projection onto the north wall (y = 10) and the east wall (x = 20), then 5 cm outward
    assert _allclose(s[["x", "y"]].to_numpy() - [X0, Y0], [[6, 10.05], [20.05, 3]])
    assert s.normal_az_deg.tolist() == [0.0, 90.0]
    assert s.z_m.tolist() == [4.0, 6.0]  # NaN -> default_z_m
    assert s.wall_free_m.tolist() == [20.0, 10.0]
    # same wall ids as the generated spots on those walls
    gen = cand.facade_spots(b)
    assert set(s.wall_id) <= set(gen.wall_id)
    assert gen[gen.normal_az_deg == 0.0].wall_id.iloc[0] == s.wall_id.iloc[0]


def test_snap_given_spots_missing_column_is_reported():
    with pytest.raises(InputDataError, match="site_ref"):
        cand.snap_given_spots(canonical.single_box(), pd.DataFrame({"x": [1.0], "y": [2.0]}))


# ----------------------------------------------------------------------------------------- street grid
def test_street_grid_outside_buffered_buildings_matches_shapely(bubenec):
    users = cand.street_grid(bubenec, grid_m=10.0)
    tables.check(users, "users")
    assert (users.kind == "street").all() and (users.building_idx == -1).all() and (users.z_m == 1.5).all()
    assert users.normal_az_deg.isna().all()
    # anchored to multiples of grid_m
    assert _allclose(users.x / 10.0, np.round(users.x / 10.0)) and _allclose(users.y / 10, np.round(users.y / 10))
    # independent reference: whole grid over the bbox + 20 m, minus a fine buffer of the union of footprints
    geoms = np.asarray(bubenec.geometry.array)
    x0, y0, x1, y1 = shapely.total_bounds(geoms) + np.array([-20, -20, 20, 20])
    gx, gy = np.meshgrid(np.arange(np.ceil(x0 / 10), np.floor(x1 / 10) + 1) * 10,
                         np.arange(np.ceil(y0 / 10), np.floor(y1 / 10) + 1) * 10)
    blocked = shapely.union_all(shapely.buffer(geoms, 0.5, quad_segs=64))
    free = ~shapely.contains_xy(blocked, gx.ravel(), gy.ravel())
    assert len(users) == free.sum()
    assert not shapely.contains_xy(blocked, users.x, users.y).any()


def test_street_grid_is_tile_independent():
    b = canonical.street_canyon()
    whole = cand.street_grid(b, box(X0 - 7, Y0 - 3, X0 + 103, Y0 + 53))
    west = cand.street_grid(b, box(X0 - 7, Y0 - 3, X0 + 48, Y0 + 53))
    east = cand.street_grid(b, box(X0 + 48.0001, Y0 - 3, X0 + 103, Y0 + 53))
    key = lambda u: set(zip(u.x.round(6), u.y.round(6)))  # noqa: E731
    assert key(west) | key(east) == key(whole) and not key(west) & key(east)
    # street between the rows: y in (15.5, 34.5) -> rows at 20, 25, 30 m; x in [-7, 103] -> -5..100, 22 columns
    street = whole[(whole.y > Y0 + 15) & (whole.y < Y0 + 35)]
    assert len(street) == 3 * 22


def test_street_grid_rejects_bad_area():
    with pytest.raises(InputDataError, match="Polygon"):
        cand.street_grid(canonical.single_box(), shapely.Point(0, 0))


# ----------------------------------------------------------------------------------------- homes
def test_homes_weights_sum_to_households():
    b = canonical.courtyard_block(height_m=18.0)
    h = cand.facade_homes(b, storey_height_m=3.0, area_per_household_m2=80.0)
    tables.check(h, "users")
    # hand check: 6 storeys x (60^2 - 30^2) m2 / 80 m2
    assert math.isclose(h.weight.sum(), 6 * 2700 / 80)
    assert set(h.z_m) == {1.5 + 3 * k for k in range(6)}
    assert (h.kind == "home").all() and (h.building_idx == 0).all() and h.normal_az_deg.notna().all()
    # 60 m walls -> 6 windows, 30 m courtyard walls -> 3 windows, per floor
    assert len(h) == 6 * (4 * 6 + 4 * 3)


def test_homes_weights_per_building_on_real_footprints(bubenec):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        h = cand.facade_homes(bubenec, area_per_household_m2=100.0)
    geoms = np.asarray(bubenec.geometry.array)
    levels = np.maximum(1, np.floor(bubenec.height_m.to_numpy() / 3.0))
    expect = levels * shapely.area(geoms) / 100.0
    got = np.bincount(h.building_idx, weights=h.weight, minlength=len(bubenec))
    has = np.bincount(h.building_idx, minlength=len(bubenec)) > 0
    assert _allclose(got[has], expect[has])
    assert has.mean() > 0.9


# ----------------------------------------------------------------------------------------- given users
def test_given_users_indoor_dropped_or_kept():
    b = canonical.single_box()
    g = pd.DataFrame({"user_ref": ["out", "in"], "x": [X0 - 5, X0 + 5], "y": [Y0, Y0 + 5],
                      "z_m": [np.nan, 2.0], "weight": [2.0, 3.0]})
    with pytest.warns(UserWarning, match="allow_indoor"):
        u, n = cand.given_users(b, g)
    assert n == 1 and u.user_ref.tolist() == ["out"] and u.z_m.tolist() == [1.5] and u.kind.tolist() == ["given"]
    u2, n2 = cand.given_users(b, g, allow_indoor=True)
    assert n2 == 0 and u2.kind.tolist() == ["given", "indoor"] and u2.building_idx.tolist() == [-1, 0]


def test_given_users_negative_weight_rejected():
    g = pd.DataFrame({"user_ref": ["a"], "x": [0.0], "y": [0.0], "weight": [-1.0]})
    with pytest.raises(InputDataError, match="weight"):
        cand.given_users(canonical.single_box(), g)


def test_combine_users_renumbers():
    b = canonical.street_canyon()
    g = pd.DataFrame({"user_ref": ["u1"], "x": [X0 + 50.0], "y": [Y0 + 25.0], "weight": [4.0]})
    a, _ = cand.given_users(b, g)
    s = cand.street_grid(b, grid_m=10.0)
    h = cand.facade_homes(b)
    u = cand.combine_users(a, s, h)
    tables.check(u, "users")
    assert u.user_id.tolist() == list(range(len(a) + len(s) + len(h)))
    assert u.kind.value_counts().to_dict() == {"street": len(s), "home": len(h), "given": 1}
    assert u.user_ref.iloc[0] == "u1" and (u.user_ref.iloc[1:] == "").all()
    assert u.weight.sum() == pytest.approx(a.weight.sum() + s.weight.sum() + h.weight.sum())


# ----------------------------------------------------------------------------------------- bad input
def test_empty_buildings_rejected():
    empty = canonical.single_box().iloc[:0]
    for fn in (cand.facade_spots, cand.street_grid, cand.facade_homes, cand.wall_segments):
        with pytest.raises(InputDataError, match="empty"):
            fn(empty)


def test_no_wall_long_enough_rejected():
    b = canonical.single_box(width_m=0.4, depth_m=0.3)
    with pytest.raises(InputDataError, match="min_wall_m"):
        cand.facade_spots(b, min_wall_m=0.5)


def test_all_buildings_too_low_rejected():
    with pytest.raises(InputDataError, match="mount_heights_m"):
        cand.facade_spots(canonical.single_box(height_m=3.0))


def test_geographic_crs_rejected():
    b = canonical.single_box().to_crs("EPSG:4326")
    with pytest.raises(InputDataError, match="projected CRS"):
        cand.facade_spots(b)


def test_non_polygon_geometry_named():
    b = canonical.single_box()
    b.loc[0, "geometry"] = shapely.LineString([(X0, Y0), (X0 + 1, Y0)])
    with pytest.raises(InputDataError, match="b0"):
        cand.facade_spots(b)


def test_missing_column_rejected():
    with pytest.raises(SitingError, match="height_m"):
        cand.facade_spots(canonical.single_box().drop(columns="height_m"))


@pytest.mark.parametrize("kw", [{"spacing_m": 0.0}, {"spacing_m": float("nan")}, {"mount_heights_m": []},
                                {"party_gap_m": -1.0}])
def test_bad_parameters_rejected(kw):
    with pytest.raises(JobError):
        cand.facade_spots(canonical.single_box(), **kw)
