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
import os
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from . import __version__
from . import candidates as cand
from . import checks, radio
from . import optimize as opt
from .cache import StageCache, digest, json_default
from .district import District, load_district
from .errors import SitingError
from .gains import GainResult, RadioParams, best_direct, coverage_matrix, direct_links, make_options, surface_links
from .job import load_job
from .tables import empty
from .visibility import Obstacles, degree_stats

log = logging.getLogger("siting")


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


def sizes_table(job: dict) -> pd.DataFrame:
    """The panel catalogue of the job as the 'sizes' table, with element counts at the configured pitch."""
    panels = pd.DataFrame(job["surfaces"]["panels"])
    wavelength_m = 299_792_458.0 / (job["radio"]["frequency_ghz"] * 1e9)
    pitch_m = job["surfaces"]["element_pitch_wavelengths"] * wavelength_m
    return pd.DataFrame({
        "size_id": panels["size_id"].astype(str).to_numpy(object),
        "width_m": panels["width_m"].astype(float),
        "height_m": panels["height_m"].astype(float),
        "cost": panels["cost"].astype(float),
        "install_cost": panels["install_cost"].astype(float),
        "elements": (np.floor(panels["width_m"] / pitch_m + 1e-9) * np.floor(panels["height_m"] / pitch_m + 1e-9))
        .astype(np.int64),
    })


# ----------------------------------------------------------------------------------------------------- stages
def load_stage(job: dict) -> District:
    i, a = job["inputs"], job["area"]
    return load_district(
        buildings_path=i["buildings"], base_stations_path=i["base_stations"], sites_path=i["sites"] or None,
        users_path=i["users"] or None, buildings_layer=i["buildings_layer"] or None,
        building_id_column=i["building_id_column"], height_column=i["height_column"] or None,
        storey_height_m=i["storey_height_m"], default_height_m=i["default_height_m"], crs=i["crs"] or None,
        area_bbox_lonlat=a["bbox"] or None, area_path=a["polygon"] or None,
        user_weight_column=i["user_weight_column"],
    )


def candidates_stage(district: District, job: dict, sizes: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame, list]:
    """Facade spots (generated and given) and demand points (grid, homes, given)."""
    c, d = job["candidates"], job["demand"]
    notes: list[str] = []
    parts = []
    if c["generate"]:
        parts.append(cand.facade_spots(
            district.buildings, spacing_m=c["spacing_m"], mount_heights_m=tuple(c["mount_heights_m"]),
            roof_margin_m=c["roof_margin_m"], offset_m=c["offset_m"], party_gap_m=c["party_gap_m"],
            front_clear_m=c["front_clear_m"], min_wall_m=float(sizes["width_m"].min())))
    if district.given_sites is not None and len(district.given_sites):
        given, dropped = cand.snap_given_spots(
            district.buildings, district.given_sites, snap_tolerance_m=c["snap_tolerance_m"],
            default_z_m=float(c["mount_heights_m"][0]), offset_m=c["offset_m"], party_gap_m=c["party_gap_m"],
            min_wall_m=float(sizes["width_m"].min()), start_id=sum(len(p) for p in parts))
        parts.append(given)
        if dropped:
            notes.append(f"{len(dropped)} given spot(s) farther than {c['snap_tolerance_m']} m from any wall were "
                         f"dropped: {', '.join(map(str, dropped[:20]))}")
    sites = pd.concat(parts, ignore_index=True) if parts else empty("sites")
    sites["site_id"] = np.arange(len(sites), dtype=np.int64)

    demand = []
    if d["street_grid"]:
        demand.append(cand.street_grid(district.buildings, district.area, grid_m=d["grid_m"],
                                       height_m=d["street_height_m"], weight_per_point=d["street_weight"]))
    if d["homes"]:
        demand.append(cand.facade_homes(district.buildings, storey_height_m=job["inputs"]["storey_height_m"],
                                        home_spacing_m=d["home_spacing_m"],
                                        area_per_household_m2=d["area_per_household_m2"], offset_m=c["offset_m"],
                                        party_gap_m=c["party_gap_m"]))
    if district.given_users is not None and len(district.given_users):
        given_u, n_inside = cand.given_users(district.buildings, district.given_users, allow_indoor=d["allow_indoor"])
        demand.append(given_u)
        if n_inside:
            notes.append(f"{n_inside} given user(s) inside buildings were dropped (set demand.allow_indoor = true "
                         "to keep them as indoor demand)")
    if not demand:
        raise SitingError("no demand: enable demand.street_grid or demand.homes, or give inputs.users")
    users = cand.combine_users(*demand)
    return sites, users, notes


