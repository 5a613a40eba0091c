"""Scenarios: one job run under several sets of overrides, sharing the stage cache, compared site by site.

A job file may hold ``[[scenarios]]`` tables, and ``inputs.scenarios`` may name a TOML file of more.  Each table
has a ``name`` (letters, digits, ``-``, ``_``, ``.``; unique) and overrides of any job key, as nested tables or
dotted keys::

    [[scenarios]]
    name = "budget-20k"
    budget.max_cost = 20000.0            # TOML dotted key: the same as budget = { max_cost = 20000.0 }

    [[scenarios]]
    name = "39GHz"
    "radio.frequency_ghz" = 39.0         # a quoted dotted key works too
    time_limit_s = 30.0                  # shorthand of solver.time_limit_s (also optimise.time_limit_s)
    checks = true                        # compute the field checks for this scenario (default: off)
    sweep = true                         # draw its own coverage-versus-budget curve (default: off)
    outputs = "full"                     # its whole output set (default "light": run.json and survey.csv)

Every scenario runs through :func:`siting.runner.run` with one stage cache (``<output.folder>/.cache``), so
scenarios whose inputs match share stages: a budget scenario takes candidates, visibility and gains from the cache
(in memory when the scenarios run in one process) and solves only.  A scenario whose job is invalid or that fails
is recorded with its error; the others run.  Each writes its output set into
``<output.folder>/scenarios/<name>/`` (``light`` by default: ``run.json`` and ``survey.csv``, see
:mod:`siting.scenario_outputs`; ``outputs = "full"`` for all layers, maps and reports); the comparison goes into
``<output.folder>``:

- ``scenarios.md`` / ``scenarios.html`` / ``scenarios.json``: per scenario its status, surfaces, cost, covered
  weight and share, bound and gap (proven optimal or stopped at a gap), time; per site its robustness (in how many
  scenarios it is chosen);
- ``robust_survey.csv``: the sites of any scenario plan, those chosen in most scenarios first, in the survey
  list's layout for verdicts (``job_fingerprint`` and the empty verdict columns of :mod:`siting.verdicts`).

Robustness compares site ids, which hold only within one candidate set: it counts the scenarios sharing the most
common job fingerprint; scenarios that change the candidate spots are listed as not comparable.
"""

from __future__ import annotations

import copy
import itertools
import json
import re
import time
import tomllib
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .errors import JobError, SitingError
from .job import Job, _apply, _read_toml, parse_override
from .verdicts import FINGERPRINT_COLUMN, VERDICT_COLUMNS

_NAME = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,63}")
_ALIASES = {("time_limit_s",): ("solver", "time_limit_s"), ("optimise", "time_limit_s"): ("solver", "time_limit_s"),
            ("optimize", "time_limit_s"): ("solver", "time_limit_s")}
_OPTIONS = ("name", "checks", "sweep", "outputs", "description")


@dataclass(frozen=True)
class Scenario:
    """One scenario: a name, overrides as (section, key, value), whether to compute the field checks and the
    coverage-versus-budget curve (the scenarios themselves compare budgets; off unless set)."""

    name: str
    overrides: tuple[tuple[str, str, Any], ...]
    checks: bool = False
    description: str = ""
    sweep: bool = False
    outputs: str = "light"


def _flatten(table: dict, where: str, problems: list[str]) -> list[tuple[str, str, Any]]:
    """``{"budget": {"max_cost": 1}}``, ``{"budget.max_cost": 1}`` and the aliases as (section, key, value)."""
    items = []
    for name, value in table.items():
        if name in _OPTIONS:
            continue
        path = tuple(name.split("."))
        if isinstance(value, dict) and len(path) == 1:
            for key, v in value.items():
                items.append(((*path, *key.split(".")), v))
        else:
            items.append((path, value))
    out = []
    for path, value in items:
        path = _ALIASES.get(path, path)
        if len(path) != 2:
            problems.append(f"{where}: override {'.'.join(path)!r} is not section.key (e.g. budget.max_cost)")
            continue
        out.append((path[0], path[1], value))
    return out


