"""The batch runner: every stage of a job end to end, cached, resumable, with progress and optional Dask.

Stages and what each one's cache key covers (a changed budget re-uses visibility and gains):

=============  =============================================================  ============================
stage          computes                                                       key
=============  =============================================================  ============================
load           district tables (always re-read; hashes the input files)       -
candidates     facade spots and demand points                                 inputs, area, candidates,
                                                                              demand, panel widths
direct         base station -> user links per user tile                       candidates key, radio
surface        (option, user) coverage rows per site tile                     direct key, surfaces
optimise       the plan, ranking, backups and budget sweep                    surface key, budget, solver
outputs        layers, survey list, report, run.json                          (always written)
=============  =============================================================  ============================

Tiles: the district is cut into square tiles of ``tile_m``.  A tile owns the users (direct stage) or the spots
(surface stage) inside it and computes their links against every building and point within the longest link
range of it (the halo), so tile results are disjoint and their union equals the one-piece computation.  A site
tile reads only the direct tiles of the users within reach of its spots, so it waits for those and for nothing
else.  Each tile is cached on its own as soon as it is done (by the worker on this machine, by this process for
an external cluster), which is the checkpoint a killed job resumes from.  With ``workers`` or ``scheduler`` the
tiles run as Dask tasks (LocalCluster or an existing scheduler); without, in this process.

Notes: the model notes of a stage (:class:`~siting.errors.SitingWarning`, caught by :func:`capture_notes`; a
tile's are caught where it runs) are stored with the stage in the cache, each once, so a run that takes a stage
from the cache, or runs its tiles on Dask, reports the same notes as a fresh run.

Disk: ``write=True`` writes the outputs, ``siting.log`` and the cache (``<output.folder>/.cache``);
``write=False`` writes nothing unless a ``cache_dir`` is given.  The stages themselves live in
:mod:`siting.stages`, the tile executor in :mod:`siting.executor`.
"""

from __future__ import annotations

import json
import logging
import logging.handlers
import os
import sys
import time
import warnings
from collections import Counter
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from . import __version__, _warmup, checks, preflight
from . import optimize as opt
from .cache import StageCache, digest, json_default
from .district import District
from .errors import JobError, SitingWarning
from .executor import _advance, _bar, _Executor
from .gains import GainResult, RadioParams
from .job import Job, load_job
from .optimize import Plan
from .plandiff import field_run_info
from .replan import FIELD_INPUTS, prepare_field, replan_stage
from .stages import (
    StageParams,
    _model_fit_warnings,
    candidates_stage,
    gains_stage,
    load_stage,
    optimisation_inputs,
    optimise_stage,
    plan_checks,
    sizes_table,
    wall_conflicts,
)
from .visibility import degree_stats

log = logging.getLogger("siting")

# The stages live in siting.stages and the tile executor in siting.executor; their names stay importable here.
__all__ = ["RunResult", "capture_notes", "load_job", "candidates_stage", "gains_stage", "load_stage", "optimisation_inputs", "optimise_stage",
           "plan_checks", "plan_fields", "run", "run_file", "sizes_table", "wall_conflicts", "write_los_graph",
           "write_stage"]


@dataclass
class RunResult:
    """Everything a job produced, one table per stage (for notebooks and tests).

    Attributes
    ----------
    job : Job
        The validated, frozen job that ran.
    district : District
        Buildings, base stations, given sites and users in the job's projected CRS (metres).
    sites : pandas.DataFrame
        Candidate facade spots (``sites`` contract: x, y [m], z_m [m], normal_az_deg [deg], wall_free_m [m]).
    users : pandas.DataFrame
        Demand points (``users`` contract: x, y [m], z_m [m], weight, kind).
    sizes : pandas.DataFrame
        The panel catalogue: size_id, width_m, height_m [m], cost, install_cost [currency], elements.
    gains : GainResult
        Options, the (option, user) coverage relation with snr_db [dB], each user's best direct link.
    plan : Plan
        The chosen options (:class:`siting.optimize.Plan`: objective [weight], bound, gap, cost [currency]).
    ranking, backups : pandas.DataFrame
        The chosen sites in survey order; up to three backup spots for each.
    sweep : pandas.DataFrame or None
        Coverage against budget (budget [currency], covered_weight, bound, gap).
    site_checks, sensitivity : pandas.DataFrame or None
        Field checks of the chosen surfaces; the plan's model sensitivity.
    notes : list of str
        Model notes of every stage, in stage order, each once (the same from a fresh, cached or Dask run).
    stage_notes : dict of str to list of str
        The same notes by stage (load, candidates, gains, optimise, checks).
    outputs : dict
        Paths of the files written (empty with ``write=False``).
    timings_s : dict
        Wall time per stage [s].
    recomputed : list of str
        Stages (and tiles) computed in this run rather than read from the cache.
    """

    job: Job
    district: District
    sites: pd.DataFrame
    users: pd.DataFrame
    sizes: pd.DataFrame
    gains: GainResult
    plan: Plan
    ranking: pd.DataFrame
    backups: pd.DataFrame
    sweep: pd.DataFrame | None
    site_checks: pd.DataFrame | None = None
    sensitivity: pd.DataFrame | None = None
    notes: list[str] = field(default_factory=list)
    stage_notes: dict[str, list[str]] = field(default_factory=dict)
    outputs: dict[str, Any] = field(default_factory=dict)
    timings_s: dict[str, float] = field(default_factory=dict)
    recomputed: list[str] = field(default_factory=list)
    params: StageParams | None = None
    field: Any = None  # the field verdicts' FieldContext (siting.replan) when inputs.survey_results is given