def _tiles(x: np.ndarray, y: np.ndarray, tile_m: float) -> np.ndarray:
    """Tile number of each point on a grid of ``tile_m`` squares anchored at the origin of the CRS."""
    if tile_m <= 0 or len(x) == 0:
        return np.zeros(len(x), np.int64)
    ix = np.floor(x / tile_m).astype(np.int64)
    iy = np.floor(y / tile_m).astype(np.int64)
    cell = (ix - ix.min()) * (int(iy.max() - iy.min()) + 1) + (iy - iy.min())  # row-major, as (ix, iy) sorts
    _, tile = np.unique(cell, return_inverse=True)
    return tile.reshape(-1).astype(np.int64)


def _halo(bounds: np.ndarray, x: np.ndarray, y: np.ndarray, halo_m: float) -> np.ndarray:
    """Rows of the buildings whose bounds meet the bounding box of (x, y) grown by ``halo_m``.

    Every link a tile computes lies inside that box, so these are all the buildings it can cross.
    """
    minx, miny, maxx, maxy = x.min() - halo_m, y.min() - halo_m, x.max() + halo_m, y.max() + halo_m
    keep = (bounds[:, 0] <= maxx) & (bounds[:, 2] >= minx) & (bounds[:, 1] <= maxy) & (bounds[:, 3] >= miny)
    return np.flatnonzero(keep)


def _direct_tile(keep, user_index, *, geoms, heights, bs, users, p, **_):
    """One user tile of the direct stage: its (base station, user) links and its users' best direct link."""
    obstacles = Obstacles.from_buildings(geoms[keep], heights[keep])
    bs_user = direct_links(obstacles, bs, users, p, user_index=user_index)
    return {"bs_user": bs_user, "direct": best_direct(bs_user, len(users), p).iloc[user_index]}


def _surface_tile(keep, site_index, user_index, direct_parts, *, geoms, heights, bs, sites, sizes, users, options,
                  p, **_):
    """One spot tile of the surface stage.

    ``direct_parts`` are the results of the direct tiles holding ``user_index`` (the users within reach of the
    tile's spots): their direct links and whether each is covered directly are all the surface links read.
    """
    obstacles = Obstacles.from_buildings(geoms[keep], heights[keep])
    covered = np.zeros(len(users), bool)
    for part in direct_parts:
        covered[part["direct"]["user_id"].to_numpy()] = part["direct"]["covered"].to_numpy(bool)
    links = [part["bs_user"][["a", "b", "rx_dbm", "los"]] for part in direct_parts]
    bs_user = pd.concat(links, ignore_index=True) if links else pd.DataFrame(
        {"a": np.zeros(0, np.int64), "b": np.zeros(0, np.int64), "rx_dbm": np.zeros(0), "los": np.zeros(0, bool)})
    coverage, bs_site, site_user = surface_links(obstacles, bs, sites, sizes, users, options, bs_user,
                                                 pd.DataFrame({"covered": covered}), p,
                                                 site_index=site_index, user_index=user_index)
    return {"coverage": coverage, "bs_site": bs_site, "site_user": site_user}


