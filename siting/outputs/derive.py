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
import pyproj

from .. import tables as T
from ..constants import SPEED_OF_LIGHT_M_S
from ..district import to_lonlat as district_to_lonlat
from ..errors import SitingError
from .emptyplan import empty_plan_reason

COMPASS_16 = ("N", "NNE", "NE", "ENE", "E", "ESE", "SE", "SSE", "S", "SSW", "SW", "WSW", "W", "WNW", "NW", "NNW")


def compass_point(azimuth_deg) -> np.ndarray:
    """16-point compass name of azimuths in degrees clockwise from north (each point spans 22.5 deg)."""
    az = np.mod(np.asarray(azimuth_deg, dtype=float), 360.0)
    idx = np.floor((az + 11.25) / 22.5).astype(np.int64) % 16
    return np.asarray(COMPASS_16, dtype=object)[idx]


def element_pitch_m(params: dict) -> float | None:
    """Element pitch [m] from ``surfaces.element_pitch_wavelengths`` and ``radio.frequency_ghz``, or None."""
    try:
        pitch_wl = float(params["surfaces"]["element_pitch_wavelengths"])
        freq_ghz = float(params["radio"]["frequency_ghz"])
    except (KeyError, TypeError, ValueError):
        return None
    if not (pitch_wl > 0 and freq_ghz > 0):
        return None
    return pitch_wl * SPEED_OF_LIGHT_M_S / (freq_ghz * 1e9)


def element_count(width_m, height_m, pitch_m: float) -> np.ndarray:
    """Elements on a ``width_m`` x ``height_m`` panel at ``pitch_m``: floor(w/p) * floor(h/p).

    A relative tolerance of 1e-9 keeps exact multiples (0.3 m at 0.01 m pitch) from losing a row to
    floating-point rounding.
    """
    w = np.asarray(width_m, dtype=float) / pitch_m
    h = np.asarray(height_m, dtype=float) / pitch_m
    return (np.floor(w * (1 + 1e-9)) * np.floor(h * (1 + 1e-9))).astype(np.int64)


def text_values(values) -> np.ndarray:
    """Ids and names from input data as text: missing -> "", integral numbers without a decimal point
    (``2106``, not ``2106.0``), everything else as ``str``."""
    arr = pd.Series(values, dtype=object) if not isinstance(values, pd.Series) else values
    if pd.api.types.is_integer_dtype(arr.dtype) or pd.api.types.is_bool_dtype(arr.dtype):
        return arr.astype(str).to_numpy(object)

    def one(v):
        if v is None or v is pd.NA:
            return ""
        if isinstance(v, (float, np.floating)):
            if not np.isfinite(v):
                return "" if np.isnan(v) else str(v)
            return str(int(v)) if float(v).is_integer() and abs(v) < 2 ** 63 else repr(float(v))
        if isinstance(v, (int, np.integer)):
            return str(int(v))
        return str(v)
    return np.asarray([one(v) for v in arr.to_numpy(object)], dtype=object)


def angle_deg(az_deg, decimals: int = 1) -> np.ndarray:
    """Azimuths rounded to ``decimals`` and folded into [0, 360): 359.97 prints as 0.0, never as 360.0."""
    a = np.round(np.mod(np.asarray(az_deg, dtype=float), 360.0), decimals)
    return np.where(a >= 360.0, a - 360.0, a) + 0.0  # + 0.0 turns -0.0 into 0.0


def dedupe_notes(notes) -> list[str]:
    """Each distinct note once, in first-seen order, with a count when it repeats."""
    counts: dict[str, int] = {}
    for n in notes or []:
        counts[str(n)] = counts.get(str(n), 0) + 1
    return [n if c == 1 else f"{n} ({c} times)" for n, c in counts.items()]


def to_lonlat(crs, x, y) -> tuple[np.ndarray, np.ndarray]:
    """Projected x, y [m] -> WGS84 longitude, latitude [deg], rounded to 7 decimals (about 1 cm)."""
    lon, lat = district_to_lonlat(x, y, crs)
    return np.round(np.asarray(lon, dtype=float), 7), np.round(np.asarray(lat, dtype=float), 7)


def _plan_attr(plan, name, default=None):
    if isinstance(plan, dict):
        return plan.get(name, default)
    return getattr(plan, name, default)


def chosen_ids(plan) -> np.ndarray:
    """The plan's chosen option ids as an int64 array (accepts a list, a tuple, an array or None)."""
    chosen = _plan_attr(plan, "chosen", None)
    return np.asarray([] if chosen is None else list(chosen))


