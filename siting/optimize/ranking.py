"""Ranking of a plan's options and backup spots for the field teams."""

from __future__ import annotations

import numbers

import numpy as np
import pandas as pd
import scipy.sparse as sp

from ..errors import SitingError
from .heuristics import _conflict_adj, _Index
from .problem import _INF, _as_1d, _conflict_pairs, _cover_matrix


def rank_chosen(chosen, cover, weight) -> pd.DataFrame:
    """Order chosen options by marginal contribution (greedy order within the plan) for the field teams.

    Each next option adds the most still-uncovered weight (ties: lower option index).  ``exclusive_weight``
    is the weight only that option covers within the plan; ``shared_weight`` the rest of the weight it
    covers.  ``cumulative_weight`` of the last row equals the plan's covered weight.

    ``cover`` is read as :func:`siting.optimize.solve_coverage` reads it (any nonzero entry covers) and the
    arguments are checked as there; ``chosen`` holds row indices of ``cover`` (duplicates count once).
    :class:`SitingError` names the argument that is wrong.

    Returns
    -------
    DataFrame with columns option, rank (1-based), marginal_weight, cumulative_weight, exclusive_weight,
    shared_weight.
    """
    cols = ["option", "rank", "marginal_weight", "cumulative_weight", "exclusive_weight", "shared_weight"]
    C = _cover_matrix(cover)
    w = _as_1d("weight", weight, C.shape[1])
    chosen = _chosen_options(chosen, C.shape[0])
    if len(chosen) == 0:
        return pd.DataFrame({c: pd.Series(dtype="int64" if c in ("option", "rank") else "float64") for c in cols})
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

    The arguments are read and checked as :func:`siting.optimize.solve_coverage` reads them (any nonzero
    ``cover`` entry covers; site ids are labels, so only their equality matters); ``chosen`` holds row indices
    of ``cover``, ``k`` is a whole number >= 0, ``option_wall`` and ``option_building`` one key per option.
    :class:`SitingError` names the argument that is wrong.

    Cost: for most candidates the swap adds only ``G0_a``, the weight ``a`` adds to the plan as it is; only
    the few options covering one of ``r``'s exclusive users, in spacing conflict with ``r``'s site, or on
    ``r``'s own building (or wall) rank differently for each ``r``.  Those are evaluated per ``r``; of the
    rest, only the first walls of one list ordered by ``G0`` (per cost limit) can reach the top ``k``, so a
    plan of 500 surfaces among 1.4 million options takes about a second, not a minute.

    Returns
    -------
    DataFrame with columns option, backup_rank (1..k), backup_option, recovered_weight, recovered_share,
    kept_weight, weak, placement.
    """
    empty = pd.DataFrame({c: pd.Series(dtype=t) for c, t in _BACKUP_DTYPES.items()})
    Cb = _cover_matrix(cover)
    n_opt = Cb.shape[0]
    w = _as_1d("weight", weight, Cb.shape[1])
    c = _as_1d("cost", cost, n_opt)
    at_site = _Index(_as_1d("option_site", option_site, n_opt, "i"))
    site = at_site.code  # compact site codes: arrays per site stay as small as the number of sites
    chosen = _chosen_options(chosen, n_opt)
    k = _backup_count(k)
    cf = _conflict_pairs(conflicts)
    wall = _option_key("option_wall", option_wall, n_opt)
    bldg = _option_key("option_building", option_building, n_opt)
    if len(chosen) == 0 or k == 0:
        return empty
    C = sp.csr_array(Cb, dtype=np.float64)
    Csub = sp.csr_array(C[chosen])
    cnt = np.asarray(Csub.sum(axis=0)).ravel()
    W = float(w[cnt > 0].sum())
    E = Csub @ np.where(cnt == 1, w, 0.0)  # weight only each chosen option covers
    G0 = C @ np.where(cnt == 0, w, 0.0)  # weight an option adds to the plan as it is
    # M[a, r]: weight of r's exclusive users that option a covers
    X = sp.csc_array(Csub.multiply((cnt == 1)[None, :] * w[None, :]).T)
    M = sp.csc_array(C @ X)
    M.sort_indices()
    free = ~np.isin(site, site[chosen])
    # spacing conflicts between site codes (pairs with a site that carries no option cannot matter)
    adj = _conflict_adj(None, np.searchsorted(at_site.keys, cf[np.isin(cf, at_site.keys).all(axis=1)]),
                        len(at_site.keys))
    nconf = np.zeros(len(at_site.keys))  # chosen sites in conflict with each site
    if adj is not None:
        cs = np.zeros(adj.shape[0])
        cs[site[chosen]] = 1.0
        nconf = adj @ cs
    group = at_site if wall is None else _Index(wall)  # one backup per wall (per site without walls)
    home = None if bldg is None and wall is None else _Index(bldg if bldg is not None else wall)
    # options whose swap adds G0 for every r (no exclusive user of any r, no spacing conflict with a chosen
    # site), and the groups (walls) of each cost limit in order of their best such option
    plain = free & (G0 > 0) & (nconf[site] <= 0)
    limits = {}
    frames = []
    for r_i, r in enumerate(chosen):
        lim = c[r] * (1 + 1e-12) + 1e-12
        if lim not in limits:
            limits[lim] = _group_order(np.flatnonzero(plain & (c <= lim)), G0, c, group)
        special = [M.indices[M.indptr[r_i]:M.indptr[r_i + 1]]]
        if adj is not None:
            neighbours = adj.indices[adj.indptr[site[r]]:adj.indptr[site[r] + 1]]
            special.append(at_site.members(neighbours))
        if home is not None:
            special.append(home.members(home.code[[r]]))
        special_groups = np.unique(group.code[np.concatenate(special)])
        a = np.concatenate([group.members(special_groups),
                            _leading_plain(limits[lim], special_groups, k, group, plain, c, lim, W)])
        rec = G0[a] + _column_values(M, r_i, a)
        ok = free[a] & (c[a] <= lim) & (rec > 0)
        if adj is not None:
            ok &= (nconf[site[a]] - np.isin(site[a], neighbours)) <= 0
        a, rec = a[ok], rec[ok]
        if len(a) == 0:
            continue
        frames.append(_best_backups(r, a, rec, W, E[r_i], c, site, wall, bldg, k))
    if not frames:
        return empty
    out = pd.DataFrame({col: np.concatenate([f[col] for f in frames]) for col in frames[0]})
    out["backup_rank"] = out.groupby("option").cumcount() + 1
    return out[_BACKUP_COLUMNS].reset_index(drop=True).astype(_BACKUP_DTYPES)


def _chosen_options(chosen, n_opt) -> np.ndarray:
    """The chosen options as sorted unique row indices of the cover matrix; :class:`SitingError` otherwise."""
    arr = np.asarray(chosen)
    if arr.ndim != 1:
        raise SitingError(f"optimiser argument 'chosen': expected a 1-D array of option indices, got shape "
                          f"{arr.shape}; pass the plan's options, e.g. plan.chosen")
    if arr.size == 0:
        return np.zeros(0, np.int64)
    if arr.dtype == bool:
        raise SitingError("optimiser argument 'chosen': expected option indices, got a boolean mask; pass "
                          "numpy.flatnonzero(mask)")
    if arr.dtype.kind not in "iuf" or not np.all(np.isfinite(arr)) or np.any(np.mod(arr, 1) != 0):
        raise SitingError(f"optimiser argument 'chosen': expected integer option indices, got dtype {arr.dtype}; "
                          f"pass row numbers of 'cover', e.g. plan.chosen")
    arr = arr.astype(np.int64)
    bad = (arr < 0) | (arr >= n_opt)
    if bad.any():
        i = int(arr[bad][0])
        fix = ("negative indices do not count from the end, pass row numbers of 'cover'" if i < 0 else
               "pass the plan computed with this cover, or the cover it was computed with")
        raise SitingError(f"optimiser argument 'chosen': expected option indices >= 0 and < {n_opt} (the rows of "
                          f"'cover'), found {i}; {fix}")
    return np.unique(arr)


def _backup_count(k) -> int:
    """``k`` as an int; :class:`SitingError` unless it is a whole number >= 0."""
    if isinstance(k, bool) or not isinstance(k, numbers.Real) or not float(k).is_integer() or k < 0:
        raise SitingError(f"optimiser argument 'k': expected a whole number of backups >= 0, got {k!r}; pass e.g. "
                          f"k=3")
    return int(float(k))


def _option_key(name, key, n_opt) -> np.ndarray | None:
    """One grouping key (wall, building) per option, none missing; :class:`SitingError` otherwise."""
    if key is None:
        return None
    arr = np.asarray(key)
    if arr.ndim != 1 or arr.shape[0] != n_opt:
        raise SitingError(f"optimiser argument '{name}': expected a 1-D array of length {n_opt}, got shape "
                          f"{arr.shape}; pass one value per option")
    missing = np.asarray(pd.isna(arr), bool)
    if missing.any():
        raise SitingError(f"optimiser argument '{name}': found a missing value at position "
                          f"{int(np.flatnonzero(missing)[0])}; give every option a key or pass None")
    return arr


def _group_order(opts, G0, c, group: _Index):
    """(groups, their best option's G0) in backup order of their best option (G0 descending, cost, index)."""
    o = opts[np.lexsort((opts, c[opts], -G0[opts]))]
    _, first = np.unique(group.code[o], return_index=True)
    best = o[np.sort(first)]
    return group.code[best], G0[best]


def _leading_plain(order, special_groups, k, group: _Index, plain, c, lim, W) -> np.ndarray:
    """The plain options (within the cost limit) of the first ``k`` groups of ``order`` that are not special,
    and of every later group whose best G0 ties the k-th within rounding."""
    codes, g0 = order
    keep = ~np.isin(codes[: k + len(special_groups)], special_groups)
    head = np.flatnonzero(keep)
    if len(head) == 0:
        return np.zeros(0, np.int64)
    kth = g0[head[min(k, len(head)) - 1]]
    end = int(np.searchsorted(-g0, -(kth - 1e-9 * max(1.0, abs(W))), side="right"))
    take = codes[:end][~np.isin(codes[:end], special_groups)]
    a = group.members(take)
    return a[plain[a] & (c[a] <= lim)]


def _column_values(M, j, rows) -> np.ndarray:
    """M[rows, j] of a CSC array with sorted indices, as a dense vector."""
    idx = M.indices[M.indptr[j]:M.indptr[j + 1]]
    val = M.data[M.indptr[j]:M.indptr[j + 1]]
    if len(idx) == 0:
        return np.zeros(len(rows))
    pos = np.minimum(np.searchsorted(idx, rows), len(idx) - 1)
    return np.where(idx[pos] == rows, val[pos], 0.0)


def _best_backups(r, a, rec, W, E_r, c, site, wall, bldg, k) -> dict:
    """The top ``k`` backups of chosen option ``r`` among candidates ``a`` (eligible, recovered weight ``rec``):
    best size per site, best site per wall, then ordered as :func:`backups_for` says."""
    share = rec / E_r if E_r > 0 else np.ones(len(a))
    kept = W - E_r + rec
    tier = np.zeros(len(a), np.int64)
    placement = np.full(len(a), "", object)
    if wall is not None:
        same_wall = wall[a] == wall[r]
        tier += 2 * same_wall
        placement[:] = np.where(same_wall, "same_wall", "other_wall")
        if bldg is not None:
            other_b = bldg[a] != bldg[r]
            tier += ~other_b & ~same_wall
            placement[other_b] = "other_building"
    elif bldg is not None:
        other_b = bldg[a] != bldg[r]
        tier += ~other_b
        placement[:] = np.where(other_b, "other_building", "same_building")
    s = np.lexsort((a, c[a], -kept))  # best first: most weight kept, then cheapest, then lowest index
    for key in (site, wall):
        if key is not None:
            _, first = np.unique(key[a[s]], return_index=True)
            s = s[np.sort(first)]
    weak = share < WEAK_SHARE
    s = s[np.lexsort((a[s], c[a[s]], -kept[s], tier[s], weak[s]))][:k]
    return {"option": np.full(len(s), r, np.int64), "backup_option": a[s], "recovered_weight": rec[s],
            "recovered_share": share[s], "kept_weight": kept[s], "weak": weak[s],
            "placement": placement[s]}
