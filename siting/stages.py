"""The pipeline stages: each takes tables and parameter objects and returns tables.

No stage reads the job file or writes an output file; the runner (:mod:`siting.runner`) builds the parameters
once, caches each stage's result and hands the tables to the writers.
"""

from __future__ import annotations

import logging
import warnings
from collections import Counter
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from . import candidates as cand
from . import checks, radio
from . import optimize as opt
from .cache import digest
from .district import District, load_district
from .errors import JobError, SitingError, SitingWarning
from .executor import NOTES, _collect, _halo, _submit_tiles, _tiles, merge_tile_notes
from .gains import GainResult, RadioParams, best_direct, coverage_matrix, direct_links, make_options, surface_links
from .job import Area, Candidates, Demand, Inputs, Job
from .tables import empty
from .visibility import Obstacles
from .walls import wall_conflicts

log = logging.getLogger("siting")


#: Budgets of the coverage-versus-budget curve when the job gives none: these multiples of budget.max_cost (the
#: plan's own budget among them, so the report shows what a quarter, half, ... twice the money would cover).
SWEEP_BUDGET_FACTORS: tuple[float, ...] = (0.25, 0.5, 0.75, 1.0, 1.5, 2.0)
SWEEP_MIN_S = 5.0  # least solver time of the whole coverage-versus-budget curve [s]


@dataclass(frozen=True)
class OptimiseParams:
    """What the optimise stage reads: limits, the sweep, the solver settings (``None`` = no limit).

    Attributes
    ----------
    max_cost : float or None
        Spending limit [currency].
    max_panels : int or None
        Panel count limit.
    target_share : float or None
        When given: find the cheapest plan covering this share of the weight the surfaces can reach.
    min_spacing_m : float
        Least distance between chosen spots on one wall [m] (0 = none).
    load_cap_weight : float or None
        Most weight one surface may carry.
    sweep_budgets : tuple of float or None
        Budgets of the coverage-versus-budget curve [currency]; None: ``sweep_budget_factors`` x ``max_cost``.
    sweep_budget_factors : tuple of float
        See :data:`SWEEP_BUDGET_FACTORS`.
    solver : str
        ``"highs"`` or ``"cbc"``.
    time_limit_s : float
        Wall-clock limit per solve [s].
    mip_gap : float
        Relative optimality gap at which to stop.
    threads : int or None
        Solver threads (None = solver default).
    """

    max_cost: float | None = None
    max_panels: int | None = None
    target_share: float | None = None
    min_spacing_m: float = 0.0
    load_cap_weight: float | None = None
    sweep_budgets: tuple[float, ...] | None = None
    sweep_budget_factors: tuple[float, ...] = SWEEP_BUDGET_FACTORS
    solver: str = "highs"
    time_limit_s: float = 120.0
    mip_gap: float = 1e-4
    threads: int | None = None

    @classmethod
    def from_job(cls, job: Job) -> OptimiseParams:
        b, s = job.budget, job.solver
        return cls(max_cost=b.max_cost, max_panels=b.max_panels, target_share=b.target_share,
                   min_spacing_m=b.min_spacing_m, load_cap_weight=job.surfaces.load_cap_weight,
                   sweep_budgets=b.sweep_budgets, solver=s.name, time_limit_s=s.time_limit_s, mip_gap=s.mip_gap,
                   threads=s.threads)


@dataclass(frozen=True)
class StageParams:
    """Every stage's parameters, built once from a :class:`~siting.job.Job` by :meth:`from_job`.

    Attributes
    ----------
    inputs, area, candidates, demand : frozen job sections
        What :func:`load_stage` and :func:`candidates_stage` read.
    radio : RadioParams
        The link model of :func:`gains_stage` and :func:`plan_checks`.
    optimise : OptimiseParams
        What :func:`optimise_stage` reads.
    height_uncertainty_m : float
        Height band (+/-) of buildings with guessed heights [m].
    robust_heights : bool
        Plan with guessed heights at the top of their band.
    tile_m : float or None
        Tile size [m] (None = one tile).
    """

    inputs: Inputs
    area: Area
    candidates: Candidates
    demand: Demand
    radio: RadioParams
    optimise: OptimiseParams
    height_uncertainty_m: float
    robust_heights: bool
    tile_m: float | None

    @classmethod
    def from_job(cls, job: Job) -> StageParams:
        return cls(inputs=job.inputs, area=job.area, candidates=job.candidates, demand=job.demand,
                   radio=RadioParams.from_job(job), optimise=OptimiseParams.from_job(job),
                   height_uncertainty_m=job.inputs.height_uncertainty_m, robust_heights=job.radio.robust_heights,
                   tile_m=job.run.tile_m)