def _load_cap(params) -> float:
    try:
        return float((params or {}).get("surfaces", {}).get("load_cap_weight") or 0.0)
    except (TypeError, ValueError, AttributeError):
        return 0.0


def _float_or_none(v):
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if np.isfinite(f) else None


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
    """rank, site_id, backup_rank, backup_option_id, backup_site_id, backup_lon, backup_lat, recovered_weight,
    backup_building_id, backup_name, backup_address, backup_facing_deg, backup_facing, backup_mount_height_m,
    backup_size_id, backup_distance_m (horizontal, from the primary spot), same_building, and any further column
    of the optimiser's table (e.g. recovered_share, weak) as given; in the optimiser's order per site"""
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

#: Columns of the optimiser's backup table that :func:`derive` reads; any further column is passed through.
BACKUP_INPUT_COLUMNS = ("option", "backup_rank", "backup_option", "recovered_weight")

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


#: Columns of the runner's per-surface field checks (``OutputBundle.site_checks``), one row per chosen option.
SITE_CHECK_COLUMNS = ("option_id", "feed_bs_idx", "feed_below_peak_db", "back_lobe_feed", "guessed_height_links",
                      "exposure_w_m2", "exposure_where", "exposure_reference_w_m2", "exposure_share")
#: Columns of the runner's model sensitivity table (``OutputBundle.sensitivity``).
SENSITIVITY_COLUMNS = ("model", "covered_weight", "covered_directly_weight")
#: The sensitivity row every other row is compared with.
PLANNING_MODEL = "planning model"


def _check_bundle(b) -> None:
    """Contract checks at the boundary: tables, ids and values the outputs rely on."""
    try:
        crs = pyproj.CRS(b.crs)
    except Exception as exc:  # pyproj raises CRSError with its own text
        raise SitingError(f"output bundle: expected a CRS pyproj understands, got {b.crs!r} ({exc}); "
                          "pass the job's projected CRS") from exc
    if not crs.is_projected:
        raise SitingError(f"output bundle: expected a projected CRS in metres, got {crs.to_string()}; "
                          "pass the job's working CRS (e.g. a UTM zone), not longitude/latitude")
    for name in ("buildings", "base_stations", "sites", "sizes", "users", "options", "coverage", "direct"):
        df = getattr(b, name)
        if not isinstance(df, pd.DataFrame):
            raise SitingError(f"output bundle: expected a DataFrame for '{name}', got {type(df).__name__}")
        T.check(df, name, where="the output bundle")
    if not np.isfinite(float(b.snr_target_db)):
        raise SitingError(f"output bundle: expected a finite snr_target_db, got {b.snr_target_db!r}; "
                          "set radio.snr_target_db in the job")
    n_users, n_sites, n_opts = len(b.users), len(b.sites), len(b.options)
    for name, df, n in (("users", b.users, n_users), ("sites", b.sites, n_sites), ("options", b.options, n_opts)):
        col = {"users": "user_id", "sites": "site_id", "options": "option_id"}[name]
        if not np.array_equal(df[col].to_numpy(), np.arange(n)):
            raise SitingError(f"output bundle: expected '{name}.{col}' to be the row position 0..{n - 1}, "
                              f"got {df[col].to_numpy()[:5].tolist()}...; reset the index before handing over")
    bad = ~b.options["site_id"].between(0, n_sites - 1)
    if bad.any():
        raise SitingError(f"output bundle: options {b.options.loc[bad, 'option_id'].tolist()[:5]} refer to "
                          f"site ids outside 0..{n_sites - 1}; the options and sites tables do not match")
    unknown_sizes = set(b.options["size_id"]) - set(b.sizes["size_id"])
    if unknown_sizes:
        raise SitingError(f"output bundle: options use size ids {sorted(unknown_sizes)[:5]} that the 'sizes' "
                          "catalogue lacks; hand over the catalogue the options were built from")
    for name, df in (("coverage", b.coverage), ("direct", b.direct)):
        bad_u = ~df["user_id"].between(0, n_users - 1)
        if bad_u.any():
            raise SitingError(f"output bundle: '{name}' has user ids outside 0..{n_users - 1} "
                              f"(e.g. {df.loc[bad_u, 'user_id'].iloc[0]}); the tables come from different runs")
    if (~b.coverage["option_id"].between(0, n_opts - 1)).any():
        raise SitingError(f"output bundle: 'coverage' has option ids outside 0..{n_opts - 1}; "
                          "the coverage and options tables come from different runs")
    if b.direct["user_id"].duplicated().any():
        raise SitingError("output bundle: 'direct' has more than one row for some user ids; expected one per user")
    chosen = chosen_ids(b.plan)
    if chosen.size:
        if not np.issubdtype(chosen.dtype, np.integer):
            raise SitingError(f"output bundle: expected plan.chosen to hold integer option ids, got "
                              f"{chosen[:5].tolist()}")
        if ((chosen < 0) | (chosen >= n_opts)).any():
            raise SitingError(f"output bundle: plan.chosen holds option ids {chosen[(chosen < 0) | (chosen >= n_opts)][:5].tolist()} "
                              f"outside 0..{n_opts - 1}; the plan and options tables come from different runs")
        if len(np.unique(chosen)) != len(chosen):
            raise SitingError("output bundle: plan.chosen lists an option twice; expected each chosen option once")
        sites_of = b.options["site_id"].to_numpy()[chosen]
        if len(np.unique(sites_of)) != len(sites_of):
            raise SitingError("output bundle: plan.chosen puts two sizes on one site; the plan allows one per site")
    if (b.users["weight"] < 0).any():
        raise SitingError("output bundle: 'users.weight' has negative values; expected weights >= 0")
    for name, cols in (("site_checks", SITE_CHECK_COLUMNS), ("sensitivity", SENSITIVITY_COLUMNS)):
        df = getattr(b, name, None)
        if df is None:
            continue
        if not isinstance(df, pd.DataFrame):
            raise SitingError(f"output bundle: expected a DataFrame or None for '{name}', got {type(df).__name__}")
        missing = [c for c in cols if c not in df.columns]
        if missing:
            raise SitingError(f"output bundle: '{name}' lacks the column(s) {missing}; expected {list(cols)}")
    sc = getattr(b, "site_checks", None)
    if sc is not None and sc["option_id"].duplicated().any():
        raise SitingError("output bundle: 'site_checks' has more than one row for some option ids; expected one "
                          "per chosen option")


