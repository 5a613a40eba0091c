"""Exact split of maximum coverage into independent parts (siting.optimize.decompose).

Reference: the monolithic integer program without reductions, solved by HiGHS to a zero gap (an exact
optimum); the split must reach the same covered weight, at no higher cost, with a proven bound equal to its
objective.  Instances are seeded random clusters (each cluster its own sites and users, so the coverage
relation splits), with spacing conflicts inside clusters.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from siting import optimize as opt
from siting.optimize import decompose
from siting.optimize.problem import _validate
from siting.optimize.reductions import _reduce


def clusters(seed, n_clusters=14, sites=(2, 6), sizes=3, users=(4, 25), density=0.35, conflicts=True):
    """Options x users coverage of independent clusters; costs on a 100-unit grid; integer weights."""
    rng = np.random.default_rng(seed)
    rows, cols, cost, site, conf = [], [], [], [], []
    n_opt = n_user = n_site = 0
    for _ in range(n_clusters):
        ns = int(rng.integers(*sites))
        nu = int(rng.integers(*users))
        for s in range(ns):
            base = rng.random(nu) < density
            for z in range(sizes):
                extra = rng.random(nu) < 0.15 * z
                cov = np.flatnonzero(base | extra)
                rows += [n_opt] * len(cov)
                cols += list(n_user + cov)
                cost.append(100.0 * (15 + 18 * z + int(rng.integers(0, 5))))
                site.append(n_site + s)
                n_opt += 1
        if conflicts and ns > 2:
            conf.append((n_site, n_site + 1))
        n_site += ns
        n_user += nu
    C = sp.csr_array((np.ones(len(rows), bool), (rows, cols)), shape=(n_opt, n_user))
    w = rng.integers(1, 5, n_user).astype(float)
    return C, w, np.asarray(cost), np.asarray(site, np.int64), np.asarray(conf, np.int64).reshape(-1, 2)


@pytest.mark.parametrize("seed", [1, 2, 3, 4])
def test_split_matches_monolithic(seed):
    C, w, cost, site, conf = clusters(seed)
    budget = float(np.random.default_rng(seed).uniform(0.1, 0.5) * cost.sum() / 3)
    split = opt.solve_coverage(C, w, cost, site, budget=budget, conflicts=conf, mip_rel_gap=0.0)
    mono = opt.solve_coverage(C, w, cost, site, budget=budget, conflicts=conf, reduce=False, mip_rel_gap=0.0)
    assert split.model_size.get("split_parts", 0) >= decompose.MIN_COMPONENTS  # the split was used
    assert mono.status == "optimal" and split.status == "optimal"
    assert split.objective == pytest.approx(mono.objective, abs=1e-9)
    assert split.bound == pytest.approx(split.objective) and split.bound >= mono.objective - 1e-9
    assert split.cost <= mono.cost + 1e-6 and split.cost <= budget + 1e-6
    # the plan is feasible: one option per site, no conflicting pair
    ch = split.chosen
    assert len(np.unique(site[ch])) == len(ch)
    chosen_sites = set(site[ch].tolist())
    assert not any(a in chosen_sites and b in chosen_sites for a, b in conf)


def test_split_count_limit_matches_monolithic():
    C, w, cost, site, conf = clusters(7, conflicts=False)
    split = opt.solve_coverage(C, w, cost, site, max_count=9, mip_rel_gap=0.0)
    mono = opt.solve_coverage(C, w, cost, site, max_count=9, reduce=False, mip_rel_gap=0.0)
    assert split.model_size.get("split_parts", 0) >= decompose.MIN_COMPONENTS
    assert split.objective == pytest.approx(mono.objective) and len(split.chosen) <= 9
    assert split.cost == pytest.approx(mono.cost)  # ties: the cheapest plan (the monolithic second solve)


@pytest.mark.parametrize("count", [1, 3, 5])
def test_split_count_limit_breaks_ties_on_cost_not_panels(count):
    """Brute force: 9 spots, each covering its own user (weight 1), costs 9, 8, ..., 1, 2 and a spot of cost
    2.5 covering the last two users (8 independent parts): within a panel count the most weight, and among
    such plans the cheapest, which is not always the plan with the fewest panels."""
    n = 9
    D = np.eye(n, dtype=bool)
    D = np.vstack([D, D[7] | D[8]])  # spot 9 covers the users of spots 7 and 8
    cost = np.array([9.0, 8, 7, 6, 5, 4, 3, 1, 2, 2.5])
    site = np.arange(n + 1)
    X = ((np.arange(2 ** (n + 1))[:, None] >> np.arange(n + 1)) & 1).astype(bool)
    ok = X.sum(1) <= count
    val = (X.astype(int) @ D.astype(int) > 0).sum(1).astype(float)
    best = val[ok].max()
    cheapest = (X @ cost)[ok & (val == best)].min()
    p = opt.solve_coverage(sp.csr_array(D), np.ones(n), cost, site, max_count=count)
    assert p.model_size.get("split_parts", 0) >= decompose.MIN_COMPONENTS
    assert p.objective == best and p.cost == pytest.approx(cheapest) and p.tie_break == "proven"


def test_split_by_exact_solves_when_enumeration_is_too_large(monkeypatch):
    """Frontiers from a sequence of exact solves (enumeration switched off) give the same optimum."""
    monkeypatch.setattr(decompose, "ENUM_MAX", 1)
    C, w, cost, site, conf = clusters(5, n_clusters=9)
    budget = 0.25 * cost.sum() / 3
    split = opt.solve_coverage(C, w, cost, site, budget=budget, conflicts=conf, mip_rel_gap=0.0)
    mono = opt.solve_coverage(C, w, cost, site, budget=budget, conflicts=conf, reduce=False, mip_rel_gap=0.0)
    assert split.model_size.get("split_parts", 0) >= decompose.MIN_COMPONENTS
    assert split.objective == pytest.approx(mono.objective)


def test_enumerated_frontier_against_brute_force():
    """Every feasible option set of a small component lies on or below the enumerated frontier."""
    C, w, cost, site, conf = clusters(11, n_clusters=1, sites=(4, 5), users=(10, 11))
    red = _reduce(_validate(C, w, cost, site, 1e9, None, conf), True)
    k = decompose.resource_units(_validate(C, w, cost, site, 1e9, None, conf), red)[0]
    f = decompose._enumerate(red.C.toarray(), red.w, k, red.c, red.site, red.conflicts)
    Cd = red.C.toarray()
    n = len(k)
    for bits in range(1 << n):
        sel = [j for j in range(n) if bits >> j & 1]
        if len(set(red.site[sel].tolist())) < len(sel):
            continue
        if any(a in red.site[sel] and b in red.site[sel] for a, b in red.conflicts):
            continue
        wt = float(red.w[Cd[sel].any(axis=0)].sum()) if sel else 0.0
        kk = int(k[sel].sum())
        best = f.w[np.searchsorted(f.k, kk, side="right") - 1]
        assert wt <= best + 1e-9


def test_sweep_points_are_exact_with_the_split():
    C, w, cost, site, conf = clusters(3)
    budgets = [2000.0, 6000.0, 15000.0]
    sw = opt.budget_sweep(C, w, cost, site, budgets, conflicts=conf, mip_rel_gap=0.0)
    for b, row in zip(budgets, sw.itertuples()):
        mono = opt.solve_coverage(C, w, cost, site, budget=b, conflicts=conf, reduce=False, mip_rel_gap=0.0)
        assert row.covered_weight == pytest.approx(mono.objective)
        assert row.status == "optimal" and row.gap == 0.0