def parse_scenarios(tables: Any, source: str) -> list[Scenario]:
    """Check ``[[scenarios]]`` tables and return them as :class:`Scenario` objects (raises :class:`JobError`)."""
    if not isinstance(tables, list) or not all(isinstance(t, dict) for t in tables):
        raise JobError("scenarios: expected [[scenarios]] tables, each with a name and overrides", source)
    problems: list[str] = []
    out, seen = [], set()
    for i, t in enumerate(tables):
        where = f"scenarios[{i}]"
        name = t.get("name")
        if not isinstance(name, str) or not _NAME.fullmatch(name):
            problems.append(f"{where}: name {name!r}: give a name of letters, digits, '-', '_' or '.' (it names "
                            "the scenario's output folder)")
            continue
        if name in seen:
            problems.append(f"{where}: duplicate scenario name {name!r}; give every scenario its own name")
        seen.add(name)
        for flag in ("checks", "sweep"):
            if not isinstance(t.get(flag, False), bool):
                problems.append(f"{where}.{flag}: expected true or false, got {t[flag]!r}")
        if t.get("outputs", "light") not in ("light", "full"):
            problems.append(f"{where}.outputs: {t['outputs']!r} is not allowed; use \"light\" or \"full\"")
        out.append(Scenario(name, tuple(_flatten(t, f"{where} ({name})", problems)), bool(t.get("checks", False)),
                            str(t.get("description", "")), bool(t.get("sweep", False)), t.get("outputs", "light")))
    if problems:
        raise JobError(problems, source)
    return out


def read_scenarios(job_path: str | Path, overrides: list[str] | None = None) -> tuple[dict, list[Scenario]]:
    """The job file's raw tables (``--set`` overrides applied, scenarios removed) and its scenarios.

    Scenarios come from the job's ``[[scenarios]]`` and from the file ``inputs.scenarios`` names (relative to the
    job file), in that order.
    """
    job_path = Path(job_path)
    raw = _read_toml(job_path)
    _apply(raw, [parse_override(o) for o in overrides or []])
    scenarios = parse_scenarios(raw.pop("scenarios", []), str(job_path))
    extra = (raw.get("inputs") or {}).get("scenarios") if isinstance(raw.get("inputs"), dict) else None
    if extra:
        path = (job_path.parent / extra).resolve()
        if not path.is_file():
            raise JobError(f"inputs.scenarios: file '{path}' not found; check the path (relative to the job file)",
                           str(job_path))
        try:
            more = tomllib.loads(path.read_text(encoding="utf-8")).get("scenarios", [])
        except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
            raise JobError(f"inputs.scenarios '{path}': not valid TOML ({exc})", str(job_path)) from None
        scenarios += parse_scenarios(more, str(path))
        names = [s.name for s in scenarios]
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            raise JobError(f"scenarios {', '.join(dup)} are defined twice (in the job and in {path.name}); rename "
                           "one", str(job_path))
    return raw, scenarios


def has_scenarios(job_path: str | Path) -> bool:
    """True when the job file holds ``[[scenarios]]`` or names an ``inputs.scenarios`` file."""
    try:
        raw = tomllib.loads(Path(job_path).read_text(encoding="utf-8"))
    except (OSError, tomllib.TOMLDecodeError, UnicodeDecodeError):
        return False  # the single-job path reports the problem
    inputs = raw["inputs"] if isinstance(raw.get("inputs"), dict) else {}
    return bool(raw.get("scenarios")) or bool(inputs.get("scenarios"))


def base_output_folder(raw: dict, job_path: Path) -> Path:
    """The job's output folder (resolved against the job file's folder)."""
    out = raw.get("output", {}).get("folder", "out") if isinstance(raw.get("output"), dict) else "out"
    return (job_path.parent / str(out)).resolve()


def scenario_job(raw: dict, scenario: Scenario, job_path: Path, base_out: Path) -> Job:
    """The validated job of one scenario: the raw job, its overrides, its own output sub-folder."""
    job = copy.deepcopy(raw)
    job.setdefault("output", {})
    if isinstance(job["output"], dict):
        job["output"]["folder"] = str(base_out / "scenarios" / scenario.name)
    _apply(job, scenario.overrides)
    budget = job.get("budget")
    own_sweep = any(k == "sweep_budgets" for _, k, _ in scenario.overrides)
    if not scenario.sweep and isinstance(budget, dict) and not own_sweep:
        cost = budget.get("max_cost")  # the curve shrinks to the plan's own point (no extra solves)
        budget["sweep_budgets"] = [cost] if isinstance(cost, (int, float)) and cost > 0 else []
    return Job.from_dict(job, base_dir=job_path.parent, source=f"{job_path} scenario {scenario.name!r}")


