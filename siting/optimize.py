"""Which facades get which panel size: budgeted maximum coverage as an integer program.

The core functions take plain arrays (spopt-style ``from_cost_matrix`` shape); :func:`solve_tables` is the
thin adapter over the pipeline tables (``options``, ``coverage``, ``users``, ``direct`` of
:mod:`siting.tables`).

Formulation
-----------
Sets: options ``j`` (a panel size at a candidate spot, ``site(j)``), users ``i`` with weight ``w_i >= 0``,
``C`` the boolean coverage relation (``C[j, i]`` = option ``j`` brings user ``i`` to the SNR target).
Users already covered by a base station directly are constants and not part of the model.

Maximum coverage (:func:`solve_coverage`)::

    maximise    sum_i w_i y_i  -  eps * sum_j c_j x_j          (eps: tie-break toward lower cost)
    subject to  y_i <= sum_j C[j, i] x_j                 for every user i               (cover)
                sum_{j: site(j) = s} x_j <= 1             for every site s               (one size per site)
                sum_{j: site(j) in {s, t}} x_j <= 1      for every conflicting site pair (spacing on a wall)
                sum_j c_j x_j <= B                        if a budget is given
                sum_j x_j <= K                            if a panel count is given
                x_j in {0, 1},  0 <= y_i <= 1

``eps`` is chosen so that the whole cost term stays below 1e-4 of the smallest positive user weight, so
it only separates plans of equal covered weight; the reported bound adds that term back, so it is a proven
upper bound on the covered weight itself.

Per-surface load cap ``L_j`` (only built when asked): a surface is steered to one user at a time, so it can
carry at most ``L_j`` weight.  Users are assigned to surfaces with integer assignment variables ``z_ji``
(``C[j, i] = 1``)::

    maximise    sum_{j,i} w_i z_ji - eps * sum_j c_j x_j
    subject to  sum_j z_ji <= m_i                         (user class i holds m_i identical users)
                z_ji <= m_i x_j                           (assign only to chosen surfaces)
                sum_i w_i z_ji <= L_j x_j                 (load cap)
                + the site, conflict, budget and count rows above;  z_ji integer in [0, m_i]

Minimum cost (:func:`min_cost_cover`): minimise ``sum_j c_j x_j`` subject to ``sum_i w_i y_i >= T`` (or
``sum w z >= T``) and the same rows.

Reductions (``reduce=True``; each keeps the optimum, see tests/test_optimize.py)
---------------------------------------------------------------------------------
1. drop users of zero weight and users no option covers;
2. drop options that cover no remaining user;
3. drop option k when another option j covers a superset of its users at no greater cost (with a load
   cap, no smaller cap) and either

   a. j sits at the same site as k: in any plan k can be swapped for j one-for-one, so the budget, count,
      conflicts and caps that held still hold; or
   b. (no load cap) j sits at another site that takes part in no spacing conflict, and *every* option at
      j's site covers all of k's users.  In a plan with k, either j's site is free (swap k for j: same
      site count, no more cost, no fewer users) or some option there already covers k's users (drop k).

   Coverage is checked on the instance, never assumed from the panel size.  Candidates are strictly
   ordered (cost, then larger coverage, then larger cap, then index), so all dominated options of a round
   go at once; rounds repeat while options go, since fewer options at a site can make (b) hold.  On
   street-like instances, where spots a few metres apart cover nested sets of users, (b) drops about half
   of the options (real district: 1,616 -> 874 after (a));
4. merge users with identical covering sets into one class, summing weights.  With a load cap a merged
   user may not be split across surfaces, so only users of identical covering set *and* identical weight
   are merged and the class becomes an integer count ``m_i``.
5. (HiGHS, when solving) fix to 0 every option that the LP relaxation leaves at 0 with a reduced cost
   above the gap between the LP bound and the incumbent: no plan with it beats the incumbent.

Independent components (connected components of the option-user graph, joined through sites and
conflicts) are counted and reported in ``Plan.model_size``; with a global budget or count they are kept
in one model rather than solved apart and combined by a knapsack over their coverage-versus-budget
curves: HiGHS detects the block structure in presolve, and one model keeps a single proven bound.

Solving
-------
The default path builds the HiGHS model directly from the sparse arrays (``highspy``), warm-started by
lazy greedy plus swap local search: the better of the cost-effectiveness greedy and the best single
option, as in S. Khuller, A. Moss and J. Naor, "The budgeted maximum coverage problem", Information
Processing Letters 70(1), 1999, DOI 10.1016/S0020-0190(99)00031-9.  With ``reduce=True`` it is staged
(:func:`_highs_staged`): LP relaxation; the warm start improved by an exact solve over the options the LP
uses; reduced-cost fixing against that incumbent (5. in the list above); then the integer program with
HiGHS's defaults, preceded on models of middle size by a few nodes without root restarts.  ``solver="cbc"``
builds the same model through PuLP and runs the CBC binary bundled with PuLP under a hard wall-clock timer
(CBC ignores its own limit during the root LP).  The status is read from the solver's solution status and
its dual bound, never from a status string alone (PuLP reports "Optimal" for time-limited runs).
"""

from __future__ import annotations

import heapq
import math
import os
import subprocess
import tempfile
import time
import warnings
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from .errors import SitingError, SolverError

__all__ = [
    "Plan",
    "solve_coverage",
    "min_cost_cover",
    "budget_sweep",
    "greedy",
    "rank_chosen",
    "backups_for",
    "solve_tables",
    "lp_relaxation_bound",
    "write_lp",
]

_INF = math.inf
_TINY = 1e-12
_EPS_SHARE = 1e-4  # whole tie-break cost term < this share of the smallest positive user weight


@dataclass
class Plan:
    """Result of an optimisation.

    Attributes
    ----------
    chosen : option indices (into the caller's option arrays), in rank order (see :func:`rank_chosen`).
    covered : bool per user of the caller: covered by the chosen options (with a load cap: served).
    objective : covered weight of the plan, surface-covered users only [weight units].
    bound : proven upper bound on ``objective`` (maximum coverage) or proven lower bound on ``cost``
        (minimum cost, ``mode == 'min_cost'``).
    gap : relative distance between plan and bound, 0 when proven optimal.
    status : 'optimal', 'time_limit' (usable plan, gap reported), 'greedy_only' (the solver found
        nothing better than the warm start in time), 'empty' (nothing to choose).
    solver : 'highs', 'cbc' or 'greedy'.
    cost : plan cost [currency units].
    greedy_objective : covered weight of the greedy + local search plan.
    message : plain sentence for the report.
    model_size : rows, cols, nonzeros before and after reductions, users/options dropped, components.
    timings_s : wall-clock seconds per step.
    mode : 'max_coverage' or 'min_cost'.
    """

    chosen: np.ndarray
    covered: np.ndarray
    objective: float
    bound: float
    gap: float
    status: str
    solver: str
    cost: float
    greedy_objective: float
    message: str
    model_size: dict = field(default_factory=dict)
    timings_s: dict = field(default_factory=dict)
    mode: str = "max_coverage"


# ----------------------------------------------------------------------------------------------------
# validation
# ----------------------------------------------------------------------------------------------------


@dataclass
class _Instance:
    C: sp.csr_array  # options x users, bool
    w: np.ndarray
    c: np.ndarray
    site: np.ndarray
    budget: float | None
    max_count: int | None
    conflicts: np.ndarray  # (k, 2) site pairs, a != b
    load_cap: np.ndarray | None  # per option


def _as_1d(name, a, n, kind="f"):
    arr = np.asarray(a)
    if arr.ndim != 1 or arr.shape[0] != n:
        raise SitingError(
            f"optimiser argument '{name}': expected a 1-D array of length {n}, got shape {arr.shape}; "
            f"pass one value per {'user' if name == 'weight' else 'option'}"
        )
    if kind == "i":
        if not (np.issubdtype(arr.dtype, np.integer) or (arr.size and np.all(np.mod(arr, 1) == 0))) and arr.size:
            raise SitingError(f"optimiser argument '{name}': expected integer indices, got dtype {arr.dtype}")
        arr = arr.astype(np.int64)
        if arr.size and arr.min() < 0:
            raise SitingError(f"optimiser argument '{name}': expected indices >= 0, found {arr.min()}")
        return arr
    arr = arr.astype(float)
    bad = ~np.isfinite(arr)
    if bad.any():
        raise SitingError(
            f"optimiser argument '{name}': expected finite numbers, found NaN/inf at position "
            f"{int(np.flatnonzero(bad)[0])}; fill or drop those rows"
        )
    if arr.size and arr.min() < 0:
        raise SitingError(
            f"optimiser argument '{name}': expected values >= 0, found {arr.min():g} at position "
            f"{int(np.argmin(arr))}; {name} cannot be negative"
        )
    return arr