def _site_checks(sc: pd.DataFrame | None, chosen: np.ndarray, bs_name) -> dict:
    """The field-check columns of the chosen sites in rank order (NA / NaN / '' where not computed)."""
    k = len(chosen)
    if sc is None or not len(sc):
        r = pd.DataFrame(index=pd.Index(chosen, name="option_id"), columns=list(SITE_CHECK_COLUMNS[1:]))
    else:
        r = sc.drop_duplicates("option_id").set_index("option_id").reindex(chosen)
    known = r["feed_bs_idx"].notna().to_numpy(bool)
    feed_idx = pd.to_numeric(r["feed_bs_idx"], errors="coerce").fillna(-1).to_numpy(np.int64)
    lobe = pd.array([bool(v) if ok and pd.notna(v) else pd.NA for v, ok in zip(r["back_lobe_feed"], known)],
                    dtype="boolean")
    guess = pd.to_numeric(r["guessed_height_links"], errors="coerce").round()
    where = r["exposure_where"].astype(object).where(r["exposure_where"].notna(), "").astype(str).to_numpy(object)
    return {
        "feed_bs_id": np.asarray(bs_name(feed_idx), dtype=object) if k else np.zeros(0, dtype=object),
        "feed_below_peak_db": pd.to_numeric(r["feed_below_peak_db"], errors="coerce").to_numpy(float),
        "back_lobe_feed": lobe,
        "guessed_height_links": pd.array(guess.to_numpy(float), dtype="Float64").astype("Int64"),
        "exposure_w_m2": pd.to_numeric(r["exposure_w_m2"], errors="coerce").to_numpy(float),
        "exposure_where": where,
        "exposure_reference_w_m2": pd.to_numeric(r["exposure_reference_w_m2"], errors="coerce").to_numpy(float),
        "exposure_share": pd.to_numeric(r["exposure_share"], errors="coerce").to_numpy(float),
    }