# -------------------------------------------------------------------------------------------- orchestration
def plan_fields(plan: Plan) -> dict:
    """The JSON-able fields of a :class:`~siting.optimize.Plan` except ``covered`` (used for the cache)."""
    out = {k: getattr(plan, k) for k in ("objective", "bound", "gap", "status", "solver", "cost",
                                         "greedy_objective", "message", "model_size", "timings_s", "mode",
                                         "empty_reason", "tie_break")}
    out["chosen"] = [int(c) for c in plan.chosen]
    return json.loads(json.dumps(out, default=json_default))


@contextmanager
def capture_notes(into: list[str]) -> Iterator[None]:
    """Collect the :class:`~siting.errors.SitingWarning` messages raised inside the block into ``into``.

    Each distinct message once, in order, with a count when the block raised it more than once (``"<note> (3
    times)"``); not added again when ``into`` holds it already.  Other warnings pass on unchanged.  This is the
    one channel of model notes: the runner opens one per stage and stores the stage's notes with it.
    """
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", SitingWarning)
        yield
    counts: Counter[str] = Counter()
    for w in caught:
        if not issubclass(w.category, SitingWarning):
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
        else:
            counts[str(w.message)] += 1
    for message, n in counts.items():
        text = message if n == 1 else f"{message} ({n} times)"
        if message not in into and text not in into:
            into.append(text)


def _unique(notes: list[str]) -> list[str]:
    return list(dict.fromkeys(notes))


@dataclass
class _Context:
    """What the stages of one run share: the cache, the executor, the progress bar, timings and notes."""

    job: Job
    params: StageParams
    cache: StageCache
    progress: bool
    bar: Any
    executor: _Executor | None = None
    timings: dict[str, float] = field(default_factory=dict)
    recomputed: list[str] = field(default_factory=list)
    notes: dict[str, list[str]] = field(default_factory=dict)


def _load(ctx: _Context) -> tuple[District, pd.DataFrame]:
    t0 = time.perf_counter()
    notes: list[str] = []
    with capture_notes(notes):
        district = load_stage(ctx.params.inputs, ctx.params.area)
        preflight.check_district(ctx.job, district)  # no demand possible: refused here; far stations: noted
        sizes = sizes_table(ctx.job.surfaces.panels, ctx.job.radio.frequency_ghz,
                            ctx.job.surfaces.element_pitch_wavelengths)
    ctx.notes["load"] = _unique(district.notes + notes)
    ctx.timings["load"] = time.perf_counter() - t0
    _advance(ctx.bar, "candidates")
    log.info("load: %d buildings, %d base stations, CRS %s (%s)", len(district.buildings),
             len(district.base_stations), district.crs.to_string(), district.crs_rule)
    return district, sizes