class _Executor:
    """Runs tile tasks in this process, or on Dask when workers / a scheduler address are given.

    ``submit`` returns a handle (a Dask future, or a deferred call here) that may be passed inside the arguments of
    later tasks: those wait for it, without a barrier between stages.  ``shares_disk`` says whether the tasks can
    write the stage cache themselves: in this process and on a LocalCluster (same machine) they do, so storing
    tiles runs in parallel too; on an external scheduler's workers the folder may not exist, so this process
    stores what they return.
    """

    def __init__(self, workers: int = 0, scheduler: str | None = None):
        self.client = None
        self.cluster = None
        self.shares_disk = not scheduler
        if workers or scheduler:
            try:
                import dask
                from dask.distributed import Client, LocalCluster
            except ImportError:
                raise SitingError("--workers/--scheduler need Dask: pip install 'siting[dask]'") from None
            if scheduler:
                self.client = Client(scheduler)
            else:
                # One task thread and one numba thread per worker process: the parallelism is over tiles (numba's
                # threads on a tile-sized kernel cost more than they gain). Dask's default aggressive memory
                # trimming (MALLOC_TRIM_THRESHOLD_=64 KiB) and its sampling profiler are switched off: they made
                # the same tiles up to 1.6x slower on a worker than in this process (benchmarks/bench_runner.py).
                # The variables are set before the worker processes start (numba reads its thread count on
                # import); Dask writes them into this process's environment too, so it is restored afterwards.
                saved_environ = dict(os.environ)
                try:
                    with dask.config.set({"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None,
                                          "distributed.nanny.pre-spawn-environ.NUMBA_NUM_THREADS": 1,
                                          "distributed.worker.profile.enabled": False}):
                        self.cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                                    dashboard_address=None)
                finally:
                    os.environ.clear()
                    os.environ.update(saved_environ)
                self.client = Client(self.cluster)

    def share(self, shared: dict) -> dict:
        """Send data every task needs to the workers once (unique keys); in-process it is passed as is."""
        if not self.client:
            return shared
        return {k: self.client.scatter(v, broadcast=True, hash=False) for k, v in shared.items()}

    def put(self, value):
        """A handle holding a value already known (a tile read from the cache)."""
        return self.client.scatter(value, hash=False) if self.client else _Deferred(lambda: value)

    def submit(self, fn, *args, **kwargs):
        if self.client:
            return self.client.submit(fn, *args, **kwargs, pure=False)
        return _Deferred(fn, *args, **kwargs)

    def as_completed(self, handles: dict):
        """Yield ``(key, result)`` for each ``key: handle``, as each one finishes."""
        if not self.client:
            for key, handle in handles.items():
                yield key, handle.result()
            return
        from dask.distributed import as_completed

        keys = {future: key for key, future in handles.items()}
        for future, result in as_completed(keys, with_results=True):
            yield keys[future], result

    def close(self) -> None:
        if self.client:
            self.client.close()
        if self.cluster:
            self.cluster.close()


class _Deferred:
    """A call run in this process when its result is first asked for; handles among its arguments (also inside
    tuples and lists) are replaced by their results first, as Dask does with futures."""

    def __init__(self, fn, *args, **kwargs):
        self.call = (fn, args, kwargs)
        self.value = None

    def result(self):
        if self.call is not None:
            fn, args, kwargs = self.call
            self.value, self.call = fn(*_resolve(args), **kwargs), None
        return self.value


def _resolve(arg):
    if isinstance(arg, _Deferred):
        return arg.result()
    if isinstance(arg, (tuple, list)):
        return type(arg)(_resolve(a) for a in arg)
    return arg


def _tile_job(fn, args, store_at, **shared):
    """One tile: ``fn(*args, **shared)``, stored in the cache at ``store_at = (root, entry, key)`` when given.

    Storing here, where the tile was computed, is the checkpoint a killed job resumes from.
    """
    tables = fn(*args, **shared)
    if store_at is not None:
        StageCache(store_at[0]).store(store_at[1], store_at[2], tables)
    return tables


@dataclass
class _TileSet:
    """The tiles of one stage: those read from the cache (``done``) and those submitted (``handles``)."""

    name: str
    keys: dict
    done: dict
    handles: dict
    held: dict = field(default_factory=dict)  # handles on tiles of ``done``, made when a later task needs one

    def handle(self, t, executor):
        """A handle on tile ``t`` to pass to a later task."""
        if t in self.handles:
            return self.handles[t]
        if t not in self.held:
            self.held[t] = executor.put(self.done[t])
        return self.held[t]