def validate_scenarios(job_path: str | Path, overrides: list[str] | None = None, say=print) -> int:
    """Check every scenario's job (``siting validate``): 0 when all are valid (or there are none), else 2."""
    if not has_scenarios(job_path):
        return 0
    job_path = Path(job_path)
    raw, scenarios = read_scenarios(job_path, overrides)
    base_out = base_output_folder(raw, job_path)
    worst = 0
    try:
        check_base_folder(raw, scenarios, job_path, base_out)
    except JobError as exc:
        say(f"output folder: {exc}")
        worst = exc.exit_code
    for sc in scenarios:
        try:
            scenario_job(raw, sc, job_path, base_out)
            say(f"scenario {sc.name}: valid")
        except JobError as exc:
            say(f"scenario {sc.name}: {exc}")
            worst = exc.exit_code
    return worst


# ------------------------------------------------------------------------------------------------ running
@dataclass
class ScenarioRun:
    """What one scenario produced (light: no tables beyond its chosen sites).

    Attributes
    ----------
    name : str
    ok : bool
    exit_code : int
        0, or the :class:`~siting.errors.SitingError` exit code of its failure (1 for an unexpected error).
    error : str
    row : dict
        The comparison row (status, surfaces, cost, covered weight and share, bound, gap, time [s]).
    chosen : pandas.DataFrame
        site_id, size_id, rank, weight_gained, lon, lat [deg], building_id, facing_deg [deg], mount_height_m [m].
    fingerprint : str
    recomputed : list of str
        Stages computed rather than read from the shared cache.
    """

    name: str
    ok: bool
    exit_code: int = 0
    error: str = ""
    row: dict = field(default_factory=dict)
    chosen: pd.DataFrame | None = None
    fingerprint: str = ""
    recomputed: list[str] = field(default_factory=list)


def proven_text(status: str, gap: float) -> str:
    """'proven optimal', or the gap at which the solver stopped and why."""
    if status == "optimal":
        return "proven optimal"
    return f"stopped at gap {100 * gap:.2f} % ({status})"


def _chosen_table(result) -> pd.DataFrame:
    from .inputs.crs import to_lonlat

    o = result.gains.options
    chosen = np.asarray(result.plan.chosen, np.int64)
    rk = result.ranking.set_index("option")
    s = result.sites.set_index("site_id").loc[o["site_id"].to_numpy()[chosen]]
    lon, lat = to_lonlat(s["x"].to_numpy(float), s["y"].to_numpy(float), result.district.crs)
    return pd.DataFrame({
        "site_id": s.index.to_numpy(np.int64), "size_id": o["size_id"].to_numpy()[chosen].astype(str),
        "rank": rk["rank"].reindex(chosen).to_numpy(),
        "weight_gained": rk["marginal_weight"].reindex(chosen).to_numpy(),
        "lon": np.round(np.asarray(lon, float), 7), "lat": np.round(np.asarray(lat, float), 7),
        "building_id": s["building_id"].astype(str).to_numpy(), "facing_deg": s["normal_az_deg"].to_numpy(float),
        "mount_height_m": s["z_m"].to_numpy(float)})


def _row(result, seconds: float) -> dict:
    plan = result.plan
    w = result.users["weight"].to_numpy(float)
    direct = float((w * result.gains.direct["covered"].to_numpy(bool)).sum())
    return {"status": plan.status, "proven": proven_text(plan.status, plan.gap), "surfaces": len(plan.chosen),
            "cost": float(plan.cost), "covered_weight": float(plan.objective),
            "covered_share": (direct + float(plan.objective)) / float(w.sum()) if w.sum() > 0 else 0.0,
            "bound": float(plan.bound), "gap": float(plan.gap), "time_s": round(seconds, 2),
            "time_limit_s": result.job.solver.time_limit_s, "folder": str(result.job.output.folder)}


