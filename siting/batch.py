"""Many jobs overnight: a resumable queue with a summary table and the worst job's exit code.

``siting plan a.toml b.toml ...`` (or a folder: every ``*.toml`` in it, sorted) runs the jobs one after another.
A job whose file holds scenarios runs them (:mod:`siting.scenarios`).  One failing job does not stop the others.

Resume: the queue state file (default ``siting_queue.json`` in the jobs' common folder; ``--queue`` names another)
records each finished job with a digest of its job file, the ``--set`` overrides and its input files.  A rerun
skips a job that finished with the same digest and whose output is still there (``done`` in the summary), reruns
failed and unfinished ones, and every job takes what it can from its stage cache, so a queue killed at 3 a.m.
resumes inside the job it stopped in.  Time limits: ``solver.time_limit_s`` of each job (``--set`` for all of
them, a scenario's own override for it); the summary says which plans are proven optimal and which stopped at a gap.

Exit code: the worst job's (0 ok, 1 unexpected error, 2 bad job or input data, 3 the solver gave no usable plan).
"""

from __future__ import annotations

import json
import os
import time
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from .cache import digest, file_sha256
from .errors import JobError, SitingError
from .outputs import atomic

QUEUE_FILE = "siting_queue.json"
_INPUT_KEYS = ("buildings", "base_stations", "sites", "users", "survey_results", "scenarios", "previous_plan")
SUMMARY_COLUMNS = ["job", "status", "surfaces", "cost", "covered_weight", "covered_share", "optimality", "time_s",
                   "exit_code", "output", "error"]


def expand_jobs(paths: list[str | Path]) -> list[Path]:
    """Job files from files and folders (a folder: its ``*.toml`` files, sorted); raises :class:`JobError`."""
    out: list[Path] = []
    for p in map(Path, paths):
        if p.is_dir():
            found = sorted(q for q in p.glob("*.toml") if q.is_file())
            if not found:
                raise JobError(f"folder '{p}' holds no job file (*.toml); give job files or a folder of them", str(p))
            out += found
        else:
            out.append(p)  # a missing file fails as that job, with the job loader's message
    return list(dict.fromkeys(q.resolve() if q.exists() else q for q in out))


def job_digest(path: Path, overrides: list[str] | None) -> str:
    """Digest of a job file, the overrides and the input files it names (what decides whether to rerun it)."""
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, tomllib.TOMLDecodeError, UnicodeDecodeError):
        return ""
    inputs = raw["inputs"] if isinstance(raw.get("inputs"), dict) else {}
    hashes = {}
    for k in _INPUT_KEYS:
        v = inputs.get(k)
        if isinstance(v, str) and v:
            f = (path.parent / v)
            f = f / "run.json" if f.is_dir() else f
            hashes[k] = file_sha256(f) if f.is_file() else "missing"
    return digest([file_sha256(path), list(overrides or []), hashes])


@dataclass
class BatchResult:
    """The summary of a queue: one row per job (see :data:`SUMMARY_COLUMNS`) and the files written."""

    rows: list[dict[str, Any]]
    files: dict[str, Path] = field(default_factory=dict)

    @property
    def exit_code(self) -> int:
        """The worst job's exit code."""
        return max((int(r["exit_code"]) for r in self.rows), default=0)

    def table(self) -> pd.DataFrame:
        return pd.DataFrame(self.rows, columns=SUMMARY_COLUMNS)


def _read_state(path: Path) -> dict:
    try:
        state = json.loads(path.read_text(encoding="utf-8"))
        return state if state.get("format") == "siting-queue" else {"jobs": {}}
    except (OSError, ValueError, AttributeError):
        return {"jobs": {}}


def _is_queue_state(path: Path) -> bool:
    """True when ``path`` is a queue state file siting wrote (a JSON object of format ``siting-queue``)."""
    try:
        state = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return isinstance(state, dict) and state.get("format") == "siting-queue" and isinstance(state.get("jobs"), dict)


#: The summary files, in the folder of the queue state file.
SUMMARY_FILES = {"summary_md": "batch_summary.md", "summary_csv": "batch_summary.csv"}


def _looks_like_summary(path: Path) -> bool:
    """A summary an earlier version wrote (its queue state kept no record of it): siting's header line."""
    try:
        with open(path, encoding="utf-8") as fh:
            head = fh.readline()
    except (OSError, UnicodeDecodeError):
        return False
    return head.rstrip("\n") == ("# Batch summary" if path.suffix == ".md" else ",".join(SUMMARY_COLUMNS))


