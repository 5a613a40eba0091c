"""The re-plan stage: the job's plan around the field verdicts of ``inputs.survey_results``.

The runner calls :func:`prepare_field` after the candidates stage (it reads and checks the verdicts and appends
the moved spots to the candidate spots) and :func:`replan_stage` in place of
:func:`siting.stages.optimise_stage`.  Both are pure: tables in, tables out.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import scipy.sparse as sp

from . import optimize as opt
from .cache import digest
from .verdicts import (
    Restriction,
    Verdicts,
    facing_notes,
    job_fingerprint,
    moved_spots,
    read_verdicts,
    restrict_options,
    solve_with_verdicts,
)

#: ``inputs`` keys read after the candidates stage (left out of its cache key).
FIELD_INPUTS = ("survey_results", "previous_plan", "scenarios")


@dataclass
class FieldContext:
    """The verdicts of one run and what they did.

    Attributes
    ----------
    verdicts : Verdicts
        The checked results file.
    fingerprint : str
        The job fingerprint of the candidate set (without moved spots).
    moved : pandas.DataFrame
        The spots added for moved sites (``site_ref`` = the site they replace).
    notes : list of str
        Model notes of the verdicts (facing mismatches, approximations).
    restriction : Restriction or None
        Allowed and fixed options (set by :func:`replan_stage`).
    conflicts : numpy.ndarray or None
        The site pairs that may not both hold a panel in the re-plan (spacing, overlaps with moved spots).
    """

    verdicts: Verdicts
    fingerprint: str
    moved: pd.DataFrame
    notes: list[str] = field(default_factory=list)
    restriction: Restriction | None = None
    conflicts: np.ndarray | None = None

    def key(self) -> str:
        """Digest of the verdicts and the moved spots (for the stage cache)."""
        return digest([self.verdicts.key(), self.moved[["x", "y", "z_m"]].round(3).to_numpy().tolist()])

    def moved_key(self) -> str:
        """Digest of the moved spots (they change the candidate spots, so the gains)."""
        return digest(self.moved[["site_id", "x", "y", "z_m", "normal_az_deg"]].round(3).to_numpy().tolist())

    def moved_to(self) -> dict[int, int]:
        """Moved site id -> the id of the spot that replaces it."""
        return {int(r): int(s) for r, s in zip(self.moved["site_ref"], self.moved["site_id"])}

    def accepted_sites(self) -> list[int]:
        """Sites settled in the field: accepted ones and the spots of moved ones (fixed in the plan)."""
        return sorted(self.verdicts.of("accepted")["site_id"].astype(int).tolist() + list(self.moved_to().values()))

    def summary(self) -> dict[str, Any]:
        """JSON-able account of the verdicts (for run.json)."""
        t = self.verdicts.table
        return {"source": self.verdicts.source, "job_fingerprint": self.fingerprint,
                "counts": {s: int((t["status"] == s).sum()) for s in ("accepted", "rejected", "moved", "pending")},
                "walls_rejected": int(t["rejects_wall"].sum()),
                "accepted_sites": self.accepted_sites(),
                "moved_spots": {str(k): v for k, v in self.moved_to().items()},
                "verdicts": t.drop(columns=["line"]).replace({np.nan: None}).to_dict("records"),
                "notes": list(self.notes)}


def prepare_field(survey_results: str, district, sites: pd.DataFrame, sizes: pd.DataFrame,
                  candidates) -> tuple[pd.DataFrame, FieldContext]:
    """Read the verdicts, append the moved spots; return (sites with the moved spots, context).

    ``candidates`` is the job's ``candidates`` section (snap tolerance, offset, party gap).  Verdict rows may name
    moved spots of an earlier re-plan: their ids follow the generated spots in the order of the results file.
    """
    fp = job_fingerprint(sites)
    # First pass on the ids the file may name: generated spots and one id per moved row (checked again below).
    verdicts = read_verdicts(survey_results, _with_placeholders(sites, survey_results), sizes, fingerprint=fp)
    moved = moved_spots(verdicts, district, sites, sizes, candidates)
    all_sites = pd.concat([sites, moved], ignore_index=True) if len(moved) else sites
    verdicts = read_verdicts(survey_results, all_sites, sizes, fingerprint=fp)
    ctx = FieldContext(verdicts, fp, moved, [*verdicts.notes, *facing_notes(verdicts, moved)])
    return all_sites, ctx


def _with_placeholders(sites: pd.DataFrame, path: str) -> pd.DataFrame:
    """The spots plus placeholder ids for the moved spots a results file can add (so their ids are known)."""
    n_moved = 0
    try:
        raw = pd.read_csv(path, dtype=str, keep_default_na=False)
        n_moved = int((raw.get("status", pd.Series(dtype=str)).str.strip().str.lower() == "moved").sum())
    except Exception:  # noqa: BLE001 - read_verdicts reports an unreadable file with its own message
        pass
    start = int(sites["site_id"].max()) + 1 if len(sites) else 0
    extra = pd.DataFrame({"site_id": np.arange(start, start + n_moved, dtype=np.int64)})
    return pd.concat([sites[["site_id", "wall_id"]], extra.assign(wall_id=-1)], ignore_index=True)


def _moved_overlaps(sites: pd.DataFrame, moved: pd.DataFrame, sizes: pd.DataFrame, min_spacing_m: float) -> np.ndarray:
    """(moved spot, other spot) pairs on one wall closer than the widest panel or the spacing [m] (3-D)."""
    if not len(moved):
        return np.zeros((0, 2), np.int64)
    reach_m = max(float(sizes["width_m"].max()), min_spacing_m)
    xyz = sites[["x", "y", "z_m"]].to_numpy(float)
    wall = sites["wall_id"].to_numpy()
    pairs = []
    for s in moved["site_id"].to_numpy(np.int64):
        near = np.flatnonzero((np.linalg.norm(xyz - xyz[s], axis=1) < reach_m) & (wall == wall[s]))
        pairs += [(s, int(o)) for o in near if o != s]
    return np.asarray(pairs, np.int64).reshape(-1, 2)


def _rank(fixed, residual, cover, weight, w_res) -> pd.DataFrame:
    """Accepted options first (greedy order among them), then the residual plan's options."""
    a = opt.rank_chosen(fixed, cover, weight)
    b = opt.rank_chosen(residual, cover, w_res)
    if len(a) and len(b):
        b = b.assign(rank=b["rank"] + len(a),
                     cumulative_weight=b["cumulative_weight"] + a["cumulative_weight"].iloc[-1])
    return pd.concat([x for x in (a, b) if len(x)], ignore_index=True) if len(a) or len(b) else a