def run_one(raw: dict, scenario: Scenario, job_path: Path, base_out: Path, *, fresh: bool = False, workers: int = 0,
            scheduler: str | None = None, progress: bool = False, checks: bool | None = None,
            outputs: str | None = None, cache=None, overwrite: bool = False) -> ScenarioRun:
    """Run one scenario with the shared stage cache; a failure is returned, not raised.

    ``cache`` is the shared :class:`~siting.scenario_outputs.MemoryStageCache` (default: a new one on
    ``<base_out>/.cache``); ``checks`` and ``outputs`` override the scenario's own settings; ``overwrite`` lets
    its output set replace files of the same names that no siting run created (the CLI's ``--overwrite``).
    """
    from .runner import run
    from .scenario_outputs import MemoryStageCache, write_light

    t0 = time.perf_counter()
    cache = cache if cache is not None else MemoryStageCache(base_out / ".cache", read=not fresh)
    light = (outputs or scenario.outputs) == "light"
    try:
        job = scenario_job(raw, scenario, job_path, base_out)
        result = run(job, fresh=fresh, workers=workers, scheduler=scheduler, progress=progress, write=not light,
                     cache=cache, checks=scenario.checks if checks is None else checks, overwrite=overwrite)
        if light:
            write_light(result, overwrite=overwrite)
    except SitingError as exc:
        return ScenarioRun(scenario.name, False, exc.exit_code, str(exc), {"status": "failed"})
    except Exception as exc:  # noqa: BLE001 - one failing scenario must not stop the others
        return ScenarioRun(scenario.name, False, 1, f"unexpected error: {type(exc).__name__}: {exc}",
                           {"status": "failed"})
    from .verdicts import job_fingerprint

    fp = result.field.fingerprint if result.field is not None else job_fingerprint(result.sites)
    return ScenarioRun(scenario.name, True, 0, "", _row(result, time.perf_counter() - t0), _chosen_table(result), fp,
                       list(result.recomputed))


def robustness(runs: list[ScenarioRun]) -> tuple[pd.DataFrame, list[str], str]:
    """Per site: in how many comparable scenarios it is chosen (and which), most robust first.

    Returns (table, names of the scenarios counted, fingerprint).  Columns: robust_rank, site_id, chosen_in,
    chosen_share, scenarios, size_id (the size most often chosen), best_rank, mean_weight_gained, lon, lat,
    building_id, facing_deg, mount_height_m.
    """
    ok = [r for r in runs if r.ok]
    if not ok:
        return pd.DataFrame(), [], ""
    fp = Counter(r.fingerprint for r in ok).most_common(1)[0][0]
    counted = [r for r in ok if r.fingerprint == fp]
    rows = pd.concat([r.chosen.assign(scenario=r.name) for r in counted if r.chosen is not None], ignore_index=True)
    if not len(rows):
        return pd.DataFrame(), [r.name for r in counted], fp
    g = rows.groupby("site_id", sort=True)
    table = pd.DataFrame({
        "chosen_in": g["scenario"].nunique(),
        "scenarios": g["scenario"].agg(lambda s: ";".join(s)),
        "size_id": g["size_id"].agg(lambda s: Counter(s).most_common(1)[0][0]),
        "best_rank": g["rank"].min(), "mean_weight_gained": g["weight_gained"].mean(),
        **{c: g[c].first() for c in ("lon", "lat", "building_id", "facing_deg", "mount_height_m")}}).reset_index()
    table["chosen_share"] = table["chosen_in"] / len(counted)
    table = table.sort_values(["chosen_in", "best_rank", "mean_weight_gained", "site_id"],
                              ascending=[False, True, False, True], kind="stable").reset_index(drop=True)
    table.insert(0, "robust_rank", np.arange(1, len(table) + 1))
    cols = ["robust_rank", "site_id", "chosen_in", "chosen_share", "scenarios", "size_id", "best_rank",
            "mean_weight_gained", "lon", "lat", "building_id", "facing_deg", "mount_height_m"]
    return table[cols], [r.name for r in counted], fp