def sensitivity_table(b, total_weight: float) -> pd.DataFrame:
    """The bundle's sensitivity rows with shares of the total weight and differences to the planning model.

    Columns: model, covered_weight, covered_share, covered_directly_weight, difference_weight (covered weight
    minus the planning model's; NaN when the table has no planning-model row).  Empty when not computed.
    """
    cols = ["model", "covered_weight", "covered_share", "covered_directly_weight", "difference_weight"]
    sv = getattr(b, "sensitivity", None)
    if sv is None or not len(sv):
        return pd.DataFrame({c: pd.Series(dtype=object if c == "model" else float) for c in cols})
    model = sv["model"].astype(object).where(sv["model"].notna(), "").astype(str).to_numpy(object)
    cw = pd.to_numeric(sv["covered_weight"], errors="coerce").to_numpy(float)
    base = cw[model == PLANNING_MODEL]
    ref = base[0] if base.size else np.nan
    return pd.DataFrame({
        "model": model, "covered_weight": cw,
        "covered_share": cw / total_weight if total_weight > 0 else np.full(len(cw), np.nan),
        "covered_directly_weight": pd.to_numeric(sv["covered_directly_weight"], errors="coerce").to_numpy(float),
        "difference_weight": cw - ref,
    }, columns=cols)


def _rank_order(chosen: np.ndarray, ranking: pd.DataFrame | None) -> np.ndarray:
    """Chosen option ids in rank order: by the ranking table when it ranks them all, else as listed."""
    if ranking is None or not len(ranking) or not {"option", "rank"} <= set(ranking.columns):
        return chosen
    r = ranking.drop_duplicates("option").set_index("option")["rank"]
    if not set(chosen.tolist()) <= set(r.index.tolist()):
        return chosen
    key = r.reindex(chosen).to_numpy(float)
    return chosen[np.argsort(key, kind="stable")]