def _validate(cover, weight, cost, option_site, budget=None, max_count=None, conflicts=None, load_cap=None,
              option_wall=None) -> _Instance:
    if cover is None:
        raise SitingError("optimiser argument 'cover': expected a sparse options x users matrix, got None")
    if sp.issparse(cover):
        C = sp.csr_array(cover)
    else:
        arr = np.asarray(cover)
        if arr.ndim != 2:
            raise SitingError(f"optimiser argument 'cover': expected a 2-D options x users matrix, got shape {arr.shape}")
        C = sp.csr_array(arr)
    if C.dtype != bool:
        if C.nnz and not np.all(np.isfinite(C.data)):
            raise SitingError("optimiser argument 'cover': found NaN/inf entries; expected a boolean relation")
        C = sp.csr_array(C != 0)
    C.eliminate_zeros()
    C.sort_indices()
    n_opt, n_user = C.shape
    w = _as_1d("weight", weight, n_user)
    c = _as_1d("cost", cost, n_opt)
    site = _as_1d("option_site", option_site, n_opt, "i")
    if budget is not None:
        if not np.isscalar(budget) or not np.isfinite(budget) or budget < 0:
            raise SitingError(f"optimiser argument 'budget': expected a finite number >= 0 or None, got {budget!r}")
        budget = float(budget)
    if max_count is not None:
        if not np.isscalar(max_count) or not np.isfinite(max_count) or max_count < 0 or int(max_count) != max_count:
            raise SitingError(f"optimiser argument 'max_count': expected an integer >= 0 or None, got {max_count!r}")
        max_count = int(max_count)
    if conflicts is None:
        conf = np.zeros((0, 2), np.int64)
    else:
        conf = np.asarray(conflicts)
        if conf.size == 0:
            conf = np.zeros((0, 2), np.int64)
        if conf.ndim != 2 or conf.shape[1] != 2:
            raise SitingError(
                f"optimiser argument 'conflicts': expected an int array of shape (k, 2) of site pairs, got shape {conf.shape}"
            )
        if conf.size and (not np.all(np.isfinite(conf)) or np.any(np.mod(conf, 1) != 0) or conf.min() < 0):
            raise SitingError("optimiser argument 'conflicts': expected non-negative integer site indices")
        conf = conf.astype(np.int64)
        conf = conf[conf[:, 0] != conf[:, 1]]
        conf = np.unique(np.sort(conf, axis=1), axis=0) if len(conf) else conf
    if option_wall is not None:
        wall = _as_1d("option_wall", option_wall, n_opt, "i")
        if len(conf) and n_opt:
            site_wall = pd.Series(wall).groupby(site).agg(["min", "max"])
            if (site_wall["min"] != site_wall["max"]).any():
                s = int(site_wall.index[(site_wall["min"] != site_wall["max"]).to_numpy()][0])
                raise SitingError(f"optimiser argument 'option_wall': options of site {s} sit on different walls")
            sw = site_wall["min"]
            known = np.isin(conf, sw.index.to_numpy())
            both = known.all(axis=1)
            wa = sw.reindex(conf[both, 0]).to_numpy()
            wb = sw.reindex(conf[both, 1]).to_numpy()
            if np.any(wa != wb):
                k = np.flatnonzero(both)[np.flatnonzero(wa != wb)[0]]
                raise SitingError(
                    f"optimiser argument 'conflicts': pair {k} joins sites {conf[k, 0]} and {conf[k, 1]} on different "
                    f"walls; spacing conflicts apply to spots on the same wall only"
                )
    cap = None
    if load_cap is not None:
        if np.isscalar(load_cap):
            if not np.isfinite(load_cap) or load_cap < 0:
                raise SitingError(f"optimiser argument 'load_cap': expected a finite weight >= 0, got {load_cap!r}")
            cap = np.full(n_opt, float(load_cap))
        else:
            cap = _as_1d("load_cap", load_cap, n_opt)
    return _Instance(C, w, c, site, budget, max_count, conf, cap)


# ----------------------------------------------------------------------------------------------------
# reductions
# ----------------------------------------------------------------------------------------------------


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
    C, w = inst.C, inst.w
    n_opt, n_user = C.shape
    stats = {"options_in": n_opt, "users_in": n_user}
    if not reduce:
        return _Reduced(np.arange(n_opt), np.arange(n_user), C, w.copy(), np.ones(n_user, np.int64), inst.c,
                        inst.site, inst.load_cap, inst.conflicts, stats, reduced=False)
    col_cnt = np.bincount(C.indices, minlength=n_user)
    users = np.flatnonzero((col_cnt > 0) & (w > 0))
    Cu = C[:, users]
    opts = np.flatnonzero(np.diff(Cu.indptr) > 0)
    Cu = sp.csr_array(Cu[opts])
    stats["users_dropped"] = int(n_user - len(users))
    stats["options_empty_dropped"] = int(n_opt - len(opts))
    cap = None if inst.load_cap is None else inst.load_cap[opts]
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
    n_dom = int(len(opts) - alive.sum())
    opts = opts[alive]
    Cu = sp.csr_array(Cu[np.flatnonzero(alive)])
    cap = None if cap is None else cap[alive]
    stats["options_dominated_dropped"] = n_dom
    # merge users with identical covering sets: two independent 64-bit random hashes per column
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
    wu = w[users]
    if inst.load_cap is not None:
        keys.append(wu.view(np.uint64))
    key = np.stack(keys, axis=1)
    _, first, cls = np.unique(key, axis=0, return_index=True, return_inverse=True)
    cls = cls.ravel()
    # verify the hash grouping exactly: members of a class have equally many options (part of the key), so
    # they are all equal exactly when the union of their columns is no larger than one of them
    R = sp.csr_array((np.ones(len(cls)), (np.arange(len(cls)), cls)), shape=(len(cls), len(first)))
    Cm = sp.csr_array((Cu.astype(np.float64) @ R) > 0)
    if not np.array_equal(np.bincount(Cm.indices, minlength=len(first)), col_n[first]):  # pragma: no cover
        cls = np.arange(len(users))
        Cm = Cu
        first = np.arange(len(users))
    n_cls = len(first)
    mult = np.bincount(cls, minlength=n_cls).astype(np.int64)
    wc = np.bincount(cls, weights=wu, minlength=n_cls)
    if inst.load_cap is not None:
        wc = wu[first]  # per-user weight, identical within a class
    user_class = np.full(n_user, -1, np.int64)
    user_class[users] = cls
    stats["users_merged"] = int(len(users) - n_cls)
    Cm = sp.csr_array(Cm, dtype=bool)
    Cm.sort_indices()
    return _Reduced(opts, user_class, Cm, wc, mult, inst.c[opts], inst.site[opts], cap, inst.conflicts, stats)


def _components(red: _Reduced) -> int:
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


# ----------------------------------------------------------------------------------------------------
# model arrays
# ----------------------------------------------------------------------------------------------------


@dataclass
class _Milp:
    """min obj.x  s.t. row_lo <= A x <= row_hi, col_lo <= x <= col_hi, x[integer] integral."""

    obj: np.ndarray
    A: sp.csr_array
    row_lo: np.ndarray
    row_hi: np.ndarray
    col_lo: np.ndarray
    col_hi: np.ndarray
    integer: np.ndarray
    n_x: int
    budget_row: int = -1
    target_row: int = -1
    delta: float = 0.0  # max value of the tie-break term (added to the bound)
    obj_sign: float = -1.0  # objective of the plan = obj_sign * solver objective (+ tie-break)
    eps: float = 0.0  # tie-break weight per unit cost

    @property
    def size(self):
        return {"rows": int(self.A.shape[0]), "cols": int(self.A.shape[1]), "nonzeros": int(self.A.nnz)}


def _site_rows(site, conflicts):
    """Rows 'at most one option per site' (sites with 2+ options) and per conflicting site pair."""
    n = len(site)
    if n == 0:
        return sp.csr_array((0, 0))
    lookup, sidx = np.unique(site, return_inverse=True)
    S = sp.csr_array((np.ones(n), (sidx, np.arange(n))), shape=(len(lookup), n))
    rows = [S[np.flatnonzero(np.diff(S.indptr) > 1)]]
    if len(conflicts):
        known = np.isin(conflicts, lookup).all(axis=1)
        cf = conflicts[known]
        if len(cf):
            a = np.searchsorted(lookup, cf[:, 0])
            b = np.searchsorted(lookup, cf[:, 1])
            k = len(cf)
            P = sp.csr_array((np.ones(2 * k), (np.r_[np.arange(k), np.arange(k)], np.r_[a, b])), shape=(k, len(lookup)))
            rows.append(sp.csr_array(P @ S))
    return sp.csr_array(sp.vstack(rows, format="csr"))


