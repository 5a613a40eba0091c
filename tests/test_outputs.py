"""Tests of siting.outputs: layers, survey list, report, run.json, atomic writes.

The bundle is synthetic (a street canyon from tests/canonical.py in EPSG:32633, random SNRs from a fixed generator state), built
here without the other stages.  Expected values come from outside the module under test: pyproj transforms,
geopandas / pyogrio / pandas readers, a plain-Python brute-force of the coverage rules stated in the issue,
the 16-point compass rose (common practice), the element-count rule floor(w/p) x floor(h/p) and the 28 GHz
wavelength c / f (c = 299 792 458 m/s, SI definition), and a real headless Chromium for the HTML.
"""

from __future__ import annotations

import base64
import importlib.metadata
import io
import json
import math
import os
import re
from pathlib import Path
from types import SimpleNamespace

import geopandas as gpd
import matplotlib.image
import numpy as np
import pandas as pd
import pyogrio
import pyproj
import pytest

from siting.errors import JobError, SitingError
from siting.outputs import (
    OutputBundle,
    atomic,
    check_output_folder,
    compass_point,
    derive,
    element_count,
    layers,
    planned_files,
    write_outputs,
)
from siting.outputs import report as report_mod
from tests import canonical
from tests.browser import check_page, find_chromium

X0, Y0 = canonical.X0, canonical.Y0
TARGET_DB = 10.0


# ------------------------------------------------------------------------------------------ bundle builder

def _greedy(options, cov_sets, weight, budget, max_panels):
    """Plain greedy by marginal weight (test-side plan maker; the real optimiser lives elsewhere)."""
    chosen, covered, used_sites, spent = [], set(), set(), 0.0
    while max_panels is None or len(chosen) < max_panels:
        best, best_gain = None, 0.0
        for o in options.itertuples():
            if o.site_id in used_sites or (budget is not None and spent + o.cost > budget):
                continue
            gain = sum(weight[u] for u in cov_sets.get(o.option_id, set()) - covered)
            if gain > best_gain + 1e-12:
                best, best_gain = o, gain
        if best is None:
            break
        chosen.append(best.option_id)
        covered |= cov_sets.get(best.option_id, set())
        used_sites.add(best.site_id)
        spent += best.cost
    return chosen, covered, spent


def make_bundle(random_state: int = 7, budget: float | None = 1300.0, max_panels: int | None = None, **kw) -> OutputBundle:
    rng = np.random.default_rng(random_state)
    buildings = canonical.street_canyon()  # south row y0..y0+15, north row y0+35..y0+50, x0..x0+100
    buildings["name"] = ["South Row", ""]
    buildings["address"] = ["1 Canyon Street", "2 Canyon Street"]
    buildings["addr:postcode"] = ["10115", "10117"]
    xs = X0 + np.array([10.0, 30, 50, 70, 90])
    sites = pd.DataFrame({
        "site_id": np.arange(11),
        "building_idx": np.r_[np.zeros(5, int), np.ones(5, int), 0],
        "building_id": ["b0"] * 5 + ["b1"] * 5 + ["b0"],
        "wall_id": np.r_[np.zeros(5, int), np.ones(5, int), 2],
        "x": np.r_[xs, xs, X0 + 100.05], "y": np.r_[np.full(5, Y0 + 15.05), np.full(5, Y0 + 34.95), Y0 + 7.5],
        "z_m": np.r_[np.full(10, 6.0), 4.5], "normal_az_deg": np.r_[np.zeros(5), np.full(5, 180.0), 90.0],
        "wall_free_m": np.r_[np.full(10, 8.0), 0.4], "source": ["generated"] * 10 + ["given"],
    })
    sizes = pd.DataFrame({"size_id": ["S", "L"], "width_m": [0.3, 0.6], "height_m": [0.3, 0.6],
                          "cost": [100.0, 300.0], "install_cost": [50.0, 100.0]})
    opt_site = np.repeat(np.arange(11), 2)
    opt_size = np.tile(["S", "L"], 11)
    options = pd.DataFrame({"option_id": np.arange(22), "site_id": opt_site, "size_id": opt_size,
                            "cost": np.tile([150.0, 400.0], 11)})
    ux, uy = np.meshgrid(X0 + np.arange(5.0, 100.0, 10.0), [Y0 + 20.0, Y0 + 30.0])
    n_street = ux.size
    hx = X0 + np.arange(10.0, 100.0, 20.0)
    users = pd.DataFrame({
        "user_id": np.arange(n_street + 5 + 3),
        "x": np.r_[ux.ravel(), hx, X0 + 110.0, X0 + 115.0, X0 + 120.0],
        "y": np.r_[uy.ravel(), np.full(5, Y0 - 0.5), Y0 + 5.0, Y0 + 10.0, Y0 + 15.0],
        "z_m": np.r_[np.full(n_street, 1.5), np.full(5, 4.0), np.full(3, 1.5)],
        "weight": np.r_[rng.integers(1, 5, n_street).astype(float), np.full(5, 3.0), np.full(3, 2.0)],
        "kind": ["street"] * n_street + ["home"] * 5 + ["given"] * 3,
        "building_idx": np.r_[np.full(n_street, -1), np.zeros(5, int), np.full(3, -1)],
        "normal_az_deg": np.r_[np.full(n_street, np.nan), np.full(5, 180.0), np.full(3, np.nan)],
    })
    n_users = len(users)
    base_stations = pd.DataFrame({
        "bs_id": ["BS-west", "BS-north"], "x": [X0 - 30.0, X0 + 50.0], "y": [Y0 + 25.0, Y0 + 80.0],
        "z_m": [10.0, 12.0], "tx_power_dbm": [30.0, 30.0], "max_gain_dbi": [20.0, 20.0],
        "azimuth_deg": [90.0, 180.0], "downtilt_deg": [5.0, 5.0], "pattern": ["sector", "sector"]})
    snr_direct = rng.uniform(-15.0, 25.0, n_users)
    snr_direct[rng.random(n_users) < 0.15] = -np.inf
    direct = pd.DataFrame({"user_id": np.arange(n_users), "snr_db": snr_direct,
                           "bs_idx": np.where(np.isfinite(snr_direct), rng.integers(0, 2, n_users), -1),
                           "los": rng.random(n_users) < 0.5, "covered": snr_direct >= TARGET_DB})
    rows = []
    for site in range(11):
        reach = np.flatnonzero(rng.random(n_users) < 0.35)
        base = np.where(np.isfinite(snr_direct[reach]), snr_direct[reach], -20.0) + rng.uniform(0.5, 18.0, reach.size)
        for k, extra in ((0, 0.0), (1, 6.0)):  # the large panel: 4x area; far-field gain ~ area^2: +12 dB (common practice)
            rows.append(pd.DataFrame({"option_id": 2 * site + k, "user_id": reach, "snr_db": base + extra,
                                      "bs_idx": site % 2}))
    coverage = pd.concat(rows, ignore_index=True)
    weight = users["weight"].to_numpy()
    cov_sets = {}
    for o, g in coverage[coverage["snr_db"] >= TARGET_DB].groupby("option_id"):
        cov_sets[int(o)] = {int(u) for u in g["user_id"] if not direct["covered"][u]}
    chosen, _, spent = _greedy(options, cov_sets, weight, budget, max_panels)
    covered, cum, rank_rows = set(), 0.0, []
    for r, o in enumerate(chosen, start=1):
        gain = sum(weight[u] for u in cov_sets[o] - covered)
        covered |= cov_sets[o]
        cum += gain
        rank_rows.append({"option": o, "rank": r, "marginal_weight": gain, "cumulative_weight": cum,
                          "exclusive_weight": 0.0, "shared_weight": 0.0})
    ranking = pd.DataFrame(rank_rows, columns=["option", "rank", "marginal_weight", "cumulative_weight",
                                               "exclusive_weight", "shared_weight"])
    chosen_sites = set(options["site_id"][chosen])
    spare = [int(o) for o in options["option_id"] if options["site_id"][o] not in chosen_sites and o % 2 == 0]
    backups = pd.DataFrame([{"option": o, "backup_rank": j + 1, "backup_option": spare[(i + j) % len(spare)],
                             "recovered_weight": 1.5 * (2 - j)}
                            for i, o in enumerate(chosen) for j in range(2)],
                           columns=["option", "backup_rank", "backup_option", "recovered_weight"])
    new_w = sum(weight[u] for u in covered)
    plan = SimpleNamespace(chosen=list(chosen), objective=new_w, bound=new_w * 1.02, gap=0.0196, status="Optimal",
                           solver="HiGHS", cost=spent, message="", greedy_objective=new_w,
                           timings_s={"solve": 0.01}, model_size={"variables": 40, "constraints": 30})
    sweep = pd.DataFrame({"budget": sorted({0.0, 150.0, 400.0, 900.0, 1500.0} | ({budget} if budget else set()))})
    cw, bw = [], []
    for bgt in sweep["budget"]:
        _, cv, _ = _greedy(options, cov_sets, weight, bgt, None)
        cw.append(sum(weight[u] for u in cv))  # the optimiser's convention: surface-covered weight only
        bw.append(cw[-1] * 1.03)
    sweep = sweep.assign(covered_weight=cw, bound=bw, gap=0.03, cost=sweep["budget"], n_sites=0, status="Optimal")
    fields = dict(
        crs=pyproj.CRS(canonical.CRS), buildings=buildings, base_stations=base_stations, sites=sites, sizes=sizes,
        users=users, options=options, coverage=coverage, direct=direct, plan=plan, ranking=ranking,
        backups=backups, sweep=sweep, snr_target_db=TARGET_DB, budget=budget, max_panels=max_panels,
        params={"radio": {"frequency_ghz": 28.0, "snr_target_db": TARGET_DB, "bandwidth_hz": 4e8},
                "surfaces": {"element_pitch_wavelengths": 0.5}, "optimize": {"budget": budget}},
        element_pitch_m=299_792_458.0 / 28e9 / 2,  # half a wavelength at 28 GHz (c exact, SI definition)
        run_info={"input_hashes": {"buildings.geojson": "9f" * 32}, "timings_s": {"visibility": 1.25, "gains": 0.5},
                  "visibility": {"mean_degree": 3.5}, "notes": ["synthetic test district"]},
    )
    fields.update(kw)
    return OutputBundle(**fields)


@pytest.fixture(scope="module")
def bundle():
    return make_bundle()


@pytest.fixture(scope="module")
def out(tmp_path_factory, bundle):
    d = tmp_path_factory.mktemp("plan")
    bundle.formats = ("geojson", "gpkg")
    bundle.include_candidates = True
    files = write_outputs(d, bundle)
    return d, files


def _brute_force(b):
    """Per-user state after the plan, straight from the rules in the issue, one user at a time."""
    chosen = list(b.plan.chosen)
    rank = {o: i + 1 for i, o in enumerate(chosen)}
    direct = {int(r.user_id): r for r in b.direct.itertuples()}
    res = {}
    for u in b.users.itertuples():
        rows = [r for r in b.coverage.itertuples() if r.user_id == u.user_id and r.option_id in rank]
        d = direct[u.user_id]
        best = max(rows, key=lambda r: (r.snr_db, -rank[r.option_id])) if rows else None
        served = best is not None and best.snr_db >= d.snr_db
        after = bool(d.covered) or (best is not None and best.snr_db >= b.snr_target_db)
        res[u.user_id] = {
            "snr_plan_db": best.snr_db if served else d.snr_db,
            "covered_after": after, "newly_covered": after and not d.covered,
            "serving_site_id": int(b.options.site_id[best.option_id]) if served else -1,
            "covers": {o for o in chosen for r in rows if r.option_id == o and r.snr_db >= b.snr_target_db}
            if not d.covered else set(),
        }
    return res


