"""Bad jobs found by the input audit: each is refused before any work with a message naming the key or file and
the fix (exit 2, nothing written), or, for data that leaves nothing to plan, warned about on the console.

The runs use a broken copy of ``demo_district/`` (the fixtures and helpers of ``tests/test_bad_inputs.py``).
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest

from siting.errors import JobError
from siting.job import load_job

from .test_bad_inputs import SMALL, _users, cli, features, refused, write_fc
from .test_job import GOOD


def _no_gains(monkeypatch) -> None:
    import siting.runner

    monkeypatch.setattr(siting.runner, "gains_stage", lambda *a, **k: pytest.fail("the gains stage ran"))


# ------------------------------------------------------------------------------------ 1. no facade spot
def test_no_spot_source_found_at_validation(demo, tmp_path, capsys):
    for cmd in ("validate", "plan"):
        err = refused(capsys, cmd, demo / "job.toml", "--set", "candidates.generate=false")
        assert "no facade spot source" in err and "candidates.generate = true" in err and "inputs.sites" in err
    assert not (tmp_path / "out").exists()


def test_given_spots_all_far_from_walls_refused_before_gains(demo, tmp_path, capsys, monkeypatch):
    _no_gains(monkeypatch)
    write_fc(demo / "sites.geojson", {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {"site_id": "P0"}, "geometry": {"type": "Point", "coordinates": [1.97, 46.81]}}]})
    args = ["--set", "candidates.generate=false", "--set", "inputs.sites='sites.geojson'"]
    for cmd in ("validate", "plan"):
        err = refused(capsys, cmd, demo / "job.toml", *args)
        assert "sites.geojson" in err and "P0" in err and "candidates.snap_tolerance_m = 2 m" in err
        assert "candidates.generate = true" in err and "m from a wall" in err
    assert not (tmp_path / "out").exists()


# ------------------------------------------------------------------------------------ 2. weight column
def test_user_weight_column_typo_refused(demo, tmp_path, capsys):
    _users(demo, [(1.9050, 46.8125), (1.9060, 46.8126)], [100.0, 200.0])
    args = ["--set", "inputs.users='users.geojson'"]
    for cmd in ("validate", "plan"):
        err = refused(capsys, cmd, demo / "job.toml", *args, "--set", "inputs.user_weight_column='Weight'")
        assert "inputs.user_weight_column" in err and "no column 'Weight'" in err and "'weight'" in err
        assert "'user_id'" in err and "users.geojson" in err
    assert not (tmp_path / "out").exists()
    code, _, err = cli(capsys, "validate", demo / "job.toml", *args)  # the named column exists
    assert code == 0, err


def test_users_without_any_weight_column_still_weigh_one(demo, capsys):
    path = _users(demo, [(1.9050, 46.8125), (1.9060, 46.8126)], [1.0, 2.0])
    fc = features(path)
    for f in fc["features"]:
        del f["properties"]["weight"]
    write_fc(path, fc)
    code, out, err = cli(capsys, "validate", demo / "job.toml", "--set", "inputs.users='users.geojson'")
    assert code == 0, err
    assert "every user weighs 1" in out


# ------------------------------------------------------------------------------------ 3. field files
@pytest.mark.parametrize("name,content,expect", [
    ("no_such_run.json", None, "not found"),
    ("buildings.geojson", "", "is not the run.json of a siting plan"),
    ("prev", "folder", "is a folder without a run.json"),
])
def test_previous_plan_missing_or_not_a_run_refused(demo, tmp_path, capsys, name, content, expect):
    if content == "folder":
        (demo / name).mkdir()
    for cmd in ("validate", "plan"):
        err = refused(capsys, cmd, demo / "job.toml", "--set", f"inputs.previous_plan='{name}'")
        assert "inputs.previous_plan" in err and name in err and expect in err
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("content,expect", [(None, "not found"), ("a;b\n1;2\n", "missing column(s) site_id, status")])
def test_survey_results_found_before_anything_is_written(demo, tmp_path, capsys, monkeypatch, content, expect):
    import siting.runner

    monkeypatch.setattr(siting.runner, "load_stage", lambda *a, **k: pytest.fail("the layers were read"))
    if content is not None:
        (demo / "verdicts.csv").write_text(content)
    for cmd in ("validate", "plan"):
        err = refused(capsys, cmd, demo / "job.toml", "--set", "inputs.survey_results='verdicts.csv'")
        assert "inputs.survey_results" in err and "verdicts.csv" in err and expect in err
    assert not (tmp_path / "out").exists()  # no .cache, no siting.log


# ------------------------------------------------------------------------------------ 4. ranges, empty values
def _write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "job.toml"
    path.write_text(text)
    return path


@pytest.mark.parametrize("override,expect", [
    ("demand.street_weight=1e308", "demand.street_weight: 1e+308 [weight] is out of range; allowed 0 .. 1e+09"),
    ("demand.street_weight=1e300", "allowed 0 .. 1e+09 weight"),
    ("surfaces.load_cap_weight=1e300", "surfaces.load_cap_weight"),
    ("budget.max_cost=1e308", "budget.max_cost: 1e+308 [currency] is out of range; allowed 0 .. 1e+12"),
    ("budget.sweep_budgets=[1e13]", "budget.sweep_budgets"),
    ("run.tile_m=0.001", "run.tile_m: 0.001 [m] is out of range; allowed 0 or 100 .. 100000 m"),
    ("inputs.buildings=''", "inputs.buildings: expected a non-empty path"),
    ("output.folder=''", "output.folder: expected a non-empty path"),
    ("output.formats=[]", "output.formats: expected a non-empty list"),
    ("inputs.building_id_column=' '", "inputs.building_id_column: expected a non-empty text"),
    ("inputs.user_weight_column=''", "inputs.user_weight_column: expected a non-empty text"),
])
def test_implausible_or_empty_job_values_refused(tmp_path, override, expect):
    with pytest.raises(JobError) as err:
        load_job(_write(tmp_path, GOOD), [override])
    assert expect in str(err.value)


@pytest.mark.parametrize("old,new,expect", [
    ("cost = 900.0", "cost = 1e15", "surfaces.panels[0].cost: 1000000000000000.0 [currency] is out of range; "
                                    "allowed 0 .. 1e+09"),
    ("cost = 900.0", "cost = 900.0\ninstall_cost = 1e10", "surfaces.panels[0].install_cost"),
    ('size_id = "S"', 'size_id = ""', "surfaces.panels[0].size_id: expected a non-empty text"),
])
def test_implausible_or_empty_panel_values_refused(tmp_path, old, new, expect):
    with pytest.raises(JobError) as err:
        load_job(_write(tmp_path, GOOD.replace(old, new)))
    assert expect in str(err.value)


def test_bounds_and_none_values_still_accepted(tmp_path):
    job = load_job(_write(tmp_path, GOOD.replace("cost = 900.0", "cost = 1e9")),
                   ["run.tile_m=0", "run.tile_m=100", "demand.street_weight=1e9", "budget.max_cost=1e12",
                    "surfaces.load_cap_weight=0", "budget.currency=''"])
    assert job["run"]["tile_m"] == 100 and job["surfaces"]["panels"][0]["cost"] == 1e9
    assert load_job(_write(tmp_path, GOOD), ["run.tile_m=0"])["run"]["tile_m"] == 0


def test_empty_paths_are_not_the_current_folder(demo, tmp_path, capsys, monkeypatch):
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    err = refused(capsys, "plan", demo / "job.toml", "--set", "output.folder=''", out=elsewhere)
    assert "output.folder: expected a non-empty path" in err
    err = refused(capsys, "validate", demo / "job.toml", "--set", "inputs.buildings=''")
    assert "inputs.buildings: expected a non-empty path" in err and "is a folder" not in err


def test_symlink_loops_named_as_loops(demo, tmp_path, capsys):
    loop = tmp_path / "loop.toml"
    os.symlink(loop, loop)
    err = refused(capsys, "plan", loop)
    assert "loop.toml' is a symbolic link that points back to itself" in err and "not found" not in err
    (demo / "buildings.geojson").unlink()
    os.symlink(demo / "buildings.geojson", demo / "buildings.geojson")
    err = refused(capsys, "plan", demo / "job.toml")
    assert "buildings file" in err and "points back to itself" in err and "unexpected" not in err
    assert not (tmp_path / "out").exists()


# ------------------------------------------------------------------------------------ 5. misplaced data
def test_swapped_station_coordinates_warned_on_the_console(demo, tmp_path, capsys):
    fc = features(demo / "base_stations.geojson")
    for f in fc["features"]:
        f["geometry"]["coordinates"] = f["geometry"]["coordinates"][::-1]  # latitude first
    write_fc(demo / "base_stations.geojson", fc)
    code, out, err = cli(capsys, "plan", demo / "job.toml", *SMALL, "--quiet")
    assert code == 0, err
    assert "siting: warning: no base station is within radio.bs_range_m (400 m) of any building (the nearest is " in err
    assert "the plan will be empty" in err and "swapped coordinates" in err and "wrong CRS" in err
    assert out == ""  # --quiet: the warning only


def test_far_users_warned_on_the_console(demo, tmp_path, capsys):
    _users(demo, [(40.0, 10.0), (40.001, 10.001)], [1.0, 2.0])
    args = ["--set", "inputs.users='users.geojson'", "--set", "demand.street_grid=false"]
    code, out, _ = cli(capsys, "validate", demo / "job.toml", *args)
    assert code == 0
    assert "warning: no given user is within reach of a base station: all 2 user(s)" in out
    code, out, err = cli(capsys, "plan", demo / "job.toml", *args)
    assert code == 0, err
    assert "siting: warning: no given user is within reach of a base station" in err
    assert "radio.bs_range_m + radio.surface_range_m (550 m)" in err and "swapped coordinates" in err
    assert "plan: 0 surface(s)" in out
    record = json.loads((tmp_path / "out" / "run.json").read_text())
    assert any("no given user is within reach" in n for n in record["notes"])


# ------------------------------------------------------------------------------------ 6. indoor users
def test_all_users_indoors_names_allow_indoor(demo, tmp_path, capsys, monkeypatch):
    _no_gains(monkeypatch)
    fc = features(demo / "buildings.geojson")
    ring = fc["features"][0]["geometry"]["coordinates"][0]
    inside = [sum(c[0] for c in ring[:-1]) / (len(ring) - 1), sum(c[1] for c in ring[:-1]) / (len(ring) - 1)]
    _users(demo, [inside], [1.0])
    args = ["--set", "inputs.users='users.geojson'", "--set", "demand.street_grid=false"]
    for cmd in ("validate", "plan"):
        err = refused(capsys, cmd, demo / "job.toml", *args)
        assert "inside building footprints" in err and "demand.allow_indoor = true" in err
    assert not (tmp_path / "out").exists()
    code, _, err = cli(capsys, "validate", demo / "job.toml", *args, "--set", "demand.allow_indoor=true")
    assert code == 0, err
