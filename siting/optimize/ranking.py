"""Ranking of a plan's options and backup spots for the field teams."""

from __future__ import annotations

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
    order = np.asarray(order)
    marg = np.asarray(marg)
    return pd.DataFrame({
        "option": chosen[order],
        "rank": np.arange(1, len(chosen) + 1),
        "marginal_weight": marg,
        "cumulative_weight": np.cumsum(marg),
        "exclusive_weight": excl[order],
        "shared_weight": tot[order] - excl[order],
    })


def backups_for(chosen, cover, weight, cost, option_site, k=3, *, conflicts=None) -> pd.DataFrame:
    """Up to ``k`` unchosen spots per chosen option, ranked by the chosen option's exclusive weight they recover.

    A backup is an option at a site that carries no chosen option, costing no more than the chosen one
    (any size); per backup site the size recovering the most (then the cheapest) is listed.  With
    ``conflicts`` (site pairs), spots conflicting with another chosen site are left out.  Only backups that
    recover some weight are listed.

    Returns
    -------
    DataFrame with columns option, backup_rank (1..k), backup_option, recovered_weight.
    """
    cols = ["option", "backup_rank", "backup_option", "recovered_weight"]
    chosen = np.unique(np.asarray(chosen, np.int64))
    empty = pd.DataFrame({"option": pd.Series(dtype="int64"), "backup_rank": pd.Series(dtype="int64"),
                          "backup_option": pd.Series(dtype="int64"), "recovered_weight": pd.Series(dtype="float64")})
    if len(chosen) == 0 or k <= 0:
        return empty
    C = sp.csr_array(cover).astype(np.float64)
    w = np.asarray(weight, float)
    c = np.asarray(cost, float)
    site = np.asarray(option_site, np.int64)
    Csub = sp.csr_array(C[chosen])
    cnt = np.asarray(Csub.sum(axis=0)).ravel()
    # X[u, r] = w_u when user u is covered only by chosen option r
    X = sp.csr_array(Csub.multiply((cnt == 1)[None, :] * w[None, :])).T
    Rm = sp.coo_array(C @ X)
    a, r, v = Rm.row, Rm.col, Rm.data
    chosen_sites = np.zeros(site.max() + 1 if len(site) else 0, bool)
    chosen_sites[site[chosen]] = True
    ok = (~chosen_sites[site[a]]) & (c[a] <= c[chosen[r]] * (1 + 1e-12) + 1e-12) & (v > 0)
    if conflicts is not None and len(np.asarray(conflicts)):
        cf = np.asarray(conflicts, np.int64)
        ns = max(chosen_sites.shape[0], cf.max() + 1)
        adj = _conflict_adj(None, cf, ns)
        cs = np.zeros(ns)
        cs[site[chosen]] = 1.0
        nconf = adj @ cs
        pair = np.asarray(adj[site[a], site[chosen[r]]]).ravel().astype(float)
        ok &= (nconf[site[a]] - pair) <= 0
    df = pd.DataFrame({"option": chosen[r[ok]], "backup_option": a[ok], "site": site[a[ok]],
                       "recovered_weight": v[ok], "cost": c[a[ok]]})
    if df.empty:
        return empty
    df = df.sort_values(["option", "recovered_weight", "cost", "backup_option"], ascending=[True, False, True, True],
                        kind="stable")
    df = df.drop_duplicates(["option", "site"], keep="first").groupby("option", sort=True).head(k)
    df["backup_rank"] = df.groupby("option").cumcount() + 1
    return df[cols].reset_index(drop=True).astype({"option": "int64", "backup_rank": "int64",
                                                   "backup_option": "int64", "recovered_weight": "float64"})
