"""Scenarios: a shared stage cache, a failing scenario that stops nothing, robustness against a direct recount."""

from __future__ import annotations

import json
from collections import Counter

import pandas as pd
import pytest

from siting.errors import JobError
from siting.scenarios import parse_scenarios, read_scenarios, run_scenarios

from .field_jobs import small_job

SCENARIOS = """
[[scenarios]]
name = "b10k"
budget.max_cost = 10000.0

[[scenarios]]
name = "b20k"

[[scenarios]]
name = "b15k"
"budget.max_cost" = 15000.0
time_limit_s = 30.0

[[scenarios]]
name = "broken"
budget.max_cost = -5.0

[[scenarios]]
name = "two-panels"
budget = { max_panels = 2 }
outputs = "full"
"""


@pytest.fixture(scope="module")
def scenario_run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("scen")
    job = small_job(tmp, extra=SCENARIOS)
    return run_scenarios(job), tmp / "out"


def test_budget_scenarios_take_gains_from_the_shared_cache(scenario_run):
    result, _ = scenario_run
    runs = {r.name: r for r in result.runs}
    assert any(s.startswith("gains") for s in runs["b10k"].recomputed)  # the first computes them
    for name in ("b20k", "b15k", "two-panels"):
        assert runs[name].recomputed == ["optimise"], name  # candidates and gains from the cache


def test_a_failing_scenario_does_not_stop_the_others(scenario_run):
    result, out = scenario_run
    runs = {r.name: r for r in result.runs}
    assert not runs["broken"].ok and runs["broken"].exit_code == 2
    assert "budget.max_cost" in runs["broken"].error and "broken" in runs["broken"].error
    assert all(runs[n].ok for n in ("b10k", "b20k", "b15k", "two-panels")) and result.exit_code == 2
    for n in ("b10k", "b20k", "b15k", "two-panels"):
        assert (out / "scenarios" / n / "run.json").is_file()
    assert not (out / "scenarios" / "broken").exists()
    # light output sets by default (run.json and survey.csv), the whole set on request
    assert sorted(p.name for p in (out / "scenarios" / "b10k").iterdir()) == ["run.json", "survey.csv"]
    assert (out / "scenarios" / "two-panels" / "report.html").is_file()
    # the overrides took effect: budgets, a panel count and a per-scenario time limit
    assert runs["b10k"].row["cost"] <= 10000 + 1e-6 and runs["two-panels"].row["surfaces"] <= 2
    assert runs["b15k"].row["time_limit_s"] == 30.0 and runs["b20k"].row["time_limit_s"] == 60.0
    # more money never covers less (each plan is proven optimal)
    w = {n: runs[n].row["covered_weight"] for n in ("b10k", "b15k", "b20k")}
    assert w["b10k"] <= w["b15k"] <= w["b20k"]


def test_robustness_equals_a_direct_recount_from_the_scenario_plans(scenario_run):
    """Recount from each scenario's own run.json (its chosen sites), independent of the in-memory tables."""
    result, out = scenario_run
    recount = Counter()
    for name in result.counted:
        record = json.loads((out / "scenarios" / name / "run.json").read_text())
        recount.update({int(s["site_id"]) for s in record["sites"]})
    table = result.robustness.set_index("site_id")["chosen_in"]
    assert dict(table) == dict(recount)
    robust = pd.read_csv(out / "robust_survey.csv")
    assert list(robust["chosen_in"]) == sorted(robust["chosen_in"], reverse=True)  # most robust first
    assert robust["site_id"].tolist() == result.robustness["site_id"].tolist()
    assert {"job_fingerprint", "status", "rejects_wall"} <= set(robust.columns)


def test_comparison_report_lists_every_scenario(scenario_run):
    result, out = scenario_run
    md = (out / "scenarios.md").read_text()
    for name in ("b10k", "b20k", "b15k", "broken", "two-panels"):
        assert f"| {name} |" in md
    assert "proven optimal" in md and "failed" in md and "Site robustness" in md
    record = json.loads((out / "scenarios.json").read_text())
    assert [s["name"] for s in record["scenarios"]] == ["b10k", "b20k", "b15k", "broken", "two-panels"]
    assert "<table>" in (out / "scenarios.html").read_text()


