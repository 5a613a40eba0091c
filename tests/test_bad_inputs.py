"""Every job-level problem is found before any heavy stage: exit 2, one message naming the file, feature or key and
the fix, no traceback, nothing written to the output folder (issue: outputs a field team can trust, item 5).

Each test runs the command line (``siting.cli.main``) on a broken copy of ``demo_district/`` in a temporary
folder.  The runs that must complete use a small area of the demo (about 50 buildings) to stay fast.
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import pytest

from siting.cli import main

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_district"
#: A corner of the demo town around the street-level small cell OST-POLE-2: ~50 buildings, plans in seconds.
SMALL = ["--set", "area.bbox=[1.9045, 46.8118, 1.9075, 46.8140]", "--set", "budget.sweep_budgets=[]"]
IS_ROOT = hasattr(os, "geteuid") and os.geteuid() == 0




def cli(capsys, *args: str) -> tuple[int, str, str]:
    code = main([str(a) for a in args])
    cap = capsys.readouterr()
    return code, cap.out, cap.err


def refused(capsys, *args: str, out: Path | None = None) -> str:
    """Run the CLI, assert exit 2, one error message without traceback, and an untouched output folder."""
    before = sorted(p.name for p in out.iterdir()) if out is not None and out.is_dir() else None
    code, _, err = cli(capsys, *args)
    assert code == 2, err
    assert "Traceback" not in err and err.startswith("siting: error:") and err.count("siting: error:") == 1, err
    if out is not None:
        after = sorted(p.name for p in out.iterdir()) if out.is_dir() else None
        assert after == before, f"the output folder changed: {before} -> {after}"
    return err


def features(path: Path) -> dict:
    return json.loads(path.read_text(encoding="utf-8"))


def write_fc(path: Path, fc: dict) -> None:
    path.write_text(json.dumps(fc), encoding="utf-8")


# ------------------------------------------------------------------------------------ 1. output folder
def test_output_folder_holding_the_inputs_refused(demo, capsys):
    for cmd in ("validate", "plan"):
        err = refused(capsys, cmd, demo / "job.toml", "--set", "output.folder='.'", out=demo)
        assert "is the folder of the input" in err and "buildings.geojson" in err and "output.folder" in err


def test_output_folder_containing_the_job_file_refused(demo, tmp_path, capsys):
    job = tmp_path / "jobs" / "job.toml"
    job.parent.mkdir()
    job.write_text((demo / "job.toml").read_text().replace('"buildings.geojson"', json.dumps(str(
        demo / "buildings.geojson"))).replace('"base_stations.geojson"', json.dumps(str(demo / "base_stations.geojson"))))
    err = refused(capsys, "plan", job, "--set", f"output.folder={json.dumps(str(tmp_path))}", out=tmp_path)
    assert "contains the input" in err and "job.toml" in err


def test_root_and_home_folder_refused(demo, tmp_path, monkeypatch, capsys):
    err = refused(capsys, "validate", demo / "job.toml", "--set", "output.folder='/'")
    assert "file-system root" in err
    home = tmp_path / "home"
    home.mkdir()
    (home / "report.html").write_text("my own report")
    monkeypatch.setenv("HOME", str(home))
    err = refused(capsys, "plan", demo / "job.toml", "--set", "output.folder='~'", out=home)
    assert "is your home folder" in err and (home / "report.html").read_text() == "my own report"


def test_output_folder_that_is_a_file_refused(demo, tmp_path, capsys):
    (tmp_path / "out").write_text("not a folder")
    err = refused(capsys, "plan", demo / "job.toml")
    assert "is an existing file" in err and (tmp_path / "out").read_text() == "not a folder"


@pytest.mark.skipif(IS_ROOT, reason="root writes into read-only folders")
def test_unwritable_output_folder_refused(demo, tmp_path, capsys):
    out = tmp_path / "out"
    out.mkdir()
    out.chmod(0o555)
    try:
        err = refused(capsys, "plan", demo / "job.toml", out=out)
    finally:
        out.chmod(0o755)
    assert "not writable" in err and "permissions" in err


def test_foreign_non_empty_folder_needs_overwrite(demo, tmp_path, capsys):
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("field notes")
    err = refused(capsys, "plan", demo / "job.toml", out=out)
    assert "not empty and no siting run created it" in err and "notes.txt" in err and "--overwrite" in err
    (out / "report.html").write_text("someone's report")  # a file of the set's names: named, not replaced
    err = refused(capsys, "validate", demo / "job.toml", out=out)
    assert "report.html" in err and "--overwrite" in err
    code, _, err = cli(capsys, "validate", demo / "job.toml", "--overwrite")
    assert code == 0, err


def test_api_refuses_foreign_folder_unless_overwrite(demo, tmp_path):
    import siting

    out = tmp_path / "out"
    out.mkdir()
    (out / "survey.csv").write_text("a,b\n")
    with pytest.raises(siting.JobError, match="survey.csv"):
        siting.plan(demo / "job.toml")
    assert sorted(p.name for p in out.iterdir()) == ["survey.csv"]


# ------------------------------------------------------------------------------------ 2. 3-D coordinates
def _with_z(fc: dict, z: float) -> dict:
    def lift(c):
        return [*c[:2], z] if isinstance(c[0], (int, float)) else [lift(x) for x in c]

    for f in fc["features"]:
        f["geometry"]["coordinates"] = lift(f["geometry"]["coordinates"])
    return fc


def test_3d_coordinates_dropped_with_a_note_and_full_output_set(demo, tmp_path, capsys):
    for name in ("buildings.geojson", "base_stations.geojson"):
        write_fc(demo / name, _with_z(features(demo / name), 123.0))
    code, out, err = cli(capsys, "validate", demo / "job.toml", *SMALL)
    assert code == 0, err
    assert "3-D coordinates" in out and "Z values were dropped" in out
    code, out, err = cli(capsys, "plan", demo / "job.toml", *SMALL, "--quiet")
    assert code == 0, err
    folder = tmp_path / "out"
    record = json.loads((folder / "run.json").read_text())
    for rel in record["manifest"]["files"]:
        assert (folder / rel).is_file(), rel
    assert {"surfaces.geojson", "demand.geojson", "survey.csv", "report.html", "figures/district_map.png"} <= set(
        record["manifest"]["files"])
    assert sum("3-D coordinates" in n for n in record["notes"]) == 2  # one note per layer
    assert "3-D coordinates" in (folder / "report.md").read_text()
    assert len(features(folder / "surfaces.geojson")["features"]) > 0


# ------------------------------------------------------------------------------------ 3. limits and demand
def test_no_budget_limit_found_at_validation(demo, tmp_path, capsys):
    for cmd in ("validate", "plan"):
        err = refused(capsys, cmd, demo / "job.toml", "--set", "budget.max_cost=0")
        assert "no limit is set" in err and "budget.max_cost" in err and "budget.max_panels" in err
        assert "budget.target_share" in err
    assert not (tmp_path / "out").exists()


def test_no_demand_source_found_at_validation(demo, tmp_path, capsys):
    err = refused(capsys, "validate", demo / "job.toml", "--set", "demand.street_grid=false")
    assert "no demand source" in err and "demand.street_grid" in err and "inputs.users" in err
    assert not (tmp_path / "out").exists()


def _users(demo: Path, lonlats, weights) -> Path:
    fc = {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {"user_id": f"u{i}", "weight": w},
         "geometry": {"type": "Point", "coordinates": list(ll)}} for i, (ll, w) in enumerate(zip(lonlats, weights))]}
    write_fc(demo / "users.geojson", fc)
    return demo / "users.geojson"


def test_users_all_outside_the_area_found_before_gains(demo, tmp_path, capsys, monkeypatch):
    import siting.runner

    monkeypatch.setattr(siting.runner, "gains_stage", lambda *a, **k: pytest.fail("the gains stage ran"))
    _users(demo, [(1.9110, 46.8160), (1.9112, 46.8161)], [1.0, 2.0])  # north-east corner, outside SMALL
    args = ["--set", "inputs.users='users.geojson'", "--set", "demand.street_grid=false", *SMALL]
    for cmd in ("validate", "plan"):
        err = refused(capsys, cmd, demo / "job.toml", *args)
        assert "gives no demand point inside the area of interest" in err and "demand.street_grid" in err
    assert not (tmp_path / "out").exists()


def test_zero_weight_demand_found_before_gains(demo, tmp_path, capsys, monkeypatch):
    import siting.runner

    monkeypatch.setattr(siting.runner, "gains_stage", lambda *a, **k: pytest.fail("the gains stage ran"))
    err = refused(capsys, "plan", demo / "job.toml", "--set", "demand.street_weight=0", *SMALL)
    assert "total weight 0" in err and "demand.street_weight" in err
    assert not (tmp_path / "out").exists()  # no log, no cache: the job was refused


# ------------------------------------------------------------------------------------ 4. far base stations
def test_far_base_stations_warned_and_empty_plan_says_why(demo, tmp_path, capsys):
    fc = features(demo / "base_stations.geojson")
    for f in fc["features"]:
        f["geometry"]["coordinates"][0] += 0.066  # ~5 km east at 46.8 deg N (cos(46.8 deg) x 111.3 km/deg)
    write_fc(demo / "base_stations.geojson", fc)
    code, out, err = cli(capsys, "validate", demo / "job.toml")
    assert code == 0, err
    assert "'OST-POLE-2' is 4," in out or "'OST-POLE-2' is 5," in out
    assert "beyond radio.bs_range_m (400 m)" in out
    code, out, err = cli(capsys, "plan", demo / "job.toml", *SMALL, "--quiet")
    assert code == 0, err
    reason = json.loads((tmp_path / "out" / "run.json").read_text())["summary"]["empty_plan_reason"]
    assert reason.startswith("no surface was chosen: no candidate facade spot sees a base station within "
                             "radio.bs_range_m (the nearest base station is 4,")
    assert "budget" not in reason and "afford" not in reason
    assert "no candidate facade spot sees a base station" in (tmp_path / "out" / "report.md").read_text()


# ------------------------------------------------------------------------------------ 5. absurd values
def _set_bs(demo: Path, **props) -> None:
    text = (demo / "base_stations.geojson").read_text()
    fc = json.loads(text)
    fc["features"][1]["properties"].update(props)
    raw = json.dumps(fc)
    for token in ("Infinity", "NaN"):  # JSON has no such numbers; GDAL reads them as the IEEE values
        raw = raw.replace(f'"{token}"', token)
    (demo / "base_stations.geojson").write_text(raw)


@pytest.mark.parametrize("props,col,valid", [
    ({"z_m": 1e9}, "z_m", "0 .. 1000 m"),
    ({"z_m": "Infinity"}, "z_m", "0 .. 1000 m"),
    ({"z_m": "NaN"}, "z_m", "fill it with a number"),
    ({"tx_power_dbm": 1e6}, "tx_power_dbm", "-30 .. 80 dBm"),
    ({"tx_power_dbm": "Infinity"}, "tx_power_dbm", "-30 .. 80 dBm"),
    ({"max_gain_dbi": -1e5}, "max_gain_dbi", "-30 .. 60 dBi"),
])
def test_absurd_station_values_refused(demo, tmp_path, capsys, props, col, valid):
    _set_bs(demo, **props)
    for cmd in ("validate", "plan"):
        err = refused(capsys, cmd, demo / "job.toml")
        assert "base_stations.geojson" in err and "'OST-POLE-2'" in err and f"'{col}'" in err and valid in err
        assert "common practice" in err or "fill it" in err
    assert not (tmp_path / "out").exists()  # plan refused at load: no log, no cache, no output


@pytest.mark.parametrize("weight,expect", [
    (-3.0, "negative"), ("Infinity", "not a finite number"), ("NaN", "empty or NaN"), (1e15, "1e+15"),
])
def test_absurd_user_weights_refused(demo, tmp_path, capsys, weight, expect):
    _users(demo, [(1.9050, 46.8125), (1.9060, 46.8126)], [1.0, 0.0])
    raw = (demo / "users.geojson").read_text().replace('"weight": 0.0', f'"weight": {weight}')
    (demo / "users.geojson").write_text(raw)
    err = refused(capsys, "validate", demo / "job.toml", "--set", "inputs.users='users.geojson'")
    assert "users.geojson" in err and "'u1'" in err and "'weight'" in err and expect in err
    assert "0 .. 1e+09" in err  # the valid range


def test_infinite_building_height_refused(demo, capsys):
    raw = (demo / "buildings.geojson").read_text().replace('"height":"10 m"', '"height":Infinity', 1)
    (demo / "buildings.geojson").write_text(raw)
    err = refused(capsys, "validate", demo / "job.toml")
    assert "buildings.geojson" in err and "'OST-0002'" in err and "'height'" in err and "1000 m" in err


def test_huge_coordinates_refused(demo, capsys):
    fc = features(demo / "base_stations.geojson")
    fc["features"][0]["geometry"]["coordinates"] = [1e12, 46.8]
    write_fc(demo / "base_stations.geojson", fc)
    err = refused(capsys, "validate", demo / "job.toml")
    assert "base_stations.geojson" in err and "longitude/latitude" in err and "EPSG:4326" in err


# ------------------------------------------------------------------------------------ 6. file system
def test_missing_layer_file(demo, tmp_path, capsys):
    (demo / "buildings.geojson").unlink()
    err = refused(capsys, "plan", demo / "job.toml")
    assert str(demo / "buildings.geojson") in err and "not found" in err and "check the path" in err
    assert not (tmp_path / "out").exists()


def test_folder_where_a_file_is_expected(demo, capsys):
    (demo / "buildings.geojson").rename(demo / "inner.geojson")
    (demo / "buildings.geojson").mkdir()
    shutil.move(demo / "inner.geojson", demo / "buildings.geojson" / "footprints.geojson")
    err = refused(capsys, "validate", demo / "job.toml")
    assert "is a folder, but a file is expected" in err and "footprints.geojson" in err


@pytest.mark.skipif(IS_ROOT, reason="root reads files whatever their permissions")
def test_unreadable_layer_file(demo, capsys):
    (demo / "base_stations.geojson").chmod(0)
    try:
        err = refused(capsys, "validate", demo / "job.toml")
    finally:
        (demo / "base_stations.geojson").chmod(0o644)
    assert "base_stations.geojson" in err and "permission denied" in err and "chmod" in err


def test_empty_files(demo, capsys):
    (demo / "base_stations.geojson").write_bytes(b"")
    err = refused(capsys, "validate", demo / "job.toml")
    assert "base_stations.geojson" in err and "is empty (0 bytes)" in err
    (demo / "job.toml").write_bytes(b"")
    err = refused(capsys, "validate", demo / "job.toml")
    assert "job.toml" in err and "is empty (0 bytes)" in err


def test_job_file_missing_or_a_folder(demo, tmp_path, capsys):
    err = refused(capsys, "validate", tmp_path / "nope.toml")
    assert "nope.toml" in err and "not found" in err
    err = refused(capsys, "validate", demo)
    assert "is a folder, but a file is expected" in err and "job.toml" in err


# ------------------------------------------------------------------------------------ 7. encodings
def test_byte_order_marks_accepted(demo, capsys):
    bom = b"\xef\xbb\xbf"
    for name in ("job.toml", "buildings.geojson"):
        (demo / name).write_bytes(bom + (demo / name).read_bytes())
    code, out, err = cli(capsys, "validate", demo / "job.toml")
    assert code == 0, err
    assert "buildings: 374" in out


@pytest.mark.parametrize("name", ["buildings.geojson", "job.toml"])
def test_latin1_file_refused_with_offset(demo, capsys, name):
    data = (demo / name).read_bytes()
    if name == "job.toml":
        data = data.replace(b"# Demo job", "# Démo job".encode("latin-1"), 1)
    else:
        data = data.replace(b"Harbourmaster's House", "Café du Port".encode("latin-1"), 1)
    (demo / name).write_bytes(data)
    offset = data.index(b"\xe9")
    err = refused(capsys, "validate", demo / "job.toml")
    assert f"'{demo / name}' is not UTF-8 text (byte 0xE9 at offset {offset}); save it as UTF-8" in err


def test_empty_plan_reason_names_the_first_true_cause():
    """Exact cases of the empty-plan reason: no station seen, every user beyond reach of every station, no option
    reaches a user, budget below the cheapest *useful* option (a cheaper useless option does not count), count
    limit 0."""
    from types import SimpleNamespace

    import geopandas as gpd
    import pandas as pd
    from shapely.geometry import box

    from siting.outputs.emptyplan import empty_plan_reason

    def bundle(coverage, budget=None, max_panels=None, bs_site_max=1, user_x=4900.0):
        return SimpleNamespace(
            users=pd.DataFrame({"user_id": [0, 1], "x": [user_x, user_x], "y": [5.0, 5.0]}),
            params={"radio": {"bs_range_m": 300.0, "surface_range_m": 150.0}},
            options=pd.DataFrame({"option_id": [0, 1], "cost": [100.0, 1500.0]}),
            coverage=pd.DataFrame(coverage, columns=["option_id", "user_id", "snr_db"]),
            direct=pd.DataFrame({"user_id": [0, 1], "covered": [True, False]}),
            base_stations=pd.DataFrame({"x": [5000.0], "y": [5.0]}),
            buildings=gpd.GeoDataFrame(geometry=[box(0, 0, 10, 10)]),
            run_info={"visibility_degrees": {"bs_site": {"b": {"n": 2, "max": bs_site_max}}}},
            budget=budget, max_panels=max_panels)

    reason = empty_plan_reason(bundle([], bs_site_max=0), 5.0, "EUR")
    assert "no candidate facade spot sees a base station" in reason and "4,990 m" in reason  # 5000 - 10 m
    reason = empty_plan_reason(bundle([], user_x=0.0), 5.0, "EUR")  # every user 5,000 m from the station
    assert "no demand point lies within radio.bs_range_m + radio.surface_range_m (450 m)" in reason
    assert "5,000 m away" in reason and "swapped coordinates" in reason
    reason = empty_plan_reason(bundle([(0, 1, 4.9), (1, 0, 20.0)]), 5.0, "EUR")  # too weak; covered directly
    assert "no option brings any demand point that the direct path leaves uncovered up to the SNR target" in reason
    reason = empty_plan_reason(bundle([(0, 1, 4.9), (1, 1, 5.0)], budget=1000.0), 5.0, "EUR")
    assert "the cheapest useful option, 1,500.00 EUR" in reason and "budget.max_cost" in reason
    reason = empty_plan_reason(bundle([(1, 1, 5.0)], budget=2000.0, max_panels=0), 5.0, "EUR")
    assert "panel count limit is 0" in reason


def test_infinite_job_value_refused_with_range(demo, tmp_path, capsys):
    err = refused(capsys, "validate", demo / "job.toml", "--set", "budget.max_cost=inf", "--set",
                  "radio.snr_target_db=nan")
    assert "budget.max_cost: expected a number [currency] in 0 .. 1e+12, got inf; infinity and nan are not allowed" \
        in err
    assert "radio.snr_target_db: expected a number [dB] in -20 .. 60, got nan" in err
    assert not (tmp_path / "out").exists()


def test_permission_messages_without_chmod(demo, tmp_path, capsys, monkeypatch):
    """The permission checks, run under root too: ``os.access`` denies reading one layer and writing the output
    folder (the chmod tests above are skipped for root, who reads and writes anything)."""
    real = os.access
    out = tmp_path / "out"
    out.mkdir()

    def access(path, mode, *a, **k):
        if str(path).endswith("base_stations.geojson") and mode & os.R_OK:
            return False
        if Path(path) == out and mode & os.W_OK:
            return False
        return real(path, mode, *a, **k)

    monkeypatch.setattr(os, "access", access)
    err = refused(capsys, "plan", demo / "job.toml", out=out)
    assert "2 problem(s)" in err
    assert "base_stations.geojson' cannot be read by this user (permission denied); fix its permissions" in err
    assert f"output.folder '{out}' is not writable by this user; fix its permissions" in err