def _submit_tiles(name, cache, key, tasks: dict, fn, shared, executor, expect: tuple[str, ...]) -> _TileSet:
    """Take each tile from the cache, or submit it (``tasks`` maps tile number -> task arguments).

    ``expect`` names the tables a tile holds.  Tile keys hash the stage key, the tile number and the tile count.
    """
    n_tiles = len(tasks)
    tiles = _TileSet(name, {t: digest([key, t, n_tiles]) for t in tasks}, {}, {})
    for t in tasks:
        hit = cache.load(f"{name}-tile{t}", tiles.keys[t], expect=expect)
        if hit is not None:
            tiles.done[t] = hit[0]
    if tiles.done:
        log.info("%s: %d of %d tiles taken from the cache", name, len(tiles.done), n_tiles)
    root = str(cache.root.resolve())
    for t, args in tasks.items():
        if t not in tiles.done:
            store_at = (root, f"{name}-tile{t}", tiles.keys[t]) if executor.shares_disk else None
            tiles.handles[t] = executor.submit(_tile_job, fn, args, store_at, **shared)
    return tiles


def _collect(tiles: _TileSet, cache, executor, progress, computed: list) -> list[dict]:
    """Every tile's tables in tile order, waiting for the submitted ones; their names are added to ``computed``."""
    results = dict(tiles.done)
    bar = _bar(progress, total=len(tiles.handles), desc=f"{tiles.name} tiles")
    for t, tables in executor.as_completed(tiles.handles):
        if not executor.shares_disk:
            cache.store(f"{tiles.name}-tile{t}", tiles.keys[t], tables)
        computed.append(f"{tiles.name}-tile{t}")
        results[t] = tables
        bar.update(1)
    bar.close()
    return [results[t] for t in sorted(results)]


def _bar(progress: bool, total: int, desc: str):
    from tqdm.auto import tqdm

    return tqdm(total=total, desc=desc, disable=not progress or total == 0, leave=False)


def _advance(bar, next_stage: str) -> None:
    bar.update(1)
    bar.set_description(next_stage)