def _build(red: _Reduced, budget, max_count, mode="max", target=None) -> _Milp:
    C, w, c = red.C, red.w, red.c
    n, m = C.shape
    capped = red.cap is not None
    # tie-break weight: whole cost term below _EPS_SHARE of the smallest positive weight
    pos = w[w > 0]
    wmin = pos.min() if len(pos) else 1.0
    if n:
        per_site_max = pd.Series(c).groupby(red.site).max().to_numpy()
        caps = [per_site_max.sum()]
        if budget is not None:
            caps.append(budget)
        if max_count is not None:
            caps.append(np.sort(per_site_max)[::-1][:max_count].sum())
        cost_cap = max(min(caps), _TINY)
    else:
        cost_cap = 1.0
    eps = _EPS_SHARE * wmin / cost_cap if mode == "max" else 0.0
    blocks = []
    lo, hi = [], []
    if not capped:
        # users whose covering options all sit at one site: y_i = sum_j x_j exactly (at most one option per
        # site, and maximising pushes y_i up to it), so their weight moves onto the x_j and the cover row
        # and y_i go away.  Same LP relaxation, fewer rows.
        loc = _site_local(red) if red.reduced else np.zeros(m, bool)
        keep = np.flatnonzero(~loc)
        xw = C.astype(float) @ np.where(loc, w, 0.0)  # weight each option brings through local users
        Ck = C[:, keep]
        wk = w[keep]
        mk = len(keep)
        nv = n + mk
        obj = np.r_[eps * c - xw, -wk] if mode == "max" else np.r_[c, np.zeros(mk)]
        col_lo = np.zeros(nv)
        col_hi = np.ones(nv)
        integer = np.r_[np.ones(n, bool), np.zeros(mk, bool)]
        cov = sp.hstack([-Ck.T.astype(float), sp.eye_array(mk, format="csr")], format="csr")
        blocks.append(cov)
        lo.append(np.full(mk, -_INF))
        hi.append(np.zeros(mk))
        val_row = np.r_[xw, wk]
    else:
        nnz = C.nnz
        rowj = np.repeat(np.arange(n), np.diff(C.indptr))
        coli = C.indices
        nv = n + nnz
        wz = w[coli]
        obj = np.r_[eps * c, -wz] if mode == "max" else np.r_[c, np.zeros(nnz)]
        col_lo = np.zeros(nv)
        col_hi = np.r_[np.ones(n), red.mult[coli].astype(float)]
        integer = np.ones(nv, bool)
        zk = np.arange(nnz)
        # class rows: sum_j z_ji <= m_i
        blocks.append(sp.csr_array((np.ones(nnz), (coli, n + zk)), shape=(m, nv)))
        lo.append(np.full(m, -_INF))
        hi.append(red.mult.astype(float))
        # z_ji - m_i x_j <= 0
        blocks.append(sp.csr_array((np.r_[np.ones(nnz), -red.mult[coli].astype(float)],
                                    (np.r_[zk, zk], np.r_[n + zk, rowj])), shape=(nnz, nv)))
        lo.append(np.full(nnz, -_INF))
        hi.append(np.zeros(nnz))
        # sum_i w_i z_ji - L_j x_j <= 0
        blocks.append(sp.csr_array((np.r_[wz, -red.cap], (np.r_[rowj, np.arange(n)], np.r_[n + zk, np.arange(n)])),
                                   shape=(n, nv)))
        lo.append(np.full(n, -_INF))
        hi.append(np.zeros(n))
        val_row = np.r_[np.zeros(n), wz]
    SR = _site_rows(red.site, red.conflicts)
    if SR.shape[0]:
        blocks.append(sp.hstack([SR, sp.csr_array((SR.shape[0], nv - n))], format="csr"))
        lo.append(np.full(SR.shape[0], -_INF))
        hi.append(np.ones(SR.shape[0]))
    nrow = sum(b.shape[0] for b in blocks)
    budget_row = target_row = -1
    if budget is not None:
        blocks.append(sp.csr_array(np.r_[c, np.zeros(nv - n)][None, :]))
        lo.append([-_INF])
        hi.append([budget])
        budget_row = nrow
        nrow += 1
    if max_count is not None:
        blocks.append(sp.csr_array(np.r_[np.ones(n), np.zeros(nv - n)][None, :]))
        lo.append([-_INF])
        hi.append([float(max_count)])
        nrow += 1
    if mode == "min":
        blocks.append(sp.csr_array(val_row[None, :]))
        lo.append([target])
        hi.append([_INF])
        target_row = nrow
        nrow += 1
    A = sp.csr_array(sp.vstack(blocks, format="csr")) if blocks else sp.csr_array((0, nv))
    A.sort_indices()
    return _Milp(obj, A, np.concatenate([np.asarray(v, float) for v in lo]) if lo else np.zeros(0),
                 np.concatenate([np.asarray(v, float) for v in hi]) if hi else np.zeros(0),
                 col_lo, col_hi, integer, n, budget_row, target_row, eps * cost_cap,
                 -1.0 if mode == "max" else 1.0, eps)


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


def _start_vector(red: _Reduced, milp: _Milp, chosen_red: np.ndarray):
    """Full start for the uncapped model (x and y), x only (sparse, HiGHS completes it) when capped."""
    n = milp.n_x
    x = np.zeros(n)
    x[chosen_red] = 1.0
    if red.cap is not None:
        return np.arange(n), x
    y = np.minimum(1.0, red.C.T.astype(float) @ x)
    if red.reduced:
        y = y[~_site_local(red)]
    return np.arange(len(milp.obj)), np.r_[x, y]


# ----------------------------------------------------------------------------------------------------
# solver back ends
# ----------------------------------------------------------------------------------------------------


@dataclass
class _Result:
    values: np.ndarray | None
    primal: float  # solver objective (minimise), inf if none
    dual: float  # solver dual bound (minimise), -inf if none
    status: str  # 'optimal', 'time_limit', 'infeasible', 'killed', 'other', 'error'
    detail: str = ""
    n_fixed: int = 0  # options set to 0 by reduced-cost fixing (staged HiGHS path)


_highs_banner_done = [False]


def _quiet_highs():
    """A ``highspy.Highs`` instance; the licence banner HiGHS prints to stdout on the first one is swallowed."""
    import sys

    import highspy

    if _highs_banner_done[0]:
        return highspy.Highs()
    _highs_banner_done[0] = True
    try:
        fd = sys.stdout.fileno()
    except (AttributeError, OSError, ValueError):  # no real stdout (e.g. captured): nothing to protect
        return highspy.Highs()
    sys.stdout.flush()
    saved = os.dup(fd)
    try:
        with open(os.devnull, "w") as null:
            os.dup2(null.fileno(), fd)
            return highspy.Highs()
    finally:
        os.dup2(saved, fd)
        os.close(saved)


_highs_threads = [None]  # thread count HiGHS's process-wide scheduler was last (re)started with


def _use_highs_threads(threads):
    """Restart HiGHS's process-wide thread scheduler when a different thread count is asked for.

    The scheduler is started once per process by the first solve; a later ``threads`` option that differs
    makes ``Highs.run`` fail with an error instead of solving (highspy 1.16).
    """
    import highspy

    if threads is not None and int(threads) != _highs_threads[0]:
        highspy.Highs.resetGlobalScheduler(True)
        _highs_threads[0] = int(threads)


# From this many nonzeros on, HiGHS solves the model's LPs with its interior point method instead of the dual
# simplex.  Measured (docs/MODELS.md): on a 21,631-row, 483,114-nonzero coverage model the dual simplex had not
# finished the root LP after 300 s, the interior point method took 13 s; at 192,000 nonzeros (synthetic city of
# 5,000 buildings) the simplex was faster (19 s against 27 s to the proven optimum).
_IPM_NONZEROS = 300_000


def _highs_new(milp: _Milp, mip_rel_gap, threads, relax=False, seed=0):
    import highspy

    _use_highs_threads(threads)
    h = _quiet_highs()
    h.setOptionValue("output_flag", False)
    h.setOptionValue("random_seed", int(seed))
    h.setOptionValue("mip_rel_gap", float(mip_rel_gap))
    if milp.A.nnz >= _IPM_NONZEROS:
        h.setOptionValue("solver" if relax else "mip_lp_solver", "ipm")
    if threads is not None:
        h.setOptionValue("threads", int(threads))
    lp = highspy.HighsLp()
    nv = len(milp.obj)
    lp.num_col_ = nv
    lp.num_row_ = milp.A.shape[0]
    lp.col_cost_ = milp.obj
    lp.col_lower_ = milp.col_lo
    lp.col_upper_ = milp.col_hi
    lp.row_lower_ = np.where(np.isinf(milp.row_lo), -highspy.kHighsInf, milp.row_lo)
    lp.row_upper_ = np.where(np.isinf(milp.row_hi), highspy.kHighsInf, milp.row_hi)
    lp.a_matrix_.format_ = highspy.MatrixFormat.kRowwise
    lp.a_matrix_.num_col_ = nv
    lp.a_matrix_.num_row_ = milp.A.shape[0]
    lp.a_matrix_.start_ = milp.A.indptr.astype(np.int32)
    lp.a_matrix_.index_ = milp.A.indices.astype(np.int32)
    lp.a_matrix_.value_ = milp.A.data.astype(np.float64)
    if not relax and milp.integer.any():
        lp.integrality_ = [highspy.HighsVarType.kInteger if b else highspy.HighsVarType.kContinuous
                           for b in milp.integer]
    h.passModel(lp)
    return h


def _highs_run(h, start, time_limit_s) -> _Result:
    import highspy

    # HiGHS overruns its limit by a few percent: ask for a little less
    h.setOptionValue("time_limit", max(0.05, 0.95 * float(time_limit_s)))
    if start is not None:
        idx, val = start
        h.setSolution(len(idx), np.asarray(idx, np.int32), np.asarray(val, np.float64))
    run_status = h.run()
    ms = h.getModelStatus()
    info = h.getInfo()
    M = highspy.HighsModelStatus
    detail = h.modelStatusToString(ms)
    if run_status == highspy.HighsStatus.kError:
        # nothing was solved: its info fields (a dual bound of 0, say) are no certificate
        return _Result(None, _INF, -_INF, "error", f"HiGHS returned an error, model status '{detail}'")
    feasible = info.primal_solution_status == 2
    is_mip = h.getLp().integrality_ is not None and len(h.getLp().integrality_) > 0
    if ms == M.kOptimal:
        status = "optimal"
    elif ms in (M.kInfeasible,):
        status = "infeasible"
    elif ms in (M.kTimeLimit, M.kInterrupt, M.kSolutionLimit, M.kIterationLimit):
        status = "time_limit"
    else:
        status = "other"
    vals = np.asarray(h.getSolution().col_value) if feasible else None
    primal = info.objective_function_value if feasible else _INF
    if is_mip and status != "other":
        dual = info.mip_dual_bound if np.isfinite(info.mip_dual_bound) else -_INF
    else:
        dual = primal if status == "optimal" else -_INF
    return _Result(vals, primal, dual, status, detail)