def replan_stage(gains, sites: pd.DataFrame, sizes: pd.DataFrame, users: pd.DataFrame, q, p, ctx: FieldContext):
    """The plan under the verdicts: (plan, ranking, backups, sweep) as :func:`siting.stages.optimise_stage`.

    ``q`` are the optimise parameters (:class:`siting.stages.OptimiseParams`), ``p`` the radio parameters.
    """
    from .stages import _sweep, optimisation_inputs, wall_conflicts

    cover, weight, cost, option_site = optimisation_inputs(gains, users, p)
    ctx.restriction = r = restrict_options(ctx.verdicts, sites, gains.options, sizes, ctx.moved_to())
    conflicts = np.concatenate([wall_conflicts(sites, q.min_spacing_m),
                                _moved_overlaps(sites, ctx.moved, sizes, q.min_spacing_m)])
    ctx.conflicts = conflicts
    kw: dict[str, Any] = dict(solver=q.solver, time_limit_s=q.time_limit_s, mip_rel_gap=q.mip_gap, threads=q.threads)
    target = None
    if q.target_share is not None:
        reach = np.asarray(sp.csr_array(cover)[np.flatnonzero(r.keep)].sum(axis=0)).ravel() > 0
        target = q.target_share * float(weight[reach].sum())
    elif q.max_cost is None and q.max_panels is None:
        from .errors import SitingError

        raise SitingError("no limit given: set budget.max_cost, budget.max_panels or budget.target_share in the job")
    plan, info = solve_with_verdicts(cover, weight, cost, option_site, r.keep, r.fixed, budget=q.max_cost,
                                     max_count=q.max_panels, conflicts=conflicts, load_cap=q.load_cap_weight,
                                     target_weight=target, **kw)
    ctx.notes += [n for n in info["notes"] if n not in ctx.notes]
    free, w_res = info["free"], info["residual_weight"]
    residual = plan.chosen[len(r.fixed):]
    ranking = _rank(r.fixed, residual, cover, weight, w_res)
    sub_conf = conflicts[np.isin(conflicts, option_site[free]).all(axis=1)] if len(conflicts) else conflicts
    local = np.searchsorted(free, residual)
    backups = opt.backups_for(local, sp.csr_array(cover)[free], w_res, cost[free], option_site[free], k=3,
                              conflicts=sub_conf)
    for col in ("option", "backup_option"):
        backups[col] = free[backups[col].to_numpy(np.int64)]
    sweep = None
    budgets = list(q.sweep_budgets or ()) or ([q.max_cost * f for f in q.sweep_budget_factors] if q.max_cost else [])
    fc = info["fixed_cost"]
    if budgets and q.target_share is None and q.max_cost is not None:
        q_res = dataclasses.replace(q, max_cost=max(q.max_cost - fc, 0.0),
                                    sweep_budgets=tuple(b - fc for b in budgets if b >= fc) or None,
                                    max_panels=None if q.max_panels is None else max(q.max_panels - len(r.fixed), 0))
        if q_res.sweep_budgets:
            sweep = _sweep(sp.csr_array(cover)[free], w_res, cost[free], option_site[free], info["residual_plan"],
                           q_res, dict(kw, conflicts=sub_conf, load_cap=q.load_cap_weight))
        if sweep is not None:
            sweep = sweep.assign(budget=sweep["budget"] + fc,
                                 covered_weight=sweep["covered_weight"] + info["fixed_weight"],
                                 bound=sweep["bound"] + info["fixed_weight"], cost=sweep["cost"] + fc,
                                 n_sites=sweep["n_sites"] + len(r.fixed))
    return plan, ranking, backups, sweep