def gains_stage(district, sites, sizes, users, p: RadioParams, *, cache, key, tile_m, executor, progress,
                heights_m: np.ndarray, computed: list | None = None):
    """Direct links per user tile and surface links per site tile; union equals the one-piece computation.

    ``heights_m`` are the building heights the links are computed with (see :func:`siting.checks.planning_heights`).

    A site tile's task depends only on the direct tiles of the users within reach of its spots, so on Dask it
    starts as soon as those are done (no barrier between the two steps, nothing merged in this process between).
    """
    computed = [] if computed is None else computed
    bounds = district.buildings.geometry.bounds.to_numpy()
    ux, uy = users["x"].to_numpy(float), users["y"].to_numpy(float)
    sx, sy = sites["x"].to_numpy(float), sites["y"].to_numpy(float)
    options = make_options(sites, sizes)
    # What the tasks read, slimmed to the columns they use (this is what Dask ships to every worker once).
    point_cols = ["x", "y", "z_m", "normal_az_deg", "building_idx"]
    shared = executor.share({
        "geoms": district.buildings.geometry.values, "heights": heights_m,
        "bs": district.base_stations, "sites": sites[point_cols], "sizes": sizes, "users": users[point_cols],
        "options": options[["site_id", "size_idx"]], "p": p})

    user_tile = _tiles(ux, uy, tile_m)
    tasks = {}
    for t in range(int(user_tile.max()) + 1 if len(users) else 0):
        idx = np.flatnonzero(user_tile == t)
        tasks[t] = (_halo(bounds, ux[idx], uy[idx], p.bs_range_m), idx)
    direct_tiles = _submit_tiles("direct", cache, digest([key, "direct"]), tasks, _direct_tile, shared, executor,
                                 expect=("bs_user", "direct"))

    site_tile = _tiles(sx, sy, tile_m)
    r = p.surface_range_m
    by_x = np.argsort(ux, kind="stable")
    x_sorted = ux[by_x]
    tasks = {}
    for t in range(int(site_tile.max()) + 1 if len(sites) else 0):
        idx = np.flatnonzero(site_tile == t)
        # Users in the tile's bounding box grown by the surface range: a slice of the users sorted by x, then y.
        strip = by_x[np.searchsorted(x_sorted, sx[idx].min() - r, side="left"):
                     np.searchsorted(x_sorted, sx[idx].max() + r, side="right")]
        near = np.sort(strip[(uy[strip] >= sy[idx].min() - r) & (uy[strip] <= sy[idx].max() + r)])
        parts = [direct_tiles.handle(u, executor) for u in np.unique(user_tile[near])]
        tasks[t] = (_halo(bounds, sx[idx], sy[idx], max(p.bs_range_m, r)), idx, near, parts)
    surface_tiles = _submit_tiles("surface", cache, digest([key, "surface"]), tasks, _surface_tile, shared,
                                  executor, expect=("coverage", "bs_site", "site_user"))

    direct_parts = _collect(direct_tiles, cache, executor, progress, computed)
    bs_user = _concat([t["bs_user"] for t in direct_parts], ["a", "b"])  # (on Dask, while the site tiles run)
    direct = _concat([t["direct"] for t in direct_parts], ["user_id"])
    if not len(direct):
        direct = best_direct(bs_user, len(users), p)
    surface_parts = _collect(surface_tiles, cache, executor, progress, computed)
    coverage = _concat([t["coverage"] for t in surface_parts], ["option_id", "user_id"])
    bs_site = _concat([t["bs_site"] for t in surface_parts], ["a", "b"])
    site_user = _concat([t["site_user"] for t in surface_parts], ["a", "b"])
    return GainResult(direct, options, coverage, bs_site, site_user, bs_user)


def _concat(frames: list[pd.DataFrame], sort_by: list[str]) -> pd.DataFrame:
    """The frames one after another, sorted by the non-negative integer columns ``sort_by`` (one or two)."""
    frames = [f for f in frames if f is not None]
    if not frames:
        return pd.DataFrame()
    out = pd.concat(frames, ignore_index=True)
    if len(out):
        sort_key = out[sort_by[0]].to_numpy(np.int64)
        if len(sort_by) == 2:
            minor = out[sort_by[1]].to_numpy(np.int64)
            sort_key = sort_key * (int(minor.max()) + 1) + minor
        out = out.take(np.argsort(sort_key, kind="stable")).reset_index(drop=True)
    return out


def wall_conflicts(sites: pd.DataFrame, min_spacing_m: float) -> np.ndarray:
    """Pairs of site rows on the same wall closer than ``min_spacing_m`` (3-D), as an int array (k, 2)."""
    if min_spacing_m <= 0 or len(sites) < 2:
        return np.zeros((0, 2), np.int64)
    from scipy.spatial import cKDTree

    xyz = sites[["x", "y", "z_m"]].to_numpy(float)
    pairs = cKDTree(xyz).query_pairs(min_spacing_m - 1e-9, output_type="ndarray")
    wall = sites["wall_id"].to_numpy()
    return pairs[wall[pairs[:, 0]] == wall[pairs[:, 1]]].astype(np.int64)


def optimisation_inputs(gains: GainResult, users: pd.DataFrame, p: RadioParams):
    """The optimiser's array inputs from the gain tables: (cover CSR, weight, cost, option_site).

    Users already covered by the direct path get weight 0: they are constants, not variables.
    """
    cover = coverage_matrix(gains.coverage, len(gains.options), len(users), p.snr_target_db)
    weight = users["weight"].to_numpy(float) * ~gains.direct["covered"].to_numpy(bool)
    return cover, weight, gains.options["cost"].to_numpy(float), gains.options["site_id"].to_numpy(np.int64)