# ------------------------------------------------------------------------------------------ derived figures

def test_per_user_state_matches_brute_force(bundle):
    fig = derive(bundle)
    ref = _brute_force(bundle)
    u = fig.users.set_index("user_id")
    for uid, r in ref.items():
        assert u.at[uid, "covered_after"] == r["covered_after"], uid
        assert u.at[uid, "newly_covered"] == r["newly_covered"], uid
        assert u.at[uid, "serving_site_id"] == r["serving_site_id"], uid
        assert u.at[uid, "snr_plan_db"] == pytest.approx(r["snr_plan_db"]) or (
            math.isinf(r["snr_plan_db"]) and math.isinf(u.at[uid, "snr_plan_db"]))
    assert fig.summary["n_users_newly_covered"] == sum(r["newly_covered"] for r in ref.values())
    assert fig.summary["n_sites_chosen"] > 1  # the synthetic plan is not trivial


def test_site_weights_match_brute_force(bundle):
    fig = derive(bundle)
    ref = _brute_force(bundle)
    w = bundle.users.set_index("user_id")["weight"]
    direct_w = sum(w[u] for u in w.index if bundle.direct.covered[u])
    seen, cum = set(), direct_w
    for s in fig.sites.itertuples():
        mine = {u for u, r in ref.items() if s.option_id in r["covers"]}
        others = {u for u, r in ref.items() if r["covers"] - {s.option_id}}
        assert s.exclusive_weight == pytest.approx(sum(w[u] for u in mine - others))
        assert s.shared_weight == pytest.approx(sum(w[u] for u in mine & others))
        assert s.weight_gained == pytest.approx(sum(w[u] for u in mine - seen))
        seen |= mine
        cum += s.weight_gained
        assert s.cumulative_covered_weight == pytest.approx(cum)
    # the last cumulative weight is the covered weight after the plan
    assert fig.sites["cumulative_covered_weight"].iloc[-1] == pytest.approx(fig.summary["covered_weight_after"])
    # the test plan's own ranking (built by set arithmetic in make_bundle) agrees on the marginal weights
    np.testing.assert_allclose(fig.sites["weight_gained"], bundle.ranking["marginal_weight"])


@pytest.mark.parametrize("az, name", [
    # the 16-point compass rose: points every 22.5 deg, each spanning +-11.25 deg (common practice)
    (0.0, "N"), (11.2, "N"), (11.25, "NNE"), (22.5, "NNE"), (45.0, "NE"), (67.5, "ENE"), (90.0, "E"),
    (112.5, "ESE"), (135.0, "SE"), (157.5, "SSE"), (180.0, "S"), (202.5, "SSW"), (225.0, "SW"), (247.5, "WSW"),
    (270.0, "W"), (292.5, "WNW"), (315.0, "NW"), (337.5, "NNW"), (348.74, "NNW"), (348.75, "N"), (359.9, "N"),
    (-90.0, "W"), (450.0, "E"),
])
def test_compass_points(az, name):
    assert compass_point(az) == name


def test_element_count_at_configured_pitch():
    # 28 GHz: lambda = c / f = 0.0107069 m (c = 299 792 458 m/s, SI definition); pitch 0.5 lambda = 5.35345 mm
    from siting.radio import element_pitch_m

    pitch = element_pitch_m(28e9, 0.5)
    assert pitch == pytest.approx(0.0107069 / 2, rel=1e-5)
    # floor(0.3 / 0.00535345) = floor(56.04) = 56 per side; floor(0.6 / p) = floor(112.08) = 112
    assert element_count(0.3, 0.3, pitch) == 56 * 56
    assert element_count(0.6, 0.3, pitch) == 112 * 56
    # exact multiples must not lose a row to rounding: 0.3 m at 0.01 m pitch is 30 elements
    assert element_count(0.3, 0.7, 0.01) == 30 * 70


# ------------------------------------------------------------------------------------------ layers

def _all_coords(geom):
    c = geom["coordinates"]
    return [c] if geom["type"] == "Point" else list(c)


def test_geojson_is_rfc7946(out, bundle):
    d, files = out
    to_ll = pyproj.Transformer.from_crs(bundle.crs, "EPSG:4326", always_xy=True)
    for name in ("surfaces", "surface_walls", "demand", "links", "candidates"):
        raw = json.loads((d / f"{name}.geojson").read_text(encoding="utf-8"))
        assert raw["type"] == "FeatureCollection" and "crs" not in raw  # RFC 7946 section 4: WGS84 implied
        for f in raw["features"]:
            for lon, lat in _all_coords(f["geometry"]):
                assert -180 <= lon <= 180 and -90 <= lat <= 90
                assert round(lon, 7) == lon and round(lat, 7) == lat  # at most 7 decimals
        g = gpd.read_file(d / f"{name}.geojson")
        assert g.crs.to_epsg() == 4326
        assert len(g) == len(raw["features"])
    # lon/lat order: the surfaces are where pyproj puts the projected spots
    g = gpd.read_file(d / "surfaces.geojson")
    fig = derive(bundle)
    s = bundle.sites.set_index("site_id").loc[g["site_id"]]
    lon, lat = to_ll.transform(s["x"].to_numpy(), s["y"].to_numpy())
    np.testing.assert_allclose(g.geometry.x, lon, atol=1e-7)
    np.testing.assert_allclose(g.geometry.y, lat, atol=1e-7)
    assert 14.9 < g.geometry.x.min() and g.geometry.y.min() > 52.0  # EPSG:32633 at (500 km, 5800 km): ~15 E, 52.3 N
    assert list(g["rank"]) == list(range(1, len(fig.sites) + 1))
    assert len(gpd.read_file(d / "demand.geojson")) == len(bundle.users)
    assert len(gpd.read_file(d / "candidates.geojson")) == len(bundle.sites)


def test_wall_lines_show_panel_width(out, bundle):
    d, _ = out
    walls = gpd.read_file(d / "surface_walls.geojson").to_crs(bundle.crs)  # back to metres with pyproj
    s = bundle.sites.set_index("site_id").loc[walls["site_id"]]
    np.testing.assert_allclose(walls.length, walls["width_m"], atol=0.02)
    mid = walls.geometry.interpolate(0.5, normalized=True)
    np.testing.assert_allclose(mid.x, s["x"], atol=0.02)
    np.testing.assert_allclose(mid.y, s["y"], atol=0.02)
    # the line runs along the wall: perpendicular to the outward normal
    for geom, az in zip(walls.geometry, s["normal_az_deg"]):
        (x1, y1), (x2, y2) = geom.coords
        normal = np.array([math.sin(math.radians(az)), math.cos(math.radians(az))])
        assert abs(np.dot([x2 - x1, y2 - y1], normal)) < 0.01


def test_links_run_bs_surface_user(out, bundle):
    d, _ = out
    links = gpd.read_file(d / "links.geojson").to_crs(bundle.crs)
    assert len(links)
    bs = bundle.base_stations.set_index("bs_id")
    for r in links.itertuples():
        pts = list(r.geometry.coords)
        assert len(pts) == 3
        np.testing.assert_allclose(pts[0], bs.loc[r.bs_id, ["x", "y"]].to_numpy(float), atol=0.02)
        np.testing.assert_allclose(pts[1], bundle.sites.loc[r.site_id, ["x", "y"]].to_numpy(float), atol=0.02)
        np.testing.assert_allclose(pts[2], bundle.users.loc[r.user_id, ["x", "y"]].to_numpy(float), atol=0.02)


def test_geopackage_layers(out, bundle):
    d, _ = out
    listed = {name: gtype for name, gtype in pyogrio.list_layers(d / "plan.gpkg")}
    assert listed == {"surfaces": "Point", "surface_walls": "LineString", "demand": "Point",
                      "links": "LineString", "candidates": "Point"}
    g = pyogrio.read_dataframe(d / "plan.gpkg", layer="surfaces")
    gj = gpd.read_file(d / "surfaces.geojson")
    assert list(g["site_id"]) == list(gj["site_id"])
    np.testing.assert_allclose(g.geometry.x, gj.geometry.x, atol=1e-9)


# ------------------------------------------------------------------------------------------ survey

def test_survey_csv_round_trip(out, bundle):
    d, _ = out
    csv = pd.read_csv(d / "survey.csv", encoding="utf-8", keep_default_na=False, na_values=[""])
    gj = gpd.read_file(d / "surfaces.geojson")
    chosen = list(bundle.plan.chosen)
    assert list(csv["rank"]) == list(range(1, len(chosen) + 1))
    assert list(csv["site_id"]) == [int(bundle.options.site_id[o]) for o in chosen]
    np.testing.assert_allclose(csv["lon"], gj.geometry.x, atol=1e-7)
    np.testing.assert_allclose(csv["lat"], gj.geometry.y, atol=1e-7)
    assert "addr:postcode" in csv.columns and set(csv["addr:postcode"].astype(str)) <= {"10115", "10117"}
    for c in ("building_id", "facing", "facing_deg", "mount_height_m", "size_id", "elements", "cost",
              "weight_gained", "cumulative_covered_weight", "serving_bs_id", "backup_1_site_id", "backup_1_lon",
              "backup_2_lat", "notes"):
        assert c in csv.columns, c
    # backups: the spots named in the bundle, with the lon/lat pyproj gives them
    to_ll = pyproj.Transformer.from_crs(bundle.crs, "EPSG:4326", always_xy=True)
    for r in csv.itertuples():
        opt = chosen[r.rank - 1]
        b1 = bundle.backups[(bundle.backups.option == opt) & (bundle.backups.backup_rank == 1)].backup_option.iloc[0]
        site = bundle.options.site_id[b1]
        assert r.backup_1_site_id == site
        lon, lat = to_ll.transform(bundle.sites.x[site], bundle.sites.y[site])
        assert r.backup_1_lon == pytest.approx(lon, abs=1e-7) and r.backup_1_lat == pytest.approx(lat, abs=1e-7)
    # cost column equals the options' cost, total equals the plan's cost in run.json
    run = json.loads((d / "run.json").read_text())
    assert csv["cost"].sum() == pytest.approx(run["summary"]["plan_cost"])


# ------------------------------------------------------------------------------------------ report

def _html_key_figures(text):
    return dict(re.findall(r'data-key="([a-z_]+)">([^<]*)<', text))


def _number(s):
    m = re.search(r"-?\d+(?:\.\d+)?", s)
    return float(m.group()) if m else None


def _close(shown: str, value, kind):
    """A shown figure equals the value up to the rounding its format implies."""
    if kind == "text":
        return shown == (value or "n/a")
    if value is None:
        return shown == "n/a"
    x = _number(shown)
    if kind == "share":
        return abs(x - 100 * value) <= 0.05 + 1e-9
    if kind == "int":
        return x == value
    return abs(x - value) <= 0.5 * 10.0 ** -report_mod.DECIMALS[kind] + 1e-9


