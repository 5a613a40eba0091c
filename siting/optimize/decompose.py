"""Exact decomposition of maximum coverage into independent components under one shared budget or count.

When the reduced instance splits into components (connected components of the graph of options, user
classes and sites, with spacing conflicts as edges between sites: scipy.sparse.csgraph.connected_components),
the only constraint joining them is the budget row (or the panel-count row).  Then

1. each component's whole Pareto frontier of (resource, covered weight) is computed exactly: by enumerating
   its feasible option sets when there are few (one size per site, conflicts honoured), else by a sequence
   of exact solves of the component alone, each with the resource limit set just below the cost of the
   previous optimum (each solve proven optimal, ties broken toward the cheaper plan);
2. the components are combined by a multiple-choice knapsack dynamic programme over integer resource units
   (the budget in units of the greatest common divisor of the option costs, or panels), which gives, for
   every resource level at once, the most weight any plan covers, and the cheapest plan doing so (the
   programme compares (weight, cost) lexicographically, so with a panel count the cheapest plan is found,
   not the one with the fewest panels).

The result is the exact optimum (bound = objective, gap 0) for the budget and for every budget of a sweep
from one frontier computation.  The multiple-choice knapsack recursion is the textbook one (Kellerer,
Pferschy and Pisinger, "Knapsack Problems", Springer 2004, chapter 11, DOI 10.1007/978-3-540-24777-7).  When a
precondition fails (both a budget and a count, a load cap, costs that are not multiples of a common unit, too
few components, a component solve not proven within the time), :func:`solve_split` returns None and the caller
solves the whole model as before.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, replace

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from .problem import _Instance
from .reductions import _Reduced

MIN_COMPONENTS = 8  # fewer components: the whole model is solved (the split gains little)
MAX_SHARE = 0.5  # the largest component holds at most this share of the options
ENUM_MAX = 4096  # option sets enumerated per component before exact solves take over
SOLVE_MAX = 300  # options of the largest component whose frontier may come from exact solves
TIME_SHARE = 0.25  # share of the time left that the split may take before the whole model is solved instead
MAX_UNITS = 1_000_000  # resource units of the dynamic programme
MAX_TABLE_BYTES = 2_000_000_000  # choice table of the dynamic programme


@dataclass
class Frontier:
    """The frontier of one component: resource units ``k`` (ascending, ``k[0] = 0``), covered weight ``w``
    (non-decreasing), cost ``c`` and the chosen options (reduced numbering) of each point.  Each point is the
    best plan within its units in the order (most weight, then least cost); a point of equal weight is kept
    only when it is cheaper (a panel count: more panels can cost less)."""

    k: np.ndarray
    w: np.ndarray
    c: np.ndarray
    sets: list


def _better(w_new, c_new, w_old, c_old):
    """(w_new, c_new) beats (w_old, c_old): more weight, or the same weight (within 1e-9) at a lower cost."""
    tol_w = 1e-9 * np.maximum(1.0, np.abs(w_old))
    return (w_new > w_old + tol_w) | ((w_new >= w_old - tol_w) & (c_new < c_old - 1e-9 * np.maximum(1.0, np.abs(c_old))))


def component_labels(red: _Reduced) -> tuple[int, np.ndarray]:
    """(number of components, component of each reduced option): options, classes and sites as nodes; edges
    option-class (coverage), option-site, and site-site (spacing conflicts)."""
    n, m = red.C.shape
    if n == 0:
        return 0, np.zeros(0, np.int64)
    sites, site_idx = np.unique(red.site, return_inverse=True)
    ns = len(sites)
    rows = np.r_[np.arange(n), np.repeat(np.arange(n), np.diff(red.C.indptr))]
    cols = np.r_[n + m + site_idx, n + red.C.indices]
    if len(red.conflicts):
        cf = red.conflicts[np.isin(red.conflicts, sites).all(axis=1)]
        rows = np.r_[rows, n + m + np.searchsorted(sites, cf[:, 0])]
        cols = np.r_[cols, n + m + np.searchsorted(sites, cf[:, 1])]
    G = sp.csr_array((np.ones(len(rows)), (rows, cols)), shape=(n + m + ns, n + m + ns))
    _, lab = connected_components(G, directed=False)
    _, comp = np.unique(lab[:n], return_inverse=True)
    return int(comp.max()) + 1, comp.ravel().astype(np.int64)


def resource_units(inst: _Instance, red: _Reduced):
    """(integer units per reduced option, units of one unit in currency or None for a count, kind) or None.

    Budget only: option costs in cents must share a common divisor (their gcd is the unit).  Count only:
    one unit per panel.  Both limits, or neither: None.
    """
    if (inst.budget is None) == (inst.max_count is None):
        return None
    if inst.max_count is not None:
        return np.ones(len(red.c), np.int64), None, "count"
    cents = np.round(red.c * 100.0)
    if len(cents) == 0 or not np.allclose(cents / 100.0, red.c, rtol=0, atol=1e-9) or cents.min() <= 0:
        return None
    g = int(np.gcd.reduce(cents.astype(np.int64)))
    return (cents // g).astype(np.int64), g / 100.0, "budget"


def _cap_units(inst: _Instance, unit, budget) -> int:
    if unit is None:
        return int(inst.max_count)  # type: ignore[arg-type]  # count mode: max_count is set
    return int(math.floor(budget / unit + 1e-9))


def _enumerate(Cd, w, k, cost, site, conflicts):
    """Frontier of a small component by enumeration of its feasible option sets, or None when too many.

    ``Cd`` dense bool (options x classes), ``w`` class weights, ``k`` units and ``cost`` per option, ``site``
    per option, ``conflicts`` site pairs of the component.
    """
    sites = np.unique(site)
    if np.prod([1 + np.count_nonzero(site == s) for s in sites], dtype=float) > ENUM_MAX:
        return None
    n, m = Cd.shape
    mask = np.zeros((1, m), bool)
    kk = np.zeros(1, np.int64)
    cc = np.zeros(1)
    pick = np.full((1, len(sites)), -1, np.int64)  # option chosen at each site, -1 none
    for si, s in enumerate(sites):
        opts = np.flatnonzero(site == s)
        rep = len(opts) + 1
        mask = np.repeat(mask, rep, axis=0)
        kk = np.repeat(kk, rep)
        cc = np.repeat(cc, rep)
        pick = np.repeat(pick, rep, axis=0)
        choice = np.tile(np.r_[-1, opts], len(kk) // rep)
        on = choice >= 0
        mask[on] |= Cd[choice[on]]
        kk[on] += k[choice[on]]
        cc[on] += cost[choice[on]]
        pick[:, si] = choice
    ok = np.ones(len(kk), bool)
    pos = {s: i for i, s in enumerate(sites)}
    for a, b in conflicts:
        ok &= ~((pick[:, pos[a]] >= 0) & (pick[:, pos[b]] >= 0))
    wt = mask[ok].astype(float) @ w
    kk, cc, pick = kk[ok], cc[ok], pick[ok]
    order = np.lexsort((cc, -wt, kk))
    best_w, best_c = -1.0, 0.0  # the first point (nothing chosen) wins on weight
    out_k, out_w, out_c, sets = [], [], [], []
    for i in order:
        if _better(wt[i], cc[i], best_w, best_c):
            best_w, best_c = wt[i], cc[i]
            out_k.append(kk[i])
            out_w.append(wt[i])
            out_c.append(cc[i])
            sets.append(np.sort(pick[i][pick[i] >= 0]))
    return Frontier(np.asarray(out_k, np.int64), np.asarray(out_w), np.asarray(out_c), sets)


def _solve_frontier(sub: _Instance, k, unit, cap, settings, backend, deadline):
    """Frontier of a component by exact solves with a falling limit, or None when a solve is not proven.

    ``sub``: the component as an instance in reduced numbering (limit set per solve); ``k`` units per option.
    """
    from .solve import _solve

    pts = []
    lim = cap
    exact = replace(settings, mip_gap=0.0)
    while lim > 0:
        left = deadline - time.perf_counter()
        if left <= 0.05:
            return None
        if unit is None:
            inst = replace(sub, max_count=int(lim))
        else:
            inst = replace(sub, budget=lim * unit * (1 + 1e-12))
        plan = _solve(inst, "max", None, replace(exact, time_limit_s=left), backend, True, True)
        if plan.status != "optimal" or (len(plan.chosen) and plan.tie_break != "proven"):
            return None
        if plan.objective <= 0:
            break
        ch = np.sort(plan.chosen)
        used = int(k[ch].sum())
        pts.append((used, plan.objective, plan.cost, ch))
        lim = used - 1
    pts.append((0, 0.0, 0.0, np.zeros(0, np.int64)))
    pts.reverse()
    return Frontier(np.array([p[0] for p in pts], np.int64), np.array([p[1] for p in pts]),
                    np.array([p[2] for p in pts]), [p[3] for p in pts])


def combine(frontiers: list[Frontier], cap: int):
    """Multiple-choice knapsack over the frontiers for every resource level 0..cap.

    Returns (V, choice): ``V[u]`` the most weight within ``u`` units (non-decreasing in u), ``choice[i][u]``
    the point of frontier i in an optimal plan for level u given the frontiers before it (None for a
    frontier of one point).  Among equal weights the cheaper plan is kept (costs are carried along).
    """
    V = np.zeros(cap + 1)
    cost = np.zeros(cap + 1)
    choice: list[np.ndarray | None] = []
    for f in frontiers:
        usable = int(np.searchsorted(f.k, cap, side="right"))
        if usable <= 1:
            choice.append(None)
            continue
        best, best_c = V.copy(), cost.copy()
        arg = np.zeros(cap + 1, np.int8 if usable < 128 else np.int16 if usable < 32768 else np.int32)
        for p in range(1, usable):
            kp = int(f.k[p])
            cand, cand_c = V[: cap + 1 - kp] + f.w[p], cost[: cap + 1 - kp] + f.c[p]
            better = _better(cand, cand_c, best[kp:], best_c[kp:])
            best[kp:][better] = cand[better]
            best_c[kp:][better] = cand_c[better]
            arg[kp:][better] = p
        V, cost = best, best_c
        choice.append(arg)
    return V, choice


def backtrack(frontiers: list[Frontier], choice, u: int) -> np.ndarray:
    """The chosen options (reduced numbering) of the optimal plan at level ``u``."""
    picks = []
    for f, arg in zip(reversed(frontiers), reversed(choice)):
        p = 0 if arg is None else int(arg[u])
        if p:
            picks.append(f.sets[p])
            u -= int(f.k[p])
    return np.sort(np.concatenate(picks)) if picks else np.zeros(0, np.int64)


def frontiers(inst: _Instance, red: _Reduced, cap_budget: float | None, settings, backend, deadline):
    """(frontiers, units per option, unit, kind) of the split instance up to ``cap_budget`` (or the count),
    or None when the split does not apply (see the module docstring)."""
    res = resource_units(inst, red)
    if res is None or red.cap is not None:
        return None
    k, unit, kind = res
    n_comp, comp = component_labels(red)
    size = np.bincount(comp)
    if n_comp < MIN_COMPONENTS or size.max() > min(SOLVE_MAX, MAX_SHARE * len(comp)):
        return None
    cap = _cap_units(inst, unit, cap_budget)
    if cap > MAX_UNITS or n_comp * (cap + 1) > MAX_TABLE_BYTES:
        return None
    order = np.argsort(comp, kind="stable")
    bounds = np.r_[0, np.cumsum(np.bincount(comp, minlength=n_comp))]
    out = []
    for i in range(n_comp):
        opts = order[bounds[i] : bounds[i + 1]]
        Ci = red.C[opts]
        cls = np.unique(Ci.indices)
        Ci = sp.csr_array(Ci[:, cls])
        cf = red.conflicts[np.isin(red.conflicts, red.site[opts]).all(axis=1)] if len(red.conflicts) else \
            np.zeros((0, 2), np.int64)  # fmt: skip
        f = _enumerate(Ci.toarray(), red.w[cls], k[opts], red.c[opts], red.site[opts], cf)
        if f is None:
            sub = _Instance(Ci, red.w[cls], red.c[opts], red.site[opts], None, None, cf, None)
            f = _solve_frontier(sub, k[opts], unit, cap, settings, backend, deadline)
            if f is None:
                return None
        out.append(Frontier(f.k, f.w, f.c, [opts[s] for s in f.sets]))
    return out, k, unit, kind


def solve_split(inst: _Instance, red: _Reduced, limits, settings, backend, t0: float, deadline: float):
    """Plans for each limit (budgets, or counts when the instance has a count only; None: the instance's own
    limit), or None when the split does not apply.

    ``inst`` holds the largest limit.  Every plan is the exact optimum, the cheapest among equal weight.
    """
    if limits is None:
        limits = [inst.budget if inst.budget is not None else inst.max_count]
    from .assemble import Assembly, covered_weight
    from .heuristics import _greedy_plan

    now = time.perf_counter()
    got = frontiers(inst, red, inst.budget, settings, backend, now + TIME_SHARE * max(0.0, deadline - now))
    if got is None:
        return None
    fr, k, unit, kind = got
    cap = _cap_units(inst, unit, inst.budget)
    V, choice = combine(fr, cap)
    asm = Assembly.start(inst, red, "max", None, settings.mip_gap, backend.name, True, {"split": 0.0}, t0,
                         settings.time_limit_s)  # fmt: skip
    asm.timings["split"] = time.perf_counter() - t0
    plans = []
    for lim in limits:
        u = min(cap, _cap_units(inst, unit, lim) if kind == "budget" else int(lim))
        chosen = backtrack(fr, choice, u)  # the most weight within u units, the cheapest such plan
        a = asm.for_budget(lim) if kind == "budget" else replace(asm, inst=replace(inst, max_count=int(lim)))
        g = _greedy_plan(red, a.inst.budget, a.inst.max_count, local=False)[0]
        plan = a.plan(chosen, "optimal", float(V[u]), covered_weight(a.inst, red, g), tie_break="proven",
                      notes=(f"Solved exactly by splitting into {len(fr)} independent parts under the shared "
                             f"{kind} (each part's whole coverage-versus-{kind} frontier, combined by a "
                             f"multiple-choice knapsack).",))  # fmt: skip
        plan.model_size["split_parts"] = len(fr)
        plan.timings_s["split"] = asm.timings["split"]
        plans.append(plan)
    return plans