# The staged HiGHS path first runs without root restarts and stops after this many branch-and-bound nodes;
# only a model still open then is solved again with HiGHS's defaults.  Measured (docs/MODELS.md): after the
# fixing, the real district closes in 3 nodes without restarts (2-3 s) but spends 6-8 s in a cascade of a
# dozen root restarts with them; the synthetic cities need 40-550 nodes without restarts and close at the
# root with them.
_FIRST_PASS_NODES = 16
# ... and only when the number of options left free by reduced-cost fixing lies between these: on larger
# models a repeated root (LP and cuts) costs more than the first pass can save; on tiny ones root restarts are
# cheap and close the model sooner (the demo, 69 free options: 19-25 ms with restarts, 28-38 ms without).
_FIRST_PASS_MIN_FREE = 100
_FIRST_PASS_MAX_FREE = 2000


def _highs_staged(milp: _Milp, start, time_limit_s, mip_rel_gap, threads, seed) -> _Result:
    """The default HiGHS path: LP relaxation, incumbent, reduced-cost fixing, then the integer program.

    1. Solve the LP relaxation (bound ``z_lp`` in the solver's minimising form, reduced costs ``d``).
    2. Incumbent: the better of the warm start and an exact solve restricted to the options the LP uses
       or the warm start chooses (small: a few dozen options on the pipeline instances).
    3. Reduced-cost fixing: an option at 0 in the LP with ``d_j > z_inc - z_lp`` cannot be part of any plan
       better than the incumbent (every such plan costs at least ``z_lp + d_j`` in the minimising form), so
       its upper bound becomes 0 (reduced-cost fixing: H. Crowder, E. L. Johnson and M. Padberg, "Solving
       large-scale zero-one linear programming problems", Operations Research 31(5), 1983,
       DOI 10.1287/opre.31.5.803; reference from memory, the method is textbook material).
    4. Solve the fixed model: when ``_FIRST_PASS_MIN_FREE`` to ``_FIRST_PASS_MAX_FREE`` options are left
       free, first without root restarts for at most ``_FIRST_PASS_NODES`` nodes; if it is still open (or
       the pass was skipped), with HiGHS's defaults from the best plan so far.  Steps 2 and 4 switch
       HiGHS's feasibility jump heuristic off whenever they pass in a feasible plan.

    Every plan the fixing removes is worse than the incumbent, so ``min(bound of the fixed model, z_inc)``
    and ``z_lp`` are lower bounds of the full model; the larger is reported.  All steps are deterministic
    (node limits, not time limits, choose the path) and share ``time_limit_s``.
    """
    import highspy

    t_end = time.perf_counter() + float(time_limit_s)

    def left():
        return max(0.05, t_end - time.perf_counter())

    def new(m, feasible_start):
        h = _highs_new(m, mip_rel_gap, threads, seed=seed)
        if feasible_start is not None:
            # HiGHS's feasibility jump heuristic hunts for a first feasible point (B. Luteberget and G. Sartor,
            # "Feasibility Jump: an LP-free Lagrangian MIP heuristic", Mathematical Programming Computation,
            # 2023, DOI 10.1007/s12532-023-00234-8; reference from memory); a feasible plan is passed in, so it
            # only costs time (demo: 10-15 ms of a 45 ms solve; no change on the larger instances)
            h.setOptionValue("mip_heuristic_run_feasibility_jump", False)
        return h

    n, nv = milp.n_x, len(milp.obj)
    lp = _highs_new(milp, mip_rel_gap, threads, relax=True, seed=seed)
    lp.setOptionValue("time_limit", left())
    if lp.run() == highspy.HighsStatus.kError or lp.getModelStatus() != highspy.HighsModelStatus.kOptimal:
        return _highs_run(new(milp, None), start, left())  # no LP certificate to work from: the plain solve decides
    sol = lp.getSolution()
    x_lp, d = np.asarray(sol.col_value)[:n], np.asarray(sol.col_dual)[:n]
    z_lp = float(lp.getInfo().objective_function_value)

    inc = None
    if start is not None and len(start[0]) == nv:
        v = np.zeros(nv)
        v[start[0]] = start[1]
        inc = v if _satisfies(milp, v) else None
    keep = np.r_[x_lp > 1e-6, np.ones(nv - n, bool)]
    if start is not None:
        idx, val = np.asarray(start[0]), np.asarray(start[1])
        keep[idx[(idx < n) & (val > 0.5)]] = True
    r = _highs_run(new(replace(milp, col_hi=np.where(keep, milp.col_hi, 0.0)), inc), start,
                   min(left(), max(1.0, 0.1 * float(time_limit_s))))
    from_solver = False  # the incumbent is a solver's plan, not the warm start
    if r.values is not None and _satisfies(milp, r.values) and (inc is None or milp.obj @ r.values < milp.obj @ inc):
        inc, from_solver = r.values, True

    fixed, first = milp, start
    if inc is not None:
        z_inc = float(milp.obj @ inc)
        if z_inc - z_lp <= mip_rel_gap * max(abs(z_inc), _TINY):
            return _Result(inc, z_inc, z_lp, "optimal", "the LP bound meets the incumbent")
        drop = (x_lp <= 1e-9) & (d > z_inc - z_lp + 1e-6 * (1.0 + abs(z_lp)))
        fixed = replace(milp, col_hi=np.where(np.r_[drop, np.zeros(nv - n, bool)], 0.0, milp.col_hi))
        first = (np.arange(nv), inc)

    def merged(res):
        if inc is None:
            return res
        vals = res.values
        if vals is None or not _satisfies(milp, vals) or milp.obj @ vals > z_inc + 1e-9 * (1.0 + abs(z_inc)):
            # a warm start the solvers could not improve goes back as no solver plan ('greedy_only')
            vals = inc if from_solver else None
        dual = max(z_lp, min(res.dual, z_inc))
        return _Result(vals, _INF if vals is None else float(milp.obj @ vals), dual, res.status, res.detail,
                       int(drop.sum()))

    if _FIRST_PASS_MIN_FREE <= np.count_nonzero(fixed.col_hi[:n] > 0) <= _FIRST_PASS_MAX_FREE:
        h = new(fixed, first)
        h.setOptionValue("mip_allow_restart", False)
        h.setOptionValue("mip_max_nodes", _FIRST_PASS_NODES)
        res = _highs_run(h, first, left())
        if h.getModelStatus() != highspy.HighsModelStatus.kSolutionLimit:  # closed, or out of time
            return merged(res)
        if res.values is not None and _satisfies(milp, res.values):
            first = (np.arange(nv), res.values)
    return merged(_highs_run(new(fixed, first), first, left()))


def _pulp_problem(milp: _Milp, name="siting"):
    import pulp

    prob = pulp.LpProblem(name, pulp.LpMinimize)
    nv = len(milp.obj)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)  # PuLP 3.3 announces a 4.0 variable API
        vs = [
            pulp.LpVariable(f"x{j}" if j < milp.n_x else f"v{j}", lowBound=milp.col_lo[j], upBound=milp.col_hi[j],
                            cat=pulp.LpInteger if milp.integer[j] else pulp.LpContinuous)
            for j in range(nv)
        ]
    nz = np.flatnonzero(milp.obj)
    prob += pulp.LpAffineExpression([(vs[j], float(milp.obj[j])) for j in nz])
    A = milp.A
    for r in range(A.shape[0]):
        sl = slice(A.indptr[r], A.indptr[r + 1])
        expr = pulp.LpAffineExpression([(vs[j], float(v)) for j, v in zip(A.indices[sl], A.data[sl])])
        lo, hi = milp.row_lo[r], milp.row_hi[r]
        if np.isfinite(lo) and np.isfinite(hi) and lo == hi:
            prob += pulp.LpConstraint(expr, pulp.LpConstraintEQ, f"r{r}", hi)
            continue
        if np.isfinite(hi):
            prob += pulp.LpConstraint(expr, pulp.LpConstraintLE, f"r{r}", hi)
        if np.isfinite(lo):
            prob += pulp.LpConstraint(expr, pulp.LpConstraintGE, f"r{r}g", lo)
    return prob, vs


