"""Outputs never damage what the user owns: the findings of the output-folder audit, one test each.

An input the job reads is never in the folder the run writes; scenario jobs and batches get the folder checks of a
plain job; a commit that fails halfway moves every file back; nothing is written through a symbolic link; a
folder counts as siting's only by a record siting writes; a stray commit journal is not trusted.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import pandas as pd
import pytest

from siting.errors import JobError, SitingError
from siting.job import Job
from siting.outputs import atomic, check_output_folder, write_outputs

from .field_jobs import small_job
from .test_outputs import _snapshot, make_bundle


def _job_with_inputs(folder: Path, lines: str, **kw) -> Path:
    """A small job whose ``[inputs]`` section gets ``lines`` (e.g. ``survey_results = "out/survey.csv"``)."""
    path = small_job(folder, **kw)
    path.write_text(path.read_text().replace("[inputs]\n", f"[inputs]\n{lines}\n", 1))
    return path


def _tree(folder: Path) -> dict:
    return {p.relative_to(folder).as_posix(): (p.read_bytes() if p.is_file() and not p.is_symlink() else "entry")
            for p in sorted(folder.rglob("*"))}


# ------------------------------------------------------------------ 1. an input inside the output folder
@pytest.mark.parametrize("key, value", [("survey_results", "out/survey.csv"), ("previous_plan", "out"),
                                        ("previous_plan", "out/run.json"), ("scenarios", "out/more.toml")])
def test_an_input_in_the_output_folder_is_refused_before_any_work(tmp_path, key, value):
    """The field teams' verdicts filled into out/survey.csv: the re-plan would replace the file it reads."""
    from siting.runner import run

    out = tmp_path / "out"
    write_outputs(out, make_bundle())  # a previous set: out/ is siting's, and holds survey.csv and run.json
    (out / "more.toml").write_text("")
    job_file = _job_with_inputs(tmp_path, f'{key} = "{value}"')
    before = _tree(out)
    with pytest.raises(JobError) as err:
        run(Job.from_toml(job_file), job_file=job_file)
    msg = str(err.value)
    assert f"inputs.{key} '{(tmp_path / value).resolve()}'" in msg, msg
    assert "copy the file out of the output folder" in msg and "choose another output.folder" in msg
    assert _tree(out) == before  # no log, no cache, the verdicts untouched


def test_an_input_outside_the_output_folder_is_accepted(tmp_path):
    from siting.runner import check_writes

    write_outputs(tmp_path / "out", make_bundle())
    (tmp_path / "verdicts.csv").write_text("site_id,status\n")
    job_file = _job_with_inputs(tmp_path, 'survey_results = "verdicts.csv"')
    check_writes(Job.from_toml(job_file), job_file=job_file)


# ------------------------------------------------------------------ 2. and 9. scenario jobs
SCENARIO = '\n[[scenarios]]\nname = "low"\nbudget.max_cost = 10000.0\n'


def test_scenarios_refuse_the_input_folder(tmp_path):
    from siting.scenarios import run_scenarios

    (tmp_path / "scenarios.md").write_text("# my own notes on scenarios\n")
    (tmp_path / "robust_survey.csv").write_text("mine\n")
    job = small_job(tmp_path, output=".", extra=SCENARIO)
    before = _tree(tmp_path)
    with pytest.raises(JobError, match=r"is the folder of the input .*job\.toml") as err:
        run_scenarios(job)
    assert "scenarios.md" in str(err.value) and "robust_survey.csv" in str(err.value)
    assert _tree(tmp_path) == before


def test_scenarios_refuse_a_foreign_folder_unless_overwrite(tmp_path):
    from siting.scenarios import check_base_folder, read_scenarios, run_scenarios

    out = tmp_path / "out"
    out.mkdir()
    (out / "scenarios.html").write_text("<p>mine</p>\n")
    (out / "notes.txt").write_text("mine\n")
    job = small_job(tmp_path, extra=SCENARIO)
    with pytest.raises(JobError) as err:
        run_scenarios(job)
    msg = str(err.value)
    assert "not empty and no siting run created it" in msg and "scenarios.html" in msg and "--overwrite" in msg
    assert _tree(out) == {"notes.txt": b"mine\n", "scenarios.html": b"<p>mine</p>\n"}
    raw, scenarios = read_scenarios(job)
    check_base_folder(raw, scenarios, job, out.resolve(), overwrite=True)  # --overwrite lifts exactly this


