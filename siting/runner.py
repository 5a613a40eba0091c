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
"""

from __future__ import annotations

import json
import logging
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from . import __version__, checks
from . import optimize as opt
from .cache import StageCache, digest, json_default
from .district import District
from .executor import _advance, _bar, _Executor
from .gains import GainResult, RadioParams
from .job import load_job
from .stages import (
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
__all__ = ["RunResult", "candidates_stage", "gains_stage", "load_stage", "optimisation_inputs", "optimise_stage",
           "plan_checks", "plan_fields", "run", "run_file", "sizes_table", "wall_conflicts", "write_los_graph",
           "write_stage"]


@dataclass
class RunResult:
    """Everything a job produced, one table per stage (for notebooks and tests)."""

    job: dict
    district: District
    sites: pd.DataFrame
    users: pd.DataFrame
    sizes: pd.DataFrame
    gains: GainResult
    plan: object
    ranking: pd.DataFrame
    backups: pd.DataFrame
    sweep: pd.DataFrame | None
    site_checks: pd.DataFrame | None = None
    sensitivity: pd.DataFrame | None = None
    outputs: dict = field(default_factory=dict)
    timings_s: dict = field(default_factory=dict)
    recomputed: list = field(default_factory=list)



# -------------------------------------------------------------------------------------------- orchestration
def plan_fields(plan) -> dict:
    """The JSON-able fields of a :class:`~siting.optimize.Plan` except ``covered`` (used for the cache)."""
    out = {k: getattr(plan, k) for k in ("objective", "bound", "gap", "status", "solver", "cost",
                                         "greedy_objective", "message", "model_size", "timings_s", "mode",
                                         "empty_reason")}
    out["chosen"] = [int(c) for c in plan.chosen]
    return json.loads(json.dumps(out, default=json_default))


def run(job: dict, *, fresh: bool = False, workers: int = 0, scheduler: str | None = None,
        progress: bool = False, tile_m: float | None = None, write: bool = True) -> RunResult:
    """Run a validated job (see :func:`siting.job.load_job`) end to end and return every stage's tables."""
    out_dir = Path(job["output"]["folder"])
    out_dir.mkdir(parents=True, exist_ok=True)
    handler = logging.FileHandler(out_dir / "siting.log", encoding="utf-8")
    handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))
    log.addHandler(handler)
    log.setLevel(logging.INFO)
    cache = StageCache(out_dir / ".cache", log=log.warning, read=not fresh)
    timings: dict[str, float] = {}
    recomputed: list[str] = []
    executor = None
    stage_bar = _bar(progress, total=5 if write else 4, desc="load")
    caught_ctx = warnings.catch_warnings(record=True)
    caught = caught_ctx.__enter__()
    warnings.simplefilter("always")
    try:
        t0 = time.perf_counter()
        log.info("siting %s: job started, output folder %s", __version__, out_dir)
        district = load_stage(job)
        sizes = sizes_table(job)
        timings["load"] = time.perf_counter() - t0
        _advance(stage_bar, "candidates")
        log.info("load: %d buildings, %d base stations, CRS %s (%s)", len(district.buildings),
                 len(district.base_stations), district.crs.to_string(), district.crs_rule)

        t0 = time.perf_counter()
        cand_key = digest([__version__, sorted(district.input_hashes.items()), job["inputs"], job["area"],
                           job["candidates"], job["demand"], sizes["width_m"].tolist()])
        hit = cache.load("candidates", cand_key, expect=("sites", "users"))
        if hit:
            sites, users, notes = hit[0]["sites"], hit[0]["users"], hit[1]["notes"]
            log.info("candidates: taken from the cache")
        else:
            sites, users, notes = candidates_stage(district, job, sizes)
            cache.store("candidates", cand_key, {"sites": sites, "users": users}, {"notes": notes})
            recomputed.append("candidates")
        district.notes.extend(notes)
        timings["candidates"] = time.perf_counter() - t0
        _advance(stage_bar, "visibility and gains")
        log.info("candidates: %d facade spots, %d demand points (weight %.1f)", len(sites), len(users),
                 users["weight"].sum())

        t0 = time.perf_counter()
        executor = _Executor(workers, scheduler)
        timings["cluster_start"] = time.perf_counter() - t0
        t0 = time.perf_counter()
        p = RadioParams.from_job(job)
        surfaces = {k: v for k, v in job["surfaces"].items() if k != "load_cap_weight"}  # the cap is the optimiser's
        gains_key = digest([cand_key, job["radio"], surfaces])
        tile = job["run"]["tile_m"] if tile_m is None else tile_m
        tiles_done: list[str] = []
        _model_fit_warnings(district.base_stations, p.direct_model)
        heights_m = checks.planning_heights(district.buildings, job["inputs"]["height_uncertainty_m"],
                                            job["radio"]["robust_heights"])
        gains = gains_stage(district, sites, sizes, users, p, cache=cache, key=digest([gains_key, tile]),
                            tile_m=tile, executor=executor, progress=progress, heights_m=heights_m,
                            computed=tiles_done)
        if tiles_done:
            recomputed.append(f"gains ({len(tiles_done)} tiles)")
        timings["gains"] = time.perf_counter() - t0
        _advance(stage_bar, "optimise")
        log.info("gains: %d options, %d coverage rows, %d users covered directly of %d", len(gains.options),
                 int((gains.coverage["snr_db"] >= p.snr_target_db).sum()) if len(gains.coverage) else 0,
                 int(gains.direct["covered"].sum()), len(users))

        t0 = time.perf_counter()
        opt_key = digest([gains_key, job["budget"], job["solver"], job["surfaces"]["load_cap_weight"]])
        hit = cache.load("optimise", opt_key, expect=("ranking", "backups", "covered"))
        if hit:
            tables, extras = hit
            fields = extras["plan"]
            chosen = np.asarray(fields.pop("chosen"), np.int64)
            plan = opt.Plan(chosen=chosen, covered=tables["covered"]["covered"].to_numpy(bool), **fields)
            ranking, backups = tables["ranking"], tables["backups"]
            sweep = tables.get("sweep")
            log.info("optimise: taken from the cache")
        else:
            plan, ranking, backups, sweep = optimise_stage(gains, sites, users, job, p)
            tables = {"ranking": ranking, "backups": backups, "covered": pd.DataFrame({"covered": plan.covered})}
            if sweep is not None:
                tables["sweep"] = sweep
            cache.store("optimise", opt_key, tables, {"plan": plan_fields(plan)})
            recomputed.append("optimise")
        timings["optimise"] = time.perf_counter() - t0
        _advance(stage_bar, "outputs")
        log.info("optimise: %s, %d surfaces, covered weight %.2f, bound %.2f, gap %.4f", plan.status,
                 len(plan.chosen), plan.objective, plan.bound, plan.gap)

        t0 = time.perf_counter()
        field_checks = plan_checks(district, sites, sizes, users, gains, plan, p, heights_m,
                                   job["inputs"]["height_uncertainty_m"])
        timings["checks"] = time.perf_counter() - t0

        for message in dict.fromkeys(str(w.message) for w in caught):  # unique, in order
            log.warning(message)
            if message not in district.notes:
                district.notes.append(message)
        result = RunResult(job, district, sites, users, sizes, gains, plan, ranking, backups, sweep,
                           *field_checks, timings_s=timings, recomputed=recomputed)
        if write:
            t0 = time.perf_counter()
            result.outputs = write_stage(result, p)
            timings["outputs"] = time.perf_counter() - t0
            _advance(stage_bar, "done")
        log.info("finished; recomputed stages: %s", ", ".join(recomputed) or "none")
        return result
    finally:
        caught_ctx.__exit__(None, None, None)
        stage_bar.close()
        if executor is not None:
            executor.close()
        log.removeHandler(handler)
        handler.close()