def derive(b) -> PlanFigures:
    """Compute every figure the outputs print from an :class:`~siting.outputs.OutputBundle`."""
    _check_bundle(b)
    notes: list[str] = list(b.run_info.get("notes", []) or []) if isinstance(b.run_info, dict) else []
    target = float(b.snr_target_db)
    users, sites, options, sizes = b.users, b.sites, b.options, b.sizes
    n_users = len(users)
    chosen = _rank_order(chosen_ids(b.plan).astype(np.int64), b.ranking)
    k = len(chosen)
    rank_of_option = np.zeros(len(options), dtype=np.int64)  # 0 = not chosen, else 1-based rank
    rank_of_option[chosen] = np.arange(1, k + 1)

    weight = users["weight"].to_numpy(float)
    total_w = float(weight.sum())
    # direct state, aligned on user_id (users missing from 'direct' have no signal)
    d = b.direct.set_index("user_id")
    snr_direct = d["snr_db"].reindex(np.arange(n_users)).to_numpy(float)
    snr_direct = np.where(np.isnan(snr_direct), -np.inf, snr_direct)
    before = d["covered"].reindex(np.arange(n_users)).fillna(False).to_numpy(bool)
    direct_bs = d["bs_idx"].reindex(np.arange(n_users)).fillna(-1).to_numpy(np.int64)

    # best chosen coverage row per user
    cov = b.coverage
    sel = rank_of_option[cov["option_id"].to_numpy(np.int64)] > 0
    c_opt = cov["option_id"].to_numpy(np.int64)[sel]
    c_user = cov["user_id"].to_numpy(np.int64)[sel]
    c_snr = cov["snr_db"].to_numpy(float)[sel]
    c_snr = np.where(np.isnan(c_snr), -np.inf, c_snr)
    c_bs = cov["bs_idx"].to_numpy(np.int64)[sel]
    c_rank = rank_of_option[c_opt]
    order = np.lexsort((c_rank, -c_snr, c_user))
    first = np.ones(order.size, dtype=bool)
    first[1:] = c_user[order][1:] != c_user[order][:-1]
    best = order[first]
    best_snr = np.full(n_users, -np.inf)
    best_snr[c_user[best]] = c_snr[best]
    best_opt = np.full(n_users, -1, dtype=np.int64)
    best_opt[c_user[best]] = c_opt[best]
    best_bs = np.full(n_users, -1, dtype=np.int64)
    best_bs[c_user[best]] = c_bs[best]

    served = (best_opt >= 0) & (best_snr >= snr_direct)
    reach = best_snr >= target
    # with a per-surface load cap the optimiser assigns users to surfaces; only its 'covered' users are served
    assigned = np.ones(n_users, dtype=bool)
    left_out = np.zeros(n_users, dtype=bool)
    plan_cov = _plan_attr(b.plan, "covered", None)
    if _load_cap(b.params) and plan_cov is not None and len(plan_cov) == n_users:
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
    opt_site = np.r_[options["site_id"].to_numpy(np.int64), -1]  # index -1 -> the sentinel
    serving_site = opt_site[serving_opt]
    serving_rank = np.r_[rank_of_option, 0][serving_opt]
    serving_bs = np.where(served, best_bs, -1)

    lon_u, lat_u = to_lonlat(b.crs, users["x"], users["y"])
    bs_ids = text_values(b.base_stations["bs_id"])

    def bs_name(idx):
        idx = np.asarray(idx, dtype=np.int64)
        ok = (idx >= 0) & (idx < len(bs_ids))
        return np.where(ok, bs_ids[np.clip(idx, 0, max(len(bs_ids) - 1, 0))] if len(bs_ids) else "", "")

    u = pd.DataFrame({
        "user_id": users["user_id"].to_numpy(np.int64), "x": users["x"].to_numpy(float),
        "y": users["y"].to_numpy(float), "lon": lon_u, "lat": lat_u, "kind": users["kind"].astype(str).to_numpy(),
        "weight": weight, "snr_direct_db": snr_direct, "snr_plan_db": snr_plan, "covered_before": before,
        "covered_after": after, "newly_covered": newly, "direct_bs_id": bs_name(direct_bs),
        "serving_option_id": serving_opt, "serving_site_id": serving_site, "serving_rank": serving_rank,
        "serving_bs_idx": serving_bs,
        "reason": _reasons(before, newly, left_out, served, best_opt >= 0, np.isfinite(snr_direct) | (best_opt >= 0)),
        "shortfall_db": np.where(after | ~np.isfinite(snr_plan), np.nan, np.round(target - snr_plan, 2)),
    })

    # which chosen sites reach which not-yet-covered users at the target (deduplicated pairs)
    hit = (c_snr >= target) & ~before[c_user] & assigned[c_user]
    pair = np.unique((c_rank[hit] - 1) * max(n_users, 1) + c_user[hit])
    p_rank0, p_user = pair // max(n_users, 1), pair % max(n_users, 1)
    n_cover = np.bincount(p_user, minlength=n_users)
    excl = np.bincount(p_rank0, weights=np.where(n_cover[p_user] == 1, weight[p_user], 0.0), minlength=k)
    shared = np.bincount(p_rank0, weights=np.where(n_cover[p_user] > 1, weight[p_user], 0.0), minlength=k)
    first_rank0 = np.full(n_users, k, dtype=np.int64)
    np.minimum.at(first_rank0, p_user, p_rank0)
    marginal = np.bincount(first_rank0[newly], weights=weight[newly], minlength=k + 1)[:k]
    w_before = float(weight[before].sum())
    cumulative = w_before + np.cumsum(marginal)

    # per chosen site
    o = options.iloc[chosen]
    s = sites.iloc[o["site_id"].to_numpy(np.int64)]
    z = sizes.drop_duplicates("size_id").set_index("size_id").reindex(o["size_id"].to_numpy())
    width, height = z["width_m"].to_numpy(float), z["height_m"].to_numpy(float)
    pitch = element_pitch_m(b.params or {})
    if "elements" in z.columns and z["elements"].notna().all():
        elements = z["elements"].to_numpy(np.int64)
    elif pitch is not None:
        elements = element_count(width, height, pitch)
    else:
        elements = np.full(k, -1, dtype=np.int64)
        if k:
            notes.append("element counts unknown: the job gives no surfaces.element_pitch_wavelengths / "
                         "radio.frequency_ghz and the catalogue has no 'elements' column")
    lon_s, lat_s = to_lonlat(b.crs, s["x"], s["y"])
    bld = b.buildings.reset_index(drop=True)
    bidx = s["building_idx"].to_numpy(np.int64)
    bld_name, bld_addr = text_values(bld["name"]), text_values(bld["address"])

    def bld_text(vals, idx):
        idx = np.asarray(idx, dtype=np.int64)
        if not len(bld):
            return np.full(len(idx), "", dtype=object)
        ok = (idx >= 0) & (idx < len(bld))
        return np.where(ok, vals[np.clip(idx, 0, len(bld) - 1)], "").astype(object)
    name, addr = bld_text(bld_name, bidx), bld_text(bld_addr, bidx)

    su = u[u["serving_rank"] > 0]
    gain = su["snr_plan_db"] - su["snr_direct_db"]
    gain = gain.where(np.isfinite(gain))
    med_gain = gain.groupby(su["serving_rank"]).median().reindex(np.arange(1, k + 1)).to_numpy(float)
    n_served = su.groupby("serving_rank").size().reindex(np.arange(1, k + 1), fill_value=0).to_numpy(np.int64)
    w_served = su.groupby("serving_rank")["weight"].sum().reindex(np.arange(1, k + 1), fill_value=0.0).to_numpy(float)
    # feeding base station: most frequent among the served users' rows, else among all rows of the option
    fb = pd.DataFrame({"rank": su["serving_rank"].to_numpy(), "bs": su["serving_bs_idx"].to_numpy()})
    all_rows = pd.DataFrame({"rank": c_rank, "bs": c_bs})
    feed = np.full(k, -1, dtype=np.int64)
    for frame in (all_rows, fb):  # served users' choice overrides
        if len(frame):
            vc = frame.value_counts().reset_index(name="n").sort_values(["rank", "n", "bs"], ascending=[True, False, True])
            top = vc.drop_duplicates("rank")
            feed[top["rank"].to_numpy(np.int64) - 1] = top["bs"].to_numpy(np.int64)

    # backups
    bk = b.backups if b.backups is not None else pd.DataFrame()
    if len(bk) and {"option", "backup_option"} <= set(bk.columns):
        bk = bk[bk["option"].isin(chosen)].copy()
        bk = bk[bk["backup_option"].between(0, len(options) - 1)]
        if "backup_rank" not in bk.columns:
            bk["backup_rank"] = bk.groupby("option").cumcount() + 1
        bk = bk.sort_values(["option", "backup_rank"])
        bsite = options["site_id"].to_numpy(np.int64)[bk["backup_option"].to_numpy(np.int64)]
        blon, blat = to_lonlat(b.crs, sites["x"].to_numpy(float)[bsite], sites["y"].to_numpy(float)[bsite])
        backups = pd.DataFrame({
            "rank": rank_of_option[bk["option"].to_numpy(np.int64)], "site_id": options["site_id"].to_numpy(np.int64)[bk["option"].to_numpy(np.int64)],
            "backup_rank": bk["backup_rank"].to_numpy(np.int64), "backup_option_id": bk["backup_option"].to_numpy(np.int64),
            "backup_site_id": bsite, "backup_lon": blon, "backup_lat": blat,
            "recovered_weight": bk["recovered_weight"].to_numpy(float) if "recovered_weight" in bk else np.nan,
        })
        # where the backup is, for a field team: its building, wall, height and distance from the primary
        prim = options["site_id"].to_numpy(np.int64)[bk["option"].to_numpy(np.int64)]
        sx, sy = sites["x"].to_numpy(float), sites["y"].to_numpy(float)
        bb = sites["building_idx"].to_numpy(np.int64)[bsite]
        bface = angle_deg(sites["normal_az_deg"].to_numpy(float)[bsite])
        backups = backups.assign(
            backup_building_id=text_values(sites["building_id"].iloc[bsite].reset_index(drop=True)),
            backup_name=bld_text(bld_name, bb), backup_address=bld_text(bld_addr, bb),
            backup_facing_deg=bface, backup_facing=compass_point(bface),
            backup_mount_height_m=sites["z_m"].to_numpy(float)[bsite],
            backup_size_id=text_values(options["size_id"].iloc[bk["backup_option"].to_numpy(np.int64)].reset_index(drop=True)),
            backup_distance_m=np.round(np.hypot(sx[bsite] - sx[prim], sy[bsite] - sy[prim]), 1),
            same_building=sites["building_idx"].to_numpy(np.int64)[bsite] == sites["building_idx"].to_numpy(np.int64)[prim],
        )
        for c in bk.columns:  # further columns of the optimiser (e.g. a recovered share, a weak flag), as given
            if c not in BACKUP_INPUT_COLUMNS and c not in backups.columns:
                backups[c] = bk[c].to_numpy()
        backups = backups.sort_values(["rank", "backup_rank"], kind="stable").reset_index(drop=True)
    else:
        backups = pd.DataFrame({c: pd.Series(dtype=t) for c, t in (
            ("rank", "int64"), ("site_id", "int64"), ("backup_rank", "int64"), ("backup_option_id", "int64"),
            ("backup_site_id", "int64"), ("backup_lon", "float64"), ("backup_lat", "float64"),
            ("recovered_weight", "float64"), ("backup_building_id", "object"), ("backup_name", "object"),
            ("backup_address", "object"), ("backup_facing_deg", "float64"), ("backup_facing", "object"),
            ("backup_mount_height_m", "float64"), ("backup_size_id", "object"), ("backup_distance_m", "float64"),
            ("same_building", "bool"))})
    backup_ids = backups.groupby("rank")["backup_site_id"].agg(lambda v: ";".join(str(i) for i in v))
    backup_ids = backup_ids.reindex(np.arange(1, k + 1), fill_value="").to_numpy(object)

    wall_free = s["wall_free_m"].to_numpy(float)
    checks = _site_checks(getattr(b, "site_checks", None), chosen, bs_name)
    site_notes = [["panel wider than the free wall length; check the facade"] if w > f + 1e-9 else []
                  for w, f in zip(width, wall_free)]
    for i, (lobe, below, n_guess) in enumerate(zip(checks["back_lobe_feed"], checks["feed_below_peak_db"],
                                                   checks["guessed_height_links"])):
        if lobe is not pd.NA and bool(lobe):
            db = f"{below:.1f} dB" if np.isfinite(below) else "far"
            site_notes[i].append(f"fed from the station's back lobe ({db} below boresight): re-aiming the "
                                 "station may serve these users without a panel")
        if n_guess is not pd.NA and n_guess > 0:
            site_notes[i].append(f"{int(n_guess)} link(s) depend on guessed building heights: measure those "
                                 "heights")
    site_notes = np.asarray(["; ".join(n) for n in site_notes] if k else [], dtype=object)
    facing = angle_deg(s["normal_az_deg"].to_numpy(float))
    sites_out = pd.DataFrame({
        "rank": np.arange(1, k + 1), "site_id": s["site_id"].to_numpy(np.int64), "option_id": chosen,
        "lon": lon_s, "lat": lat_s, "x": s["x"].to_numpy(float), "y": s["y"].to_numpy(float),
        "building_id": text_values(s["building_id"]), "name": name, "address": addr,
        "facing_deg": facing, "facing": compass_point(facing), "mount_height_m": s["z_m"].to_numpy(float),
        "size_id": text_values(o["size_id"]), "width_m": width, "height_m": height,
        "area_m2": width * height, "elements": elements, "cost": o["cost"].to_numpy(float),
        "weight_gained": marginal, "exclusive_weight": excl, "shared_weight": shared,
        "cumulative_covered_weight": cumulative,
        "cumulative_covered_share": np.round(cumulative / total_w, 6) if total_w > 0 else np.zeros(k),
        "n_users_served": n_served, "served_weight": w_served, "median_snr_gain_db": np.round(med_gain, 2),
        "serving_bs_id": bs_name(feed), "backup_site_ids": backup_ids, "wall_free_m": wall_free,
        **checks, "notes": site_notes,
    }, columns=list(SITE_COLUMNS))

    # per kind
    g = u.assign(wb=np.where(before, weight, 0.0), wa=np.where(after, weight, 0.0), wn=np.where(newly, weight, 0.0))
    by_kind = g.groupby("kind", sort=True).agg(
        n_users=("user_id", "size"), weight=("weight", "sum"), covered_weight_before=("wb", "sum"),
        covered_weight_after=("wa", "sum"), newly_covered_weight=("wn", "sum")).reset_index()
    with np.errstate(invalid="ignore", divide="ignore"):
        by_kind["covered_share_before"] = np.where(by_kind["weight"] > 0, by_kind["covered_weight_before"] / by_kind["weight"], 0.0)
        by_kind["covered_share_after"] = np.where(by_kind["weight"] > 0, by_kind["covered_weight_after"] / by_kind["weight"], 0.0)

    # links of served users
    lk = u[u["serving_rank"] > 0]
    links = pd.DataFrame({
        "rank": lk["serving_rank"].to_numpy(np.int64), "option_id": lk["serving_option_id"].to_numpy(np.int64),
        "site_id": lk["serving_site_id"].to_numpy(np.int64), "user_id": lk["user_id"].to_numpy(np.int64),
        "bs_idx": lk["serving_bs_idx"].to_numpy(np.int64), "bs_id": bs_name(lk["serving_bs_idx"].to_numpy()),
        "snr_db": lk["snr_plan_db"].to_numpy(float),
    }).sort_values(["rank", "user_id"], kind="stable").reset_index(drop=True)

    # candidates
    lon_c, lat_c = to_lonlat(b.crs, sites["x"], sites["y"])
    chosen_sites = np.zeros(len(sites), dtype=bool)
    chosen_sites[o["site_id"].to_numpy(np.int64)] = True
    cand_facing = angle_deg(sites["normal_az_deg"].to_numpy(float))
    candidates = pd.DataFrame({
        "site_id": sites["site_id"].to_numpy(np.int64), "building_id": text_values(sites["building_id"]),
        "lon": lon_c, "lat": lat_c, "facing_deg": cand_facing, "facing": compass_point(cand_facing),
        "mount_height_m": sites["z_m"].to_numpy(float), "wall_free_m": sites["wall_free_m"].to_numpy(float),
        "source": sites["source"].astype(str).to_numpy(),
        "n_options": np.bincount(options["site_id"].to_numpy(np.int64), minlength=len(sites)),
        "chosen": chosen_sites,
    })

    summary = _summary(b, u, sites_out, target, total_w, w_before, notes)
    below = (u["reason"] == REASONS["below"]).to_numpy(bool)
    summary["n_users_below_target_with_plan"] = int(below.sum())
    summary["weight_below_target_with_plan"] = float(weight[below].sum())
    summary["median_shortfall_db_with_plan"] = float(np.median(u["shortfall_db"].to_numpy(float)[below])) if below.any() else None
    summary["currency"] = currency_label(getattr(b, "currency", ""))
    cov_snr = b.coverage["snr_db"].to_numpy(float)
    summary["n_coverage_rows"] = int(len(cov_snr))
    summary["n_coverage_rows_at_target"] = int((cov_snr >= target).sum())
    known = getattr(b, "site_checks", None) is not None
    summary["site_checks_computed"] = known
    summary["n_back_lobe_feeds"] = int(sites_out["back_lobe_feed"].fillna(False).sum()) if known else None
    summary["n_sites_on_guessed_heights"] = int((sites_out["guessed_height_links"].fillna(0) > 0).sum()) if known else None
    share = sites_out["exposure_share"].to_numpy(float)
    summary["max_exposure_share"] = float(np.nanmax(share)) if np.isfinite(share).any() else None
    return PlanFigures(users=u, sites=sites_out, by_kind=by_kind, links=links, backups=backups,
                       candidates=candidates, summary=summary, notes=dedupe_notes(notes),
                       sensitivity=sensitivity_table(b, total_w))