def optimise_stage(gains: GainResult, sites, users, job: dict, p: RadioParams):
    """The plan (maximum coverage, or minimum cost for a target share), its ranking, backups and budget sweep."""
    b, s = job["budget"], job["solver"]
    cover, weight, cost, option_site = optimisation_inputs(gains, users, p)
    solver_kw = dict(
        conflicts=wall_conflicts(sites, b["min_spacing_m"]),
        load_cap=job["surfaces"]["load_cap_weight"] or None,
        solver=s["name"], time_limit_s=s["time_limit_s"], mip_rel_gap=s["mip_gap"], threads=s["threads"] or None,
    )
    budget = b["max_cost"] or None
    max_count = b["max_panels"] or None
    if b["target_share"] > 0:
        reachable = float(weight[np.asarray(cover.sum(axis=0)).ravel() > 0].sum())
        plan = opt.min_cost_cover(cover, weight, cost, option_site, b["target_share"] * reachable,
                                  max_count=max_count, **solver_kw)
    else:
        if budget is None and max_count is None:
            raise SitingError("no limit given: set budget.max_cost, budget.max_panels or budget.target_share "
                              "in the job")
        plan = opt.solve_coverage(cover, weight, cost, option_site, budget=budget, max_count=max_count, **solver_kw)
    chosen = np.asarray(plan.chosen, dtype=np.int64)
    ranking = opt.rank_chosen(chosen, cover, weight)
    backups = opt.backups_for(chosen, cover, weight, cost, option_site, k=3, conflicts=solver_kw["conflicts"])
    budgets = list(b["sweep_budgets"])
    if not budgets and budget:
        budgets = [round(budget * f, 2) for f in (0.25, 0.5, 0.75, 1.0, 1.5, 2.0)]
    sweep = None
    if budgets:
        # The curve is for the report: each point gets a short limit and a 1 % gap (its bound is shown beside
        # it); the plan's own budget is not solved again.
        sweep_kw = dict(solver_kw, time_limit_s=max(2.0, min(10.0, s["time_limit_s"] / 6)),
                        mip_rel_gap=max(s["mip_gap"], 0.01))
        others = sorted(x for x in set(budgets) if not (budget and b["target_share"] == 0 and x == budget))
        sweep = opt.budget_sweep(cover, weight, cost, option_site, others, max_count=max_count, **sweep_kw)
        if len(others) < len(set(budgets)):
            own = pd.DataFrame([{"budget": budget, "covered_weight": plan.objective, "bound": plan.bound,
                                 "gap": plan.gap, "cost": plan.cost, "n_sites": len(plan.chosen),
                                 "status": plan.status}])
            sweep = pd.concat([sweep, own], ignore_index=True).sort_values("budget", kind="stable")
            sweep = sweep.reset_index(drop=True)
    return plan, ranking, backups, sweep


def _model_fit_warnings(base_stations: pd.DataFrame, model: str) -> None:
    """One warning per station whose antenna height does not suit the direct path model."""
    for bs_id, z in zip(base_stations["bs_id"].astype(str), base_stations["z_m"].to_numpy(float)):
        advice = radio.direct_model_fit(model, z)
        if advice:
            warnings.warn(f"base station {bs_id}: {advice}", stacklevel=2)


def plan_checks(district, sites, sizes, users, gains: GainResult, plan, p: RadioParams, heights_m, uncertainty_m):
    """The chosen surfaces' field checks and the plan's model sensitivity (:mod:`siting.checks`)."""
    chosen = np.asarray(plan.chosen, np.int64)
    args = (district.buildings, district.base_stations, sites, sizes, users, gains.options, gains.bs_user,
            gains.direct, chosen, p)
    obstacles = Obstacles.from_buildings(district.buildings.geometry.values, heights_m)  # built once for both
    return (checks.site_checks(*args, obstacles=obstacles, heights_m=heights_m, uncertainty_m=uncertainty_m),
            checks.sensitivity(*args, obstacles=obstacles, heights_m=heights_m))


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
