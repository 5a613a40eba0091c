"""Figures derived from a solved plan: per user "before / after", per chosen site, per demand kind, summary.

Everything the layers, the survey list, the report and ``run.json`` print comes from :func:`derive`, so the
same number is the same everywhere.

Rules (from the plan's coverage relation)
--------------------------------------------------------------------
* A surface is steered to one user at a time, so a user's SNR with the plan is its best SNR over the
  coverage rows of the *chosen* options (each row already combines the surface path with the direct path),
  or its direct SNR when that is higher or when no chosen option reaches it.
* The serving surface of a user is the chosen option giving that best SNR (ties: the better-ranked site);
  users whose direct path is at least as good have no serving surface.
* Covered after = covered directly, or best chosen SNR >= target.  Newly covered = covered after and not
  covered directly; this is the quantity the optimiser maximises.  With a per-surface load cap
  (``surfaces.load_cap_weight`` > 0) only the users the plan marks as covered (``plan.covered``) count and
  are served; the others keep their direct SNR, and a note says how many were left out.
* Field checks (``site_checks``) and the model sensitivity (``sensitivity``) are computed by the runner and
  only merged here: by option id into the site rows, with a plain-language note per site when the surface is
  fed from a station's back lobe or some of its links depend on guessed building heights.
* For a chosen site: *exclusive weight* is the newly covered weight that no other chosen site reaches at
  the target, *shared weight* the newly covered weight it reaches together with other chosen sites;
  *weight gained* (``weight_gained``; the optimiser's ranking calls it ``marginal_weight``) is the newly covered
  weight it adds in rank order, and *cumulative covered weight* (``cumulative_covered_weight``) the covered
  weight after the sites up to it, the weight covered directly included.
* A demand point's ``reason`` says why it is or is not covered: covered directly, covered by the plan, below
  the target with the plan (a chosen surface improves it, not enough), left out by the load cap, no chosen
  surface reaches it, or no base station in range.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..radio import element_count
from .backups import BACKUP_INPUT_COLUMNS, backup_rows
from .contract import SITE_CHECK_COLUMNS, check_bundle, sensitivity_table, site_check_columns
from .emptyplan import empty_plan_reason
from .values import (
    angle_deg,
    chosen_ids,
    compass_point,
    currency_label,
    dedupe_notes,
    float_or_none,
    plan_attr,
    text_values,
    to_lonlat,
)

__all__ = ["PlanFigures", "derive", "SITE_COLUMNS", "REASONS", "SITE_CHECK_COLUMNS", "BACKUP_INPUT_COLUMNS",
           "angle_deg", "compass_point", "currency_label", "element_count", "text_values", "to_lonlat"]


@dataclass
class PlanFigures:
    """Derived tables.  Units in column names; weights in the users' weight unit, costs in currency units."""

    users: pd.DataFrame
    """one row per user: user_id, x, y, lon, lat, kind, weight, snr_direct_db, snr_plan_db, covered_before,
    covered_after, newly_covered, direct_bs_id, serving_option_id (-1 none), serving_site_id (-1 none),
    serving_rank (0 none), serving_bs_idx (-1 none), reason (see :data:`REASONS`), shortfall_db (target minus
    SNR with the plan when not covered, else NaN)"""
    sites: pd.DataFrame
    """one row per chosen site in rank order (see :data:`SITE_COLUMNS`)"""
    by_kind: pd.DataFrame
    """per demand kind: kind, n_users, weight, covered_weight_before, covered_weight_after,
    newly_covered_weight, covered_share_before, covered_share_after"""
    links: pd.DataFrame
    """served (surface, user) pairs: rank, option_id, site_id, user_id, bs_idx, bs_id, snr_db"""
    backups: pd.DataFrame
    """the backups of each chosen site in the optimiser's order (:data:`siting.outputs.backups.BACKUP_COLUMNS`):
    where the spot is (building, name, address, lon/lat, facing, mount height, panel, horizontal distance from
    the primary spot), placement, recovered weight and share, kept weight, weak flag"""
    candidates: pd.DataFrame
    """every candidate spot: site_id, building_id, lon, lat, facing_deg, facing, mount_height_m,
    wall_free_m, source, n_options, chosen"""
    summary: dict
    notes: list = field(default_factory=list)
    sensitivity: pd.DataFrame | None = None
    """the chosen plan's covered weight per radio model (see :func:`sensitivity_table`); empty when not computed"""