def test_scenarios_into_a_file_give_a_clear_error(tmp_path):
    from siting.scenarios import run_scenarios

    (tmp_path / "afile.txt").write_text("x\n")
    job = small_job(tmp_path, output="afile.txt", extra=SCENARIO)
    with pytest.raises(JobError, match="is an existing file, not a folder: remove or rename the file"):
        run_scenarios(job)
    assert (tmp_path / "afile.txt").read_text() == "x\n"


def test_scenarios_rerun_replaces_only_the_comparison_they_wrote(tmp_path):
    from siting.scenarios import run_scenarios

    job = small_job(tmp_path, extra=SCENARIO)
    first = run_scenarios(job)
    out = tmp_path / "out"
    record = json.loads((out / "scenarios.json").read_text())
    assert sorted(record["manifest"]["files"]) == sorted(["scenarios.md", "scenarios.html", "scenarios.json",
                                                          "robust_survey.csv"])
    again = run_scenarios(job)  # its own files: replaced without --overwrite
    assert [r.row["surfaces"] for r in again.runs] == [r.row["surfaces"] for r in first.runs]
    (out / "scenarios.json").unlink()
    (out / "scenarios.md").write_text("edited by hand, with no record left")
    with pytest.raises(JobError, match=r"scenario comparison would replace: scenarios\.md"):
        run_scenarios(job)
    assert (out / "scenarios.md").read_text() == "edited by hand, with no record left"


# ------------------------------------------------------------------ 3. a commit failing halfway
def _freeze(monkeypatch, sub: Path):
    """No entry of ``sub`` can be added, removed or renamed (as ``chattr +i sub`` or another owner's folder)."""
    real = atomic.os.replace
    inside = str(sub) + os.sep

    def replace(src, dst):
        if str(src).startswith(inside) or str(dst).startswith(inside):
            raise PermissionError(1, "Operation not permitted")
        return real(src, dst)
    monkeypatch.setattr(atomic.os, "replace", replace)


def test_a_commit_failing_halfway_restores_the_previous_set(tmp_path, monkeypatch):
    d = tmp_path / "out"
    write_outputs(d, make_bundle(random_state=3))
    before = _snapshot(d)
    _freeze(monkeypatch, d / "figures")
    with pytest.raises(SitingError, match="Operation not permitted") as err:
        write_outputs(d, make_bundle(random_state=4, budget=900.0))
    assert "every file was moved back" in str(err.value) and "previous set" in str(err.value)
    monkeypatch.undo()
    assert _snapshot(d) == before  # run.json, report and layers of the previous set, nothing else
    write_outputs(d, make_bundle(random_state=4, budget=900.0))  # and the next run commits normally
    assert _snapshot(d)["survey.csv"] != before["survey.csv"]


@pytest.mark.parametrize("previous", [True, False])
def test_a_file_named_figures_is_refused_before_anything_is_replaced(tmp_path, previous):
    d = tmp_path / "out"
    d.mkdir()
    if previous:
        write_outputs(d, make_bundle(random_state=3))
        for p in (d / "figures").iterdir():
            p.unlink()
        (d / "figures").rmdir()
    (d / "figures").write_text("user's file named figures\n")
    before = _snapshot(d)
    for overwrite in (False, True):
        with pytest.raises(SitingError, match="'figures' is a file where the output set needs a folder"):
            write_outputs(d, make_bundle(random_state=4, budget=900.0), overwrite=overwrite)
        with pytest.raises(JobError, match="'figures' is a file where the output set needs a folder"):
            check_output_folder(d, [], overwrite=overwrite)
    assert _snapshot(d) == before and not any(p.name.startswith(atomic.TMP_PREFIX) for p in d.iterdir())