def test_report_numbers_equal_run_json_and_layers(out):
    d, _ = out
    run = json.loads((d / "run.json").read_text())
    s = run["summary"]
    html_figs = _html_key_figures((d / "report.html").read_text(encoding="utf-8"))
    md = (d / "report.md").read_text(encoding="utf-8")
    for key, label, kind in report_mod.KEY_FIGURES:
        assert _close(html_figs[key], s[key], kind), (key, html_figs[key], s[key])
        m = re.search(r"^\| " + re.escape(label) + r" \| ([^|]*) \|$", md, re.M)
        assert m and m.group(1).strip() == html_figs[key], key
    # layers: covered weight and counts straight from the GeoJSON
    dem = gpd.read_file(d / "demand.geojson")
    assert dem.loc[dem["covered_after"], "weight"].sum() == pytest.approx(s["covered_weight_after"])
    assert dem.loc[dem["covered_before"], "weight"].sum() == pytest.approx(s["covered_weight_before"])
    assert dem.loc[dem["newly_covered"], "weight"].sum() == pytest.approx(s["newly_covered_weight"])
    surf = gpd.read_file(d / "surfaces.geojson")
    assert len(surf) == s["n_sites_chosen"] == len(run["sites"])
    assert surf["cost"].sum() == pytest.approx(s["plan_cost"])
    # the ranked-site table of the report lists the same sites as the survey list, in the same order
    table = re.search(r'<table id="sites">(.*?)</table>', (d / "report.html").read_text(encoding="utf-8"), re.S).group(1)
    shown_sites = [int(m) for m in re.findall(r"<tr><td[^>]*>\d+</td><td[^>]*>(\d+)</td>", table)]
    csv = pd.read_csv(d / "survey.csv")
    assert shown_sites == list(csv["site_id"])
    # coverage by kind: rows add up to the totals
    kinds = pd.DataFrame(run["coverage_by_kind"])
    assert kinds["covered_weight_after"].sum() == pytest.approx(s["covered_weight_after"])
    assert set(kinds["kind"]) == {"street", "home", "given"}


def test_report_is_self_contained(out):
    d, _ = out
    for name in ("report.html", "survey.html"):
        text = (d / name).read_text(encoding="utf-8")
        assert not re.search(r"(src|href)\s*=\s*\"(?!data:|#)", text), name  # nothing fetched, not even locally
        assert "<script" not in text and "<link" not in text and "@import" not in text
        srcs = re.findall(r'<img [^>]*src="data:image/png;base64,([^"]+)"', text)
        assert srcs and len(srcs) == text.count("<img ")
        for b64 in srcs:  # every image is a PNG matplotlib can decode
            img = matplotlib.image.imread(io.BytesIO(base64.b64decode(b64)), format="png")
            assert img.shape[0] > 50 and img.shape[1] > 50
    text = (d / "report.html").read_text(encoding="utf-8")
    for phrase in ("exposure", "height", "structural", "permit", "local codes"):
        assert phrase in text.lower(), phrase


def test_markdown_figures_exist(out):
    d, _ = out
    md = (d / "report.md").read_text(encoding="utf-8")
    paths = re.findall(r"!\[[^\]]*\]\(([^)]+)\)", md)
    assert {"figures/district_map.png", "figures/coverage_curve.png", "figures/snr_cdf.png"} == set(paths)
    for p in paths:
        assert (d / p).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.skipif(find_chromium() is None, reason="no Chromium installed (CI installs the Debian 'chromium' package)")
@pytest.mark.parametrize("page", ["report.html", "survey.html"])
def test_pages_open_in_headless_chromium(out, page):
    d, _ = out
    res = check_page(d / page)
    assert res["images"], "no images found"
    for img in res["images"]:
        assert img["complete"] and img["decoded"] and img["bottom_painted"] is True and img["w"] > 0, img
    assert res["errors"] == [] and res["console_errors"] == []


def test_run_json_contents(out, bundle):
    d, files = out
    run = json.loads((d / "run.json").read_text())
    for pkg in ("numpy", "scipy", "shapely", "geopandas", "pyproj", "pulp", "highspy", "numba", "siting"):
        assert run["versions"][pkg] == importlib.metadata.version(pkg)
    assert run["input_hashes"] == bundle.run_info["input_hashes"]
    assert run["timings_s"]["visibility"] == 1.25 and "outputs.layers" in run["timings_s"]
    assert run["parameters"]["surfaces"]["element_pitch_wavelengths"] == 0.5
    assert run["plan"]["chosen_option_ids"] == list(bundle.plan.chosen)
    assert "synthetic test district" in run["notes"]
    assert len(run["sweep"]) == len(bundle.sweep)
    # every file listed exists, and run.json is the newest (written last)
    paths = [d / p for p in run["files"].values()]
    assert all(p.exists() for p in paths)
    assert max(p.stat().st_mtime_ns for p in paths) == (d / "run.json").stat().st_mtime_ns
    assert set(files) >= {"surfaces_geojson", "gpkg", "survey_csv", "survey_html", "report_html", "report_md", "run_json"}
    assert atomic.leftover_temp_files(d) == []


# ------------------------------------------------------------------------------------------ empty plan

def test_budget_below_cheapest_gives_empty_plan_and_says_so(tmp_path):
    b = make_bundle(budget=120.0)  # cheapest option costs 150
    assert b.plan.chosen == []
    write_outputs(tmp_path, b)
    run = json.loads((tmp_path / "run.json").read_text())
    s = run["summary"]
    assert s["empty_plan"] and s["n_sites_chosen"] == 0 and s["plan_cost"] == 0.0
    assert s["covered_weight_after"] == pytest.approx(s["covered_weight_before"])
    assert "below the cheapest option" in s["empty_plan_reason"] and "150.00" in s["empty_plan_reason"]
    for name in ("report.html", "report.md", "survey.html"):
        assert "below the cheapest option" in (tmp_path / name).read_text(encoding="utf-8"), name
    assert len(gpd.read_file(tmp_path / "surfaces.geojson")) == 0
    csv = pd.read_csv(tmp_path / "survey.csv")
    assert len(csv) == 0 and "site_id" in csv.columns


# ------------------------------------------------------------------------------------------ atomic writes