def test_scenario_file_and_bad_definitions(tmp_path):
    extra = tmp_path / "more.toml"
    extra.write_text('[[scenarios]]\nname = "f39"\nradio.frequency_ghz = 39.0\noptimise.time_limit_s = 5.0\n')
    job = small_job(tmp_path, extra='[[scenarios]]\nname = "a"\n')
    text = job.read_text().replace("[inputs]", f'[inputs]\nscenarios = "{extra}"', 1)
    job.write_text(text)
    _, scenarios = read_scenarios(job)
    assert [s.name for s in scenarios] == ["a", "f39"]
    assert set(scenarios[1].overrides) == {("radio", "frequency_ghz", 39.0), ("solver", "time_limit_s", 5.0)}
    with pytest.raises(JobError, match="duplicate scenario name 'x'"):
        parse_scenarios([{"name": "x"}, {"name": "x"}], "job")
    with pytest.raises(JobError, match="name '../up'"):
        parse_scenarios([{"name": "../up"}], "job")


def test_summary_says_which_plans_are_proven_and_which_stopped_at_a_gap(tmp_path):
    """Reporting of the time limit: a plan stopped by it is named with its gap (rows as the runner gives them)."""
    from siting.batch import BatchResult, summary_text
    from siting.scenario_report import comparison_md
    from siting.scenarios import ScenarioResult, ScenarioRun, proven_text

    assert proven_text("optimal", 0.0) == "proven optimal"
    assert proven_text("time_limit", 0.0312) == "stopped at gap 3.12 % (time_limit)"
    runs = [ScenarioRun("fast", True, row={"status": "optimal", "proven": proven_text("optimal", 0.0), "gap": 0.0}),
            ScenarioRun("slow", True, row={"status": "time_limit", "proven": proven_text("time_limit", 0.05),
                                           "gap": 0.05})]
    md = comparison_md(ScenarioResult(runs, pd.DataFrame(), [], ""))
    assert "| fast | optimal | proven optimal |" in md and "stopped at gap 5.00 % (time_limit)" in md
    assert "Stopped at a gap: slow" in md
    batch = BatchResult([{"job": "/x/a.toml", "status": "ok", "optimality": "proven optimal", "exit_code": 0},
                         {"job": "/x/b.toml", "status": "ok", "optimality": proven_text("time_limit", 0.01),
                          "exit_code": 0},
                         {"job": "/x/c.toml", "status": "failed", "exit_code": 3, "error": "no usable plan"}])
    text = summary_text(batch)
    assert "| a.toml | ok |" in text and "stopped at gap 1.00 %" in text and batch.exit_code == 3


def test_parallel_scenarios_give_the_same_plans(scenario_run, tmp_path):
    """Scenarios in two processes (after the first fills the cache) choose exactly what the sequential run chose."""
    sequential, _ = scenario_run
    job = small_job(tmp_path, extra=SCENARIOS)
    parallel = run_scenarios(job, parallel=2)
    assert [r.name for r in parallel.runs] == [r.name for r in sequential.runs]
    for a, b in zip(sequential.runs, parallel.runs):
        assert a.ok == b.ok and a.exit_code == b.exit_code
        if a.ok:
            assert sorted(a.chosen["site_id"]) == sorted(b.chosen["site_id"]) and b.recomputed == a.recomputed
    pd.testing.assert_frame_equal(sequential.robustness, parallel.robustness)


def test_cli_runs_the_scenarios_of_a_job(tmp_path):
    import subprocess
    import sys

    from .field_jobs import ROOT

    job = small_job(tmp_path, extra='[[scenarios]]\nname = "ok"\n\n'
                                    '[[scenarios]]\nname = "bad"\nradio.frequncy_ghz = 3.0\n')
    proc = subprocess.run([sys.executable, "-c", "import sys; from siting.cli import main; sys.exit(main())", "plan",
                           str(job), "--set", "budget.max_cost=8000.0"], capture_output=True, text=True, timeout=600,
                          cwd=ROOT)
    assert proc.returncode == 2, proc.stderr
    assert "scenario bad failed" in proc.stderr and "did you mean 'frequency_ghz'" in proc.stderr
    assert "scenario ok: " in proc.stdout and "proven optimal" in proc.stdout
    record = json.loads((tmp_path / "out" / "scenarios" / "ok" / "run.json").read_text())
    assert record["parameters"]["budget"]["max_cost"] == 8000.0  # --set reaches every scenario


def test_validate_checks_every_scenario(tmp_path):
    from siting.scenarios import validate_scenarios

    job = small_job(tmp_path, extra='[[scenarios]]\nname = "ok"\n\n[[scenarios]]\nname = "bad"\nbudget.max_cst = 1.0\n')
    said: list[str] = []
    assert validate_scenarios(job, say=said.append) == 2
    assert said[0] == "scenario ok: valid" and "did you mean 'max_cost'" in said[1]