def batch_file_problems(qpath: Path, state: dict | None = None) -> list[str]:
    """Files of the queue that a run would replace but that no siting batch wrote, as sentences naming the file
    and the fix: a queue state file that is not siting's, and ``batch_summary.md|csv`` that the queue state does
    not record (with the SHA-256 of what the batch wrote).  Links are never written through."""
    problems = []
    if qpath.is_symlink() or (qpath.exists() and not _is_queue_state(qpath)):
        problems.append(f"queue file '{qpath}' exists and is not a queue state siting wrote (a link, or not a "
                        "siting-queue JSON file); move it away or name another queue file with --queue")
        state = {"jobs": {}}
    state = _read_state(qpath) if state is None else state
    record = state.get("summary") if isinstance(state.get("summary"), dict) else None
    for name in SUMMARY_FILES.values():
        p = qpath.parent / name
        if not (p.exists() or p.is_symlink()):
            continue
        if p.is_symlink() or not p.is_file():
            ok = False
        elif record is not None:
            known = record.get(name)
            ok = isinstance(known, list) and file_sha256(p) in known
        else:  # an earlier version kept no record: its summary beside its own queue state
            ok = _is_queue_state(qpath) and _looks_like_summary(p)
        if not ok:
            problems.append(f"'{p}' was not written by a siting batch (or was edited since), and the batch summary "
                            f"would replace it; move it away, or name a queue file in another folder with --queue "
                            "(the summary is written beside it)")
    return problems


def _run_single(path: Path, overrides, *, fresh, workers, scheduler, progress, overwrite=False) -> dict:
    from .job import Job
    from .runner import run
    from .scenarios import _row

    t0 = time.perf_counter()
    result = run(Job.from_toml(path, overrides), fresh=fresh, workers=workers, scheduler=scheduler,
                 progress=progress, job_file=path, overwrite=overwrite)
    row = _row(result, time.perf_counter() - t0)
    return {"status": "ok", "surfaces": row["surfaces"], "cost": row["cost"], "covered_weight": row["covered_weight"],
            "covered_share": row["covered_share"], "optimality": row["proven"], "time_s": row["time_s"],
            "exit_code": 0, "output": row["folder"], "error": ""}


def _run_scenarios(path: Path, overrides, *, fresh, workers, scheduler, progress, overwrite=False) -> dict:
    from .scenarios import run_scenarios

    t0 = time.perf_counter()
    res = run_scenarios(path, overrides, fresh=fresh, workers=workers, scheduler=scheduler, progress=progress,
                        overwrite=overwrite)
    ok = [r for r in res.runs if r.ok]
    proven = sum(r.row.get("status") == "optimal" for r in ok)
    failed = [f"{r.name}: {r.error.splitlines()[0]}" for r in res.runs if not r.ok]
    return {"status": "ok" if not failed else "failed", "surfaces": None, "cost": None, "covered_weight": None,
            "covered_share": None,
            "optimality": f"{len(ok)} of {len(res.runs)} scenarios ran, {proven} proven optimal"
                          + (f", {len(ok) - proven} stopped at a gap" if len(ok) > proven else ""),
            "time_s": round(time.perf_counter() - t0, 2), "exit_code": res.exit_code,
            "output": str(res.files.get("scenarios_md", "")), "error": "; ".join(failed)}


def run_job(path: Path, overrides, kw: dict) -> dict:
    """One queue entry (a job, or a job's scenarios) as a summary row; a failure is returned, not raised."""
    from .scenarios import has_scenarios

    try:
        row = (_run_scenarios if has_scenarios(path) else _run_single)(path, overrides, **kw)
    except SitingError as exc:
        row = {"status": "failed", "exit_code": exc.exit_code, "error": str(exc)}
    except Exception as exc:  # noqa: BLE001 - one failing job must not stop the queue
        row = {"status": "failed", "exit_code": 1, "error": f"unexpected error: {type(exc).__name__}: {exc}"}
    return {c: row.get(c) for c in SUMMARY_COLUMNS if c != "job"}


def _output_present(row: dict) -> bool:
    out = Path(str(row.get("output") or ""))
    return bool(row.get("output")) and (out.is_file() or (out / "run.json").is_file())