def write_stage(result: RunResult, p: RadioParams) -> dict:
    """Hand every table to the output writers (GeoJSON, survey list, report, run.json)."""
    from .outputs import OutputBundle, write_outputs

    job, gains = result.job, result.gains
    pairs_stats = {
        "bs_site": degree_stats(gains.bs_site, len(result.district.base_stations), len(result.sites)),
        "site_user": degree_stats(gains.site_user, len(result.sites), len(result.users)),
    }
    run_info = {
        "siting_version": __version__,
        "input_hashes": result.district.input_hashes,
        "crs": result.district.crs.to_string(),
        "crs_rule": result.district.crs_rule,
        "timings_s": result.timings_s,
        "recomputed_stages": result.recomputed,
        "visibility_degrees": pairs_stats,
        "notes": result.district.notes,
        "counts": {"buildings": len(result.district.buildings), "base_stations": len(result.district.base_stations),
                   "sites": len(result.sites), "users": len(result.users), "options": len(gains.options),
                   "coverage_rows": len(gains.coverage)},
    }
    bundle = OutputBundle(
        crs=result.district.crs, buildings=result.district.buildings, base_stations=result.district.base_stations,
        sites=result.sites, sizes=result.sizes, users=result.users, options=gains.options, coverage=gains.coverage,
        direct=gains.direct, plan=result.plan, ranking=result.ranking, backups=result.backups, sweep=result.sweep,
        snr_target_db=p.snr_target_db, budget=job["budget"]["max_cost"] or None,
        max_panels=job["budget"]["max_panels"] or None, params=job, run_info=run_info,
        formats=tuple(job["output"]["formats"]), include_candidates=job["output"]["candidates_layer"],
        title=job["output"]["title"], site_checks=result.site_checks, sensitivity=result.sensitivity,
    )
    graph = {}
    if job["output"]["los_graph"]:
        graph["los_graph"] = write_los_graph(Path(job["output"]["folder"]) / "los_graph.graphml", gains)
    return {**graph, **write_outputs(Path(job["output"]["folder"]), bundle)}


def write_los_graph(path: Path, gains: GainResult) -> Path:
    """The LOS graph (base station - spot and spot - user links) as GraphML, written atomically."""
    import networkx as nx

    from .outputs.atomic import write_with
    from .visibility import los_graph

    graph = nx.compose(los_graph(gains.bs_site, "bs", "site"), los_graph(gains.site_user, "site", "user"))
    return write_with(path, lambda fh: nx.write_graphml(graph, fh), mode="wb")


def run_file(path: str | Path, overrides: list[str] | None = None, **kwargs) -> RunResult:
    """Load, validate and run a job file (the Python API behind ``siting plan``)."""
    return run(load_job(path, overrides), **kwargs)