def _cbc_run(milp: _Milp, start, time_limit_s, mip_rel_gap, threads, seed=0) -> _Result:
    import pulp

    prob, vs = _pulp_problem(milp)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)  # the bundled-binary class is kept for its path
        solver = pulp.PULP_CBC_CMD(msg=False)
    with tempfile.TemporaryDirectory(prefix="siting_cbc_") as tmp:
        mps, sol, mst = (os.path.join(tmp, f) for f in ("m.mps", "m.sol", "m.mst"))
        vs_, vnames, cnames, _ = prob.writeMPS(mps, rename=1)
        args = [solver.path, mps, "-sec", f"{float(time_limit_s):g}", "-ratio", f"{float(mip_rel_gap):g}",
                "-randomSeed", str(int(seed) + 1), "-randomCbcSeed", str(int(seed) + 1)]
        if threads is not None:
            args += ["-threads", str(int(threads))]
        if start is not None:
            idx, val = start
            full = np.zeros(len(vs))
            full[idx] = val
            for v, x in zip(vs, full):
                v.setInitialValue(float(x), check=False)
            solver.writesol(mst, prob, vs_, vnames, cnames)
            args += ["-mips", mst]
        args += ["-solve", "-solution", sol]
        proc = subprocess.Popen(args, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL,
                                text=True)
        try:
            out, _ = proc.communicate(timeout=float(time_limit_s) * 1.05 + 5.0)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.communicate()
            return _Result(None, _INF, -_INF, "killed", "CBC stopped by the hard timer")
        if not os.path.exists(sol):
            return _Result(None, _INF, -_INF, "other", out[-300:])
        with open(sol) as f:
            head = f.readline()
        status, values, *_ = solver.readsol_MPS(sol, prob, vs_, vnames, cnames)
    words = head.split()
    # the first line says how CBC stopped, e.g. "Optimal - objective value -12.0",
    # "Stopped on time - objective value -10.0", "Infeasible - objective value ...",
    # "Stopped on time - no integer solution"
    has_sol = "objective value" in head and not head.startswith("Infeasible") and "no integer" not in head
    x = np.array([values.get(v.name, 0.0) for v in vs]) if has_sol else None
    primal = float(words[-1]) if has_sol else _INF
    dual = -_INF
    for line in out.splitlines():
        low = line.lower()
        if low.startswith("lower bound:") or low.startswith("best possible:"):
            try:
                dual = float(line.split(":")[1].split()[0])
            except (ValueError, IndexError):
                pass
    if head.startswith("Optimal"):
        return _Result(x, primal, primal, "optimal", head.strip())
    if head.startswith("Infeasible") or head.startswith("Integer infeasible"):
        return _Result(None, _INF, _INF, "infeasible", head.strip())
    return _Result(x, primal, dual, "time_limit", head.strip())


# ----------------------------------------------------------------------------------------------------
# greedy and local search (on the reduced instance)
# ----------------------------------------------------------------------------------------------------


def _conflict_adj(site, conflicts, n_sites):
    if len(conflicts) == 0:
        return None
    a, b = conflicts[:, 0], conflicts[:, 1]
    keep = (a < n_sites) & (b < n_sites)
    a, b = a[keep], b[keep]
    return sp.csr_array((np.ones(2 * len(a), bool), (np.r_[a, b], np.r_[b, a])), shape=(n_sites, n_sites))


class _Greedy:
    """Lazy greedy (Minoux's accelerated evaluation) and swap local search on a reduced instance."""

    def __init__(self, C, w, c, site, budget, max_count, conflicts):
        self.C, self.w, self.c = C, w, c
        self.n = C.shape[0]
        self.lookup, self.sidx = np.unique(site, return_inverse=True) if len(site) else (np.zeros(0, int), np.zeros(0, int))
        ns = len(self.lookup)
        cf = np.zeros((0, 2), np.int64)
        if len(conflicts) and ns:
            known = np.isin(conflicts, self.lookup).all(axis=1)
            cf = np.searchsorted(self.lookup, conflicts[known])
        self.adj = _conflict_adj(self.sidx, cf, ns)
        self.ns = ns
        self.budget, self.max_count = budget, max_count
        self.scale = max(float(c.max()) if len(c) else 1.0, 1.0) * 1e-9

    def value(self, chosen):
        if len(chosen) == 0:
            return 0.0
        cov = np.zeros(self.C.shape[1], bool)
        cov[self.C[np.asarray(chosen)].indices] = True
        return float(self.w[cov].sum())

    def _key(self, gain, j):
        if self.budget is not None:
            return gain / (self.c[j] + self.scale)
        return gain

    def run(self, start=()):
        C, w, c = self.C, self.w, self.c
        chosen = list(start)
        covered = np.zeros(C.shape[1], bool)
        site_used = np.zeros(self.ns, bool)
        blocked = np.zeros(self.ns, bool)
        spent = 0.0
        for j in chosen:
            covered[C.indices[C.indptr[j]:C.indptr[j + 1]]] = True
            site_used[self.sidx[j]] = True
            spent += c[j]
        if self.adj is not None and chosen:
            blocked |= (self.adj @ site_used.astype(float)) > 0
        if self.max_count is not None and len(chosen) >= self.max_count:
            return chosen
        wcov = np.where(covered, 0.0, w)
        gains = C.astype(np.float64) @ wcov
        cand = np.flatnonzero((gains > 0) & ~site_used[self.sidx] & ~blocked[self.sidx])
        keys = gains[cand] / (c[cand] + self.scale) if self.budget is not None else gains[cand]
        # heap of (-key, cost, index): ties toward lower cost, then lower index (deterministic)
        heap = list(zip((-keys).tolist(), c[cand].tolist(), cand.tolist()))
        heapq.heapify(heap)
        budget = self.budget
        while heap:
            negk, cj, j = heapq.heappop(heap)
            s = self.sidx[j]
            if site_used[s] or blocked[s] or (budget is not None and spent + cj > budget * (1 + 1e-12) + 1e-12):
                continue  # never becomes feasible again
            idx = C.indices[C.indptr[j]:C.indptr[j + 1]]
            g = float(w[idx][~covered[idx]].sum())
            if g <= 0:
                continue
            k = self._key(g, j)
            if heap and -heap[0][0] > k * (1 + 1e-12):
                heapq.heappush(heap, (-k, cj, j))
                continue
            chosen.append(j)
            covered[idx] = True
            site_used[s] = True
            spent += cj
            if self.adj is not None:
                blocked[self.adj.indices[self.adj.indptr[s]:self.adj.indptr[s + 1]]] = True
            if self.max_count is not None and len(chosen) >= self.max_count:
                break
        return chosen

    def best_single(self):
        tot = self.C.astype(float) @ self.w
        ok = np.ones(self.n, bool) if self.budget is None else self.c <= self.budget
        if self.max_count == 0 or not ok.any():
            return []
        t = np.where(ok, tot, -1.0)
        best = t.max()
        if best <= 0:
            return []
        j = np.flatnonzero(t == best)
        j = j[np.lexsort((j, self.c[j]))][0]
        return [int(j)]

    def khuller(self):
        g = self.run()
        s = self.best_single()
        return s if self.value(s) > self.value(g) else g

    def local_search(self, chosen, max_rounds=50, time_limit_s=10.0):
        """Best-improvement swaps (one chosen option out, one unchosen in) while the covered weight grows."""
        C, w, c = self.C, self.w, self.c
        chosen = list(chosen)
        if not chosen or self.n == 0:
            return chosen
        Cf = C.astype(np.float64)
        t0 = time.perf_counter()
        total_w = max(float(w.sum()), _TINY)
        for _ in range(max_rounds):
            if time.perf_counter() - t0 > time_limit_s:
                break
            ch = np.asarray(chosen)
            cnt = np.asarray(Cf[ch].sum(axis=0)).ravel()
            w0 = np.where(cnt == 0, w, 0.0)
            w1 = np.where(cnt == 1, w, 0.0)
            G0 = Cf @ w0  # gain of adding a to the plan as it is
            Csub = Cf[ch]
            E = Csub @ w1  # exclusive weight of each chosen option
            M = (Cf @ sp.diags_array(w1) @ Csub.T).toarray()  # weight a re-covers of r's exclusive users
            gain = G0[:, None] + M - E[None, :]
            # feasibility of swapping r (column) out for a (row) in
            su = np.zeros(self.ns, bool)
            su[self.sidx[ch]] = True
            sa = self.sidx
            feas = (~su[sa])[:, None] | (sa[:, None] == self.sidx[ch][None, :])
            feas[ch, :] = False
            if self.adj is not None:
                nconf = self.adj @ su.astype(float)
                pair = self.adj[sa][:, self.sidx[ch]].toarray().astype(float)
                feas &= (nconf[sa][:, None] - pair) <= 0
            if self.budget is not None:
                spent = c[ch].sum()
                feas &= (spent - c[ch][None, :] + c[:, None]) <= self.budget * (1 + 1e-12) + 1e-12
            gain = np.where(feas, gain, -_INF)
            a, r = np.unravel_index(np.argmax(gain), gain.shape)
            if gain[a, r] <= 1e-9 * total_w:
                break
            chosen[r] = int(a)
            chosen = self.run(chosen)  # fill any slack the swap left
        return chosen


def _greedy_plan(red: _Reduced, budget, max_count, local=True, ls_time_s=10.0):
    g = _Greedy(red.C, red.w * red.mult if red.cap is not None else red.w, red.c, red.site, budget, max_count,
                red.conflicts)
    ch = g.khuller()
    if local:
        ch = g.local_search(ch, time_limit_s=ls_time_s)
    return np.asarray(sorted(ch), np.int64), g


# ----------------------------------------------------------------------------------------------------
# plan assembly
# ----------------------------------------------------------------------------------------------------


def _covered_users(inst: _Instance, chosen: np.ndarray) -> np.ndarray:
    cov = np.zeros(inst.C.shape[1], bool)
    if len(chosen):
        cov[inst.C[chosen].indices] = True
    return cov