def run_batch(paths: list[str | Path], overrides: list[str] | None = None, *, queue_file: str | Path | None = None,
              fresh: bool = False, workers: int = 0, scheduler: str | None = None, progress: bool = False,
              log=None, parallel: int = 1, overwrite: bool = False) -> BatchResult:
    """Run a queue of jobs (files or folders of ``*.toml``), resumably; return the summary.

    Parameters
    ----------
    paths : list of str or Path
        Job files and folders of job files.
    overrides : list of str, optional
        ``section.key=value`` strings applied to every job (e.g. ``solver.time_limit_s=600``).
    queue_file : str or Path, optional
        The queue state file (default ``siting_queue.json`` in the jobs' common folder).
    fresh : bool
        Rerun every job and ignore the stage caches.
    workers, scheduler : int, str
        Dask settings of :func:`siting.runner.run` (each job's tiles on the cluster).
    log : callable, optional
        Receives one line per job.
    parallel : int
        Run up to this many jobs at once, each in its own process (1: one after another).
    overwrite : bool
        Let each job write into an output folder holding files no siting run created, and the summary replace
        ``batch_summary.md|csv`` that no siting batch wrote (the CLI's ``--overwrite``).  A queue state file
        that is not siting's is refused either way.
    """
    from .scenarios import _pooled

    jobs = expand_jobs(paths)
    if not jobs:
        raise JobError("no job files given", "siting plan")
    common = Path(os.path.commonpath([str(j.parent) for j in jobs]))
    qpath = Path(queue_file) if queue_file else common / QUEUE_FILE
    problems = batch_file_problems(qpath)
    problems = [p for p in problems if p.startswith("queue file")] if overwrite else problems
    if problems:
        raise JobError(problems, str(qpath.parent))  # before any job runs
    state = _read_state(qpath)
    state.update(format="siting-queue", format_version=1)
    rows: dict[str, dict] = {}
    todo = []
    for path in jobs:
        key, dg = str(path), job_digest(path, overrides)
        done = state["jobs"].get(key)
        if not fresh and done and done.get("status") == "ok" and dg and done.get("digest") == dg \
                and _output_present(done["row"]):
            rows[key] = {"job": key, **done["row"], "status": "done"}
            if log is not None:
                log(f"{path.name}: finished earlier, not rerun")
        else:
            todo.append((path, dg))
    kw = dict(fresh=fresh, workers=workers, scheduler=scheduler, progress=progress and parallel <= 1,
              overwrite=overwrite)
    results = _pooled(run_job, [((path, overrides, kw), {}) for path, _ in todo], parallel,
                      lambda args, exc: {**{c: None for c in SUMMARY_COLUMNS if c != "job"}, "status": "failed",
                                         "exit_code": 1, "error": f"worker process failed: {exc}"})
    for (path, dg), row in zip(todo, results):
        key = str(path)
        rows[key] = {"job": key, **row}
        state["jobs"][key] = {"digest": dg, "status": row["status"], "row": row,
                              "finished_at": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())}
        atomic.write_text(qpath, json.dumps(state, indent=1, default=str) + "\n")
        if log is not None:
            log(f"{path.name}: {row['status']}" + (f" ({row['optimality']})" if row.get("optimality") else "")
                + (f": {row['error']}" if row.get("error") else ""))
    result = BatchResult([rows[str(p)] for p in jobs])
    result.files = write_summary(qpath.parent, result, state=state, queue_file=qpath, overwrite=overwrite)
    return result


def _cell(col: str, v) -> str:
    if v is None or (isinstance(v, float) and v != v):
        return "-"
    if col == "covered_share":
        return f"{100 * float(v):.1f} %"
    if col in ("cost", "covered_weight"):
        return f"{float(v):,.1f}"
    if col == "job":
        return Path(str(v)).name
    return str(v).replace("\n", " ").replace("|", "\\|")


def summary_text(result: BatchResult) -> str:
    """The summary table as Markdown (also what ``siting plan`` prints for a queue)."""
    cols = [c for c in SUMMARY_COLUMNS if c != "output"]
    lines = ["| " + " | ".join(cols) + " |", "|" + "---|" * len(cols)]
    lines += ["| " + " | ".join(_cell(c, r.get(c)) for c in cols) + " |" for r in result.rows]
    worst = result.exit_code
    lines += ["", f"{len(result.rows)} job(s): {sum(r['status'] in ('ok', 'done') for r in result.rows)} ok, "
              f"{sum(r['status'] == 'failed' for r in result.rows)} failed; exit code {worst}"]
    return "\n".join(lines)


def write_summary(folder: Path, result: BatchResult, *, state: dict | None = None, queue_file: Path | None = None,
                  overwrite: bool = False) -> dict[str, Path]:
    """``batch_summary.md`` and ``batch_summary.csv`` in ``folder`` (atomically).

    With the queue's ``state`` (and its ``queue_file``), the SHA-256 of each summary is recorded there, and a
    summary file that the record does not list (the user's own, or one edited since) is refused with
    :class:`JobError` unless ``overwrite``: only files a siting batch wrote are replaced.
    """
    files = {k: folder / name for k, name in SUMMARY_FILES.items()}
    texts = {"summary_md": "# Batch summary\n\n" + summary_text(result) + "\n",
             "summary_csv": result.table().to_csv(index=False, lineterminator="\n")}
    if state is None or queue_file is None:
        atomic.write_text(files["summary_md"], texts["summary_md"])
        atomic.write_text(files["summary_csv"], texts["summary_csv"])
        return files
    problems = [p for p in batch_file_problems(queue_file, state) if not overwrite or p.startswith("queue file")]
    if problems:
        raise JobError(problems, str(folder))
    import hashlib

    new = {SUMMARY_FILES[k]: hashlib.sha256(t.encode("utf-8")).hexdigest() for k, t in texts.items()}
    old = {SUMMARY_FILES[k]: file_sha256(p) for k, p in files.items() if p.is_file() and not p.is_symlink()}
    # recorded before the files change, so a kill in between leaves either version recognised as the batch's
    state["summary"] = {n: sorted({new[n], *([old[n]] if n in old else [])}) for n in new}
    atomic.write_text(queue_file, json.dumps(state, indent=1, default=str) + "\n")
    for k, path in files.items():
        atomic.write_text(path, texts[k])
    state["summary"] = {n: [new[n]] for n in new}
    atomic.write_text(queue_file, json.dumps(state, indent=1, default=str) + "\n")
    return files