@dataclass
class ScenarioResult:
    """Every scenario's run, the robustness table and the files written."""

    runs: list[ScenarioRun]
    robustness: pd.DataFrame
    counted: list[str]
    fingerprint: str
    files: dict[str, Path] = field(default_factory=dict)

    @property
    def exit_code(self) -> int:
        """The worst scenario's exit code (0 when every scenario ran)."""
        return max((r.exit_code for r in self.runs), default=0)

    def comparison(self) -> pd.DataFrame:
        """One row per scenario: name, status, proven, surfaces, cost, covered weight and share, bound, gap, time."""
        out = pd.DataFrame([{"scenario": r.name, **r.row, "error": r.error} for r in self.runs])
        if "surfaces" in out:
            out["surfaces"] = out["surfaces"].astype("Int64")
        return out


def process_pool(parallel: int):
    """A pool of ``parallel`` fresh interpreter processes ('spawn': no state forked from solver threads)."""
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    return ProcessPoolExecutor(max_workers=parallel, mp_context=multiprocessing.get_context("spawn"))


def _pooled(fn, calls: list[tuple[tuple, dict]], parallel: int, on_failure):
    """``fn(*args, **kw)`` for each call, in order; in ``parallel`` processes when above 1 (results in order)."""
    if parallel <= 1 or len(calls) < 2:
        for args, kw in calls:
            yield fn(*args, **kw)
        return
    with process_pool(min(parallel, len(calls))) as pool:
        futures = [pool.submit(fn, *args, **kw) for args, kw in calls]
        for (args, _), fut in zip(calls, futures):
            try:
                yield fut.result()
            except Exception as exc:  # noqa: BLE001 - a crashed worker fails its own item only
                yield on_failure(args, exc)


def check_base_folder(raw: dict, scenarios: list[Scenario], job_path: Path, base_out: Path, *,
                      overwrite: bool = False) -> None:
    """Refuse an unsafe output folder for a job's scenarios before any of them runs (one :class:`JobError`).

    The scenarios write into ``output.folder`` (the comparison files, ``scenarios/<name>/``, the stage cache), so
    it gets the checks of a plain job's folder (:func:`siting.outputs.folder.output_folder_problems`): not empty,
    not a file, not an input's folder or the job's, not the root or home folder, writable, no link on the way, a
    non-empty folder only when a siting run created it; and the comparison files of a folder may be replaced only
    when its ``scenarios.json`` lists them (unless ``overwrite``).  No input of any scenario (layers,
    ``inputs.survey_results``, ``inputs.previous_plan``, ``inputs.scenarios``) may lie inside it.
    """
    from .outputs.atomic import path_problem
    from .outputs.folder import input_problems, output_folder_problems, unsafe_paths
    from .preflight import field_input_paths, input_files
    from .scenario_report import COMPARISON_FILES, comparison_clash

    problems: list[str] = []
    out: dict = raw["output"] if isinstance(raw.get("output"), dict) else {}
    if isinstance(out.get("folder"), str) and not out["folder"].strip():
        problems.append("output.folder: empty, which would write the scenarios into the job's folder; give a folder "
                        "of its own, e.g. output.folder = \"out\" (relative to the job file)")
    inputs: list[Path] = [job_path]
    named: dict[str, str] = {}
    extra = (raw.get("inputs") or {}).get("scenarios") if isinstance(raw.get("inputs"), dict) else None
    if isinstance(extra, str) and extra:
        named["inputs.scenarios"] = str((job_path.parent / extra).resolve())
    for sc in scenarios:
        try:
            job = scenario_job(raw, sc, job_path, base_out)
        except JobError:
            continue  # reported as this scenario's failure
        inputs += [p for _, p in input_files(job)]
        for key, path in field_input_paths(job).items():
            if named.setdefault(key, path) != path:
                named[f"{key} (scenario {sc.name})"] = path
    problems += output_folder_problems(base_out, inputs, files=[], overwrite=overwrite)
    problems += input_problems(base_out, named)
    if base_out.is_dir():
        unsafe = [*unsafe_paths(base_out, COMPARISON_FILES),
                  *[p for p in (path_problem(base_out, f"scenarios/{sc.name}", want="folder") for sc in scenarios)
                    if p]]
        problems += [f"output.folder '{base_out}': {p}; move it away or choose another output.folder (--overwrite "
                     "does not lift this)" for p in dict.fromkeys(unsafe)]
        clash = [] if overwrite else comparison_clash(base_out)
        if clash:
            problems.append(f"output.folder '{base_out}' holds files that no siting run created there and that the "
                            f"scenario comparison would replace: {', '.join(clash)}; move them away, choose another "
                            "output.folder, or allow it with --overwrite")
    if problems:
        raise JobError(list(dict.fromkeys(problems)), str(job_path))