def _summary(b, u, sites_out, target, total_w, w_before, notes) -> dict:
    plan = b.plan
    w_after = float(u.loc[u["covered_after"], "weight"].sum())
    w_new = float(u.loc[u["newly_covered"], "weight"].sum())
    plan_cost = float(sites_out["cost"].sum())
    opt_cost = b.options["cost"].to_numpy(float)
    cheapest = float(opt_cost.min()) if opt_cost.size else None
    budget = _float_or_none(b.budget)
    objective = _float_or_none(_plan_attr(plan, "objective"))
    if objective is not None and len(sites_out) and not (
            np.isclose(objective, w_new, rtol=1e-6, atol=1e-6) or np.isclose(objective, w_after, rtol=1e-6, atol=1e-6)):
        notes.append(f"the solver's objective ({objective:.6g}) differs from the newly covered weight recomputed "
                     f"from the coverage relation ({w_new:.6g}); a load cap or a reduced model may explain it")
    empty_reason = "" if len(sites_out) else empty_plan_reason(
        b, target, currency_label(getattr(b, "currency", "")), _plan_attr(plan, "message", "") or "")
    return {
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
        "cheapest_option_cost": cheapest,
        "snr_target_db": target,
        "status": str(_plan_attr(plan, "status", "") or ""),
        "solver": str(_plan_attr(plan, "solver", "") or ""),
        "objective": objective,
        "bound": _float_or_none(_plan_attr(plan, "bound")),
        "gap": _float_or_none(_plan_attr(plan, "gap")),
        "greedy_objective": _float_or_none(_plan_attr(plan, "greedy_objective")),
        "solver_reported_cost": _float_or_none(_plan_attr(plan, "cost")),
        "solver_message": str(_plan_attr(plan, "message", "") or ""),
        "empty_plan": not len(sites_out),
        "empty_plan_reason": empty_reason,
    }


def currency_label(currency) -> str:
    """The unit printed beside every cost: the job's currency, or "cost units" when it gives none."""
    text = "" if currency is None else str(currency).strip()
    return text or "cost units"
