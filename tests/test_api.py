"""The Python API: `siting.plan`, the frozen typed job, the exported names, the README's examples as doctests."""

import dataclasses
import doctest
import os
import tomllib
from pathlib import Path

import numpy as np
import pytest
import scipy.constants

import siting
from siting.errors import JobError
from siting.job import PANEL_KEYS, SCHEMA, Job, load_job, reference_markdown, toml_literal

ROOT = Path(__file__).resolve().parents[1]
DEMO_JOB = ROOT / "demo_district" / "job.toml"


def _listing(folder: Path) -> list[str]:
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


def test_plan_write_false_creates_no_file(tmp_path, monkeypatch):
    """`write=False` computes everything and touches no disk: the folder listing is the same before and after."""
    (tmp_path / "keep.txt").write_text("x")
    monkeypatch.chdir(tmp_path)  # a relative output folder would land here
    before = _listing(tmp_path)
    result = siting.plan(DEMO_JOB, budget={"max_cost": 20000}, output={"folder": "out"}, write=False)
    assert _listing(tmp_path) == before
    assert result.outputs == {} and result.job.budget.max_cost == 20000.0
    assert 0 < result.plan.cost <= 20000.0 + 1e-6 and result.plan.objective > 0
    assert result.notes == list(dict.fromkeys(result.notes))  # each note once


def test_plan_refuses_a_job_file_with_scenarios(tmp_path):
    """A job file with [[scenarios]] is what siting.run_scenarios runs: siting.plan() and siting.run_file() stop
    with a JobError naming the file and the call to use, before any input is read or any file written, instead of
    silently planning the base job only."""
    text = DEMO_JOB.read_text(encoding="utf-8").replace('"buildings.geojson"', f'"{ROOT}/demo_district/buildings.geojson"')
    text = text.replace('"base_stations.geojson"', f'"{ROOT}/demo_district/base_stations.geojson"')
    job = tmp_path / "with_scenarios.toml"
    job.write_text(text + '\n[[scenarios]]\nname = "half"\nbudget.max_cost = 15000.0\n', encoding="utf-8")
    for call in (siting.plan, siting.run_file):
        with pytest.raises(JobError, match=r"with_scenarios\.toml.*siting\.run_scenarios"):
            call(job)
    assert _listing(tmp_path) == ["with_scenarios.toml"]
    assert siting.run_scenarios.__module__ == "siting.scenarios"  # the named call exists


def test_job_is_frozen_and_none_means_no_limit(tmp_path):
    job = Job.from_toml(DEMO_JOB)
    with pytest.raises(dataclasses.FrozenInstanceError):
        job.budget.max_cost = -5
    with pytest.raises(dataclasses.FrozenInstanceError):
        job.budget = None
    assert job.budget.max_panels is None and job.inputs.crs is None and job.solver.threads is None
    assert isinstance(job.candidates.mount_heights_m, tuple) and isinstance(job.surfaces.panels, tuple)
    assert job.surfaces.panels[0].install_cost == 600.0
    # The file encoding round-trips, and the legacy dict of load_job is the same job.
    assert Job.from_dict(job.to_dict()) == job
    assert Job.from_dict(load_job(DEMO_JOB)) == job
    # Overrides are validated like the file: a negative budget is refused with the key named.
    with pytest.raises(JobError, match="budget.max_cost"):
        job.replace(budget={"max_cost": -5})
    with pytest.raises(JobError, match="budget.max_cost"):
        Job.from_toml(DEMO_JOB, budget={"max_cost": -5})
    assert job.replace(budget={"max_cost": 0}).budget.max_cost is None  # 0 in the file still means no limit
    assert Job.from_toml(DEMO_JOB, ["budget.max_panels=3"]).budget.max_panels == 3


def test_job_sections_follow_the_schema():
    job = Job.from_toml(DEMO_JOB)
    for section, keys in SCHEMA.items():
        fields = [f.name for f in dataclasses.fields(getattr(job, section))]
        assert fields == list(keys), section
        doc = type(getattr(job, section)).__doc__
        assert all(f"{name} :" in doc for name in keys), section
    assert [f.name for f in dataclasses.fields(job.surfaces.panels[0])] == list(PANEL_KEYS)