def sizes_table(panels, frequency_ghz: float, element_pitch_wavelengths: float) -> pd.DataFrame:
    """The panel catalogue (``job.surfaces.panels``) as the 'sizes' table, with element counts at the pitch."""
    pitch_m = radio.element_pitch_m(frequency_ghz * 1e9, element_pitch_wavelengths)
    width_m = np.array([p.width_m for p in panels], float)
    height_m = np.array([p.height_m for p in panels], float)
    return pd.DataFrame({
        "size_id": np.array([str(p.size_id) for p in panels], dtype=object),
        "width_m": width_m,
        "height_m": height_m,
        "cost": np.array([p.cost for p in panels], float),
        "install_cost": np.array([p.install_cost for p in panels], float),
        "elements": radio.element_count(width_m, height_m, pitch_m),
    })


def load_stage(inputs: Inputs, area: Area) -> District:
    """The district's layers in one metric CRS, from the job's ``inputs`` and ``area`` sections."""
    return load_district(
        buildings_path=inputs.buildings, base_stations_path=inputs.base_stations, sites_path=inputs.sites,
        users_path=inputs.users, buildings_layer=inputs.buildings_layer,
        building_id_column=inputs.building_id_column, height_column=inputs.height_column,
        storey_height_m=inputs.storey_height_m, default_height_m=inputs.default_height_m, crs=inputs.crs,
        area_bbox_lonlat=list(area.bbox) if area.bbox is not None else None, area_path=area.polygon,
        user_weight_column=inputs.user_weight_column,
    )


def _facade_spots(district: District, c: Candidates, sizes: pd.DataFrame, notes: list[str]) -> pd.DataFrame:
    """Generated and given facade spots, numbered 0..n-1."""
    parts = []
    if c.generate:
        parts.append(cand.facade_spots(
            district.buildings, spacing_m=c.spacing_m, mount_heights_m=tuple(c.mount_heights_m),
            roof_margin_m=c.roof_margin_m, offset_m=c.offset_m, party_gap_m=c.party_gap_m,
            front_clear_m=c.front_clear_m, min_wall_m=float(sizes["width_m"].min())))
    if district.given_sites is not None and len(district.given_sites):
        given, dropped = cand.snap_given_spots(
            district.buildings, district.given_sites, snap_tolerance_m=c.snap_tolerance_m,
            default_z_m=float(c.mount_heights_m[0]), offset_m=c.offset_m, party_gap_m=c.party_gap_m,
            min_wall_m=float(sizes["width_m"].min()), start_id=sum(len(p) for p in parts))
        parts.append(given)
        if dropped:
            notes.append(f"{len(dropped)} given spot(s) farther than {c.snap_tolerance_m} m from any wall were "
                         f"dropped: {', '.join(map(str, dropped[:20]))}")
    sites = pd.concat(parts, ignore_index=True) if parts else empty("sites")
    if not len(sites):  # nothing to plan with: refused here, before the gains stage and before anything is stored
        sources = ((["the walls"] if c.generate else [])
                   + (["the given spots (inputs.sites)"] if district.given_sites is not None else []))
        fix = ("lower candidates.front_clear_m or candidates.party_gap_m, check the footprints" if c.generate
               else "set candidates.generate = true")
        raise JobError(f"candidates: no candidate facade spot is left from {' and '.join(sources) or 'any source'}; "
                       f"{fix}, or move the given spots within candidates.snap_tolerance_m of a free wall", "job")
    sites["site_id"] = np.arange(len(sites), dtype=np.int64)
    return sites