def _candidates(ctx: _Context, district: District, sizes: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame, str]:
    t0 = time.perf_counter()
    job = ctx.job.to_dict()
    inputs = {k: v for k, v in job["inputs"].items() if k not in FIELD_INPUTS}  # read after this stage
    key = digest([__version__, sorted(district.input_hashes.items()), inputs, job["area"],
                  job["candidates"], job["demand"], sizes["width_m"].tolist()])
    hit = ctx.cache.load("candidates", key, expect=("sites", "users"))
    if hit:
        sites, users, notes = hit[0]["sites"], hit[0]["users"], list(hit[1].get("notes", []))
        log.info("candidates: taken from the cache")
    else:
        notes = []
        with capture_notes(notes):
            sites, users, explicit = candidates_stage(district, ctx.params.candidates, ctx.params.demand, sizes,
                                                      ctx.params.inputs.storey_height_m)
        notes = _unique(explicit + notes)
        preflight.check_demand(ctx.job, users)  # before the gains stage and before anything is stored
        ctx.cache.store("candidates", key, {"sites": sites, "users": users}, {"notes": notes})
        ctx.recomputed.append("candidates")
    ctx.notes["candidates"] = notes
    ctx.timings["candidates"] = time.perf_counter() - t0
    _advance(ctx.bar, "visibility and gains")
    log.info("candidates: %d facade spots, %d demand points (weight %.1f)", len(sites), len(users),
             users["weight"].sum())
    return sites, users, key


def _gains(ctx: _Context, district, sites, sizes, users, cand_key: str, tile_m: float | None,
           workers: int, scheduler: str | None) -> tuple[GainResult, np.ndarray, str]:
    t0 = time.perf_counter()
    ctx.executor = _Executor(workers, scheduler)
    ctx.timings["cluster_start"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    p = ctx.params.radio
    job = ctx.job.to_dict()
    surfaces = {k: v for k, v in job["surfaces"].items() if k != "load_cap_weight"}  # the cap is the optimiser's
    gains_key = digest([cand_key, job["radio"], surfaces])
    tile = (ctx.params.tile_m if tile_m is None else tile_m) or 0.0
    tiles_done: list[str] = []
    notes: list[str] = []
    with capture_notes(notes):
        _model_fit_warnings(district.base_stations, p.direct_model)
        heights_m = checks.planning_heights(district.buildings, ctx.params.height_uncertainty_m,
                                            ctx.params.robust_heights)
        gains = gains_stage(district, sites, sizes, users, p, cache=ctx.cache, key=digest([gains_key, tile]),
                            tile_m=tile, executor=ctx.executor, progress=ctx.progress, heights_m=heights_m,
                            computed=tiles_done, notes=notes)
    ctx.notes["gains"] = notes
    if tiles_done:
        ctx.recomputed.append(f"gains ({len(tiles_done)} tiles)")
    ctx.timings["gains"] = time.perf_counter() - t0
    _advance(ctx.bar, "optimise")
    rows, at_target = coverage_row_counts(gains, p.snr_target_db)
    log.info("gains: %d options, %d coverage rows (%d at the SNR target), %d users covered directly of %d",
             len(gains.options), rows, at_target, int(gains.direct["covered"].sum()), len(users))
    return gains, heights_m, gains_key


def _optimise(ctx: _Context, gains: GainResult, sites, users, gains_key: str, sizes=None, field_ctx=None):
    t0 = time.perf_counter()
    job = ctx.job.to_dict()
    budget = {k: v for k, v in job["budget"].items() if k != "currency"}  # the currency is only printed
    key = digest([gains_key, budget, job["solver"], job["surfaces"]["load_cap_weight"],
                  *([field_ctx.key()] if field_ctx is not None else [])])
    hit = ctx.cache.load("optimise", key, expect=("ranking", "backups", "covered"))
    if hit:
        tables, extras = hit
        fields = dict(extras["plan"])
        chosen = np.asarray(fields.pop("chosen"), np.int64)
        plan = opt.Plan(chosen=chosen, covered=tables["covered"]["covered"].to_numpy(bool), **fields)
        ranking, backups, sweep = tables["ranking"], tables["backups"], tables.get("sweep")
        notes = list(extras.get("notes", []))
        log.info("optimise: taken from the cache")
    else:
        notes = []
        with capture_notes(notes):
            if field_ctx is None:
                plan, ranking, backups, sweep = optimise_stage(gains, sites, users, ctx.params.optimise,
                                                               ctx.params.radio)
            else:  # around the field verdicts (siting.replan)
                plan, ranking, backups, sweep = replan_stage(gains, sites, sizes, users, ctx.params.optimise,
                                                             ctx.params.radio, field_ctx)
                notes += [n for n in field_ctx.notes if n not in notes]
        tables = {"ranking": ranking, "backups": backups, "covered": pd.DataFrame({"covered": plan.covered})}
        if sweep is not None:
            tables["sweep"] = sweep
        ctx.cache.store("optimise", key, tables, {"plan": plan_fields(plan), "notes": notes})
        ctx.recomputed.append("optimise")
    ctx.notes["optimise"] = notes
    ctx.timings["optimise"] = time.perf_counter() - t0
    _advance(ctx.bar, "outputs")
    log.info("optimise: %s, %d surfaces, covered weight %.2f, bound %.2f, gap %.4f", plan.status,
             len(plan.chosen), plan.objective, plan.bound, plan.gap)
    return plan, ranking, backups, sweep


#: The line shown before the first compile of the kernels (numba's cache cold; siting._warmup).
COMPILE_NOTICE = ("compiling the line-of-sight kernels in the background (first run only, about 10-30 s more on "
                  "a 2-core machine)")


def kernels_cold(clearance: bool = False) -> bool:
    """Whether the next run compiles kernels: numba's on-disk cache lacks some kernel group the job uses
    (:func:`siting._warmup.cached`; ``clearance``: the job uses the first-Fresnel-zone clearance rule)."""
    return bool(_warmup.needed(clearance))


def coverage_row_counts(gains: GainResult, snr_target_db: float) -> tuple[int, int]:
    """Rows of the coverage relation, and those reaching the SNR target (``run.json`` ``counts.coverage_rows`` and
    ``counts.coverage_rows_at_target``, the same definitions)."""
    if not len(gains.coverage):
        return 0, 0
    return len(gains.coverage), int((gains.coverage["snr_db"].to_numpy(float) >= snr_target_db).sum())


class _LogFile(logging.FileHandler):
    """``siting.log`` opened for appending without following a symbolic link (``O_NOFOLLOW``): a link named
    ``siting.log`` fails to open instead of sending the log to a file outside the output folder."""

    def _open(self):
        flags = os.O_WRONLY | os.O_APPEND | os.O_CREAT | getattr(os, "O_NOFOLLOW", 0)
        try:
            fd = os.open(self.baseFilename, flags, 0o666)
        except OSError as exc:
            raise JobError(f"output folder: cannot open '{self.baseFilename}' for the log ({exc.strerror}); it "
                           "must be a regular file siting created, not a link: move it away", "job") from exc
        return open(fd, "a", encoding=self.encoding)  # noqa: SIM115 - the handler owns and closes it


def _log_handler(out_dir: Path) -> logging.Handler:
    out_dir.mkdir(parents=True, exist_ok=True)
    handler = _LogFile(out_dir / "siting.log", encoding="utf-8")
    handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))
    return handler