def run_scenarios(job_path: str | Path, overrides: list[str] | None = None, *, fresh: bool = False, workers: int = 0,
                  scheduler: str | None = None, progress: bool = False, checks: bool | None = None,
                  write: bool = True, log=None, parallel: int = 1, outputs: str | None = None,
                  overwrite: bool = False) -> ScenarioResult:
    """Run every scenario of a job file (one after another, one shared stage cache) and compare them.

    Parameters
    ----------
    job_path : str or Path
        A job file with ``[[scenarios]]`` or ``inputs.scenarios``.
    overrides : list of str, optional
        ``section.key=value`` strings applied to the job before each scenario's own overrides.
    fresh : bool
        The first scenario ignores what the cache holds (the others then share its fresh stages).
    workers, scheduler : int, str
        Dask settings of :func:`siting.runner.run` (each scenario's tiles).
    checks : bool, optional
        Field checks for every scenario (default: each scenario's ``checks``, off unless set).
    write : bool
        Write the comparison files into the job's output folder.
    log : callable, optional
        Receives one line per finished scenario.
    parallel : int
        Run up to this many scenarios at once, each in its own process, once the first scenario has filled the
        shared cache (1: one after another, sharing the cache in memory too).
    outputs : str, optional
        "light" or "full" output sets for every scenario (default: each scenario's own, "light" unless set).
    overwrite : bool
        Write into an output folder holding files that no siting run created (the CLI's ``--overwrite``); the
        other checks of :func:`check_base_folder` still apply.
    """
    job_path = Path(job_path)
    raw, scenarios = read_scenarios(job_path, overrides)
    if not scenarios:
        raise JobError("no scenarios: add [[scenarios]] tables or inputs.scenarios to the job", str(job_path))
    base_out = base_output_folder(raw, job_path)
    check_base_folder(raw, scenarios, job_path, base_out, overwrite=overwrite)  # before any scenario runs
    from .scenario_outputs import MemoryStageCache

    kw: dict[str, Any] = dict(workers=workers, scheduler=scheduler, progress=progress and parallel <= 1, checks=checks,
                              outputs=outputs, overwrite=overwrite)
    cache = MemoryStageCache(base_out / ".cache", read=not fresh)
    first = run_one(raw, scenarios[0], job_path, base_out, fresh=fresh, cache=cache, **kw)  # fills the cache
    cache.read = True
    if parallel <= 1:
        kw["cache"] = cache  # (a process pool gets its own per scenario: it shares the entries on disk)
    rest = _pooled(run_one, [((raw, sc, job_path, base_out), kw) for sc in scenarios[1:]], parallel,
                   lambda args, exc: ScenarioRun(args[1].name, False, 1, f"worker process failed: {exc}",
                                                 {"status": "failed"}))
    runs = []
    for sc, r in zip(scenarios, itertools.chain([first], rest)):
        runs.append(r)
        if log is not None:
            log(f"scenario {sc.name}: " + (f"{r.row['surfaces']} surface(s), cost {r.row['cost']:,.0f}, "
                                           f"{r.row['proven']}" if r.ok else f"failed: {r.error}"))
    table, counted, fp = robustness(runs)
    result = ScenarioResult(runs, table, counted, fp)
    if write:
        from .scenario_report import write_comparison

        result.files = write_comparison(base_out, result, overwrite=overwrite)
    return result


def robust_survey_frame(result: ScenarioResult) -> pd.DataFrame:
    """The robust survey list: robustness rows plus the job fingerprint and empty verdict columns."""
    out = result.robustness.copy()
    out[FINGERPRINT_COLUMN] = result.fingerprint
    for c in VERDICT_COLUMNS:
        out[c] = ""
    return out


def _json(obj) -> str:
    return json.dumps(obj, indent=1, allow_nan=False, ensure_ascii=False, default=str)