def candidates_stage(district: District, c: Candidates, d: Demand, sizes: pd.DataFrame,
                     storey_height_m: float) -> tuple[pd.DataFrame, pd.DataFrame, list[str]]:
    """Facade spots (generated and given) and demand points (grid, homes, given).

    ``c`` and ``d`` are the job's ``candidates`` and ``demand`` sections; returns (sites, users, notes).
    """
    notes: list[str] = []
    sites = _facade_spots(district, c, sizes, notes)
    demand = []
    if d.street_grid:
        demand.append(cand.street_grid(district.buildings, district.area, grid_m=d.grid_m,
                                       height_m=d.street_height_m, weight_per_point=d.street_weight))
    if d.homes:
        demand.append(cand.facade_homes(district.buildings, storey_height_m=storey_height_m,
                                        home_spacing_m=d.home_spacing_m,
                                        area_per_household_m2=d.area_per_household_m2, offset_m=c.offset_m,
                                        party_gap_m=c.party_gap_m))
    if district.given_users is not None and len(district.given_users):
        given_u, n_inside = cand.given_users(district.buildings, district.given_users, allow_indoor=d.allow_indoor)
        demand.append(given_u)
        if n_inside:
            notes.append(f"{n_inside} given user(s) inside buildings were dropped (set demand.allow_indoor = true "
                         "to keep them as indoor demand)")
    if not demand:
        raise SitingError("no demand: enable demand.street_grid or demand.homes, or give inputs.users")
    users = cand.combine_users(*demand)
    return sites, users, notes


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