def check_writes(job: Job, *, job_file: str | Path | None = None, overwrite: bool = False) -> None:
    """The checks of a writing run (:func:`siting.preflight.check_job` with ``write=True``): besides the job and its
    files, ``output.folder`` must be given and safe, and no input the job reads (the layers, the job file,
    ``inputs.survey_results``, ``inputs.previous_plan``, ``inputs.scenarios``) may lie in it."""
    preflight.check_job(job, job_file=job_file, write=True, overwrite=overwrite)


def _open_log(buffer: logging.handlers.BufferingHandler | None, out_dir: Path) -> logging.Handler | None:
    """Swap the in-memory log of a job that passed its checks for ``siting.log`` (the records so far first),
    so a job refused by its checks leaves no file behind."""
    if buffer is None:
        return None
    handler = _log_handler(out_dir)
    for record in buffer.buffer:
        handler.handle(record)
    log.removeHandler(buffer)
    log.addHandler(handler)
    return handler


def run(job: Job | Mapping[str, Any], *, fresh: bool = False, workers: int = 0, scheduler: str | None = None,
        progress: bool = False, tile_m: float | None = None, write: bool = True,
        cache_dir: str | Path | None = None, notices: bool | None = None, overwrite: bool = False,
        checks: bool = True, cache: StageCache | None = None, job_file: str | Path | None = None) -> RunResult:
    """Run a job end to end and return every stage's tables.

    Parameters
    ----------
    job : Job or mapping
        A :class:`~siting.job.Job`, or a job as nested tables (validated here, e.g. from :func:`load_job`).
    fresh : bool
        Ignore what the stage cache holds (still store new results).
    workers, scheduler : int, str
        Run the tiles on a Dask LocalCluster of ``workers`` processes, or on the cluster at ``scheduler``.
    progress : bool
        Show progress bars (on stderr).
    tile_m : float, optional
        Tile size [m] instead of the job's ``run.tile_m`` (0 = one tile).
    notices : bool, optional
        Print :data:`COMPILE_NOTICE` on stderr before the kernels' first compile (default: as ``progress``); it
        is logged either way.
    write : bool
        Write the outputs, the log (``siting.log``) and the stage cache into ``output.folder``.  With
        ``write=False`` nothing is written to disk unless ``cache_dir`` is given.
    cache_dir : str or Path, optional
        Stage cache folder; default ``<output.folder>/.cache`` when ``write``, else no cache.
    overwrite : bool
        Write into an output folder holding files that no siting run created (see
        :func:`siting.preflight.check_job`, which runs first).
    checks : bool
        Compute the chosen surfaces' field checks and the model sensitivity (``False``: both None; scenario runs
        may skip them, see :mod:`siting.scenarios`).
    cache : StageCache, optional
        The stage cache object to use instead of one at ``cache_dir`` (the scenarios of a job share one that also
        keeps its entries in memory).
    job_file : str or Path, optional
        The job file the job came from: the output folder may not hold it either (:func:`siting.preflight.check_job`).
    """
    job = job if isinstance(job, Job) else Job.from_dict(job)
    if write:
        check_writes(job, job_file=job_file, overwrite=overwrite)
    else:
        preflight.check_job(job, job_file=job_file, write=False, overwrite=overwrite)
    out_dir = Path(job.output.folder)
    cache_root = Path(cache_dir) if cache_dir is not None else (out_dir / ".cache" if write else None)
    buffer = logging.handlers.BufferingHandler(1 << 20) if write else None  # siting.log opens after the checks
    handler: logging.Handler | None = buffer
    if handler is not None:
        log.addHandler(handler)
    log.setLevel(logging.INFO)
    cache = cache if cache is not None else StageCache(cache_root, log=log.warning, read=not fresh)
    ctx = _Context(job, StageParams.from_job(job), cache,
                   progress, _bar(progress, total=5 if write else 4, desc="load"))
    try:
        log.info("siting %s: job started, output folder %s", __version__, out_dir)
        clearance = ctx.params.radio.fresnel_clearance > 0
        cold = kernels_cold(clearance)
        _warmup.start(clearance=clearance)  # first run: compile the kernels in background processes
        district, sizes = _load(ctx)
        sites, users, cand_key = _candidates(ctx, district, sizes)
        handler = _open_log(buffer, out_dir) or handler
        if cold:  # after the checks, so a refused job prints only its error
            log.info(COMPILE_NOTICE)
            if progress if notices is None else notices:
                ctx.bar.write(f"siting: {COMPILE_NOTICE}", file=sys.stderr)
        field_ctx = None
        if job.inputs.survey_results:  # field verdicts: moved spots join the candidates (siting.replan)
            sites, field_ctx = prepare_field(job.inputs.survey_results, district, sites, sizes, job.candidates)
            cand_key = digest([cand_key, field_ctx.moved_key()]) if len(field_ctx.moved) else cand_key
        gains, heights_m, gains_key = _gains(ctx, district, sites, sizes, users, cand_key, tile_m, workers,
                                             scheduler)
        plan, ranking, backups, sweep = _optimise(ctx, gains, sites, users, gains_key, sizes, field_ctx)
        t0 = time.perf_counter()
        ctx.notes["checks"] = []
        with capture_notes(ctx.notes["checks"]):
            field_checks = plan_checks(district, sites, sizes, users, gains, plan, ctx.params.radio, heights_m,
                                       ctx.params.height_uncertainty_m) if checks else (None, None)
        ctx.timings["checks"] = time.perf_counter() - t0
        notes = _unique([n for stage in ctx.notes.values() for n in stage])
        for message in notes:
            log.warning(message)
        result = RunResult(job, district, sites, users, sizes, gains, plan, ranking, backups, sweep,
                           site_checks=field_checks[0], sensitivity=field_checks[1], notes=notes, stage_notes=ctx.notes, timings_s=ctx.timings, recomputed=ctx.recomputed,
                           params=ctx.params, field=field_ctx)
        if write:
            t0 = time.perf_counter()
            result.outputs = write_stage(result, ctx.params.radio, overwrite=overwrite)
            ctx.timings["outputs"] = time.perf_counter() - t0
            _advance(ctx.bar, "done")
        log.info("finished; recomputed stages: %s", ", ".join(ctx.recomputed) or "none")
        return result
    finally:
        ctx.bar.close()
        if ctx.executor is not None:
            ctx.executor.close()
        if handler is not None:
            log.removeHandler(handler)
            handler.close()