def _capped_served(inst: _Instance, red: _Reduced, chosen_red: np.ndarray, z: np.ndarray | None) -> np.ndarray:
    """Users served under a load cap: from the solver's assignment z, or by a greedy assignment."""
    C = red.C
    n_cls = C.shape[1]
    served_cls = np.zeros(n_cls)
    if z is not None:
        served_cls = np.bincount(C.indices, weights=np.round(z), minlength=n_cls)
    elif len(chosen_red):
        # greedy assignment: users by descending weight to the covering surface with most room
        room = {int(j): float(red.cap[j]) for j in chosen_red}
        Cc = sp.csc_array(C[:, :][chosen_red])
        for i in np.argsort(-red.w, kind="stable"):
            rows = chosen_red[Cc.indices[Cc.indptr[i]:Cc.indptr[i + 1]]]
            for _ in range(int(red.mult[i])):
                best = max(rows, key=lambda j: room[int(j)], default=None)
                if best is None or room[int(best)] + 1e-9 < red.w[i]:
                    break
                room[int(best)] -= red.w[i]
                served_cls[i] += 1
    served = np.zeros(inst.C.shape[1], bool)
    uc = red.user_class
    ok = uc >= 0
    order = np.flatnonzero(ok)
    cls = uc[order]
    srt = np.argsort(cls, kind="stable")
    order, cls = order[srt], cls[srt]
    first = np.searchsorted(cls, cls)
    rank_in = np.arange(len(cls)) - first
    served[order[rank_in < served_cls[cls]]] = True
    return served


def _message(mode, status, objective, bound, gap, cost, n, total, solver, target=None, reason=""):
    share = objective / total if total > 0 else 0.0
    if n == 0 and reason:
        return f"No surface is placed: {reason}."
    what = (f"{n} surface(s) costing {cost:g} cover weight {objective:g} ({100 * share:.1f} % of the weight "
            f"that no base station covers directly)")
    if mode == "min_cost":
        what = f"The cheapest plan found to cover weight {target:g}: " + what
    if status == "optimal":
        return f"{what}; proven optimal by {solver} (gap {100 * gap:.3g} %)."
    if status == "time_limit":
        return f"{what}; the time limit stopped {solver} with a proven gap of {100 * gap:.3g} % (bound {bound:g})."
    if status == "greedy_only":
        return (f"{what}; {solver} found nothing better than the greedy plan within the time limit "
                f"(proven bound {bound:g}, gap {100 * gap:.3g} %).")
    return f"{what}; solver status {status}."


def _finish_gap(mode, objective, cost, bound):
    if mode == "max_coverage":
        bound = max(bound, objective)
        return bound, (bound - objective) / max(bound, _TINY) if bound > 0 else 0.0
    bound = min(bound, cost)
    return bound, (cost - bound) / max(cost, _TINY) if cost > 0 else 0.0