def gains_stage(district, sites, sizes, users, p: RadioParams, *, cache, key, tile_m, executor, progress,
                heights_m: np.ndarray, computed: list | None = None, notes: list | None = None) -> GainResult:
    """Direct links per user tile and surface links per site tile; union equals the one-piece computation.

    ``heights_m`` are the building heights the links are computed with (see :func:`siting.checks.planning_heights`).
    The names of the tiles computed (not read from the cache) are appended to ``computed``, the tiles' model
    notes to ``notes`` (in tile order; a note each tile repeats with its own count once, with the sum: see
    :func:`siting.executor.merge_tile_notes`).

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
    tasks: dict[int, tuple] = {}
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
    if notes is not None:
        tile_notes = count_tile_notes([list(part.get(NOTES, ())) for part in [*direct_parts, *surface_parts]])
        notes.extend(n for n in tile_notes if n not in notes)
    return GainResult(direct, options, coverage, bs_site, site_user, bs_user)


def count_tile_notes(per_tile: list[list[str]]) -> list[str]:
    """The notes of a stage's tiles (one list per tile, in tile order), each distinct note once with a count.

    A note several tiles raise word for word is listed once as ``"<note> (34 tiles)"``; notes equal but for one
    whole number are summed into one (:func:`siting.executor.merge_tile_notes`, "... (summed over 3 tiles)");
    any other note is kept as it is, in first-seen order.  The result depends only on the tiles' notes, so a
    run in one process, on Dask workers or from the cache lists the same notes.
    """
    n_tiles = Counter(n for tile in per_tile for n in dict.fromkeys(tile))
    merged = merge_tile_notes([n for tile in per_tile for n in tile])
    return [f"{n} ({n_tiles[n]} tiles)" if n_tiles.get(n, 0) > 1 else n for n in merged]


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


def optimisation_inputs(gains: GainResult, users: pd.DataFrame, p: RadioParams):
    """The optimiser's array inputs from the gain tables: (cover CSR, weight, cost, option_site).

    Users already covered by the direct path get weight 0: they are constants, not variables.
    """
    cover = coverage_matrix(gains.coverage, len(gains.options), len(users), p.snr_target_db)
    weight = users["weight"].to_numpy(float) * ~gains.direct["covered"].to_numpy(bool)
    return cover, weight, gains.options["cost"].to_numpy(float), gains.options["site_id"].to_numpy(np.int64)


def _sweep(cover, weight, cost, option_site, plan, q: OptimiseParams, solver_kw: dict) -> pd.DataFrame | None:
    """The coverage-versus-budget curve: ``q.sweep_budgets``, else :data:`SWEEP_BUDGET_FACTORS` x ``max_cost``."""
    budget = q.max_cost
    budgets = list(q.sweep_budgets or ())
    if not budgets and budget:
        budgets = [round(budget * f, 2) for f in q.sweep_budget_factors]
    if not budgets:
        return None
    # The whole curve gets the plan's own solve time, at least SWEEP_MIN_S, as one pool shared by its points
    # (time an easy point leaves goes to the later ones), on one model kept for all; each point reports its own
    # proven gap and is 'optimal' only when proven within the plan's gap.  The plan's own budget is not solved
    # again.  The floor: on a small district the points take ~0.1 s each and the plan less, and a limit near
    # that would let the machine's load decide whether a point is proven, so two runs of one job could report
    # different curves.
    others = sorted(x for x in set(budgets) if not (budget and q.target_share is None and x == budget))
    own_s = float(plan.timings_s.get("total", q.time_limit_s))
    sweep_kw = dict(solver_kw, mip_rel_gap=q.mip_gap, total_time_s=min(q.time_limit_s, max(SWEEP_MIN_S, own_s)))
    sweep = opt.budget_sweep(cover, weight, cost, option_site, others, max_count=q.max_panels, **sweep_kw)
    if len(others) < len(set(budgets)):
        own = pd.DataFrame([{"budget": budget, "covered_weight": plan.objective, "bound": plan.bound,
                             "gap": plan.gap, "cost": plan.cost, "n_sites": len(plan.chosen), "status": plan.status}])
        sweep = pd.concat([sweep, own], ignore_index=True).sort_values("budget", kind="stable")
        sweep = sweep.reset_index(drop=True)
    return sweep


def optimise_stage(gains: GainResult, sites: pd.DataFrame, users: pd.DataFrame, q: OptimiseParams,
                   p: RadioParams):
    """The plan (maximum coverage, or minimum cost for a target share), its ranking, backups and budget sweep."""
    cover, weight, cost, option_site = optimisation_inputs(gains, users, p)
    solver_kw: dict[str, Any] = dict(
        conflicts=wall_conflicts(sites, q.min_spacing_m), load_cap=q.load_cap_weight,
        solver=q.solver, time_limit_s=q.time_limit_s, mip_rel_gap=q.mip_gap, threads=q.threads,
    )
    if q.target_share is not None:
        try:
            plan = opt.min_cost_cover(cover, weight, cost, option_site, target_share=q.target_share,
                                      budget=q.max_cost, max_count=q.max_panels, **solver_kw)
        except opt.TargetUnreachable as exc:
            raise opt.TargetUnreachable(f"budget.target_share = {q.target_share:g}: {exc}", reachable=exc.reachable,
                                        bound=exc.bound, advice=exc.advice) from None
    else:
        if q.max_cost is None and q.max_panels is None:
            raise SitingError("no limit given: set budget.max_cost, budget.max_panels or budget.target_share "
                              "in the job")
        plan = opt.solve_coverage(cover, weight, cost, option_site, budget=q.max_cost, max_count=q.max_panels,
                                  **solver_kw)
    chosen = np.asarray(plan.chosen, dtype=np.int64)
    ranking = opt.rank_chosen(chosen, cover, weight)
    site_rows = sites.set_index("site_id").reindex(option_site)  # options' sites (site_id is the row position)
    backups = opt.backups_for(chosen, cover, weight, cost, option_site, k=3, conflicts=solver_kw["conflicts"],
                              option_wall=site_rows["wall_id"].to_numpy(np.int64),
                              option_building=site_rows["building_id"].astype(str).to_numpy(object))
    return plan, ranking, backups, _sweep(cover, weight, cost, option_site, plan, q, solver_kw)


def _model_fit_warnings(base_stations: pd.DataFrame, model: str) -> None:
    """One warning per station whose antenna height does not suit the direct path model."""
    for bs_id, z in zip(base_stations["bs_id"].astype(str), base_stations["z_m"].to_numpy(float)):
        advice = radio.direct_model_fit(model, z)
        if advice:
            warnings.warn(f"base station {bs_id}: {advice}", SitingWarning, stacklevel=2)


def plan_checks(district, sites, sizes, users, gains: GainResult, plan, p: RadioParams, heights_m, uncertainty_m):
    """The chosen surfaces' field checks and the plan's model sensitivity (:mod:`siting.checks`)."""
    chosen = np.asarray(plan.chosen, np.int64)
    args = (district.buildings, district.base_stations, sites, sizes, users, gains.options, gains.bs_user,
            gains.direct, chosen, p)
    obstacles = Obstacles.from_buildings(district.buildings.geometry.values, heights_m)  # built once for both
    return (checks.site_checks(*args, obstacles=obstacles, heights_m=heights_m, uncertainty_m=uncertainty_m),
            checks.sensitivity(*args, obstacles=obstacles, heights_m=heights_m))