def output_bundle(result: RunResult, p: RadioParams, **run_info_extra: Any):
    """The :class:`~siting.outputs.OutputBundle` of a run: every table and the run information the writers need
    (``run_info_extra`` joins the run information, e.g. ``outputs="light"`` for a scenario's light set)."""
    from . import radio
    from .outputs import OutputBundle

    job, gains = result.job, result.gains
    pairs_stats = {
        "bs_site": degree_stats(gains.bs_site, len(result.district.base_stations), len(result.sites)),
        "site_user": degree_stats(gains.site_user, len(result.sites), len(result.users)),
    }
    rows, at_target = coverage_row_counts(gains, p.snr_target_db)
    run_info = {
        "siting_version": __version__,
        "input_hashes": result.district.input_hashes,
        "crs": result.district.crs.to_string(),
        "crs_rule": result.district.crs_rule,
        "timings_s": result.timings_s,
        "visibility_degrees": pairs_stats,
        "notes": result.notes,
        "counts": {"buildings": len(result.district.buildings), "base_stations": len(result.district.base_stations),
                   "sites": len(result.sites), "users": len(result.users), "options": len(gains.options),
                   "coverage_rows": rows, "coverage_rows_at_target": at_target},
        **field_run_info(result),  # job fingerprint, field verdicts, changes against the previous plan
        **run_info_extra,
    }
    return OutputBundle(
        crs=result.district.crs, buildings=result.district.buildings, base_stations=result.district.base_stations,
        sites=result.sites, sizes=result.sizes, users=result.users, options=gains.options, coverage=gains.coverage,
        direct=gains.direct, plan=result.plan, ranking=result.ranking, backups=result.backups, sweep=result.sweep,
        snr_target_db=p.snr_target_db, budget=job.budget.max_cost, max_panels=job.budget.max_panels,
        params=job.to_dict(), run_info=run_info, formats=tuple(job.output.formats),
        include_candidates=job.output.candidates_layer, title=job.output.title, site_checks=result.site_checks,
        sensitivity=result.sensitivity, currency=job.budget.currency,
        element_pitch_m=radio.element_pitch_m(p.frequency_hz, job.surfaces.element_pitch_wavelengths),
        load_cap_weight=job.surfaces.load_cap_weight,
    )


