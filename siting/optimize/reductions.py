"""Optimum-preserving reductions of the instance (see the package docstring, items 1-4)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from .problem import _Instance


@dataclass
class _Reduced:
    opt: np.ndarray  # kept option -> caller's option index
    user_class: np.ndarray  # caller's user -> class (-1: dropped)
    C: sp.csr_array  # kept options x classes
    w: np.ndarray  # class weight (per user of the class when load-capped)
    mult: np.ndarray  # users per class
    c: np.ndarray
    site: np.ndarray
    cap: np.ndarray | None
    conflicts: np.ndarray
    stats: dict
    reduced: bool = True


def _superset_pairs(C, rare=8, chunk_nnz=4_000_000, full_max=4_000_000):
    """All pairs ``(k, j)``, ``k != j``, where option j covers every user option k covers (rows of ``C``).

    When the product ``C C^T`` has at most ``full_max`` terms (the sum of squared user degrees), it counts
    every pair's common users at once.  Otherwise candidates come from k's ``rare`` least-covered users (a
    superset of row k covers them too; cheap even on dense relations), and each candidate is then checked
    on the whole row, in chunks of ``chunk_nnz`` entries.
    """
    n, m = C.shape
    nnz = np.diff(C.indptr)
    if n == 0 or C.nnz == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    deg = np.bincount(C.indices, minlength=m)
    Cf = sp.csr_array(C, dtype=np.float64)
    if float(deg.astype(np.float64) @ deg) <= full_max:  # |cov(k) & cov(j)| == |cov(k)| for every pair
        hits = sp.coo_array(Cf @ Cf.T)
        keep = (hits.data == nnz[hits.row]) & (hits.row != hits.col)
        return hits.row[keep].astype(np.int64), hits.col[keep].astype(np.int64)
    rowid = np.repeat(np.arange(n), nnz)
    order = np.lexsort((C.indices, deg[C.indices], rowid))  # grouped by row, rarest user first
    rank = np.arange(C.nnz) - np.repeat(C.indptr[:-1], nnz)
    sel = order[rank < rare]
    R = sp.csr_array((np.ones(len(sel)), (rowid[sel], C.indices[sel])), shape=(n, m))
    hits = sp.coo_array(R @ Cf.T)
    need = np.minimum(nnz, rare)
    keep = (hits.data == need[hits.row]) & (hits.row != hits.col)
    k, j = hits.row[keep].astype(np.int64), hits.col[keep].astype(np.int64)
    # rows of at most ``rare`` users were compared whole; the others get an exact check on the whole row:
    # |cov(k) & cov(j)| == |cov(k)|, in chunks of bounded size
    ok = nnz[k] <= rare
    todo = np.flatnonzero(~ok)
    if len(todo) == 0:
        return k[ok], j[ok]
    cum = np.cumsum(nnz[k[todo]])
    edges = np.unique(np.r_[0, np.searchsorted(cum, np.arange(chunk_nnz, cum[-1], chunk_nnz)), len(todo)])
    for lo, hi in zip(edges[:-1], edges[1:]):
        kk, jj = k[todo[lo:hi]], j[todo[lo:hi]]
        ok[todo[lo:hi]] = np.asarray(Cf[kk].multiply(Cf[jj]).sum(axis=1)).ravel() == nnz[kk]
    return k[ok], j[ok]


def _dominated(k, j, nnz, c, site, cap, pinned, alive):
    """Bool per option: it can be dropped without changing the optimum (one round; see reduction 3).

    ``(k, j)`` are the superset pairs of the relation (``_superset_pairs``); only pairs of options still
    ``alive`` count.  Option k is dominated by option j when j covers every user k covers at no greater cost
    (no smaller load cap), j comes first in the order (cost, larger coverage, larger cap, index), and either
    j sits at the same site as k, or - without a load cap - j's site takes part in no spacing conflict
    (``pinned``) and every live option at j's site covers all of k's users.
    """
    out = np.zeros(len(alive), bool)
    live = alive[k] & alive[j]
    k, j = k[live], j[live]
    if len(k) == 0:
        return out
    equal = nnz[j] == nnz[k]
    ok_cap = np.ones(len(k), bool) if cap is None else cap[j] >= cap[k]
    strict_cap = np.zeros(len(k), bool) if cap is None else cap[j] > cap[k]
    same_cost = c[j] == c[k]
    # strictly better in some respect, or a perfect tie broken by index: no cycles, so all can go at once
    better = (c[j] < c[k]) | (same_cost & ~equal) | strict_cap | (same_cost & equal & (j < k))
    dom = (c[j] <= c[k]) & ok_cap & better
    _, sidx = np.unique(site, return_inverse=True)
    same_site = sidx[j] == sidx[k]
    if cap is None:
        # how many live options at j's site cover all of k's users, against how many live options it has
        n_site = int(sidx.max()) + 1
        key = k * n_site + sidx[j]
        keys, counts = np.unique(key, return_counts=True)
        every = counts[np.searchsorted(keys, key)] == np.bincount(sidx[alive], minlength=n_site)[sidx[j]]
        dom &= same_site | (every & ~pinned[j])
    else:
        dom &= same_site
    out[k[dom]] = True
    return out


def _reduce(inst: _Instance, reduce: bool) -> _Reduced:
    """The instance after reductions 1-4 of the package docstring (``reduce=False``: unchanged, one class per user)."""
    C, w = inst.C, inst.w
    n_opt, n_user = C.shape
    stats = {"options_in": n_opt, "users_in": n_user}
    if not reduce:
        return _Reduced(np.arange(n_opt), np.arange(n_user), C, w.copy(), np.ones(n_user, np.int64), inst.c,
                        inst.site, inst.load_cap, inst.conflicts, stats, reduced=False)
    # 1-2. users of zero weight or covered by no option, then options covering none of the rest
    col_cnt = np.bincount(C.indices, minlength=n_user)
    users = np.flatnonzero((col_cnt > 0) & (w > 0))
    Cu = C[:, users]
    opts = np.flatnonzero(np.diff(Cu.indptr) > 0)
    Cu = sp.csr_array(Cu[opts])
    stats["users_dropped"] = int(n_user - len(users))
    stats["options_empty_dropped"] = int(n_opt - len(opts))
    cap = None if inst.load_cap is None else inst.load_cap[opts]
    # 3. dominated options
    alive = _undominated(inst, opts, Cu, cap)
    stats["options_dominated_dropped"] = int(len(opts) - alive.sum())
    opts = opts[alive]
    Cu = sp.csr_array(Cu[np.flatnonzero(alive)])
    cap = None if cap is None else cap[alive]
    # 4. users with identical covering sets (and, with a load cap, identical weight) merged into classes
    wu = w[users]
    cls, first, Cm = _user_classes(Cu, wu, inst.load_cap is not None)
    n_cls = len(first)
    mult = np.bincount(cls, minlength=n_cls).astype(np.int64)
    wc = np.bincount(cls, weights=wu, minlength=n_cls)
    if inst.load_cap is not None:
        wc = wu[first]  # per-user weight, identical within a class
    user_class = np.full(n_user, -1, np.int64)
    user_class[users] = cls
    stats["users_merged"] = int(len(users) - n_cls)
    return _Reduced(opts, user_class, Cm, wc, mult, inst.c[opts], inst.site[opts], cap, inst.conflicts, stats)


def _undominated(inst: _Instance, opts, Cu, cap) -> np.ndarray:
    """Bool per kept option: not dropped by rounds of reduction 3 (``opts``: caller's indices, ``Cu``: rows)."""
    pinned_sites = np.unique(inst.conflicts) if len(inst.conflicts) else np.zeros(0, inst.site.dtype)
    # the superset relation between two options does not depend on the others: find the pairs once
    pk, pj = _superset_pairs(Cu)
    nnz = np.diff(Cu.indptr)
    pinned = np.isin(inst.site[opts], pinned_sites)
    alive = np.ones(len(opts), bool)
    for _ in range(20):  # dropping options can make more dominated (fewer options left at a site)
        dom = _dominated(pk, pj, nnz, inst.c[opts], inst.site[opts], cap, pinned, alive)
        if not dom.any():
            break
        alive &= ~dom
    return alive


def _user_classes(Cu, wu, by_weight: bool):
    """(class per user, first user of each class, options x classes relation) for users of equal columns.

    Columns are grouped by two independent 64-bit random hashes and their length (and the weight when
    ``by_weight``), then the grouping is verified exactly.
    """
    Cc = sp.csc_array(Cu)
    rng = np.random.default_rng(20240521)
    r1 = rng.integers(1, 2**62, size=Cu.shape[0], dtype=np.int64).astype(np.uint64)
    r2 = rng.integers(1, 2**62, size=Cu.shape[0], dtype=np.uint64)
    colid = np.repeat(np.arange(Cc.shape[1]), np.diff(Cc.indptr))
    h1 = np.zeros(Cc.shape[1], np.uint64)
    h2 = np.zeros(Cc.shape[1], np.uint64)
    with np.errstate(over="ignore"):
        np.add.at(h1, colid, r1[Cc.indices])
        np.add.at(h2, colid, r2[Cc.indices] * r1[Cc.indices])
    col_n = np.diff(Cc.indptr)
    keys = [h1, h2, col_n.astype(np.uint64)]
    if by_weight:
        keys.append(wu.view(np.uint64))
    key = np.stack(keys, axis=1)
    _, first, cls = np.unique(key, axis=0, return_index=True, return_inverse=True)
    cls = cls.ravel()
    # verify the hash grouping exactly: members of a class have equally many options (part of the key), so
    # they are all equal exactly when the union of their columns is no larger than one of them
    R = sp.csr_array((np.ones(len(cls)), (np.arange(len(cls)), cls)), shape=(len(cls), len(first)))
    Cm = sp.csr_array((Cu.astype(np.float64) @ R) > 0)
    if not np.array_equal(np.bincount(Cm.indices, minlength=len(first)), col_n[first]):  # pragma: no cover
        cls = np.arange(len(wu))
        Cm = Cu
        first = np.arange(len(wu))
    Cm = sp.csr_array(Cm, dtype=bool)
    Cm.sort_indices()
    return cls, first, Cm


def _components(red: _Reduced) -> int:
    """Connected components of the option-class graph, joined through sites and conflicts (options only)."""
    n, m = red.C.shape
    if n == 0:
        return 0
    _, site_idx = np.unique(red.site, return_inverse=True)
    ns = site_idx.max() + 1
    # nodes: options, classes, sites; edges: option - its site, option - the classes it covers
    rows = np.r_[np.arange(n), np.repeat(np.arange(n), np.diff(red.C.indptr))]
    cols = np.r_[n + m + site_idx, n + red.C.indices]
    G = sp.csr_array((np.ones(len(rows)), (rows, cols)), shape=(n + m + ns, n + m + ns))
    if len(red.conflicts):
        known = np.isin(red.conflicts, red.site).all(axis=1)
        cf = red.conflicts[known]
        if len(cf):
            lookup = np.unique(red.site)
            a = np.searchsorted(lookup, cf[:, 0])
            b = np.searchsorted(lookup, cf[:, 1])
            G = G + sp.csr_array((np.ones(len(a)), (n + m + a, n + m + b)), shape=G.shape)
    k, lab = connected_components(G, directed=False)
    used = np.unique(lab[:n])
    return int(len(used))


def _site_local(red: _Reduced) -> np.ndarray:
    """Bool per user class: every option covering it sits at one and the same site."""
    Cc = sp.csc_array(red.C)
    if Cc.nnz == 0:
        return np.zeros(red.C.shape[1], bool)
    s = red.site[Cc.indices].astype(float)
    starts = Cc.indptr[:-1]
    nz = np.diff(Cc.indptr) > 0
    smax = np.full(red.C.shape[1], -np.inf)
    smin = np.full(red.C.shape[1], np.inf)
    smax[nz] = np.maximum.reduceat(s, starts[nz])
    smin[nz] = np.minimum.reduceat(s, starts[nz])
    return nz & (smax == smin)
