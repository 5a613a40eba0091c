"""Ranking of a plan's options and backup spots for the field teams."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
import scipy.sparse as sp

from .heuristics import _conflict_adj
from .problem import _INF


def rank_chosen(chosen, cover, weight) -> pd.DataFrame:
    """Order chosen options by marginal contribution (greedy order within the plan) for the field teams.

    Each next option adds the most still-uncovered weight (ties: lower option index).  ``exclusive_weight``
    is the weight only that option covers within the plan; ``shared_weight`` the rest of the weight it
    covers.  ``cumulative_weight`` of the last row equals the plan's covered weight.

    Returns
    -------
    DataFrame with columns option, rank (1-based), marginal_weight, cumulative_weight, exclusive_weight,
    shared_weight.
    """
    cols = ["option", "rank", "marginal_weight", "cumulative_weight", "exclusive_weight", "shared_weight"]
    chosen = np.unique(np.asarray(chosen, np.int64))
    if len(chosen) == 0:
        return pd.DataFrame({c: pd.Series(dtype="int64" if c in ("option", "rank") else "float64") for c in cols})
    C = sp.csr_array(cover)
    w = np.asarray(weight, float)
    Csub = sp.csr_array(C[chosen], dtype=np.float64)
    cnt = np.asarray(Csub.sum(axis=0)).ravel()
    tot = Csub @ w
    excl = Csub @ np.where(cnt == 1, w, 0.0)
    uncovered = np.ones(C.shape[1])
    left = np.ones(len(chosen), bool)
    order, marg = [], []
    for _ in range(len(chosen)):
        g = Csub @ (w * uncovered)
        g = np.where(left, g, -_INF)
        k = int(np.argmax(g))
        order.append(k)
        marg.append(float(g[k]))
        left[k] = False
        uncovered[Csub.indices[Csub.indptr[k]:Csub.indptr[k + 1]]] = 0.0
    order_a = np.asarray(order)
    marg_a = np.asarray(marg)
    return pd.DataFrame({
        "option": chosen[order_a],
        "rank": np.arange(1, len(chosen) + 1),
        "marginal_weight": marg_a,
        "cumulative_weight": np.cumsum(marg_a),
        "exclusive_weight": excl[order_a],
        "shared_weight": tot[order_a] - excl[order_a],
    })


_BACKUP_COLUMNS = ["option", "backup_rank", "backup_option", "recovered_weight", "recovered_share", "kept_weight",
                   "weak", "placement"]
_BACKUP_DTYPES = {"option": "int64", "backup_rank": "int64", "backup_option": "int64", "recovered_weight": "float64",
                  "recovered_share": "float64", "kept_weight": "float64", "weak": "bool", "placement": "object"}
WEAK_SHARE = 0.5  # a backup keeping less than half of what its primary contributes is flagged (common practice)


def backups_for(chosen, cover, weight, cost, option_site, k=3, *, conflicts=None, option_wall=None,
                option_building=None) -> pd.DataFrame:
    """Up to ``k`` unchosen spots per chosen option, ranked by the plan's covered weight after the swap.

    For chosen option ``r`` and a candidate ``a``, the plan with ``r`` swapped for ``a`` is evaluated
    exactly: ``kept_weight = W - E_r + R_a`` where ``W`` is the plan's covered weight, ``E_r`` the weight
    only ``r`` covers in the plan, and ``R_a`` the weight ``a`` covers that the rest of the plan leaves
    uncovered (``recovered_weight``; it counts users ``r`` did not cover too).  ``recovered_share`` =
    ``R_a / E_r`` (1 when ``r`` covers nothing alone): the share of the primary's contribution the swap keeps
    (above 1: the swap gains).  ``weak`` flags a share below 0.5.

    A candidate is an option at a site that carries no chosen option, costing no more than ``r`` (so budget
    and count still hold), and, with ``conflicts`` (site pairs), in spacing conflict with no chosen site but
    ``r``'s own.  Per site the best size is kept (most weight kept, then cheapest, then lowest index).
    Diversity, when ``option_wall`` is given: at most one backup per wall (the best), so the list never
    holds the same spot at another height or a metre along the same wall twice; ``placement`` says
    where the backup is against the primary: 'other_building' (needs ``option_building``), 'other_wall',
    'same_wall' ('' when walls are not given).  Order: backups that are not weak first, then by placement
    (another building before another wall of the same building before the primary's own wall), then by
    ``kept_weight`` (descending), cost, index.  The coverage is evaluated without load caps.

    Returns
    -------
    DataFrame with columns option, backup_rank (1..k), backup_option, recovered_weight, recovered_share,
    kept_weight, weak, placement.
    """
    empty = pd.DataFrame({c: pd.Series(dtype=t) for c, t in _BACKUP_DTYPES.items()})
    chosen = np.unique(np.asarray(chosen, np.int64))
    if len(chosen) == 0 or k <= 0:
        return empty
    C = sp.csr_array(sp.csr_array(cover), dtype=np.float64)
    w = np.asarray(weight, float)
    c = np.asarray(cost, float)
    site = np.asarray(option_site, np.int64)
    wall = None if option_wall is None else np.asarray(option_wall)
    bldg = None if option_building is None else np.asarray(option_building)
    Csub = sp.csr_array(C[chosen])
    cnt = np.asarray(Csub.sum(axis=0)).ravel()
    W = float(w[cnt > 0].sum())
    E = Csub @ np.where(cnt == 1, w, 0.0)  # weight only each chosen option covers
    G0 = C @ np.where(cnt == 0, w, 0.0)  # weight an option adds to the plan as it is
    # M[a, r]: weight of r's exclusive users that option a covers
    X = sp.csc_array(Csub.multiply((cnt == 1)[None, :] * w[None, :]).T)
    M = sp.csc_array(C @ X)
    chosen_sites = np.isin(site, site[chosen])
    nconf: Any = None  # with conflicts: chosen sites in conflict with each site, and the site adjacency
    pair_conf: Any = None
    if conflicts is not None and len(np.asarray(conflicts)):
        cf = np.asarray(conflicts, np.int64)
        ns = int(max(site.max() + 1, cf.max() + 1))
        adj = _conflict_adj(None, cf, ns)
        cs = np.zeros(ns)
        cs[site[chosen]] = 1.0
        nconf = adj @ cs  # chosen sites in conflict with each site
        pair_conf = adj
    frames = []
    for r_i, r in enumerate(chosen):
        rec = G0 + M[:, [r_i]].toarray().ravel()
        ok = ~chosen_sites & (c <= c[r] * (1 + 1e-12) + 1e-12) & (rec > 0)
        if nconf is not None:
            own = np.asarray(pair_conf[site[np.flatnonzero(ok)], [site[r]] * int(ok.sum())]).ravel() \
                if ok.any() else np.zeros(0)
            idx = np.flatnonzero(ok)
            ok[idx] = (nconf[site[idx]] - own) <= 0
        a = np.flatnonzero(ok)
        if len(a) == 0:
            continue
        share = rec[a] / E[r_i] if E[r_i] > 0 else np.ones(len(a))
        df = pd.DataFrame({"option": r, "backup_option": a, "site": site[a], "recovered_weight": rec[a],
                           "recovered_share": share, "kept_weight": W - E[r_i] + rec[a], "cost": c[a]})
        df["weak"] = df["recovered_share"] < WEAK_SHARE
        tier = np.zeros(len(a), np.int64)
        placement = np.full(len(a), "", object)
        if wall is not None:
            same_wall = wall[a] == wall[r]
            tier += 2 * same_wall
            placement[:] = np.where(same_wall, "same_wall", "other_wall")
            if bldg is not None:
                other_b = bldg[a] != bldg[r]
                tier += (~other_b & ~same_wall)
                placement[other_b] = "other_building"
        elif bldg is not None:
            other_b = bldg[a] != bldg[r]
            tier += ~other_b
            placement[:] = np.where(other_b, "other_building", "same_building")
        df["tier"], df["placement"] = tier, placement
        df = df.sort_values(["kept_weight", "cost", "backup_option"], ascending=[False, True, True], kind="stable")
        df = df.drop_duplicates("site", keep="first")
        if wall is not None:
            df = df.assign(wall=wall[df["backup_option"].to_numpy()]).drop_duplicates("wall", keep="first")
        df = df.sort_values(["weak", "tier", "kept_weight", "cost", "backup_option"],
                            ascending=[True, True, False, True, True], kind="stable").head(k)
        frames.append(df)
    if not frames:
        return empty
    out = pd.concat(frames, ignore_index=True)
    out["backup_rank"] = out.groupby("option").cumcount() + 1
    return out[_BACKUP_COLUMNS].reset_index(drop=True).astype(_BACKUP_DTYPES)