def write_stage(result: RunResult, p: RadioParams, overwrite: bool = False) -> dict:
    """Hand every table to the output writers (GeoJSON, survey list, report, run.json, the LOS graph if asked)."""
    from .outputs import write_outputs

    job, gains = result.job, result.gains
    bundle = output_bundle(result, p)
    extra = {}
    if job.output.los_graph:
        extra["los_graph"] = ("los_graph.graphml", lambda path: write_los_graph(path, gains))
    return write_outputs(Path(job.output.folder), bundle, extra_files=extra, overwrite=overwrite)


def write_los_graph(path: Path, gains: GainResult) -> Path:
    """The LOS graph (base station - spot and spot - user links) as GraphML, written atomically.

    The runner writes it only through :func:`siting.outputs.write_outputs` (``extra_files``), so it is part of
    the complete output set and its manifest.
    """
    import networkx as nx

    from .outputs.atomic import write_with
    from .visibility import los_graph

    graph = nx.compose(los_graph(gains.bs_site, "bs", "site"), los_graph(gains.site_user, "site", "user"))
    return write_with(path, lambda fh: nx.write_graphml(graph, fh), mode="wb")


def run_file(path: str | Path, overrides: list[str] | None = None, **kwargs: Any) -> RunResult:
    """Load, validate and run a job file (what ``siting plan`` does for a file without scenarios); ``kwargs``
    go to :func:`run`.  A file with ``[[scenarios]]`` raises :class:`JobError` (see :func:`refuse_scenarios`)."""
    refuse_scenarios(path)
    return run(Job.from_toml(path, overrides), job_file=path, **kwargs)


def refuse_scenarios(path: str | Path) -> None:
    """Raise :class:`JobError` when the job file holds scenarios: one run would silently plan the base job only."""
    from .scenarios import has_scenarios

    if has_scenarios(path):
        raise JobError(f"job file '{path}' holds scenarios ([[scenarios]] or inputs.scenarios), and this call runs "
                       "one job: run every scenario and their comparison with siting.run_scenarios(path) (what "
                       "`siting plan` does with this file), or remove the scenarios to plan the base job alone")  # fmt: skip