def _half_then_fail(real):
    def broken(fc, fh):
        buf = io.StringIO()
        real(fc, buf)
        fh.write(buf.getvalue()[: len(buf.getvalue()) // 2])
        fh.flush()
        raise OSError("disk full (injected)")
    return broken


def test_failed_write_keeps_previous_file(tmp_path, monkeypatch):
    write_outputs(tmp_path, make_bundle(random_state=3))
    before = {p.name: p.read_bytes() for p in tmp_path.glob("*.geojson")}
    monkeypatch.setattr(layers, "_dump_geojson", _half_then_fail(layers._dump_geojson))
    with pytest.raises(SitingError, match="injected"):
        write_outputs(tmp_path, make_bundle(random_state=4))
    after = {p.name: p.read_bytes() for p in tmp_path.glob("*.geojson")}
    assert after == before  # previous complete files, none truncated
    for p in tmp_path.glob("*.geojson"):
        json.loads(p.read_text())
    assert atomic.leftover_temp_files(tmp_path) == []


def test_failed_first_write_leaves_no_file(tmp_path, monkeypatch):
    monkeypatch.setattr(layers, "_dump_geojson", _half_then_fail(layers._dump_geojson))
    with pytest.raises(SitingError, match="injected"):
        write_outputs(tmp_path, make_bundle())
    assert list(tmp_path.glob("*.geojson")) == [] and not (tmp_path / "run.json").exists()
    assert atomic.leftover_temp_files(tmp_path) == []


def test_failed_geopackage_write_keeps_previous(tmp_path, monkeypatch):
    b = make_bundle(formats=("gpkg",))
    write_outputs(tmp_path, b)
    before = (tmp_path / "plan.gpkg").read_bytes()
    real = pyogrio.write_dataframe
    calls = []

    def broken(df, path, **kw):
        real(df, path, **kw)  # first layer lands in the temporary file, then the "disk" fails
        calls.append(path)
        if len(calls) == 2:
            raise OSError("disk full (injected)")

    monkeypatch.setattr(pyogrio, "write_dataframe", broken)
    with pytest.raises(SitingError, match="injected"):
        write_outputs(tmp_path, make_bundle(random_state=11, formats=("gpkg",)))
    assert (tmp_path / "plan.gpkg").read_bytes() == before
    assert Path(calls[0]).parent.parent == tmp_path and Path(calls[0]).name != "plan.gpkg"  # in the staging folder
    assert atomic.leftover_temp_files(tmp_path) == []


def test_atomic_write_text_failure(tmp_path):
    target = tmp_path / "a.txt"
    atomic.write_text(target, "complete\n")

    def writer(fh):
        fh.write("parti")
        raise KeyboardInterrupt  # even an interrupt leaves the old file
    with pytest.raises(KeyboardInterrupt):
        atomic.write_with(target, writer)
    assert target.read_text() == "complete\n"
    assert atomic.leftover_temp_files(tmp_path) == []


# ------------------------------------------------------------------------------------------ bad input

def _bad(**kw):
    return make_bundle(**kw)


@pytest.mark.parametrize("mutate, match", [
    (lambda b: setattr(b, "crs", pyproj.CRS("EPSG:4326")), "projected CRS"),
    (lambda b: setattr(b, "crs", "not a crs"), "CRS pyproj understands"),
    (lambda b: setattr(b.plan, "chosen", [999]), "plan.chosen holds option ids"),
    (lambda b: setattr(b.plan, "chosen", [0, 0]), "lists an option twice"),
    (lambda b: setattr(b.plan, "chosen", [0, 1]), "two sizes on one site"),
    (lambda b: setattr(b, "formats", ("geojson", "shp")), "output formats"),
    (lambda b: setattr(b, "users", b.users.drop(columns=["weight"])), "missing column 'weight'"),
    (lambda b: setattr(b, "users", b.users.assign(weight=-1.0)), "negative"),
    (lambda b: setattr(b, "coverage", b.coverage.assign(user_id=b.coverage.user_id + 1000)), "user ids outside"),
    (lambda b: setattr(b, "coverage", b.coverage.assign(option_id=b.coverage.option_id + 1000)), "option ids outside"),
    (lambda b: setattr(b, "options", b.options.assign(site_id=b.options.site_id + 50)), "site ids outside"),
    (lambda b: setattr(b, "options", b.options.assign(size_id="XL")), "catalogue lacks"),
    (lambda b: setattr(b, "direct", pd.concat([b.direct, b.direct.iloc[:1]])), "more than one row"),
    (lambda b: setattr(b, "sites", b.sites.iloc[::-1].reset_index(drop=True)), "row position"),
    (lambda b: setattr(b, "snr_target_db", float("nan")), "finite snr_target_db"),
])
def test_bad_bundle_is_rejected_before_writing(tmp_path, mutate, match):
    b = make_bundle()
    mutate(b)
    out_dir = tmp_path / "out"
    with pytest.raises(SitingError, match=match):
        write_outputs(out_dir, b)
    assert not out_dir.exists()  # nothing written, not even the folder


def test_unwritable_output_folder(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    with pytest.raises(SitingError, match="writable folder"):
        write_outputs(blocker / "out", make_bundle())


# ------------------------------------------------------------------------------------------ smaller cases

def test_files_get_ordinary_permissions(out):
    d, files = out
    import os
    umask = os.umask(0)
    os.umask(umask)
    for p in files.values():  # like any file the user creates: 0o666 & ~umask (common practice)
        assert Path(p).stat().st_mode & 0o777 == 0o666 & ~umask, p


def test_no_sweep_numpy_chosen_and_unknown_snr(tmp_path):
    b = make_bundle(random_state=5, sweep=None)
    b.plan.chosen = np.asarray(b.plan.chosen, dtype=np.int64)  # an array is as good as a list
    write_outputs(tmp_path, b)
    html_text = (tmp_path / "report.html").read_text(encoding="utf-8")
    assert "No budget sweep was run" in html_text
    assert not (tmp_path / "figures" / "coverage_curve.png").exists()
    # users with no base station in range (-inf dB) have a null SNR in GeoJSON, which has no infinity
    raw = json.loads((tmp_path / "demand.geojson").read_text())
    no_signal = set(np.flatnonzero(~np.isfinite(b.direct["snr_db"].to_numpy())))
    assert no_signal
    for f in raw["features"]:
        if f["properties"]["user_id"] in no_signal:
            assert f["properties"]["snr_direct_db"] is None
        if f["properties"]["serving_rank"] == 0:
            assert f["properties"]["serving_site_id"] is None


def test_ranking_order_wins_over_plan_order(tmp_path):
    b = make_bundle()
    assert len(b.plan.chosen) >= 2
    b.plan.chosen = list(reversed(b.plan.chosen))  # the ranking table still holds the real order
    fig = derive(b)
    assert list(fig.sites["option_id"]) == list(b.ranking.sort_values("rank")["option"])


def test_load_cap_counts_only_the_plans_covered_users(tmp_path):
    b = make_bundle()
    fig0 = derive(b)
    newly = fig0.users["newly_covered"].to_numpy()
    drop = np.flatnonzero(newly)[:3]  # pretend the cap left three reachable users out
    covered = newly.copy()
    covered[drop] = False
    b.plan.covered = covered
    b.load_cap_weight = 10.0
    fig = derive(b)
    w = b.users["weight"].to_numpy()
    assert fig.summary["newly_covered_weight"] == pytest.approx(fig0.summary["newly_covered_weight"] - w[drop].sum())
    assert not fig.users["covered_after"].to_numpy()[drop].any()
    assert (fig.users["serving_site_id"].to_numpy()[drop] == -1).all()
    assert fig.sites["cumulative_covered_weight"].iloc[-1] == pytest.approx(fig.summary["covered_weight_after"])
    assert any("load cap" in n for n in fig.notes)
    # without a cap, plan.covered is not consulted
    b.load_cap_weight = 0.0
    assert derive(b).summary["newly_covered_weight"] == pytest.approx(fig0.summary["newly_covered_weight"])


def test_sweep_table_adds_direct_coverage(out, bundle):
    d, _ = out
    run = json.loads((d / "run.json").read_text())
    s = run["summary"]
    table = re.search(r'<table id="sweep">(.*?)</table>', (d / "report.html").read_text(encoding="utf-8"), re.S).group(1)
    rows = re.findall(r"<tr>(.*?)</tr>", table)[1:]
    assert len(rows) == len(bundle.sweep)
    for r, sw in zip(rows, bundle.sweep.sort_values("budget").itertuples()):
        cells = re.findall(r"<td[^>]*>([^<]*)</td>", r)
        assert float(cells[0]) == pytest.approx(sw.budget)
        # optimiser's sweep weight counts surface-covered demand only; the share adds the direct coverage
        assert _close(cells[2], (s["covered_weight_before"] + sw.covered_weight) / s["total_weight"], "share")
    # the plan's own budget appears in the sweep with the plan's coverage (same greedy in make_bundle)
    at_budget = bundle.sweep[bundle.sweep.budget == bundle.budget]
    assert len(at_budget) == 1
    assert at_budget.covered_weight.iloc[0] == pytest.approx(s["newly_covered_weight"])


def test_no_options_and_no_users_still_write_a_complete_set(tmp_path):
    from siting import tables as T

    b = make_bundle(budget=120.0, ranking=None, backups=None, sweep=None)
    b.options, b.coverage = T.empty("options"), T.empty("coverage")
    write_outputs(tmp_path / "a", b)
    assert "no candidate options" in json.loads((tmp_path / "a" / "run.json").read_text())["summary"]["empty_plan_reason"]
    b = make_bundle(budget=120.0)
    b.users, b.direct, b.coverage = b.users.iloc[:0], b.direct.iloc[:0], b.coverage.iloc[:0]
    write_outputs(tmp_path / "b", b)
    assert len(gpd.read_file(tmp_path / "b" / "demand.geojson")) == 0
    assert json.loads((tmp_path / "b" / "run.json").read_text())["summary"]["covered_share_after"] == 0.0


def test_unknown_element_pitch_gives_empty_element_counts(tmp_path):
    b = make_bundle(element_pitch_m=None)  # no surfaces.element_pitch_wavelengths
    write_outputs(tmp_path, b)
    raw = json.loads((tmp_path / "surfaces.geojson").read_text())
    assert raw["features"] and all(f["properties"]["elements"] is None for f in raw["features"])
    assert pd.read_csv(tmp_path / "survey.csv")["elements"].isna().all()
    assert any("element counts unknown" in n for n in json.loads((tmp_path / "run.json").read_text())["notes"])
    # a catalogue 'elements' column is used as given
    b = make_bundle(sizes=make_bundle().sizes.assign(elements=[1024, 4096]))
    assert set(derive(b).sites["elements"]) <= {1024, 4096}


@pytest.mark.skipif(find_chromium() is None, reason="no Chromium installed (CI installs the Debian 'chromium' package)")
def test_browser_check_catches_a_broken_image(tmp_path):
    # the check itself can fail: a PNG cut short leaves its bottom rows unpainted, a missing file does not load
    good = base64.b64encode(matplotlib_png()).decode()
    page = tmp_path / "p.html"
    page.write_text(f'<!DOCTYPE html><html><head><meta charset="utf-8"></head><body>'
                    f'<img src="data:image/png;base64,{good}"><img src="data:image/png;base64,{good[:200]}">'
                    f'<img src="missing.png"></body></html>', encoding="utf-8")
    res = check_page(page)
    assert [i["decoded"] and i["bottom_painted"] is True for i in res["images"]] == [True, False, False]
    assert res["images"][0]["w"] > 0 and res["images"][2]["w"] == 0
    assert res["errors"] or res["console_errors"]


def matplotlib_png() -> bytes:
    from matplotlib.figure import Figure

    buf = io.BytesIO()
    Figure(figsize=(1, 1)).savefig(buf, format="png")
    return buf.getvalue()


# ------------------------------------------------------------------------------------------ site checks, sensitivity

# ICNIRP 2020 guidelines (Health Physics 118(5), 2020), general public, whole body, 2-300 GHz: 10 W/m^2 (from memory)
ICNIRP_WHOLE_BODY_W_M2 = 10.0
# the three chosen options in rank order get, in turn: a front-lobe feed, a back-lobe feed, a guessed-height feed
CHECK_ROWS = (
    dict(feed_below_peak_db=3.25, back_lobe_feed=False, guessed_height_links=0, exposure_w_m2=0.0125,
         exposure_where="at a served point"),
    dict(feed_below_peak_db=27.5, back_lobe_feed=True, guessed_height_links=2, exposure_w_m2=0.5,
         exposure_where="at the panel (station beam)"),
    dict(feed_below_peak_db=12.0, back_lobe_feed=False, guessed_height_links=1, exposure_w_m2=12.0,
         exposure_where="within 2 m in front of the panel"),
)


def hand_site_checks(b, where=None) -> pd.DataFrame:
    """The runner's site_checks for the test plan, built by hand: the feed is the coverage rows' station
    (site % 2 in make_bundle), plus one row of a not-chosen option that the outputs must ignore."""
    order = list(b.ranking.sort_values("rank")["option"])
    assert len(order) == len(CHECK_ROWS)
    rows = []
    for o, c in zip(order, CHECK_ROWS):
        rows.append({"option_id": o, "feed_bs_idx": int(b.options.site_id[o]) % 2, **c,
                     "exposure_reference_w_m2": ICNIRP_WHOLE_BODY_W_M2,
                     "exposure_share": c["exposure_w_m2"] / ICNIRP_WHOLE_BODY_W_M2})
    if where is not None:
        rows[0]["exposure_where"] = where
    spare = next(o for o in b.options.option_id if o not in order)
    rows.append({**rows[0], "option_id": int(spare), "back_lobe_feed": True, "guessed_height_links": 9})
    df = pd.DataFrame(rows)
    return df.astype({"option_id": "int64", "feed_bs_idx": "int64", "guessed_height_links": "int64"})


def hand_sensitivity(b, model=None) -> pd.DataFrame:
    """Sensitivity rows by hand: the planning model equals the plan's covered weight (no load cap in the bundle)."""
    fig = derive(b)
    w, d = fig.summary["covered_weight_after"], fig.summary["covered_weight_before"]
    rows = [("planning model", w, d), ("with coherent combining", w + 3.0, d + 1.0),
            ("with per-user focusing", w + 1.5, d), ("with bare-ray line of sight", w - 0.5, d),
            ("upper bound (all of the above)", w + 10.0, d + 5.0)]
    if model is not None:
        rows[1] = (model, w + 3.0, d + 1.0)
    return pd.DataFrame(rows, columns=["model", "covered_weight", "covered_directly_weight"])


def checked_bundle(**kw):
    b = make_bundle(**kw)
    b.site_checks, b.sensitivity = hand_site_checks(b), hand_sensitivity(b)
    return b


@pytest.fixture(scope="module")
def checked_out(tmp_path_factory):
    d = tmp_path_factory.mktemp("checked")
    b = checked_bundle(params={"radio": {"frequency_ghz": 28.0, "snr_target_db": TARGET_DB, "fresnel_clearance": 0.5,
                                         "coverage_probability": 0.95, "combining": "power"},
                               "surfaces": {"element_pitch_wavelengths": 0.5, "control": "beams", "element_q": 2.0},
                               "inputs": {"height_uncertainty_m": 4.0}})
    write_outputs(d, b)
    return d, b


def test_site_checks_merge_by_option_and_notes(checked_out):
    _, b = checked_out
    fig = derive(b)
    for c in ("feed_bs_id", "feed_below_peak_db", "back_lobe_feed", "guessed_height_links", "exposure_w_m2",
              "exposure_where", "exposure_reference_w_m2", "exposure_share"):
        assert c in fig.sites.columns, c
    s = fig.sites.set_index("option_id")
    sc = b.site_checks.set_index("option_id")
    for o in s.index:  # merged by option id, not by row position
        assert s.at[o, "feed_below_peak_db"] == sc.at[o, "feed_below_peak_db"]
        assert bool(s.at[o, "back_lobe_feed"]) == sc.at[o, "back_lobe_feed"]
        assert s.at[o, "guessed_height_links"] == sc.at[o, "guessed_height_links"]
        assert s.at[o, "exposure_where"] == sc.at[o, "exposure_where"]
        assert s.at[o, "feed_bs_id"] == b.base_stations.bs_id[sc.at[o, "feed_bs_idx"]]
    notes = list(fig.sites["notes"])
    assert notes[0] == ""  # front-lobe feed, no guessed heights
    assert ("fed from the station's back lobe (27.5 dB below boresight): re-aiming the station may serve these "
            "users without a panel") in notes[1]
    assert "2 link(s) depend on guessed building heights: measure those heights" in notes[1]
    assert "1 link(s) depend on guessed building heights" in notes[2] and "back lobe" not in notes[2]
    # the third site's panel is wider than its wall (site 10, 0.4 m free): both notes, joined
    if fig.sites["site_id"].iloc[2] == 10:
        assert notes[2].startswith("panel wider than the free wall length") and "; 1 link(s)" in notes[2]
    assert fig.summary["n_back_lobe_feeds"] == 1 and fig.summary["n_sites_on_guessed_heights"] == 2
    assert fig.summary["max_exposure_share"] == pytest.approx(12.0 / ICNIRP_WHOLE_BODY_W_M2)


def test_survey_lists_site_checks(checked_out):
    d, b = checked_out
    csv = pd.read_csv(d / "survey.csv")
    for c in ("feed_below_peak_db", "guessed_height_links", "exposure_w_m2", "exposure_share"):
        assert c in csv.columns, c
    np.testing.assert_allclose(csv["feed_below_peak_db"], [r["feed_below_peak_db"] for r in CHECK_ROWS])
    assert list(csv["guessed_height_links"]) == [r["guessed_height_links"] for r in CHECK_ROWS]
    np.testing.assert_allclose(csv["exposure_w_m2"], [r["exposure_w_m2"] for r in CHECK_ROWS])
    np.testing.assert_allclose(csv["exposure_share"], [r["exposure_w_m2"] / ICNIRP_WHOLE_BODY_W_M2 for r in CHECK_ROWS])
    assert "back lobe" in csv["notes"].iloc[1]
    text = (d / "survey.html").read_text(encoding="utf-8")
    blocks = re.findall(r'<section class="site" id="site-\d+">(.*?)</section>', text, re.S)
    assert len(blocks) == 3
    assert "<th>feed below station boresight</th><td>27.5 dB (back lobe" in blocks[1]
    assert "<th>links on guessed building heights</th><td>2 (measure those heights)</td>" in blocks[1]
    assert "<th>RF exposure (screening)</th><td>12 W/m\u00b2 within 2 m in front of the panel</td>" in blocks[2]
    assert "<th>share of the reference level</th><td>120.0 % of 10 W/m\u00b2" in blocks[2]
    assert "screening value" in text and "local rules" in text  # the RF caution of the field checks stays


def _section(text, heading):
    m = re.search(r"<h2[^>]*>" + re.escape(heading) + r"</h2>(.*?)(?=<h2)", text, re.S)
    assert m, heading
    return m.group(1)


def test_report_sensitivity_and_exposure_sections(checked_out):
    d, b = checked_out
    text = (d / "report.html").read_text(encoding="utf-8")
    total = float(b.users.weight.sum())
    sens = _section(text, "What the model assumptions are worth")
    assert "planning model is the default" in sens and "upper bound" in sens and "at most deliver" in sens
    rows = [re.findall(r"<td[^>]*>([^<]*)</td>", r) for r in re.findall(r"<tr>(.*?)</tr>", sens)[1:]]
    assert [r[0] for r in rows] == list(b.sensitivity["model"])
    for r, ref in zip(rows, b.sensitivity.itertuples()):
        assert _close(r[1], ref.covered_weight, "weight") and _close(r[2], ref.covered_weight / total, "share")
        assert _close(r[4], ref.covered_directly_weight, "weight")
    assert [r[3] for r in rows] == ["reference", "+3.00", "+1.50", "-0.50", "+10.00"]

    expo = _section(text, "RF exposure screening")
    rows = [re.findall(r"<td[^>]*>([^<]*)</td>", r) for r in re.findall(r"<tr>(.*?)</tr>", expo)[1:]]
    assert [r[3] for r in rows] == [c["exposure_where"] for c in CHECK_ROWS]
    assert [float(r[2]) for r in rows] == [c["exposure_w_m2"] for c in CHECK_ROWS]
    assert [r[5] for r in rows] == ["0.12 %", "5.00 %", "120.00 %"]
    assert "rank 3" in expo and "exceeds the reference level" in expo
    for phrase in ("ICNIRP 2020", "general-public whole-body reference level", "from memory",
                   "local regulation", "licensed practice", "not a compliance assessment"):
        assert phrase in expo, phrase

    checks = _section(text, "Feeds and building heights to check")
    items = re.findall(r"<li>(.*?)</li>", checks)
    assert len(items) == 3  # one back-lobe feed, two sites on guessed heights
    assert "rank 2" in items[0] and "BS-" in items[0] and "27.5 dB below boresight" in items[0]
    assert "2 link(s)" in items[1] and "1 link(s)" in items[2]

    md = (d / "report.md").read_text(encoding="utf-8")
    for heading in ("## What the model assumptions are worth", "## RF exposure screening",
                    "## Feeds and building heights to check"):
        assert heading in md, heading
    assert re.search(r"^\| with coherent combining \| [\d.]+ \| [\d.]+ % \| \+3\.00 \| [\d.]+ \|$", md, re.M)
    assert re.search(r"^\| 3 \| \d+ \| 12 \| within 2 m in front of the panel \| 10 \| 120\.00 % \|$", md, re.M)


def test_assumptions_name_the_jobs_values(checked_out):
    import scipy.stats

    d, _ = checked_out
    text = _section((d / "report.html").read_text(encoding="utf-8"), "Model assumptions")
    assert "leave 0.5 of the first Fresnel zone radius" in text  # radio.fresnel_clearance = 0.5
    assert "probability of 95 %" in text
    # fade margin in standard deviations: the normal quantile at 0.95 (scipy.stats.norm.ppf: 1.6449)
    assert f"{scipy.stats.norm.ppf(0.95):.2f} standard deviations" in text
    assert "3GPP TR 38.901 Table 7.4.1-1" in text and "7.82 dB NLOS" in text  # UMi default
    assert "cos^2(\u03b8)" in text and "finite set of far-field beams" in text
    assert "a beam squints across the channel" in text
    assert "add in power" in text and "never with an NLOS direct path" in text
    assert "\u00b14 m" in text and "aimed at the surface" in text
    # other values change the words: upper-bound choices say so
    words = " ".join(report_mod.assumptions({"radio": {"combining": "coherent", "station_beam": "envelope",
                                                       "shadow_fading": False, "fresnel_clearance": 0.0},
                                             "surfaces": {"control": "focus", "squint": False}}))
    for phrase in ("co-phased so their amplitudes add", "best beam toward it", "No shadow fading",
                   "bare geometric ray", "per-user focusing", "no beam squint"):
        assert phrase in words, phrase


def test_run_json_carries_both_tables(checked_out):
    d, b = checked_out
    run = json.loads((d / "run.json").read_text())
    assert run["site_checks"] == json.loads(b.site_checks.to_json(orient="records"))
    assert run["sensitivity"] == json.loads(b.sensitivity.to_json(orient="records"))
    assert run["summary"]["n_back_lobe_feeds"] == 1
    assert [s["guessed_height_links"] for s in run["sites"]] == [r["guessed_height_links"] for r in CHECK_ROWS]


def test_data_strings_are_escaped(tmp_path):
    evil = "<script>alert(1)</script>"
    b = make_bundle()
    b.site_checks = hand_site_checks(b, where=evil)
    b.sensitivity = hand_sensitivity(b, model="<img src=x onerror=alert(2)> [x](https://example.org)")
    b.buildings = b.buildings.assign(name=["<b>South</b> Row", "<script>x()</script>"])
    write_outputs(tmp_path, b)
    for name in ("report.html", "survey.html", "report.md"):
        text = (tmp_path / name).read_text(encoding="utf-8")
        assert "<script" not in text and "<img src=x" not in text and "<b>South" not in text, name
    assert "](https://example.org)" not in (tmp_path / "report.md").read_text(encoding="utf-8")  # no live link
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in (tmp_path / "report.html").read_text(encoding="utf-8")
    survey = (tmp_path / "survey.html").read_text(encoding="utf-8")
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in survey and "&lt;b&gt;South&lt;/b&gt; Row" in survey
    assert "&lt;img src=x onerror=alert(2)&gt;" in (tmp_path / "report.md").read_text(encoding="utf-8")
    # the data comes back unchanged in the machine-readable record
    assert json.loads((tmp_path / "run.json").read_text())["site_checks"][0]["exposure_where"] == evil


def test_without_checks_the_output_set_is_complete(out, tmp_path):
    d, files = out  # the module bundle has no site_checks / sensitivity
    run = json.loads((d / "run.json").read_text())
    assert run["site_checks"] is None and run["sensitivity"] is None
    assert all(s["exposure_w_m2"] is None and s["back_lobe_feed"] is None for s in run["sites"])
    csv = pd.read_csv(d / "survey.csv")
    for c in ("feed_below_peak_db", "guessed_height_links", "exposure_w_m2", "exposure_share"):
        assert c in csv.columns and csv[c].isna().all(), c
    text = (d / "report.html").read_text(encoding="utf-8")
    assert "No model sensitivity was computed" in text and "No exposure screening was computed" in text
    assert "No site checks were computed" in text and "ICNIRP 2020" in text
    assert "No model sensitivity was computed" in (d / "report.md").read_text(encoding="utf-8")
    # an empty plan with (empty) tables handed over also writes every file
    b = make_bundle(budget=120.0)
    b.site_checks = hand_site_checks(make_bundle()).iloc[:0]
    b.sensitivity = hand_sensitivity(b)
    written = write_outputs(tmp_path, b)
    assert {"survey_csv", "survey_html", "report_html", "report_md", "run_json"} <= set(written)
    assert "What the model assumptions are worth" in (tmp_path / "report.html").read_text(encoding="utf-8")


@pytest.mark.parametrize("mutate, match", [
    (lambda b: setattr(b, "site_checks", b.site_checks.drop(columns=["exposure_share"])), "lacks the column"),
    (lambda b: setattr(b, "site_checks", pd.concat([b.site_checks, b.site_checks.iloc[:1]])), "more than one row"),
    (lambda b: setattr(b, "sensitivity", b.sensitivity.drop(columns=["model"])), "lacks the column"),
    (lambda b: setattr(b, "sensitivity", [1, 2]), "DataFrame or None"),
])
def test_bad_check_tables_are_rejected(tmp_path, mutate, match):
    b = checked_bundle()
    mutate(b)
    with pytest.raises(SitingError, match=match):
        write_outputs(tmp_path / "out", b)
    assert not (tmp_path / "out").exists()


def test_survey_csv_cells_cannot_run_as_formulas(tmp_path):
    # OWASP "CSV Injection": a text cell starting with = + - @ is prefixed with an apostrophe; numbers stay
    b = make_bundle()
    b.buildings = b.buildings.assign(name=["=HYPERLINK(\"http://x\")", "@SUM(A1)"], address=["-2+3", "plain"])
    write_outputs(tmp_path, b)
    csv = pd.read_csv(tmp_path / "survey.csv", keep_default_na=False)
    names = set(csv["name"]) | set(csv["address"])
    assert not any(str(v).startswith(("=", "+", "-", "@")) for v in names)
    assert set(csv["building_id"]) == {"b0", "b1"}  # both buildings carry chosen sites
    assert {"'=HYPERLINK(\"http://x\")", "'@SUM(A1)", "'-2+3", "plain"} == names
    assert pd.api.types.is_float_dtype(csv["lon"]) and (csv["lon"] > 0).all()  # numbers untouched


# ------------------------------------------------------------------------------------------ complete sets

def _snapshot(folder: Path) -> dict:
    """Every file under ``folder`` (relative path -> bytes), hidden files included."""
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def _visible(snap: dict) -> dict:
    return {k: v for k, v in snap.items() if not k.startswith(".")}


def _enospc_after(real, n_ok: int, calls: list):
    """``real`` for the first ``n_ok`` calls, then a full disk (errno ENOSPC) halfway through a file."""
    import errno

    def broken(path, *args, **kw):
        calls.append(Path(path))
        if len(calls) > n_ok:
            Path(path).write_bytes(b"half a file")
            raise OSError(errno.ENOSPC, "No space left on device (injected)")
        return real(path, *args, **kw)
    return broken


@pytest.mark.parametrize("n_ok", [0, 1, 3, 5])
def test_a_failure_while_writing_leaves_the_previous_set(tmp_path, monkeypatch, n_ok):
    """A disk that fills up after n_ok files of the new set: the folder keeps exactly the previous set."""
    write_outputs(tmp_path, make_bundle(random_state=3))
    (tmp_path / "my notes.txt").write_text("the user's own file")
    before = _snapshot(tmp_path)
    calls: list = []
    monkeypatch.setattr(atomic, "write_with", _enospc_after(atomic.write_with, n_ok, calls))
    with pytest.raises(SitingError, match="No space left") as err:
        write_outputs(tmp_path, make_bundle(random_state=4, budget=900.0))
    assert "previous set is left as it was" in str(err.value)
    assert len(calls) == n_ok + 1 and all(p.parts[-2].startswith(atomic.STAGING_PREFIX) or
                                          p.parts[-3].startswith(atomic.STAGING_PREFIX) for p in calls)
    assert _snapshot(tmp_path) == before  # no new file, no staging folder, no temporary file left
    assert atomic.leftover_temp_files(tmp_path) == []


def test_a_failure_in_a_figure_leaves_no_partial_first_set(tmp_path, monkeypatch):
    from siting.outputs import figures as figures_mod

    def broken(*a, **kw):
        raise RuntimeError("figure failed (injected)")
    monkeypatch.setattr(figures_mod, "snr_cdf", broken)
    with pytest.raises(RuntimeError, match="injected"):
        write_outputs(tmp_path / "out", make_bundle())
    assert _snapshot(tmp_path / "out") == {}


def _kill_commit_after(monkeypatch, n_moves: int):
    """Make the commit stop dead (as a SIGKILL would: no clean-up code runs) after ``n_moves`` renames."""
    real = atomic.os.replace
    count = [0]

    class Killed(BaseException):
        pass

    def replace(src, dst):
        if atomic.STAGING_PREFIX in str(src) and atomic.STAGING_PREFIX not in str(dst):  # a move into place
            if count[0] >= n_moves:
                raise Killed()
            count[0] += 1
        return real(src, dst)
    monkeypatch.setattr(atomic.os, "replace", replace)
    return Killed


@pytest.mark.parametrize("n_moves", [0, 2, 6, 11])
def test_a_commit_killed_midway_is_rolled_back_by_the_next_run(tmp_path, monkeypatch, n_moves):
    """Killed while the new set moves into place: no run.json marks the mixed folder complete, and the next
    write into the folder first moves every file back, giving exactly the previous set (never a mix)."""
    old_b, new_b = make_bundle(random_state=3), make_bundle(random_state=4, budget=900.0)
    d = tmp_path / "out"
    write_outputs(d, old_b)
    (d / "my notes.txt").write_text("the user's own file")
    before = _snapshot(d)
    killed = _kill_commit_after(monkeypatch, n_moves)
    with pytest.raises(killed):
        write_outputs(d, new_b)
    monkeypatch.undo()
    assert not (d / "run.json").exists() and (d / atomic.JOURNAL).exists()
    assert sorted(atomic.read_manifest(d)) == sorted(json.loads(before["run.json"])["manifest"]["files"])
    assert atomic.recover(d) is True
    assert _snapshot(d) == before
    assert atomic.leftover_temp_files(d) == [] and not (d / atomic.JOURNAL).exists()
    write_outputs(d, new_b)  # and the next run commits its set
    assert json.loads((d / "run.json").read_text())["manifest"]["complete"] is True


def test_a_kill_before_the_commit_leaves_the_previous_set(tmp_path, monkeypatch):
    d = tmp_path / "out"
    write_outputs(d, make_bundle(random_state=3))
    before = _snapshot(d)

    class Killed(BaseException):
        pass
    monkeypatch.setattr(atomic.OutputSet, "__exit__", lambda *a: None)  # a killed process cleans nothing up
    monkeypatch.setattr(atomic.OutputSet, "commit", lambda self, files: (_ for _ in ()).throw(Killed()))
    with pytest.raises(Killed):
        write_outputs(d, make_bundle(random_state=4))
    monkeypatch.undo()
    assert _visible(_snapshot(d)) == _visible(before)  # only a hidden staging folder was added
    assert atomic.recover(d) is False and _snapshot(d) == before


def test_only_files_of_a_previous_run_are_replaced_or_removed(tmp_path):
    d = tmp_path
    b = make_bundle(formats=("geojson", "gpkg"), include_candidates=True)
    write_outputs(d, b)
    run = json.loads((d / "run.json").read_text())
    man = run["manifest"]
    assert man["complete"] is True and "run.json" in man["files"] and "plan.gpkg" in man["files"]
    assert sorted(man["files"]) == sorted(p.relative_to(d).as_posix() for p in d.rglob("*") if p.is_file())
    (d / "keep.txt").write_text("mine")
    (d / "figures" / "my_photo.png").write_bytes(b"\x89PNG mine")
    # a smaller set: the candidates layer, the GeoPackage and the sweep figure of the previous run go away
    write_outputs(d, make_bundle(budget=900.0, sweep=None))
    assert not (d / "plan.gpkg").exists() and not (d / "candidates.geojson").exists()
    assert not (d / "figures" / "coverage_curve.png").exists()
    assert (d / "keep.txt").read_text() == "mine" and (d / "figures" / "my_photo.png").exists()
    # a tampered record cannot make a run remove a file outside the set's names or outside the folder
    victim_out, victim_in = tmp_path.parent / f"{tmp_path.name}-victim.txt", d / "keep.txt"
    victim_out.write_text("outside")
    run = json.loads((d / "run.json").read_text())
    run["manifest"]["files"] += [f"../{victim_out.name}", "keep.txt", "/etc/hostname"]
    (d / "run.json").write_text(json.dumps(run))
    write_outputs(d, make_bundle())
    assert victim_out.read_text() == "outside" and victim_in.read_text() == "mine"
    victim_out.unlink()


def test_a_users_own_file_of_the_same_name_is_refused_then_allowed(tmp_path):
    (tmp_path / "report.html").write_text("<p>my own report</p>")
    with pytest.raises(SitingError, match=r"no siting run created there: report\.html"):
        write_outputs(tmp_path, make_bundle())
    assert (tmp_path / "report.html").read_text() == "<p>my own report</p>"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report.html"]
    write_outputs(tmp_path, make_bundle(), overwrite=True)
    assert "my own report" not in (tmp_path / "report.html").read_text()


def test_extra_files_join_the_set(tmp_path):
    def graph(path):
        Path(path).write_text("<graphml/>\n")
    files = write_outputs(tmp_path, make_bundle(), extra_files={"los_graph": ("los_graph.graphml", graph)})
    assert files["los_graph"] == tmp_path / "los_graph.graphml" and files["los_graph"].read_text() == "<graphml/>\n"
    assert "los_graph.graphml" in json.loads((tmp_path / "run.json").read_text())["manifest"]["files"]
    write_outputs(tmp_path, make_bundle())  # a rerun without it removes it: it was siting's
    assert not (tmp_path / "los_graph.graphml").exists()


# ------------------------------------------------------------------------------------------ output folder

def test_output_folder_checks_accept_a_fresh_or_own_folder(tmp_path):
    inputs = [tmp_path / "data" / "buildings.geojson"]
    inputs[0].parent.mkdir()
    inputs[0].write_text("{}")
    assert check_output_folder(tmp_path / "out" / "new", inputs) == (tmp_path / "out" / "new").resolve()
    write_outputs(tmp_path / "out", make_bundle())
    (tmp_path / "out" / "unrelated.txt").write_text("x")  # other files do not matter
    assert check_output_folder(tmp_path / "out", inputs) == (tmp_path / "out").resolve()


@pytest.mark.parametrize("case, match", [
    ("input_folder", "is the folder of the input"),
    ("contains_input", "contains the input"),
    ("is_input", "is the input"),
    ("home", "is your home folder"),
    ("root", "is the file-system root"),
    ("file", "is an existing file"),
    ("under_file", "is a file, not a folder"),
    ("users_report", r"no siting run created there and that a run would replace: report\.html, survey\.csv"),
    ("directory_named_like_output", r"would replace: run\.json"),
])
def test_output_folder_checks_refuse(tmp_path, monkeypatch, case, match):
    data = tmp_path / "city" / "data"
    data.mkdir(parents=True)
    inp = data / "buildings.geojson"
    inp.write_text("{}")
    folder = {"input_folder": data, "contains_input": tmp_path / "city", "is_input": inp, "root": Path("/"),
              "file": inp, "under_file": inp / "out"}.get(case, tmp_path / "out")
    if case == "home":
        monkeypatch.setenv("HOME", str(tmp_path / "out"))
        (tmp_path / "out").mkdir()
        folder = Path("~")
    if case == "users_report":
        (tmp_path / "out").mkdir()
        (tmp_path / "out" / "report.html").write_text("mine")
        (tmp_path / "out" / "survey.csv").write_text("mine")
    if case == "directory_named_like_output":
        (tmp_path / "out" / "run.json").mkdir(parents=True)
    with pytest.raises(JobError, match=match) as err:
        check_output_folder(folder, [inp])
    msg = str(err.value)
    assert "output.folder" in msg and ("choose another output.folder" in msg or "set output.folder" in msg
                                       or "--overwrite" in msg), msg
    if case == "users_report":  # --overwrite lifts only this refusal
        check_output_folder(folder, [inp], overwrite=True)


@pytest.mark.skipif(os.geteuid() == 0 if hasattr(os, "geteuid") else True,
                    reason="root may write anywhere, so a read-only folder cannot be simulated")
def test_output_folder_check_refuses_a_read_only_folder(tmp_path):
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o555)
    try:
        with pytest.raises(JobError, match="not writable"):
            check_output_folder(ro, [])
        with pytest.raises(JobError, match="cannot be created"):
            check_output_folder(ro / "sub", [])
    finally:
        ro.chmod(0o755)


def test_output_folder_check_refuses_what_os_access_denies(tmp_path, monkeypatch):
    """The permission rule itself, for runs as root (where chmod cannot make a folder read-only)."""
    real = os.access
    monkeypatch.setattr(os, "access", lambda p, mode, **kw: False if Path(p) == tmp_path / "ro" else real(p, mode, **kw))
    (tmp_path / "ro").mkdir()
    with pytest.raises(JobError, match=r"'.*ro' is not writable by this user; fix its permissions"):
        check_output_folder(tmp_path / "ro", [])


def test_planned_files_match_what_is_written(tmp_path):
    b = make_bundle(formats=("geojson", "gpkg"), include_candidates=True)
    write_outputs(tmp_path, b)
    written = sorted(p.relative_to(tmp_path).as_posix() for p in tmp_path.rglob("*") if p.is_file())
    assert written == planned_files(("geojson", "gpkg"), True)


_KILL_SCRIPT = """
import os, signal, sys
from pathlib import Path
sys.path.insert(0, {root!r})
from tests.test_outputs import make_bundle
from siting.outputs import atomic, write_outputs
real, n = os.replace, [0]
def replace(src, dst):
    n[0] += 1
    if n[0] == {kill_at}:
        os.kill(os.getpid(), signal.SIGKILL)
    return real(src, dst)
atomic.os.replace = replace
write_outputs(Path({folder!r}), make_bundle(random_state=4, budget=900.0))
print("finished", n[0])
"""


@pytest.mark.parametrize("kill_at", [2, 7, 13, 15, 19, 25])
def test_sigkill_during_the_outputs_gives_the_old_or_the_new_set(tmp_path, kill_at):
    """SIGKILL at several renames of the outputs (staging, journal, moves into place): the folder holds the
    previous set, or, once the next run has recovered the interrupted commit, exactly the new set."""
    import subprocess
    import sys

    old, new = tmp_path / "old", tmp_path / "new"
    write_outputs(old, make_bundle(random_state=3))
    write_outputs(new, make_bundle(random_state=4, budget=900.0))
    d = tmp_path / "out"
    write_outputs(d, make_bundle(random_state=3))
    root = str(Path(__file__).resolve().parents[1])
    proc = subprocess.run([sys.executable, "-c", _KILL_SCRIPT.format(root=root, kill_at=kill_at, folder=str(d))],
                          capture_output=True, text=True, timeout=300, check=False, env={**os.environ, "PYTHONPATH": root})
    assert proc.returncode == -9, proc.stderr[-2000:]  # killed, never finished
    complete = (d / "run.json").exists()
    atomic.recover(d)
    got = _visible(_snapshot(d))
    canon = {k: v for k, v in got.items() if k.endswith((".geojson", ".csv"))}
    old_set, new_set = _visible(_snapshot(old)), _visible(_snapshot(new))
    matches = [name for name, ref in (("old", old_set), ("new", new_set))
               if sorted(got) == sorted(ref) and canon == {k: v for k, v in ref.items() if k.endswith((".geojson", ".csv"))}]
    assert matches, (kill_at, sorted(got))
    if complete and matches == ["new"]:  # a run.json was in place at the kill: it was the new one, complete
        assert json.loads(got["run.json"])["manifest"]["complete"] is True
    assert atomic.leftover_temp_files(d) == []


# ------------------------------------------------------------------------------------------ 3-D, ids, angles

def test_three_d_footprints_do_not_break_the_figures(tmp_path):
    """Footprints with x, y, z coordinates (and a multipolygon of them) are drawn by their x, y."""
    import shapely
    from shapely.geometry import MultiPolygon

    b = make_bundle()
    g3 = shapely.force_3d(b.buildings.geometry.to_numpy(), z=12.5)
    g3[1] = MultiPolygon([g3[1], shapely.affinity.translate(g3[1], xoff=200.0)])
    b.buildings = b.buildings.set_geometry(gpd.GeoSeries(g3, crs=b.buildings.crs))
    assert b.buildings.has_z.all()
    write_outputs(tmp_path, b)
    two_d = tmp_path / "flat"
    write_outputs(two_d, make_bundle())
    img = matplotlib.image.imread(tmp_path / "figures" / "district_map.png")
    assert img.shape[0] > 1000
    assert (tmp_path / "survey.html").stat().st_size > 0 and (tmp_path / "run.json").exists()


def test_ids_print_as_integers_and_facings_stay_below_360(tmp_path):
    b = make_bundle()
    sites = b.sites.copy()
    # ids read from a numeric column of the input (an object column holding floats passes the contract)
    sites["building_id"] = pd.Series([2106.0] * 5 + [2107.0] * 5 + [2106.0], dtype=object)
    sites["normal_az_deg"] = np.r_[np.full(5, 359.97), np.full(5, -0.02), 360.0]
    b.sites = sites
    write_outputs(tmp_path, b)
    csv = pd.read_csv(tmp_path / "survey.csv", dtype=str, keep_default_na=False)
    assert set(csv["building_id"]) <= {"2106", "2107"}
    assert set(csv["facing_deg"].astype(float)) == {0.0} and set(csv["facing"]) == {"N"}
    run = json.loads((tmp_path / "run.json").read_text())
    assert all(0.0 <= s["facing_deg"] < 360.0 for s in run["sites"])
    surv = (tmp_path / "survey.html").read_text(encoding="utf-8")
    assert "2106.0" not in surv and "360.0" not in surv and "2106" in surv
    assert "2106.0" not in (tmp_path / "report.html").read_text(encoding="utf-8")
    cand = json.loads((tmp_path / "surfaces.geojson").read_text())
    assert {f["properties"]["building_id"] for f in cand["features"]} <= {"2106", "2107"}


@pytest.mark.parametrize("az, shown", [(359.94, 359.9), (359.95, 0.0), (360.0, 0.0), (-0.04, 0.0), (-0.06, 359.9),
                                        (720.25, 0.2), (180.0, 180.0)])
def test_angle_folding(az, shown):
    from siting.outputs.values import angle_deg

    got = float(angle_deg(az))
    assert got == pytest.approx(shown, abs=1e-9) and 0.0 <= got < 360.0 and math.copysign(1, got) == 1


# ------------------------------------------------------------------------------------------ survey pack

def test_backups_tell_a_field_team_where_to_go(tmp_path):
    b = make_bundle()
    write_outputs(tmp_path, b)
    fig = derive(b)
    bk = fig.backups
    assert len(bk) == len(b.backups)
    # distance from the primary spot: plain Euclidean distance in the projected CRS (pyproj-free check)
    for r in bk.itertuples():
        prim = b.sites.iloc[r.site_id]
        bs = b.sites.iloc[r.backup_site_id]
        assert r.backup_distance_m == pytest.approx(math.hypot(bs.x - prim.x, bs.y - prim.y), abs=0.05)
        assert r.backup_building_id == bs.building_id and r.same_building == (bs.building_idx == prim.building_idx)
        assert r.backup_address == b.buildings["address"].iloc[bs.building_idx]
        assert r.backup_mount_height_m == bs.z_m
    # the optimiser's order is kept per site
    for opt, g in b.backups.groupby("option", sort=False):
        rank = int(fig.sites.loc[fig.sites.option_id == opt, "rank"].iloc[0])
        assert list(bk.loc[bk["rank"] == rank, "backup_option_id"]) == list(g["backup_option"])
    csv = pd.read_csv(tmp_path / "survey.csv", keep_default_na=False, na_values=[""])
    for c in ("backup_1_building_id", "backup_1_address", "backup_1_distance_m", "backup_1_lon", "backup_1_lat",
              "backup_2_distance_m", "backup_1_recovered_weight"):
        assert c in csv.columns, c
    html_text = (tmp_path / "survey.html").read_text(encoding="utf-8")
    assert html_text.count('class="backups"') == len(fig.sites)
    assert "From primary" in html_text and "Canyon Street" in html_text


def test_backup_share_kept_weight_and_weak_warning_are_shown(tmp_path):
    b = make_bundle()
    b.backups = b.backups.assign(recovered_share=np.where(b.backups["backup_rank"] == 1, 0.8, 0.25),
                                 kept_weight=100.0 - b.backups["backup_rank"],
                                 weak=b.backups["backup_rank"] == 2, placement="other_building",
                                 certainty="high")  # a column the outputs do not know is passed through
    write_outputs(tmp_path, b)
    csv = pd.read_csv(tmp_path / "survey.csv")
    assert set(csv["backup_1_recovered_share"]) == {0.8} and set(csv["backup_2_weak"]) == {True}
    assert set(csv["backup_1_weak"]) == {False} and set(csv["backup_2_kept_weight"]) == {98.0}
    assert set(csv["backup_1_placement"]) == {"other_building"} and set(csv["backup_1_certainty"]) == {"high"}
    text = (tmp_path / "survey.html").read_text(encoding="utf-8")
    n_sites = len(csv)
    assert text.count("80 % of the primary&#x27;s own weight") == n_sites
    assert text.count("WEAK: recovers less than 50 %") == n_sites  # once per weak backup, i.e. rank 2 of each
    assert text.count('<tr class="weak">') == n_sites and "another building" in text and "certainty: high" in text
    run = json.loads((tmp_path / "run.json").read_text())
    assert run["backups"][0]["recovered_share"] == 0.8 and run["summary"]["n_weak_backups"] == n_sites


def test_weak_flag_follows_the_share_when_the_optimiser_gives_none(tmp_path):
    """Without a 'weak' column a backup below 50 % of the primary's own weight is weak (common practice)."""
    b = make_bundle()
    b.backups = b.backups.assign(recovered_share=np.where(b.backups["backup_rank"] == 1, 0.5, 0.4999))
    fig = derive(b)
    assert (fig.backups["weak"] == (fig.backups["backup_rank"] == 2)).all()


def test_currency_beside_every_cost(tmp_path):
    b = make_bundle(currency="EUR")
    write_outputs(tmp_path, b)
    html_text = (tmp_path / "report.html").read_text(encoding="utf-8")
    figs = _html_key_figures(html_text)
    assert figs["plan_cost"].endswith(" EUR") and figs["budget"].endswith(" EUR")
    assert "Cost [EUR]" in html_text and "Budget [EUR]" in html_text
    md = (tmp_path / "report.md").read_text(encoding="utf-8")
    assert re.search(r"^\| Cost of the plan \| [\d.]+ EUR \|$", md, re.M)
    csv = pd.read_csv(tmp_path / "survey.csv")
    assert set(csv["currency"]) == {"EUR"}
    surv = (tmp_path / "survey.html").read_text(encoding="utf-8")
    assert len(re.findall(r"<th>cost</th><td>[\d.]+ EUR</td>", surv)) == len(csv)
    run = json.loads((tmp_path / "run.json").read_text())
    assert run["summary"]["currency"] == "EUR"
    # no currency given: "cost units", never a bare number
    write_outputs(tmp_path / "plain", make_bundle())
    assert _html_key_figures((tmp_path / "plain" / "report.html").read_text())["plan_cost"].endswith(" cost units")


def test_one_name_per_quantity_and_the_cumulative_baseline(out):
    d, _ = out
    csv = pd.read_csv(d / "survey.csv")
    surf = json.loads((d / "surfaces.geojson").read_text())["features"][0]["properties"]
    run = json.loads((d / "run.json").read_text())
    for cols in (list(csv.columns), list(surf), list(run["sites"][0])):
        assert "weight_gained" in cols and "marginal_weight" not in cols and "cumulative_weight" not in cols
        assert "cumulative_covered_weight" in cols
    html_text = (d / "report.html").read_text(encoding="utf-8")
    assert "Covered weight after this site (direct included)" in html_text
    # the first row starts from the weight covered directly: cumulative = direct + weight gained
    s = run["summary"]
    first = run["sites"][0]
    assert first["cumulative_covered_weight"] == pytest.approx(s["covered_weight_before"] + first["weight_gained"])
    assert "direct included" in (d / "survey.html").read_text(encoding="utf-8")
    assert "marginal_weight" in run["definitions"]["weight_gained"]  # the optimiser's name, for readers


def test_demand_points_say_why_they_are_not_covered(out, bundle):
    d, _ = out
    ref = _brute_force(bundle)
    dem = gpd.read_file(d / "demand.geojson")
    target = TARGET_DB
    for r in dem.itertuples():
        st = ref[r.user_id]
        if r.covered_before:
            assert r.reason == "covered directly"
        elif r.newly_covered:
            assert r.reason == "covered by the plan"
        elif st["serving_site_id"] >= 0:
            # a surface serves it (better than direct) but not up to the target
            assert r.reason.startswith("below target with the plan")
            assert r.shortfall_db == pytest.approx(target - st["snr_plan_db"], abs=0.006)
        else:
            assert r.reason.startswith(("below target:", "no base station"))
    below = dem["reason"].str.startswith("below target with the plan")
    assert below.any()
    run = json.loads((d / "run.json").read_text())
    assert run["summary"]["n_users_below_target_with_plan"] == int(below.sum())
    assert f"{int(below.sum())} demand point(s)" in (d / "report.html").read_text(encoding="utf-8")


def test_coverage_rows_are_defined_in_run_json(out, bundle):
    d, _ = out
    run = json.loads((d / "run.json").read_text())
    assert run["counts"]["coverage_rows"] == len(bundle.coverage)
    assert run["counts"]["coverage_rows_at_target"] == int((bundle.coverage["snr_db"] >= TARGET_DB).sum())
    assert "whatever the SNR" in run["definitions"]["counts.coverage_rows"]


def test_repeated_notes_are_listed_once_with_a_count(tmp_path):
    b = make_bundle(run_info={"notes": ["tile warning"] * 34 + ["other"]})
    fig = derive(b)
    assert fig.notes[:2] == ["tile warning (34 times)", "other"]


# ------------------------------------------------------------------------------------------ print quality

def test_report_map_is_print_ready(out, bundle):
    """A4 landscape at >= 200 dpi, with scale bar, north arrow, CRS name, labelled stations and surfaces, the
    facing arrows in the legend, and no two labels overlapping."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar
    from PIL import Image

    from siting.outputs import figures as figures_mod

    d, _ = out
    with Image.open(d / "figures" / "district_map.png") as im:
        w, h = im.size
        dpi = im.info.get("dpi", (0, 0))[0]
    # A4 is 297 x 210 mm (ISO 216); at 200 dpi its printable width (12 mm margins) is about 2150 px
    assert dpi >= 199 and w >= 2000 and h >= 1400 and 1.3 < w / h < 1.6
    fig = figures_mod.district_figure(bundle, derive(bundle))
    ax = fig.axes[0]
    assert any(isinstance(a, AnchoredSizeBar) for a in ax.artists)
    texts = [t.get_text() for t in ax.texts] + [t.get_text() for t in fig.texts]
    assert "N" in texts
    crs = pyproj.CRS(bundle.crs)
    caption = fig.texts[0].get_text()
    assert crs.name in caption and "EPSG:32633" in caption and "grid north" in caption
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert any("facing" in t for t in legend) and any("base station" in t for t in legend)
    placed = {str(t[2]) for t in fig.placed_labels}
    assert set(bundle.base_stations["bs_id"]) <= placed  # every station labelled
    renderer = FigureCanvasAgg(fig).get_renderer()
    labels = [t for t in ax.texts if t.get_text() and t.get_text() != "N"]
    boxes = [t.get_window_extent(renderer) for t in labels]
    for i in range(len(boxes)):
        for j in range(i + 1, len(boxes)):
            assert not boxes[i].overlaps(boxes[j]), (labels[i].get_text(), labels[j].get_text())


def test_crowded_labels_are_moved_or_left_out_never_overlapping():
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from siting.outputs.figures import place_labels

    fig = Figure(figsize=(4, 3))
    canvas = FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    ax.set_xlim(0, 100)
    ax.set_ylim(0, 100)
    rng = np.random.default_rng(5)
    pts = rng.normal(50, 2.0, (40, 2))  # 40 labels on a 2 m spot
    renderer = canvas.get_renderer()
    shown = place_labels(ax, renderer, [(x, y, f"site {i}", {"fontsize": 8}) for i, (x, y) in enumerate(pts)])
    assert 4 <= sum(shown) < 40
    boxes = [t.get_window_extent(renderer) for t in ax.texts]
    assert len(boxes) == sum(shown)
    for i in range(len(boxes)):
        for j in range(i + 1, len(boxes)):
            assert not boxes[i].overlaps(boxes[j])


@pytest.mark.parametrize("span, bar", [(640.0, 100.0), (120.0, 20.0), (5000.0, 1000.0), (37.0, 5.0), (9.0, 1.0)])
def test_scale_bar_length_is_round(span, bar):
    from siting.outputs.figures import nice_length

    assert nice_length(span) == bar  # 1, 2 or 5 x 10^k, at most a fifth of the span (common practice)


@pytest.mark.skipif(find_chromium() is None, reason="no Chromium installed (CI installs the Debian 'chromium' package)")
def test_report_tables_fit_a_1400_px_page(tmp_path):
    from tests.browser import page_widths

    b = make_bundle(budget=2000.0, currency="EUR")
    b.buildings = b.buildings.assign(name=["A building with a rather long name, " * 3, ""])
    write_outputs(tmp_path, b)
    for page in ("report.html", "survey.html"):
        res = page_widths(tmp_path / page, 1400)
        assert res["scroll_width"] <= 1400, (page, res["scroll_width"])
        for t in res["tables"]:
            assert t["right"] <= t["parent_right"] + 0.5, (page, t)  # no table wider than its column


def test_building_paths_keep_holes_and_drop_z():
    from matplotlib.path import Path as MPath
    from shapely.geometry import LineString, MultiPolygon, Polygon

    from siting.outputs.figures import _building_paths

    courtyard = Polygon([(0, 0, 5), (10, 0, 5), (10, 10, 5), (0, 10, 5)], [[(4, 4, 5), (4, 6, 5), (6, 6, 5), (6, 4, 5)]])
    two = MultiPolygon([Polygon([(20, 0), (21, 0), (21, 1)]), Polygon([(30, 0), (31, 0), (31, 1)])])
    paths = _building_paths([courtyard, None, LineString([(0, 0), (1, 1)]), two], 1.0, 2.0)
    assert len(paths) == 3  # the courtyard block and both parts; the line and the missing geometry skipped
    p = paths[0]
    assert p.vertices.shape == (10, 2)
    np.testing.assert_array_equal(p.vertices[:5], np.array(courtyard.exterior.coords)[:, :2] - (1.0, 2.0))
    np.testing.assert_array_equal(p.vertices[5:], np.array(courtyard.interiors[0].coords)[:, :2] - (1.0, 2.0))
    assert list(p.codes) == [MPath.MOVETO, *[MPath.LINETO] * 3, MPath.CLOSEPOLY] * 2
    # drawn, the courtyard stays empty (a hole wound against its exterior, as RFC 7946 section 3.1.6 asks)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.collections import PathCollection
    from matplotlib.figure import Figure

    fig = Figure(figsize=(1, 1), dpi=100)
    canvas = FigureCanvasAgg(fig)
    ax = fig.add_axes([0, 0, 1, 1])
    ax.add_collection(PathCollection([p], facecolor="black", edgecolor="none"))
    ax.set_xlim(-1, 9)
    ax.set_ylim(-2, 8)
    canvas.draw()
    px = np.asarray(canvas.buffer_rgba())[..., 0]  # rows from the top; 10 px per metre
    # shifted by (1, 2): (3, 1) lies in the block (black), (4, 3) is the courtyard centre (white)
    assert px[100 - 30, 40] < 50 and px[100 - 50, 50] > 200


@pytest.mark.skipif(find_chromium() is None, reason="no Chromium installed (CI installs the Debian 'chromium' package)")
def test_script_bearing_names_do_not_run_in_a_browser(tmp_path):
    """Payloads in names, addresses and ids: were one written unescaped, the script would throw and the image
    would fail to load, both caught by the page's error listener (tests/browser.py)."""
    b = make_bundle(currency="<script>throw new Error('pwned currency')</script>")
    b.buildings = b.buildings.assign(name=["<script>throw new Error('pwned')</script>", "<img src=x onerror=1>"],
                                     address=["<svg onload=alert(1)>", "<iframe src=javascript:alert(2)>"])
    b.backups = b.backups.assign(note="<script>throw new Error('pwned backup')</script>")
    write_outputs(tmp_path, b)
    for page in ("survey.html", "report.html"):
        res = check_page(tmp_path / page)
        assert res["errors"] == [] and res["console_errors"] == [], (page, res["errors"], res["console_errors"])
        assert "pwned" not in " ".join(res["console"])


def test_a_second_run_into_a_busy_folder_is_refused(tmp_path):
    """While one run holds the folder, another gets a clear error and the first run's staging is untouched."""
    d = tmp_path / "out"
    write_outputs(d, make_bundle(random_state=3))
    before = _snapshot(d)
    with atomic.folder_lock(d):
        staging = d / f"{atomic.STAGING_PREFIX}busy"
        staging.mkdir()  # the first run's work in progress
        with pytest.raises(SitingError, match="being written by another siting run"):
            write_outputs(d, make_bundle(random_state=4))
        assert staging.is_dir()
        staging.rmdir()
    assert _snapshot(d) == before
    write_outputs(d, make_bundle(random_state=4))  # free again


def test_tables_print_on_a4(out):
    """Print rules: A4 pages (ISO 216) and no table row split across two pages, in both printable pages."""
    d, _ = out
    for page in ("report.html", "survey.html"):
        css = re.search(r"<style>(.*?)</style>", (d / page).read_text(encoding="utf-8"), re.S).group(1)
        assert re.search(r"@page\s*\{[^}]*size:\s*A4", css), page
        printing = css[css.index("@media print"):]
        assert re.search(r"tr[^{]*\{[^}]*(page-)?break-inside:\s*avoid", printing), page
        assert "thead { display: table-header-group; }" in printing, page  # headers repeat on each page


def test_report_counts_weak_backups(tmp_path):
    b = make_bundle()
    b.backups = b.backups.assign(recovered_share=np.where(b.backups["backup_rank"] == 1, 0.9, 0.2))
    write_outputs(tmp_path, b)
    n_sites = len(derive(b).sites)
    md = (tmp_path / "report.md").read_text(encoding="utf-8")
    assert f"offers {2 * n_sites} backup spot(s)" in md and f"{n_sites} of them recover less than half" in md