SITE_COLUMNS = (
    "rank", "site_id", "option_id", "lon", "lat", "x", "y", "building_id", "name", "address",
    "facing_deg", "facing", "mount_height_m", "size_id", "width_m", "height_m", "area_m2", "elements",
    "cost", "weight_gained", "exclusive_weight", "shared_weight", "cumulative_covered_weight",
    "cumulative_covered_share",
    "n_users_served", "served_weight", "median_snr_gain_db", "serving_bs_id", "backup_site_ids", "wall_free_m",
    "feed_bs_id", "feed_below_peak_db", "back_lobe_feed", "guessed_height_links", "exposure_w_m2",
    "exposure_where", "exposure_reference_w_m2", "exposure_share", "notes",
)

#: Why a demand point is or is not covered (the demand layer's ``reason``), in the order they are decided.
REASONS = {
    "direct": "covered directly",
    "plan": "covered by the plan",
    "load_cap": "reaches the target, but the load cap leaves no room on the surface",
    "below": "below target with the plan: a chosen surface improves it, not enough",
    "direct_better": "below target: its direct path beats every chosen surface",
    "unreached": "below target: no chosen surface reaches it",
    "no_signal": "no base station in range",
}


def _reasons(before, newly, left_out, served, reached, has_signal) -> np.ndarray:
    """The ``reason`` of every demand point (see :data:`REASONS`)."""
    return np.select(
        [before, newly, left_out, served, reached, ~has_signal],
        [REASONS["direct"], REASONS["plan"], REASONS["load_cap"], REASONS["below"], REASONS["direct_better"],
         REASONS["no_signal"]], REASONS["unreached"]).astype(object)


def _rank_order(chosen: np.ndarray, ranking: pd.DataFrame | None) -> np.ndarray:
    """Chosen option ids in rank order: by the ranking table when it ranks them all, else as listed."""
    if ranking is None or not len(ranking) or not {"option", "rank"} <= set(ranking.columns):
        return chosen
    r = ranking.drop_duplicates("option").set_index("option")["rank"]
    if not set(chosen.tolist()) <= set(r.index.tolist()):
        return chosen
    key = r.reindex(chosen).to_numpy(float)
    return chosen[np.argsort(key, kind="stable")]


def _by_index(values: np.ndarray, idx, fill="") -> np.ndarray:
    """``values[idx]`` where ``idx`` is a valid position, ``fill`` elsewhere (-1 and the like)."""
    idx = np.asarray(idx, dtype=np.int64)
    if not len(values):
        return np.full(len(idx), fill, dtype=object)
    ok = (idx >= 0) & (idx < len(values))
    return np.where(ok, values[np.clip(idx, 0, len(values) - 1)], fill).astype(object)


