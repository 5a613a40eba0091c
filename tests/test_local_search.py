"""The swap local search's best swap against a brute-force reference written from its definition.

Reference: for every chosen option ``r`` and every unchosen option ``a``, the plan with ``r`` swapped for ``a`` is
built and checked from the definition (one option per site, no two chosen sites in spacing conflict, total cost
within the budget), and its covered weight counted user by user on the dense coverage matrix.  The best swap is
the largest gain; ties go to the smallest ``a``, then ``r``.  Integer weights keep every sum exact, so ties are
compared exactly too.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from siting.optimize.heuristics import _Greedy


def value(D, w, plan):
    return float(w[D[list(plan)].any(0)].sum()) if len(plan) else 0.0


def conflict_set(conflicts):
    """Site pairs in conflict, both orders."""
    return {(int(a), int(b)) for a, b in conflicts} | {(int(b), int(a)) for a, b in conflicts}


def reference_best_swap(D, w, c, site, budget, conflicts, chosen):
    conf = conflict_set(conflicts)
    base = value(D, w, chosen)
    best = (-np.inf, 0, 0)
    for a in range(len(c)):
        if a in chosen:
            continue
        for r in range(len(chosen)):
            new = list(chosen)
            new[r] = a
            sites = [int(site[j]) for j in new]
            if len(set(sites)) < len(sites) or any((s, t) in conf for s in sites for t in sites):
                continue
            if budget is not None and c[new].sum() > budget * (1 + 1e-12) + 1e-12:
                continue
            gain = value(D, w, new) - base
            if gain > best[0]:  # strict: the first (smallest a, then r) of equal gains stays
                best = (gain, a, r)
    return best


def instance(seed):
    rng = np.random.default_rng(seed)
    n_sites = int(rng.integers(3, 16))
    sizes = rng.integers(1, 4, n_sites)
    site = np.repeat(np.arange(n_sites) * 7 + 3, sizes)  # site ids need not be 0..n-1
    n, m = len(site), int(rng.integers(8, 50))
    D = rng.random((n, m)) < rng.uniform(0.05, 0.3)
    w = rng.integers(0, 5, m).astype(float)
    c = rng.integers(1, 6, n).astype(float)
    pairs = rng.integers(0, n_sites, (int(rng.integers(0, n_sites)), 2)) * 7 + 3
    conflicts = pairs[pairs[:, 0] != pairs[:, 1]] if rng.random() < 0.6 else np.zeros((0, 2), np.int64)
    budget = float(rng.integers(3, 20)) if rng.random() < 0.7 else None
    return D, w, c, site, budget, conflicts, rng


def feasible_plans(D, w, c, site, budget, conflicts, rng):
    """The greedy plan, and a plan of random feasible insertions."""
    g = _Greedy(sp.csr_array(D), w, c, site, budget, None, conflicts)
    yield g, list(g.run())
    conf = conflict_set(conflicts)
    plan: list[int] = []
    for j in rng.permutation(len(c)):
        sites = {int(site[i]) for i in plan}
        if int(site[j]) in sites or any((int(site[j]), s) in conf for s in sites):
            continue
        if budget is not None and c[plan + [j]].sum() > budget:
            continue
        plan.append(int(j))
    yield g, plan


@pytest.mark.parametrize("seed", range(120))
def test_best_swap_matches_brute_force(seed):
    D, w, c, site, budget, conflicts, rng = instance(seed)
    for g, plan in feasible_plans(D, w, c, site, budget, conflicts, rng):
        if not plan:
            continue
        got = g.best_swap(g.C.astype(np.float64), np.asarray(plan))
        want = reference_best_swap(D, w, c, site, budget, conflicts, plan)
        assert got == want, (seed, plan)


@pytest.mark.parametrize("seed", range(40))
def test_local_search_never_loses_weight_and_stays_feasible(seed):
    D, w, c, site, budget, conflicts, rng = instance(seed)
    for g, plan in feasible_plans(D, w, c, site, budget, conflicts, rng):
        out = g.local_search(plan)
        assert value(D, w, out) >= value(D, w, plan)
        assert len({int(site[j]) for j in out}) == len(out)
        if budget is not None:
            assert c[out].sum() <= budget * (1 + 1e-12) + 1e-12
        conf = conflict_set(conflicts)
        assert not any((int(site[a]), int(site[b])) in conf for a in out for b in out)