def _solve(inst: _Instance, mode, target, solver, time_limit_s, mip_rel_gap, reduce, warm_start, threads, seed):
    t = {}
    t0 = time.perf_counter()
    if solver not in ("highs", "cbc"):
        raise SitingError(f"optimiser argument 'solver': expected 'highs' or 'cbc', got {solver!r}")
    if not (np.isfinite(time_limit_s) and time_limit_s > 0):
        raise SitingError(f"optimiser argument 'time_limit_s': expected a positive number, got {time_limit_s!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or not 0 <= seed < 2**31:
        raise SitingError(f"optimiser argument 'solver_seed': expected an integer from 0 to 2**31 - 1, got {seed!r}")
    red = _reduce(inst, reduce)
    t["reduce"] = time.perf_counter() - t0
    raw_size = _raw_size(inst)
    total_w = float(inst.w.sum())
    empty = np.zeros(0, np.int64)
    base = dict(solver=solver, timings_s=t, mode="min_cost" if mode == "min" else "max_coverage")

    def plan_from(chosen_red, status, bound_raw, greedy_obj, solver_name, z=None, milp=None, reason=""):
        chosen = red.opt[chosen_red] if len(chosen_red) else empty
        if inst.load_cap is not None:
            covered = _capped_served(inst, red, chosen_red, z)
        else:
            covered = _covered_users(inst, chosen)
        objective = float(inst.w[covered].sum())
        cost = float(inst.c[chosen].sum()) if len(chosen) else 0.0
        m = base["mode"]
        bound, gap = _finish_gap(m, objective, cost, bound_raw)
        if status == "optimal" and gap > max(mip_rel_gap, 1e-9) * 1.0001:
            status = "time_limit"
        if len(chosen):
            rk = rank_chosen(chosen, inst.C, inst.w)
            chosen = rk["option"].to_numpy(np.int64)
        if len(chosen) == 0 and status == "optimal" and not reason:
            reason = ("the target is already met without surfaces" if m == "min_cost"
                      else "no affordable option adds covered weight")
        msg = _message(m, status, objective, bound, gap, cost, len(chosen), total_w, solver_name, target, reason)
        size = {"raw": raw_size, "reduced": milp.size if milp is not None else {"rows": 0, "cols": 0, "nonzeros": 0}}
        size.update(red.stats)
        size["components"] = _components(red) if reduce else None
        t["total"] = time.perf_counter() - t0
        return Plan(chosen, covered, objective, float(bound), float(gap), status, solver_name, cost,
                    float(greedy_obj), msg, size, t, m)

    n, m = red.C.shape
    if mode == "min" and target <= 1e-9 * total_w:  # zero within floating-point noise of the total weight
        return plan_from(empty, "optimal", 0.0, 0.0, solver, reason="the target weight is already met")
    if n == 0 or m == 0:
        if mode == "min":
            raise SolverError(
                f"no plan can cover the target weight {target:g}: no candidate option covers a user who needs "
                f"coverage; lower the target or add candidate spots"
            )
        return plan_from(empty, "empty", 0.0, 0.0, solver,
                         reason="no candidate option covers any user who still needs coverage")
    if mode == "max" and inst.max_count == 0:
        return plan_from(empty, "optimal", 0.0, 0.0, solver, reason="the panel count is 0")
    if mode == "max" and inst.budget is not None and red.c.min() > inst.budget:
        return plan_from(empty, "optimal", 0.0, 0.0, solver,
                         reason=f"the budget {inst.budget:g} is below the cheapest useful option ({red.c.min():g})")
    model_target = target
    if mode == "min":
        # any plan that covers some weight covers at least the smallest positive user weight, so a smaller
        # target is the same target; raising it keeps the target row far above the solvers' feasibility
        # tolerances (a target of 1e-6 was met within tolerance by a point covering nobody)
        model_target = max(target, float(inst.w[inst.w > 0].min()))

    # warm start
    t1 = time.perf_counter()
    greedy_red = np.zeros(0, np.int64)
    greedy_obj = 0.0
    if warm_start:
        if mode == "max":
            greedy_red, g = _greedy_plan(red, inst.budget, inst.max_count, ls_time_s=max(1.0, 0.1 * time_limit_s))
        else:
            greedy_red, g = _min_cost_greedy(red, model_target, inst.budget, inst.max_count)
        if len(greedy_red):
            if inst.load_cap is not None:
                greedy_obj = float(inst.w[_capped_served(inst, red, greedy_red, None)].sum())
            else:
                greedy_obj = float(inst.w[_covered_users(inst, red.opt[greedy_red])].sum())
        if mode == "min" and greedy_obj < model_target * (1 - 1e-12):
            greedy_red = None  # greedy could not reach the target: no usable start
    t["greedy"] = time.perf_counter() - t1

    t2 = time.perf_counter()
    milp = _build(red, inst.budget, inst.max_count, mode="max" if mode == "max" else "min", target=model_target)
    t["build"] = time.perf_counter() - t2
    start = _start_vector(red, milp, greedy_red) if (warm_start and greedy_red is not None and len(greedy_red)) else None
    t3 = time.perf_counter()
    if solver == "cbc":
        res = _cbc_run(milp, start, time_limit_s, mip_rel_gap, threads, seed)
    elif reduce:
        res = _highs_staged(milp, start, time_limit_s, mip_rel_gap, threads, seed)
    else:
        res = _highs_run(_highs_new(milp, mip_rel_gap, threads, seed=seed), start, time_limit_s)
    t["solve"] = time.perf_counter() - t3
    red.stats["options_fixed_by_lp"] = res.n_fixed
    return _plan_from_result(res, red, milp, greedy_red, greedy_obj, plan_from, mode, target, solver, time_limit_s)


def _satisfies(milp: _Milp, x, tol=1e-6) -> bool:
    """The point meets the model's bounds, rows and integrality (within solver tolerances)."""
    x = np.asarray(x, float)
    if x.shape != milp.obj.shape or not np.all(np.isfinite(x)):
        return False
    if np.any(x < milp.col_lo - tol) or np.any(x > milp.col_hi + tol):
        return False
    xi = x[milp.integer]
    if np.any(np.abs(xi - np.round(xi)) > 1e-5):
        return False
    act = milp.A @ x
    slack = tol * (1.0 + np.abs(act))
    return bool(np.all(act >= milp.row_lo - slack) and np.all(act <= milp.row_hi + slack))


def _plan_from_result(res, red, milp, greedy_red, greedy_obj, plan_from, mode, target, solver, time_limit_s):
    n = milp.n_x
    if res.values is not None and not _satisfies(milp, res.values):
        # CBC stopped inside the root LP ("Stopped on iterations") writes the LP's current point, which can break
        # the budget and the one-size-per-site rows: never a plan
        res = _Result(None, _INF, res.dual, res.status, res.detail + "; its point breaks the model and is ignored")
    if res.status in ("error", "other") and res.values is None:
        raise SolverError(f"{solver} stopped without a plan or a bound ({res.detail}); the run gives no proof, so "
                          f"no plan is reported; check the solver options (threads, time limit) or try the other "
                          f"solver ('highs' or 'cbc')")
    if res.status == "infeasible":
        if mode == "min":
            raise SolverError(
                f"no plan can cover the target weight {target:g} under the given constraints ({solver} proved the "
                f"model infeasible); lower the target, raise the budget or count, or add candidate spots"
            )
        raise SolverError(f"{solver} reported the coverage model infeasible, which should not happen; "
                          f"check the budget and count arguments")
    # bound on the plan's objective (covered weight, or cost for min-cost)
    if mode == "max":
        # without a solver bound (stopped before the root LP), the weight of every coverable user is one
        bound_raw = -res.dual + milp.delta if np.isfinite(res.dual) else float((red.w * red.mult).sum())
        if red.cap is None:
            bound_raw = min(bound_raw, float(red.w.sum()))
        if np.isfinite(bound_raw) and np.all(np.mod(red.w, 1) == 0):
            bound_raw = math.floor(bound_raw + 1e-6)  # integral weights: the bound is an integer
    else:
        bound_raw = res.dual if np.isfinite(res.dual) else 0.0
        if np.all(np.mod(red.c, 1) == 0):
            bound_raw = math.ceil(bound_raw - 1e-6)
    if res.values is not None:
        x = res.values[:n] > 0.5
        chosen_red = np.flatnonzero(x)
        z = res.values[n:] if red.cap is not None else None
        if mode == "max" and red.cap is None:
            chosen_red = _prune(red, chosen_red)
        p = plan_from(chosen_red, "optimal" if res.status == "optimal" else "time_limit", bound_raw, greedy_obj,
                      solver, z=z, milp=milp)
        # never return less than the warm start (a time-limited solver may not have used it)
        if mode == "max" and greedy_red is not None and len(greedy_red) and greedy_obj > p.objective + 1e-9:
            return plan_from(greedy_red, "greedy_only", bound_raw, greedy_obj, solver, milp=milp)
        return p
    if greedy_red is not None and len(greedy_red):
        return plan_from(greedy_red, "greedy_only", bound_raw, greedy_obj, solver, milp=milp)
    raise SolverError(
        f"{solver} found no plan within {time_limit_s:g} s ({res.detail}) and there is no warm start; "
        f"raise time_limit_s or keep warm_start=True"
    )


def _prune(red: _Reduced, chosen_red):
    """Drop chosen options that add no covered weight (most expensive first): cost goes down, coverage stays."""
    chosen = np.asarray(chosen_red, np.int64)
    if len(chosen) < 2:
        return chosen
    C = red.C
    cnt = np.bincount(C[chosen].indices, minlength=C.shape[1])  # chosen options covering each user class
    keep = np.ones(len(chosen), bool)
    for i in np.lexsort((-chosen, -red.c[chosen])):  # most expensive first
        idx = C.indices[C.indptr[chosen[i]]:C.indptr[chosen[i] + 1]]
        if np.all(cnt[idx] > 1) or red.w[idx].sum() == 0:
            keep[i] = False
            cnt[idx] -= 1
    return np.sort(chosen[keep])


def _min_cost_greedy(red: _Reduced, target, budget, max_count):
    """Ratio greedy until the target weight is reached, then drop redundant options, most expensive first."""
    w = red.w * red.mult if red.cap is not None else red.w
    g = _Greedy(red.C, w, red.c, red.site, _INF, None, red.conflicts)  # infinite budget: weight-per-cost keys
    order = g.run()
    chosen = []
    covered = np.zeros(red.C.shape[1], bool)
    got = 0.0
    for j in order:
        if got >= target * (1 - 1e-12):
            break
        idx = red.C.indices[red.C.indptr[j]:red.C.indptr[j + 1]]
        got += float(w[idx][~covered[idx]].sum())
        covered[idx] = True
        chosen.append(j)
    if got < target * (1 - 1e-12):
        return np.zeros(0, np.int64), g
    for j in sorted(chosen, key=lambda j: (-red.c[j], -j)):
        rest = [k for k in chosen if k != j]
        if g.value(rest) >= target * (1 - 1e-12):
            chosen = rest
    if (budget is not None and red.c[chosen].sum() > budget) or (max_count is not None and len(chosen) > max_count):
        return np.zeros(0, np.int64), g
    return np.asarray(sorted(chosen), np.int64), g


def _raw_size(inst: _Instance):
    n, m = inst.C.shape
    site_multi = np.bincount(np.unique(inst.site, return_inverse=True)[1]) if n else np.zeros(0)
    rows = m + int((site_multi > 1).sum()) + len(inst.conflicts) + (inst.budget is not None) + (inst.max_count is not None)
    return {"rows": rows, "cols": n + m, "nonzeros": int(inst.C.nnz + m)}


# ----------------------------------------------------------------------------------------------------
# public API
# ----------------------------------------------------------------------------------------------------


def solve_coverage(cover, weight, cost, option_site, *, budget=None, max_count=None, conflicts=None, load_cap=None,
                   option_wall=None, solver="highs", time_limit_s=60.0, mip_rel_gap=1e-4, reduce=True,
                   warm_start=True, threads=None, solver_seed=0) -> Plan:
    """Choose options to maximise the covered user weight within a budget and/or a panel count.

    Parameters
    ----------
    cover : scipy.sparse matrix, bool, shape (n_options, n_users)
        ``cover[j, i]``: option j brings user i to the SNR target.
    weight : (n_users,) demand weight of each user, >= 0.
    cost : (n_options,) option cost [currency units], >= 0.
    option_site : (n_options,) site index of each option; at most one option per site is chosen.
    budget : total cost limit [currency units], or None.
    max_count : limit on the number of panels, or None.
    conflicts : (k, 2) int array of SITE pairs that may not both be chosen (spacing on a wall).
    load_cap : weight one surface may carry (scalar, or one value per option); builds assignment variables.
    option_wall : (n_options,) wall id; when given, conflicts are checked to join spots on one wall.
    solver : 'highs' (default, model passed to highspy as arrays) or 'cbc' (through PuLP, hard timer).
    time_limit_s : solver wall-clock limit [s].
    mip_rel_gap : relative gap at which the solver stops and reports optimal.
    reduce : apply the optimum-preserving reductions of the module docstring and, with HiGHS, the staged
        solve (LP, incumbent, reduced-cost fixing); ``False`` passes the raw model to the solver as is.
    warm_start : start from greedy + swap local search.
    threads : solver threads (None: solver default).
    solver_seed : the solver's random seed; the same seed gives the same plan (solve times can differ a lot
        between seeds, see docs/MODELS.md).

    Returns
    -------
    Plan
        See :class:`Plan`; ``chosen`` in rank order.  Without budget and count every useful option may
        be chosen (one per site).
    """
    inst = _validate(cover, weight, cost, option_site, budget, max_count, conflicts, load_cap, option_wall)
    return _solve(inst, "max", None, solver, time_limit_s, mip_rel_gap, reduce, warm_start, threads, solver_seed)


def min_cost_cover(cover, weight, cost, option_site, target_weight, *, budget=None, max_count=None, conflicts=None,
                   load_cap=None, option_wall=None, solver="highs", time_limit_s=60.0, mip_rel_gap=1e-4, reduce=True,
                   warm_start=True, threads=None, solver_seed=0) -> Plan:
    """Cheapest set of options covering at least ``target_weight`` of user weight.

    Same arguments as :func:`solve_coverage`; ``Plan.mode == 'min_cost'`` and ``Plan.bound`` is a proven
    lower bound on the cost.  Raises :class:`SolverError` when no plan can reach the target.  A target at
    or below 1e-9 of the total weight counts as met by the empty plan.
    """
    inst = _validate(cover, weight, cost, option_site, budget, max_count, conflicts, load_cap, option_wall)
    if not np.isscalar(target_weight) or not np.isfinite(target_weight):
        raise SitingError(f"optimiser argument 'target_weight': expected a finite number, got {target_weight!r}")
    return _solve(inst, "min", float(target_weight), solver, time_limit_s, mip_rel_gap, reduce, warm_start, threads,
                  solver_seed)


def budget_sweep(cover, weight, cost, option_site, budgets, *, max_count=None, conflicts=None, load_cap=None,
                 option_wall=None, solver="highs", time_limit_s=60.0, mip_rel_gap=1e-4, reduce=True,
                 warm_start=True, threads=None, solver_seed=0) -> pd.DataFrame:
    """Covered weight against budget, for the report's curve.

    Budgets are solved in increasing order on one HiGHS model (only the budget row changes), each
    warm-started from the better of the previous plan (still feasible under a larger budget) and greedy.
    ``time_limit_s`` applies to each budget.

    Returns
    -------
    DataFrame with columns budget, covered_weight, bound, gap, cost, n_sites, status (in the caller's
    budget order).
    """
    b = np.asarray(budgets, float).ravel()
    if b.size == 0:
        return pd.DataFrame(columns=["budget", "covered_weight", "bound", "gap", "cost", "n_sites", "status"])
    if not np.all(np.isfinite(b)) or b.min() < 0:
        raise SitingError(f"optimiser argument 'budgets': expected finite numbers >= 0, got {b.tolist()}")
    order = np.argsort(b, kind="stable")
    rows = [None] * len(b)
    same = dict(max_count=max_count, conflicts=conflicts, load_cap=load_cap, option_wall=option_wall)
    if solver != "highs" or b[order[-1]] == 0:
        for k in order:
            p = solve_coverage(cover, weight, cost, option_site, budget=float(b[k]), solver=solver,
                               time_limit_s=time_limit_s, mip_rel_gap=mip_rel_gap, reduce=reduce,
                               warm_start=warm_start, threads=threads, solver_seed=solver_seed, **same)
            rows[k] = (b[k], p.objective, p.bound, p.gap, p.cost, len(p.chosen), p.status)
    else:
        # build once with the largest budget, then lower the row bound per budget
        inst = _validate(cover, weight, cost, option_site, float(b[order[-1]]), max_count, conflicts, load_cap,
                         option_wall)
        red = _reduce(inst, reduce)
        milp = _build(red, inst.budget, inst.max_count) if red.C.shape[0] and red.C.shape[1] else None
        h = _highs_new(milp, mip_rel_gap, threads, seed=solver_seed) if milp is not None else None
        prev = np.zeros(0, np.int64)
        for k in order:
            inst_k = _Instance(inst.C, inst.w, inst.c, inst.site, float(b[k]), inst.max_count, inst.conflicts,
                               inst.load_cap)
            if h is None or red.c.min() > b[k] or inst.max_count == 0:
                rows[k] = (b[k], 0.0, 0.0, 0.0, 0.0, 0, "empty")
                continue
            g_red, _ = _greedy_plan(red, float(b[k]), inst.max_count) if warm_start else (np.zeros(0, np.int64), None)
            gval = _value_red(red, inst_k, g_red)
            pval = _value_red(red, inst_k, prev)
            st = prev if pval >= gval and len(prev) else g_red
            h.changeRowBounds(milp.budget_row, -_highs_inf(), float(b[k]))
            milp.row_hi[milp.budget_row] = float(b[k])
            start = _start_vector(red, milp, st) if len(st) else None
            res = _highs_run(h, start, time_limit_s)

            def plan_from(chosen_red, status, bound_raw, greedy_obj, solver_name, z=None, milp=None, _i=inst_k):
                return _sweep_plan(_i, red, chosen_red, status, bound_raw, greedy_obj, solver_name, z, mip_rel_gap)

            p = _plan_from_result(res, red, milp, g_red, max(gval, 0.0), plan_from, "max", None, "highs", time_limit_s)
            prev = np.searchsorted(red.opt, p.chosen) if len(p.chosen) else prev
            rows[k] = (b[k], p.objective, p.bound, p.gap, p.cost, len(p.chosen), p.status)
    return pd.DataFrame(rows, columns=["budget", "covered_weight", "bound", "gap", "cost", "n_sites", "status"])


def _highs_inf():
    import highspy

    return highspy.kHighsInf


def _value_red(red, inst, chosen_red):
    if len(chosen_red) == 0:
        return 0.0
    if inst.load_cap is not None:
        return float(inst.w[_capped_served(inst, red, chosen_red, None)].sum())
    return float(inst.w[_covered_users(inst, red.opt[chosen_red])].sum())


def _sweep_plan(inst, red, chosen_red, status, bound_raw, greedy_obj, solver_name, z, mip_rel_gap):
    chosen = red.opt[chosen_red] if len(chosen_red) else np.zeros(0, np.int64)
    covered = _capped_served(inst, red, chosen_red, z) if inst.load_cap is not None else _covered_users(inst, chosen)
    objective = float(inst.w[covered].sum())
    cost = float(inst.c[chosen].sum()) if len(chosen) else 0.0
    bound, gap = _finish_gap("max_coverage", objective, cost, bound_raw)
    if status == "optimal" and gap > max(mip_rel_gap, 1e-9) * 1.0001:
        status = "time_limit"
    if len(chosen) == 0 and status == "optimal":
        status = "empty"
    return Plan(chosen, covered, objective, bound, gap, status, solver_name, cost, greedy_obj, "", {}, {})


def greedy(cover, weight, cost, option_site, *, budget=None, max_count=None, conflicts=None,
           local_search=True) -> np.ndarray:
    """Greedy plan: the better of the cost-effectiveness greedy and the best single option, then swaps.

    Khuller, Moss and Naor, "The budgeted maximum coverage problem", Information Processing Letters 70(1),
    1999, DOI 10.1016/S0020-0190(99)00031-9: picking by marginal weight per cost (skipping options that no
    longer fit) and returning the better of that and the best single option.  With ``local_search`` the
    plan is then improved by best-improvement swaps (one chosen option out, one unchosen in) while the
    covered weight grows.  Returns the chosen option indices, sorted.
    """
    inst = _validate(cover, weight, cost, option_site, budget, max_count, conflicts)
    red = _reduce(inst, True)
    if red.C.shape[0] == 0 or red.C.shape[1] == 0:
        return np.zeros(0, np.int64)
    ch, _ = _greedy_plan(red, inst.budget, inst.max_count, local=local_search)
    return np.sort(red.opt[ch]).astype(np.int64)


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


def lp_relaxation_bound(cover, weight, cost, option_site, *, budget=None, max_count=None, conflicts=None,
                        load_cap=None, reduce=True) -> float:
    """Optimum of the LP relaxation of the maximum-coverage model: an upper bound on any plan's covered weight."""
    inst = _validate(cover, weight, cost, option_site, budget, max_count, conflicts, load_cap)
    red = _reduce(inst, reduce)
    if red.C.shape[0] == 0 or red.C.shape[1] == 0:
        return 0.0
    milp = _build(red, inst.budget, inst.max_count)
    milp.obj[: milp.n_x] -= milp.eps * red.c  # drop the tie-break term: pure covered weight
    h = _highs_new(milp, 1e-9, None, relax=True)
    h.run()
    return float(-h.getInfo().objective_function_value)


def write_lp(path, cover, weight, cost, option_site, *, budget=None, max_count=None, conflicts=None, load_cap=None,
             target_weight=None, reduce=True) -> str:
    """Write the (reduced) model as a CPLEX-LP file through PuLP, for inspection or another solver.

    Variables ``x<j>`` are the kept options in reduced numbering.  Returns the path written.
    """
    inst = _validate(cover, weight, cost, option_site, budget, max_count, conflicts, load_cap)
    red = _reduce(inst, reduce)
    mode = "max" if target_weight is None else "min"
    milp = _build(red, inst.budget, inst.max_count, mode=mode, target=target_weight)
    prob, _ = _pulp_problem(milp)
    prob.writeLP(str(path))
    return str(path)


def solve_tables(options: pd.DataFrame, coverage: pd.DataFrame, users: pd.DataFrame, direct: pd.DataFrame, *,
                 target_share=None, **kwargs) -> Plan:
    """Adapter over the pipeline tables (:mod:`siting.tables`).

    ``coverage`` rows are (option_id, user_id) pairs that meet the SNR target (the caller filters).  Users
    with ``direct.covered`` are constants: left out of the model, ``Plan.covered`` is False for them and
    ``Plan.objective`` counts surface-covered users only.  With ``target_share`` (0..1 of the total user
    weight, direct coverage included) the minimum-cost plan reaching that share is returned instead.
    Other keyword arguments go to :func:`solve_coverage` / :func:`min_cost_cover`; ``option_wall`` may be
    given as a column name of ``options``.
    """
    from .tables import check

    check(options, "options", "optimiser input")
    check(users, "users", "optimiser input")
    for col in ("option_id", "user_id"):
        if col not in coverage.columns:
            raise SitingError(f"table 'coverage' from optimiser input breaks its contract: missing column '{col}'")
    for col in ("user_id", "covered"):
        if col not in direct.columns:
            raise SitingError(f"table 'direct' from optimiser input breaks its contract: missing column '{col}'")
    n_opt, n_user = len(options), len(users)
    if not np.array_equal(options["option_id"].to_numpy(), np.arange(n_opt)):
        raise SitingError("table 'options': expected option_id == row position 0..n-1; reset the ids before solving")
    if not np.array_equal(users["user_id"].to_numpy(), np.arange(n_user)):
        raise SitingError("table 'users': expected user_id == row position 0..n-1; reset the ids before solving")
    oi = coverage["option_id"].to_numpy(np.int64)
    ui = coverage["user_id"].to_numpy(np.int64)
    if len(oi) and (oi.min() < 0 or oi.max() >= n_opt or ui.min() < 0 or ui.max() >= n_user):
        raise SitingError(
            f"table 'coverage': option_id/user_id out of range (options 0..{n_opt - 1}, users 0..{n_user - 1}); "
            f"build coverage from the same options and users tables"
        )
    dcov = np.zeros(n_user, bool)
    du = direct["user_id"].to_numpy(np.int64)
    if len(du) and (du.min() < 0 or du.max() >= n_user):
        raise SitingError(f"table 'direct': user_id out of range 0..{n_user - 1}")
    dcov[du] = direct["covered"].to_numpy(bool)
    keep = ~dcov[ui]
    cover = sp.csr_array((np.ones(int(keep.sum()), bool), (oi[keep], ui[keep])), shape=(n_opt, n_user))
    cover.sum_duplicates()
    w = users["weight"].to_numpy(float)
    wall = kwargs.pop("option_wall", None)
    if isinstance(wall, str):
        wall = options[wall].to_numpy()
    args = (cover, w, options["cost"].to_numpy(float), options["site_id"].to_numpy(np.int64))
    if target_share is not None:
        if not (0 <= float(target_share) <= 1):
            raise SitingError(f"optimiser argument 'target_share': expected a share in [0, 1], got {target_share!r}")
        need = float(target_share) * float(w.sum()) - float(w[dcov].sum())
        plan = min_cost_cover(*args, max(need, 0.0), option_wall=wall, **kwargs)
    else:
        plan = solve_coverage(*args, option_wall=wall, **kwargs)
    plan.model_size["direct_weight"] = float(w[dcov].sum())
    return plan