@dataclass
class _Rows:
    """The coverage rows of the chosen options (rank = 1-based rank of the option)."""

    opt: np.ndarray
    user: np.ndarray
    snr: np.ndarray
    bs: np.ndarray
    rank: np.ndarray

    @classmethod
    def of(cls, coverage: pd.DataFrame, rank_of_option: np.ndarray) -> _Rows:
        sel = rank_of_option[coverage["option_id"].to_numpy(np.int64)] > 0
        opt = coverage["option_id"].to_numpy(np.int64)[sel]
        snr = coverage["snr_db"].to_numpy(float)[sel]
        return cls(opt, coverage["user_id"].to_numpy(np.int64)[sel], np.where(np.isnan(snr), -np.inf, snr),
                   coverage["bs_idx"].to_numpy(np.int64)[sel], rank_of_option[opt])

    def best(self, n_users: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Per user: best SNR over the rows, its option (-1 none) and station (-1 none); ties: better rank."""
        order = np.lexsort((self.rank, -self.snr, self.user))
        first = np.ones(order.size, dtype=bool)
        first[1:] = self.user[order][1:] != self.user[order][:-1]
        top = order[first]
        snr, opt, bs = np.full(n_users, -np.inf), np.full(n_users, -1, np.int64), np.full(n_users, -1, np.int64)
        snr[self.user[top]], opt[self.user[top]], bs[self.user[top]] = self.snr[top], self.opt[top], self.bs[top]
        return snr, opt, bs


def _user_table(b, rows: _Rows, rank_of_option: np.ndarray, target: float, notes: list[str]) -> pd.DataFrame:
    """Every demand point before and with the plan (see :attr:`PlanFigures.users`)."""
    users, n_users = b.users, len(b.users)
    weight = users["weight"].to_numpy(float)
    d = b.direct.set_index("user_id")  # users missing from 'direct' have no signal
    snr_direct = d["snr_db"].reindex(np.arange(n_users)).to_numpy(float)
    snr_direct = np.where(np.isnan(snr_direct), -np.inf, snr_direct)
    before = d["covered"].reindex(np.arange(n_users)).fillna(False).to_numpy(bool)
    direct_bs = d["bs_idx"].reindex(np.arange(n_users)).fillna(-1).to_numpy(np.int64)
    best_snr, best_opt, best_bs = rows.best(n_users)
    served = (best_opt >= 0) & (best_snr >= snr_direct)
    reach = best_snr >= target
    # with a per-surface load cap the optimiser assigns users to surfaces; only its 'covered' users are served
    assigned, left_out = np.ones(n_users, dtype=bool), np.zeros(n_users, dtype=bool)
    plan_cov = plan_attr(b.plan, "covered", None)
    if (b.load_cap_weight or 0.0) > 0 and plan_cov is not None and len(plan_cov) == n_users:
        assigned = np.asarray(plan_cov, dtype=bool)
        left_out = reach & ~before & ~assigned
        if left_out.any():
            notes.append(f"{int(left_out.sum())} demand point(s) (weight {weight[left_out].sum():.2f}) reach the "
                         "SNR target through a chosen surface but are not counted: the per-surface load cap "
                         "leaves no capacity for them")
        served &= assigned
        reach &= assigned | before
    snr_plan = np.where(served, best_snr, snr_direct)
    after = before | reach
    newly = after & ~before
    serving_opt = np.where(served, best_opt, -1)
    lon, lat = to_lonlat(b.crs, users["x"], users["y"])
    bs_ids = text_values(b.base_stations["bs_id"])
    return pd.DataFrame({
        "user_id": users["user_id"].to_numpy(np.int64), "x": users["x"].to_numpy(float),
        "y": users["y"].to_numpy(float), "lon": lon, "lat": lat, "kind": users["kind"].astype(str).to_numpy(),
        "weight": weight, "snr_direct_db": snr_direct, "snr_plan_db": snr_plan, "covered_before": before,
        "covered_after": after, "newly_covered": newly, "direct_bs_id": _by_index(bs_ids, direct_bs),
        "serving_option_id": serving_opt,
        "serving_site_id": np.r_[b.options["site_id"].to_numpy(np.int64), -1][serving_opt],
        "serving_rank": np.r_[rank_of_option, 0][serving_opt], "serving_bs_idx": np.where(served, best_bs, -1),
        "reason": _reasons(before, newly, left_out, served, best_opt >= 0, np.isfinite(snr_direct) | (best_opt >= 0)),
        "shortfall_db": np.where(after | ~np.isfinite(snr_plan), np.nan, np.round(target - snr_plan, 2)),
        "assigned": assigned,
    })


def _site_weights(u: pd.DataFrame, rows: _Rows, k: int, target: float) -> dict:
    """Exclusive, shared, gained and cumulative covered weight of each chosen site, in rank order."""
    n_users = max(len(u), 1)
    weight, before = u["weight"].to_numpy(float), u["covered_before"].to_numpy(bool)
    newly = u["newly_covered"].to_numpy(bool)
    # which chosen sites reach which not-yet-covered users at the target (deduplicated pairs)
    hit = (rows.snr >= target) & ~before[rows.user] & u["assigned"].to_numpy(bool)[rows.user]
    pair = np.unique((rows.rank[hit] - 1) * n_users + rows.user[hit])
    p_rank0, p_user = pair // n_users, pair % n_users
    n_cover = np.bincount(p_user, minlength=len(u))
    first_rank0 = np.full(len(u), k, dtype=np.int64)
    np.minimum.at(first_rank0, p_user, p_rank0)
    marginal = np.bincount(first_rank0[newly], weights=weight[newly], minlength=k + 1)[:k]
    return {
        "weight_gained": marginal,
        "exclusive_weight": np.bincount(p_rank0, weights=np.where(n_cover[p_user] == 1, weight[p_user], 0.0),
                                        minlength=k),
        "shared_weight": np.bincount(p_rank0, weights=np.where(n_cover[p_user] > 1, weight[p_user], 0.0),
                                     minlength=k),
        "cumulative_covered_weight": float(weight[before].sum()) + np.cumsum(marginal),
    }


def _served(u: pd.DataFrame, rows: _Rows, k: int, bs_ids: np.ndarray) -> dict:
    """Per chosen site: points and weight served, median SNR gain, the station feeding most of its users."""
    ranks = np.arange(1, k + 1)
    su = u[u["serving_rank"] > 0]
    gain = su["snr_plan_db"] - su["snr_direct_db"]
    gain = gain.where(np.isfinite(gain))
    # feeding base station: most frequent among the served users' rows, else among all rows of the option
    feed = np.full(k, -1, dtype=np.int64)
    for frame in (pd.DataFrame({"rank": rows.rank, "bs": rows.bs}),
                  pd.DataFrame({"rank": su["serving_rank"].to_numpy(), "bs": su["serving_bs_idx"].to_numpy()})):
        if len(frame):
            vc = frame.value_counts().reset_index(name="n").sort_values(["rank", "n", "bs"],
                                                                        ascending=[True, False, True])
            top = vc.drop_duplicates("rank")
            feed[top["rank"].to_numpy(np.int64) - 1] = top["bs"].to_numpy(np.int64)
    return {
        "n_users_served": su.groupby("serving_rank").size().reindex(ranks, fill_value=0).to_numpy(np.int64),
        "served_weight": su.groupby("serving_rank")["weight"].sum().reindex(ranks, fill_value=0.0).to_numpy(float),
        "median_snr_gain_db": np.round(gain.groupby(su["serving_rank"]).median().reindex(ranks).to_numpy(float), 2),
        "serving_bs_id": _by_index(bs_ids, feed),
    }


def _elements(b, z: pd.DataFrame, width: np.ndarray, height: np.ndarray, notes: list[str]) -> np.ndarray:
    """Element counts of the chosen panels: the catalogue's, else at ``b.element_pitch_m``, else -1 (unknown)."""
    if "elements" in z.columns and z["elements"].notna().all():
        return z["elements"].to_numpy(np.int64)
    if b.element_pitch_m:
        return np.asarray(element_count(width, height, float(b.element_pitch_m)), np.int64).reshape(-1)
    if len(width):
        notes.append("element counts unknown: the job gives no surfaces.element_pitch_wavelengths / "
                     "radio.frequency_ghz and the catalogue has no 'elements' column")
    return np.full(len(width), -1, dtype=np.int64)


def _site_notes(width, wall_free, checks: dict) -> np.ndarray:
    """Plain-language notes per chosen site: a panel wider than its wall, a back-lobe feed, guessed heights."""
    out: list[list[str]] = [["panel wider than the free wall length; check the facade"] if w > f + 1e-9 else []
                            for w, f in zip(width, wall_free)]
    for i, (lobe, below, n_guess) in enumerate(zip(checks["back_lobe_feed"], checks["feed_below_peak_db"],
                                                   checks["guessed_height_links"])):
        if lobe is not pd.NA and bool(lobe):
            db = f"{below:.1f} dB" if np.isfinite(below) else "far"
            out[i].append(f"fed from the station's back lobe ({db} below boresight): re-aiming the station may "
                          "serve these users without a panel")
        if n_guess is not pd.NA and n_guess > 0:
            out[i].append(f"{int(n_guess)} link(s) depend on guessed building heights: measure those heights")
    return np.asarray(["; ".join(n) for n in out], dtype=object)


def _site_table(b, chosen: np.ndarray, weights: dict, served: dict, backups: pd.DataFrame, texts: tuple,
                notes: list[str]) -> pd.DataFrame:
    """One row per chosen site in rank order (see :data:`SITE_COLUMNS`)."""
    k = len(chosen)
    o = b.options.iloc[chosen]
    s = b.sites.iloc[o["site_id"].to_numpy(np.int64)]
    z = b.sizes.drop_duplicates("size_id").set_index("size_id").reindex(o["size_id"].to_numpy())
    width, height = z["width_m"].to_numpy(float), z["height_m"].to_numpy(float)
    bidx = s["building_idx"].to_numpy(np.int64)
    lon, lat = to_lonlat(b.crs, s["x"], s["y"])
    backup_ids = backups.groupby("rank")["backup_site_id"].agg(lambda v: ";".join(str(i) for i in v))
    bs_ids = text_values(b.base_stations["bs_id"])
    checks = site_check_columns(b.site_checks, chosen, lambda idx: _by_index(bs_ids, idx))
    wall_free = s["wall_free_m"].to_numpy(float)
    facing = angle_deg(s["normal_az_deg"].to_numpy(float))
    total_w = float(b.users["weight"].sum())
    cumulative = weights["cumulative_covered_weight"]
    return pd.DataFrame({
        "rank": np.arange(1, k + 1), "site_id": s["site_id"].to_numpy(np.int64), "option_id": chosen,
        "lon": lon, "lat": lat, "x": s["x"].to_numpy(float), "y": s["y"].to_numpy(float),
        "building_id": text_values(s["building_id"]), "name": _by_index(texts[0], bidx),
        "address": _by_index(texts[1], bidx), "facing_deg": facing, "facing": compass_point(facing),
        "mount_height_m": s["z_m"].to_numpy(float), "size_id": text_values(o["size_id"]), "width_m": width,
        "height_m": height, "area_m2": width * height, "elements": _elements(b, z, width, height, notes),
        "cost": o["cost"].to_numpy(float), **weights,
        "cumulative_covered_share": np.round(cumulative / total_w, 6) if total_w > 0 else np.zeros(k),
        **served, "backup_site_ids": backup_ids.reindex(np.arange(1, k + 1), fill_value="").to_numpy(object),
        "wall_free_m": wall_free, **checks, "notes": _site_notes(width, wall_free, checks),
    }, columns=list(SITE_COLUMNS))


def _by_kind(u: pd.DataFrame) -> pd.DataFrame:
    w = u["weight"].to_numpy(float)
    g = u.assign(wb=np.where(u["covered_before"], w, 0.0), wa=np.where(u["covered_after"], w, 0.0),
                 wn=np.where(u["newly_covered"], w, 0.0))
    out = g.groupby("kind", sort=True).agg(
        n_users=("user_id", "size"), weight=("weight", "sum"), covered_weight_before=("wb", "sum"),
        covered_weight_after=("wa", "sum"), newly_covered_weight=("wn", "sum")).reset_index()
    with np.errstate(invalid="ignore", divide="ignore"):
        for when in ("before", "after"):
            out[f"covered_share_{when}"] = np.where(out["weight"] > 0, out[f"covered_weight_{when}"] / out["weight"],
                                                    0.0)
    return out


def _links(u: pd.DataFrame, bs_ids: np.ndarray) -> pd.DataFrame:
    lk = u[u["serving_rank"] > 0]
    return pd.DataFrame({
        "rank": lk["serving_rank"].to_numpy(np.int64), "option_id": lk["serving_option_id"].to_numpy(np.int64),
        "site_id": lk["serving_site_id"].to_numpy(np.int64), "user_id": lk["user_id"].to_numpy(np.int64),
        "bs_idx": lk["serving_bs_idx"].to_numpy(np.int64), "bs_id": _by_index(bs_ids, lk["serving_bs_idx"]),
        "snr_db": lk["snr_plan_db"].to_numpy(float),
    }).sort_values(["rank", "user_id"], kind="stable").reset_index(drop=True)


def _candidates(b, chosen: np.ndarray) -> pd.DataFrame:
    sites, options = b.sites, b.options
    lon, lat = to_lonlat(b.crs, sites["x"], sites["y"])
    is_chosen = np.zeros(len(sites), dtype=bool)
    is_chosen[options["site_id"].to_numpy(np.int64)[chosen]] = True
    facing = angle_deg(sites["normal_az_deg"].to_numpy(float))
    return pd.DataFrame({
        "site_id": sites["site_id"].to_numpy(np.int64), "building_id": text_values(sites["building_id"]),
        "lon": lon, "lat": lat, "facing_deg": facing, "facing": compass_point(facing),
        "mount_height_m": sites["z_m"].to_numpy(float), "wall_free_m": sites["wall_free_m"].to_numpy(float),
        "source": sites["source"].astype(str).to_numpy(),
        "n_options": np.bincount(options["site_id"].to_numpy(np.int64), minlength=len(sites)),
        "chosen": is_chosen,
    })


def derive(b) -> PlanFigures:
    """Compute every figure the outputs print from an :class:`~siting.outputs.OutputBundle`."""
    check_bundle(b)
    notes: list[str] = list(b.run_info.get("notes", []) or []) if isinstance(b.run_info, dict) else []
    target = float(b.snr_target_db)
    chosen = _rank_order(chosen_ids(b.plan).astype(np.int64), b.ranking)
    k = len(chosen)
    rank_of_option = np.zeros(len(b.options), dtype=np.int64)  # 0 = not chosen, else 1-based rank
    rank_of_option[chosen] = np.arange(1, k + 1)
    rows = _Rows.of(b.coverage, rank_of_option)
    u = _user_table(b, rows, rank_of_option, target, notes)
    bld = b.buildings.reset_index(drop=True)
    texts = (text_values(bld["name"]), text_values(bld["address"]))
    backups = backup_rows(b, chosen, rank_of_option, *texts)
    bs_ids = text_values(b.base_stations["bs_id"])
    sites_out = _site_table(b, chosen, _site_weights(u, rows, k, target), _served(u, rows, k, bs_ids), backups,
                            texts, notes)
    u = u.drop(columns="assigned")
    total_w = float(u["weight"].sum())
    summary = _summary(b, u, sites_out, target, total_w, notes)
    summary["n_weak_backups"] = int(backups["weak"].sum())
    return PlanFigures(users=u, sites=sites_out, by_kind=_by_kind(u), links=_links(u, bs_ids), backups=backups,
                       candidates=_candidates(b, chosen), summary=summary, notes=dedupe_notes(notes),
                       sensitivity=sensitivity_table(b, total_w))


def _plan_summary(plan) -> dict:
    return {
        "status": str(plan_attr(plan, "status", "") or ""),
        "solver": str(plan_attr(plan, "solver", "") or ""),
        "objective": float_or_none(plan_attr(plan, "objective")),
        "bound": float_or_none(plan_attr(plan, "bound")),
        "gap": float_or_none(plan_attr(plan, "gap")),
        "greedy_objective": float_or_none(plan_attr(plan, "greedy_objective")),
        "solver_reported_cost": float_or_none(plan_attr(plan, "cost")),
        "solver_message": str(plan_attr(plan, "message", "") or ""),
        "mode": str(plan_attr(plan, "mode", "") or ""),
        "tie_break": str(plan_attr(plan, "tie_break", "") or ""),
    }


def _check_summary(b, u: pd.DataFrame, sites_out: pd.DataFrame, target: float) -> dict:
    """Below-target points, coverage rows, field checks and exposure of the summary."""
    weight = u["weight"].to_numpy(float)
    below = (u["reason"] == REASONS["below"]).to_numpy(bool)
    cov_snr = b.coverage["snr_db"].to_numpy(float)
    known = b.site_checks is not None
    share = sites_out["exposure_share"].to_numpy(float)
    return {
        "n_users_below_target_with_plan": int(below.sum()),
        "weight_below_target_with_plan": float(weight[below].sum()),
        "median_shortfall_db_with_plan": float(np.median(u["shortfall_db"].to_numpy(float)[below]))
        if below.any() else None,
        "currency": currency_label(b.currency),
        "n_coverage_rows": int(len(cov_snr)),
        "n_coverage_rows_at_target": int((cov_snr >= target).sum()),
        "site_checks_computed": known,
        "n_back_lobe_feeds": int(sites_out["back_lobe_feed"].fillna(False).sum()) if known else None,
        "n_sites_on_guessed_heights": int((sites_out["guessed_height_links"].fillna(0) > 0).sum()) if known else None,
        "max_exposure_share": float(np.nanmax(share)) if np.isfinite(share).any() else None,
    }


def _summary(b, u, sites_out, target, total_w, notes) -> dict:
    w_before = float(u.loc[u["covered_before"], "weight"].sum())
    w_after = float(u.loc[u["covered_after"], "weight"].sum())
    w_new = float(u.loc[u["newly_covered"], "weight"].sum())
    plan_cost = float(sites_out["cost"].sum())
    opt_cost = b.options["cost"].to_numpy(float)
    budget = float_or_none(b.budget)
    plan = _plan_summary(b.plan)
    objective = plan["objective"]
    if objective is not None and len(sites_out) and not (
            np.isclose(objective, w_new, rtol=1e-6, atol=1e-6) or np.isclose(objective, w_after, rtol=1e-6, atol=1e-6)):
        notes.append(f"the solver's objective ({objective:.6g}) differs from the newly covered weight recomputed "
                     f"from the coverage relation ({w_new:.6g}); a load cap or a reduced model may explain it")
    out = {
        "n_users": int(len(u)),
        "total_weight": total_w,
        "covered_weight_before": w_before,
        "covered_share_before": w_before / total_w if total_w > 0 else 0.0,
        "covered_weight_after": w_after,
        "covered_share_after": w_after / total_w if total_w > 0 else 0.0,
        "newly_covered_weight": w_new,
        "n_users_covered_before": int(u["covered_before"].sum()),
        "n_users_covered_after": int(u["covered_after"].sum()),
        "n_users_newly_covered": int(u["newly_covered"].sum()),
        "n_sites_chosen": int(len(sites_out)),
        "n_candidate_sites": int(len(b.sites)),
        "n_options": int(len(b.options)),
        "n_base_stations": int(len(b.base_stations)),
        "n_buildings": int(len(b.buildings)),
        "plan_cost": plan_cost,
        "budget": budget,
        "budget_used_share": plan_cost / budget if budget else None,
        "max_panels": int(b.max_panels) if b.max_panels is not None else None,
        "cheapest_option_cost": float(opt_cost.min()) if opt_cost.size else None,
        "snr_target_db": target,
        **plan,
        "empty_plan": not len(sites_out),
        "empty_plan_reason": "" if len(sites_out) else empty_plan_reason(
            b, target, currency_label(b.currency), plan["solver_message"]),
    }
    out.update(_check_summary(b, u, sites_out, target))
    return out
