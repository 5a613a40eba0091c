"""The output bundle's contract: the checks at the boundary, and the runner's optional tables merged in.

:func:`check_bundle` raises :class:`~siting.errors.SitingError` (naming the table, the column and the fix) before
any figure is computed, so a bad bundle never leaves a partial output set.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyproj

from .. import tables as T
from ..errors import SitingError
from .values import chosen_ids

#: Columns of the runner's per-surface field checks (``OutputBundle.site_checks``), one row per chosen option.
SITE_CHECK_COLUMNS = ("option_id", "feed_bs_idx", "feed_below_peak_db", "back_lobe_feed", "guessed_height_links",
                      "exposure_w_m2", "exposure_where", "exposure_reference_w_m2", "exposure_share")
#: Columns of the runner's model sensitivity table (``OutputBundle.sensitivity``).
SENSITIVITY_COLUMNS = ("model", "covered_weight", "covered_directly_weight")
#: The sensitivity row every other row is compared with.
PLANNING_MODEL = "planning model"

_ID_COLUMN = {"users": "user_id", "sites": "site_id", "options": "option_id"}


def _fail(text: str) -> None:
    raise SitingError(f"output bundle: {text}")


def _check_crs(crs) -> None:
    try:
        c = pyproj.CRS(crs)
    except Exception as exc:  # pyproj raises CRSError with its own text
        raise SitingError(f"output bundle: expected a CRS pyproj understands, got {crs!r} ({exc}); "
                          "pass the job's projected CRS") from exc
    if not c.is_projected:
        _fail(f"expected a projected CRS in metres, got {c.to_string()}; pass the job's working CRS (e.g. a UTM "
              "zone), not longitude/latitude")


def _check_tables(b) -> None:
    for name in ("buildings", "base_stations", "sites", "sizes", "users", "options", "coverage", "direct"):
        df = getattr(b, name)
        if not isinstance(df, pd.DataFrame):
            _fail(f"expected a DataFrame for '{name}', got {type(df).__name__}")
        T.check(df, name, where="the output bundle")
    if not np.isfinite(float(b.snr_target_db)):
        _fail(f"expected a finite snr_target_db, got {b.snr_target_db!r}; set radio.snr_target_db in the job")
    if (b.users["weight"] < 0).any():
        _fail("'users.weight' has negative values; expected weights >= 0")


def _check_ids(b) -> None:
    for name, col in _ID_COLUMN.items():
        df = getattr(b, name)
        if not np.array_equal(df[col].to_numpy(), np.arange(len(df))):
            _fail(f"expected '{name}.{col}' to be the row position 0..{len(df) - 1}, got "
                  f"{df[col].to_numpy()[:5].tolist()}...; reset the index before handing over")
    n_users, n_sites, n_opts = len(b.users), len(b.sites), len(b.options)
    bad = ~b.options["site_id"].between(0, n_sites - 1)
    if bad.any():
        _fail(f"options {b.options.loc[bad, 'option_id'].tolist()[:5]} refer to site ids outside "
              f"0..{n_sites - 1}; the options and sites tables do not match")
    unknown_sizes = set(b.options["size_id"]) - set(b.sizes["size_id"])
    if unknown_sizes:
        _fail(f"options use size ids {sorted(unknown_sizes)[:5]} that the 'sizes' catalogue lacks; hand over the "
              "catalogue the options were built from")
    for name in ("coverage", "direct"):
        df = getattr(b, name)
        bad_u = ~df["user_id"].between(0, n_users - 1)
        if bad_u.any():
            _fail(f"'{name}' has user ids outside 0..{n_users - 1} (e.g. {df.loc[bad_u, 'user_id'].iloc[0]}); the "
                  "tables come from different runs")
    if (~b.coverage["option_id"].between(0, n_opts - 1)).any():
        _fail(f"'coverage' has option ids outside 0..{n_opts - 1}; the coverage and options tables come from "
              "different runs")
    if b.direct["user_id"].duplicated().any():
        _fail("'direct' has more than one row for some user ids; expected one per user")


def _check_plan(b) -> None:
    chosen = chosen_ids(b.plan)
    if not chosen.size:
        return
    n_opts = len(b.options)
    if not np.issubdtype(chosen.dtype, np.integer):
        _fail(f"expected plan.chosen to hold integer option ids, got {chosen[:5].tolist()}")
    outside = (chosen < 0) | (chosen >= n_opts)
    if outside.any():
        _fail(f"plan.chosen holds option ids {chosen[outside][:5].tolist()} outside 0..{n_opts - 1}; the plan and "
              "options tables come from different runs")
    if len(np.unique(chosen)) != len(chosen):
        _fail("plan.chosen lists an option twice; expected each chosen option once")
    sites_of = b.options["site_id"].to_numpy()[chosen]
    if len(np.unique(sites_of)) != len(sites_of):
        _fail("plan.chosen puts two sizes on one site; the plan allows one per site")


def _check_optional(b) -> None:
    for name, cols in (("site_checks", SITE_CHECK_COLUMNS), ("sensitivity", SENSITIVITY_COLUMNS)):
        df = getattr(b, name, None)
        if df is None:
            continue
        if not isinstance(df, pd.DataFrame):
            _fail(f"expected a DataFrame or None for '{name}', got {type(df).__name__}")
        missing = [c for c in cols if c not in df.columns]
        if missing:
            _fail(f"'{name}' lacks the column(s) {missing}; expected {list(cols)}")
    sc = getattr(b, "site_checks", None)
    if sc is not None and sc["option_id"].duplicated().any():
        _fail("'site_checks' has more than one row for some option ids; expected one per chosen option")


def check_bundle(b) -> None:
    """Contract checks at the boundary: tables, ids and values the outputs rely on."""
    _check_crs(b.crs)
    _check_tables(b)
    _check_ids(b)
    _check_plan(b)
    _check_optional(b)


def site_check_columns(sc: pd.DataFrame | None, chosen: np.ndarray, bs_name) -> dict:
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
