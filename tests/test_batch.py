"""The batch queue: three jobs with one broken -> two plans, one clear error, exit 2, a summary; resume."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pandas as pd

from .field_jobs import ROOT, small_job


def _cli(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", "import sys; from siting.cli import main; sys.exit(main())", *args],
                          capture_output=True, text=True, timeout=600, cwd=ROOT)


def test_batch_of_three_with_one_broken(tmp_path):
    jobs = tmp_path / "jobs"
    jobs.mkdir()
    small_job(jobs, "a", max_cost=10000.0, output="out_a")
    small_job(jobs, "b", max_cost=20000.0, output="out_b")
    broken = small_job(jobs, "c", output="out_c")
    broken.write_text(broken.read_text().replace("[radio]", "[radio]\nfrequncy_ghz = 28.0"))
    proc = _cli("plan", str(jobs))
    assert proc.returncode == 2, proc.stderr
    assert (jobs / "out_a" / "run.json").is_file() and (jobs / "out_b" / "run.json").is_file()
    assert not (jobs / "out_c").exists()
    assert "c.toml" in proc.stderr and "did you mean 'frequency_ghz'" in proc.stderr and "Traceback" not in proc.stderr
    summary = pd.read_csv(jobs / "batch_summary.csv")
    assert summary["status"].tolist() == ["ok", "ok", "failed"]
    assert summary["exit_code"].tolist() == [0, 0, 2]
    assert summary["optimality"].iloc[:2].tolist() == ["proven optimal"] * 2
    assert "| a.toml | ok |" in proc.stdout and "exit code 2" in proc.stdout

    # Resume: the finished jobs are not rerun, the broken one is (and fails again); a fixed one then runs.
    before = (jobs / "out_a" / "run.json").stat().st_mtime_ns
    proc = _cli("plan", str(jobs / "a.toml"), str(jobs / "b.toml"), str(jobs / "c.toml"))
    assert proc.returncode == 2
    assert (jobs / "out_a" / "run.json").stat().st_mtime_ns == before
    assert pd.read_csv(jobs / "batch_summary.csv")["status"].tolist() == ["done", "done", "failed"]
    broken.write_text(broken.read_text().replace("frequncy_ghz = 28.0", ""))
    proc = _cli("plan", str(jobs))
    assert proc.returncode == 0, proc.stderr
    state = json.loads((jobs / "siting_queue.json").read_text())
    assert {Path(k).name: v["status"] for k, v in state["jobs"].items()} == {"a.toml": "ok", "b.toml": "ok",
                                                                              "c.toml": "ok"}
    # a changed job file is rerun
    (jobs / "a.toml").write_text((jobs / "a.toml").read_text().replace("max_cost = 10000.0", "max_cost = 12000.0"))
    proc = _cli("plan", str(jobs))
    assert pd.read_csv(jobs / "batch_summary.csv")["status"].tolist() == ["ok", "done", "done"]