# ------------------------------------------------------------------ 4. batch summaries
def test_batch_refuses_a_users_summary_files(tmp_path):
    from siting.batch import run_batch

    jobs = tmp_path / "jobs"
    jobs.mkdir()
    small_job(jobs, "a", output="../out_a")
    (jobs / "batch_summary.md").write_text("# my own summary of the batch\n")
    (jobs / "batch_summary.csv").write_text("my,own\n")
    before = _tree(tmp_path)
    with pytest.raises(JobError, match=r"batch_summary\.md' was not written by a siting batch") as err:
        run_batch([jobs])
    assert "batch_summary.csv" in str(err.value) and "--queue" in str(err.value)
    assert _tree(tmp_path) == before  # no job ran, no queue file


def test_batch_replaces_its_own_summary_but_not_an_edited_one(tmp_path):
    from siting.batch import run_batch

    jobs = tmp_path / "jobs"
    jobs.mkdir()
    broken = small_job(jobs, "c", output="../out_c")
    broken.write_text(broken.read_text().replace("[radio]", "[radio]\nfrequncy_ghz = 28.0"))  # fails at once
    assert run_batch([jobs]).exit_code == 2
    assert run_batch([jobs]).exit_code == 2  # its own summary: replaced
    assert pd.read_csv(jobs / "batch_summary.csv")["status"].tolist() == ["failed"]
    (jobs / "batch_summary.md").write_text("# notes added by hand\n")
    with pytest.raises(JobError, match="was not written by a siting batch"):
        run_batch([jobs])
    assert (jobs / "batch_summary.md").read_text() == "# notes added by hand\n"
    (jobs / "siting_queue.json").write_text("[1, 2]")  # not a queue state: refused even with overwrite
    with pytest.raises(JobError, match="is not a queue state siting wrote"):
        run_batch([jobs], overwrite=True)


# ------------------------------------------------------------------ 5. siting.log and .cache
def test_a_symlinked_log_is_refused_and_never_followed(tmp_path):
    from siting.runner import _log_handler

    victim = tmp_path / "victim.txt"
    victim.write_text("precious file outside the output folder\n")
    out = tmp_path / "out"
    out.mkdir()
    os.symlink("../victim.txt", out / "siting.log")
    for overwrite in (False, True):
        with pytest.raises(JobError, match="'siting.log' is a symbolic link"):
            check_output_folder(out, [], overwrite=overwrite)
    with pytest.raises(JobError, match="not a link"):
        _log_handler(out)
    assert victim.read_text() == "precious file outside the output folder\n"


@pytest.mark.parametrize("own", ["siting.log", ".cache"])
def test_a_log_or_cache_of_the_user_does_not_make_a_folder_sitings(tmp_path, own):
    from siting.preflight import check_job

    proj = tmp_path / "proj"
    proj.mkdir()
    if own == ".cache":
        (proj / ".cache").mkdir()
        (proj / ".cache" / "pip-like-cache.bin").write_text("cache of another tool\n")
    else:
        (proj / "siting.log").write_text("my own project log: site visits 2024\n")
    (proj / "budget.xlsx").write_text("pretend spreadsheet\n")
    job_file = small_job(tmp_path, output="proj")
    with pytest.raises(JobError, match="not empty and no siting run created it") as err:
        check_job(Job.from_toml(job_file), job_file=job_file)
    assert "budget.xlsx" in str(err.value)
    check_job(Job.from_toml(job_file), job_file=job_file, overwrite=True)


def test_the_folder_of_a_run_killed_before_its_first_set_is_sitings(tmp_path):
    """A run killed after its first checkpoint leaves only .cache and siting.log: the rerun resumes there."""
    from siting.cache import StageCache

    out = tmp_path / "out"
    StageCache(out / ".cache").store("candidates", "a" * 64, {"t": pd.DataFrame({"a": [1]})})
    (out / "siting.log").write_text("... siting: job started\n")
    check_output_folder(out, [])
    manifest = next((out / ".cache").glob("*/manifest.json"))
    manifest.write_text(manifest.read_text().replace('"key"', '"kye"'))  # not a record siting wrote
    with pytest.raises(JobError, match="not empty and no siting run created it"):
        check_output_folder(out, [])