def test_reference_defaults_are_toml():
    """`siting keys` prints defaults as TOML literals (true, ["geojson"]), each of which TOML reads back."""
    ref = reference_markdown()
    assert "| `true` |" in ref and '`["geojson"]`' in ref and "True" not in ref and "'geojson'" not in ref
    for keys in [*SCHEMA.values(), PANEL_KEYS]:
        for key in keys.values():
            if key.default is not None:
                assert tomllib.loads(f"v = {toml_literal(key.default)}")["v"] == key.default


def test_dir_lists_the_api():
    assert set(dir(siting)) == set(siting.__all__)
    for name in siting.__all__:
        assert getattr(siting, name) is not None, name
    assert {"plan", "Job", "Plan", "RunResult", "SitingWarning", "load_stage", "optimise_stage"} <= set(dir(siting))
    assert issubclass(siting.SitingWarning, UserWarning)


def test_stage_parameters_built_once_from_the_job():
    job = Job.from_toml(DEMO_JOB, budget={"max_panels": 4}, solver={"threads": 2})
    params = siting.StageParams.from_job(job)
    q = params.optimise
    assert (q.max_cost, q.max_panels, q.threads, q.target_share, q.load_cap_weight) == (30000.0, 4, 2, None, None)
    assert q.sweep_budget_factors == siting.SWEEP_BUDGET_FACTORS
    assert params.radio.frequency_hz == job.radio.frequency_ghz * 1e9
    with pytest.raises(dataclasses.FrozenInstanceError):
        params.optimise = None


def test_element_count_one_function():
    """N = floor(w/p) floor(h/p) (Björnson, Özdogan, Larsson, IEEE Commun. Mag. 2020, arXiv:2006.03377)."""
    from siting import radio
    from siting.outputs import element_count as outputs_element_count

    assert outputs_element_count is radio.element_count  # one function, no copy in the outputs

    assert radio.element_count(0.3, 0.3, 0.01) == 900  # exact multiples keep their last row
    # Half a wavelength at 28 GHz: c / 28 GHz / 2 = 5.3534 mm (c exact by the SI definition of the metre).
    pitch = radio.element_pitch_m(28e9, 0.5)
    assert pitch == pytest.approx(scipy.constants.c / 28e9 / 2, rel=1e-15)
    assert radio.element_count(0.5, 0.5, pitch) == 93 * 93
    rng = np.random.default_rng(5)
    w, h = rng.uniform(0.05, 3.0, 200), rng.uniform(0.05, 3.0, 200)
    np.testing.assert_array_equal(radio.element_count(w, h, pitch), outputs_element_count(w, h, pitch))


def test_readme_python_api_examples_run(monkeypatch):
    """The README's "Python API" examples run as doctests, from the repository root."""
    monkeypatch.chdir(ROOT)
    result = doctest.testfile(str(ROOT / "README.md"), module_relative=False, verbose=False,
                              optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.attempted >= 10
    assert result.failed == 0
    assert os.getcwd() == str(ROOT)


def test_tile_notes_once_per_stage():
    """A note every tile repeats with its own count is one note per stage, with the sum; others stay as they are."""
    from siting.executor import merge_tile_notes

    per_tile = ["3GPP TR 38.901 UMi: 3 value(s) of d2d_m outside [10, 5000]",
                "station A: above 20 m", "3GPP TR 38.901 UMi: 6 value(s) of d2d_m outside [10, 5000]",
                "station A: above 20 m", "height 1.5 m", "height 2.5 m"]
    assert merge_tile_notes(per_tile) == [
        "3GPP TR 38.901 UMi: 9 value(s) of d2d_m outside [10, 5000] (summed over 2 tiles)",
        "station A: above 20 m", "height 1.5 m", "height 2.5 m"]
    assert merge_tile_notes([]) == []
