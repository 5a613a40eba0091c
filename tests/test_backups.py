"""Backup spots against a brute-force reference: every swap of a chosen option evaluated from the definition.

Reference (brute force, written from the docstring of :func:`siting.optimize.backups_for`): for each chosen
option ``r`` and every option ``a``, the plan with ``r`` swapped for ``a`` is counted user by user on the dense
coverage matrix; eligibility (free site, no dearer than ``r``, no spacing conflict with another chosen site,
something recovered), best size per site, best spot per wall, then the survey order (not weak, placement,
kept weight, cost, index).  Integer weights keep every sum exact, so ties are compared exactly too.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp

import siting.optimize as opt


def reference_backups(chosen, D, w, c, site, k, conflicts, wall, bldg):
    chosen = np.unique(chosen)
    chosen_sites = set(site[chosen].tolist())
    conf = {(int(a), int(b)) for a, b in conflicts} | {(int(b), int(a)) for a, b in conflicts}
    W = w[D[chosen].any(0)].sum()
    rows = []
    for r in chosen:
        rest = [j for j in chosen if j != r]
        cov_rest = D[rest].any(0) if rest else np.zeros(D.shape[1], bool)
        without = w[cov_rest].sum()
        excl = W - without
        cands = []
        for a in range(len(c)):
            rec = w[D[a] & ~cov_rest].sum()
            others = chosen_sites - {int(site[r])}
            if (site[a] in chosen_sites or c[a] > c[r] or rec <= 0
                    or any((int(site[a]), s) in conf for s in others)):
                continue
            share = rec / excl if excl > 0 else 1.0
            same_wall = wall is not None and wall[a] == wall[r]
            other_b = bldg is not None and bldg[a] != bldg[r]
            if wall is not None:
                tier = 2 if same_wall else (0 if bldg is None or other_b else 1)
                place = "same_wall" if same_wall else ("other_building" if other_b else "other_wall")
            elif bldg is not None:
                tier, place = (0, "other_building") if other_b else (1, "same_building")
            else:
                tier, place = 0, ""
            cands.append(dict(a=a, rec=rec, share=share, kept=without + rec, cost=c[a], tier=tier, place=place,
                              weak=share < 0.5, site=site[a], wall=None if wall is None else wall[a]))
        cands.sort(key=lambda d: (-d["kept"], d["cost"], d["a"]))
        for key in ("site", "wall"):
            seen, kept_c = set(), []
            for d in cands:
                if d[key] is None or d[key] not in seen:
                    seen.add(d[key])
                    kept_c.append(d)
            cands = kept_c
        cands.sort(key=lambda d: (d["weak"], d["tier"], -d["kept"], d["cost"], d["a"]))
        rows += [(int(r), d["a"], d["rec"], d["share"], d["kept"], d["weak"], d["place"]) for d in cands[:k]]
    return rows


def random_case(seed, n_sites, n_users, density):
    rng = np.random.default_rng(seed)
    sizes = rng.integers(1, 4, n_sites)
    site = np.repeat(np.arange(n_sites), sizes)
    D = np.zeros((len(site), n_users), bool)
    for s in range(n_sites):  # a spot sees a patch of nearby users; larger sizes reach a little further
        centre = rng.integers(0, n_users)
        for j, o in enumerate(np.flatnonzero(site == s)):
            reach = int(rng.integers(1, 1 + int(density * n_users))) + 3 * j
            D[o, max(0, centre - reach):centre + reach] = rng.random(min(n_users, centre + reach)
                                                                    - max(0, centre - reach)) < 0.7
    w = rng.integers(0, 4, n_users).astype(float)
    c = np.array([1500.0 + 1000.0 * j for s in range(n_sites) for j in range(sizes[s])])
    wall = np.arange(n_sites)[site] // int(rng.integers(1, 4))  # one to three spots per wall
    bldg = wall // 3
    n_conf = n_sites // 4
    conflicts = np.unique(np.sort(rng.integers(0, n_sites, (n_conf, 2)), axis=1), axis=0)
    conflicts = conflicts[conflicts[:, 0] != conflicts[:, 1]]
    chosen_sites = rng.choice(n_sites, size=max(1, n_sites // 8), replace=False)
    chosen = np.array([rng.choice(np.flatnonzero(site == s)) for s in chosen_sites])
    return D, w, c, site, wall, bldg, conflicts, chosen


def as_rows(b: pd.DataFrame):
    return [(int(r), int(a), rec, share, kept, bool(weak), place) for r, a, rec, share, kept, weak, place in zip(
        b["option"], b["backup_option"], b["recovered_weight"], b["recovered_share"], b["kept_weight"], b["weak"],
        b["placement"])]


@pytest.mark.parametrize("seed", range(12))
@pytest.mark.parametrize("layout", ["walls_and_buildings", "walls", "buildings", "sites", "no_conflicts"])
def test_backups_equal_brute_force(seed, layout):
    D, w, c, site, wall, bldg, conflicts, chosen = random_case(seed, n_sites=40 + 10 * seed, n_users=300,
                                                               density=0.05)
    wall_a = wall if layout in ("walls_and_buildings", "walls", "no_conflicts") else None
    bldg_a = bldg.astype(str) if layout in ("walls_and_buildings", "buildings", "no_conflicts") else None
    conf = np.zeros((0, 2), np.int64) if layout == "no_conflicts" else conflicts
    got = opt.backups_for(chosen, sp.csr_array(D), w, c, site, k=3, conflicts=conf if len(conf) else None,
                          option_wall=wall_a, option_building=bldg_a)
    assert got["backup_rank"].tolist() == [int(x) for x in got.groupby("option").cumcount() + 1]
    assert as_rows(got) == reference_backups(chosen, D, w, c, site, 3, conf, wall_a, bldg_a)


def test_backups_at_scale_equal_brute_force():
    # many options of one list and few per-primary ones: the leading walls of the shared list decide
    D, w, c, site, wall, bldg, conflicts, chosen = random_case(99, n_sites=900, n_users=2000, density=0.01)
    got = opt.backups_for(chosen, sp.csr_array(D), w, c, site, k=3, conflicts=conflicts, option_wall=wall,
                          option_building=bldg.astype(str))
    ref = reference_backups(chosen, D, w, c, site, 3, conflicts, wall, bldg.astype(str))
    assert len(ref) > 100 and as_rows(got) == ref