# ------------------------------------------------------------------ 6. a symlinked figures/ folder
def test_a_symlinked_figures_folder_is_never_written_through(tmp_path):
    d = tmp_path / "out"
    write_outputs(d, make_bundle(random_state=3))
    web = tmp_path / "webroot"
    web.mkdir()
    (web / "district_map.png").write_bytes(b"the web team's own district map\n")
    for p in (d / "figures").iterdir():
        p.unlink()
    (d / "figures").rmdir()
    os.symlink("../webroot", d / "figures")
    before, web_before = _snapshot(d), _tree(web)
    for overwrite in (False, True):
        with pytest.raises(SitingError, match="'figures' is a symbolic link"):
            write_outputs(d, make_bundle(random_state=4, budget=900.0), overwrite=overwrite)
        with pytest.raises(JobError, match="'figures' is a symbolic link"):
            check_output_folder(d, [], overwrite=overwrite)
    assert _tree(web) == web_before and _snapshot(d) == before


# ------------------------------------------------------------------ 7. a stray commit journal
def test_a_planted_journal_is_not_trusted(tmp_path):
    d = tmp_path / "out"
    d.mkdir()
    (d / "report.html").write_text("<p>the user's own hand-edited report</p>\n")
    (d / atomic.JOURNAL).write_text(json.dumps({"staging": atomic.STAGING_PREFIX + "000000000000", "files": [],
                                                "remove": ["report.html", "survey.csv"]}))
    before = _snapshot(d)
    assert atomic.read_manifest(d) == [] and atomic.read_journal(d)[0] == "foreign"
    atomic.recover(d)
    assert _snapshot(d) == before
    with pytest.raises(JobError, match=r"no siting run created there and that a run would replace: "
                                       r"\.siting-commit\.json, report\.html"):
        check_output_folder(d, [])
    with pytest.raises(SitingError, match="report.html"):
        write_outputs(d, make_bundle())
    assert _snapshot(d) == before


def test_a_journal_rolls_back_only_the_files_it_staged(tmp_path, monkeypatch):
    """A journal of siting's, after a kill: a file whose bytes are not the ones staged stays where it is."""
    d = tmp_path / "out"
    write_outputs(d, make_bundle(random_state=3))

    class Killed(BaseException):
        pass
    real = atomic.os.replace
    moved = [0]

    def replace(src, dst):
        if atomic.STAGING_PREFIX in str(src) and atomic.STAGING_PREFIX not in str(dst):
            if moved[0] == 3:
                raise Killed()
            moved[0] += 1
        return real(src, dst)
    monkeypatch.setattr(atomic.os, "replace", replace)
    with pytest.raises(Killed):
        write_outputs(d, make_bundle(random_state=4, budget=900.0))
    monkeypatch.undo()
    journal = json.loads((d / atomic.JOURNAL).read_text())
    moved_in = [r for r in journal["files"] if (d / r).is_file()]
    assert moved_in
    (d / moved_in[0]).write_text("the user replaced this file meanwhile")
    atomic.recover(d)
    assert (d / moved_in[0]).read_text() == "the user replaced this file meanwhile"
    assert (d / "run.json").is_file() and not (d / atomic.JOURNAL).exists()


# ------------------------------------------------------------------ 8. an empty output folder name
def test_an_empty_output_folder_is_refused(tmp_path, monkeypatch):
    """``output.folder = ""`` would write into the current folder: refused by the job check and by the runner."""
    import dataclasses

    from siting.runner import run

    job_file = small_job(tmp_path, output="")
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    with pytest.raises(JobError, match="output.folder"):
        run(Job.from_toml(job_file), job_file=job_file)
    job = Job.from_toml(small_job(tmp_path, "ok"))
    job = dataclasses.replace(job, output=dataclasses.replace(job.output, folder=""))  # past the job check
    with pytest.raises(JobError, match=r"output.folder: empty, which would write the output set into the current "):
        run(job)
    assert list(elsewhere.iterdir()) == []
