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
from siting.errors import SitingError


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


# --- argument checks and reading of the cover (reference: the docstrings of rank_chosen and backups_for, which
# --- read and check their arguments as solve_coverage does, and the SitingError contract of siting.errors)

def small_case():
    D, w, c, site, wall, bldg, conflicts, chosen = random_case(5, n_sites=40, n_users=200, density=0.05)
    return dict(cover=sp.csr_array(D), weight=w, cost=c, option_site=site, chosen=chosen, conflicts=conflicts,
                option_wall=wall, option_building=bldg.astype(str))


def _nan_at_0(a, n):
    a = np.asarray(a, float).copy()
    a[0] = np.nan
    return a


# (which function takes it, argument, how it is spoiled); each must raise SitingError naming the argument
BAD_ARGUMENTS = [
    ("both", "chosen", lambda a, n: [-1]),  # would wrap around to the last option
    ("both", "chosen", lambda a, n: [n]),  # one past the end
    ("both", "chosen", lambda a, n: [0.5]),
    ("both", "chosen", lambda a, n: np.ones(n, bool)),  # a mask, not indices
    ("both", "chosen", lambda a, n: np.zeros((1, 2), np.int64)),
    ("both", "cover", lambda a, n: None),
    ("both", "cover", lambda a, n: sp.csr_array(a.toarray() * np.where(np.arange(a.shape[1]) == 0, np.nan, 1.0))),
    ("both", "cover", lambda a, n: a.toarray()[0]),  # 1-D
    ("both", "weight", lambda a, n: a[:-1]),
    ("both", "weight", _nan_at_0),
    ("both", "weight", lambda a, n: -a),
    ("backups_for", "cost", lambda a, n: a[:-1]),
    ("backups_for", "cost", _nan_at_0),
    ("backups_for", "option_site", lambda a, n: a[:-1]),
    ("backups_for", "option_site", lambda a, n: a - 1),  # site -1
    ("backups_for", "option_site", lambda a, n: a + 0.5),
    ("backups_for", "k", lambda a, n: 1.5),
    ("backups_for", "k", lambda a, n: -1),
    ("backups_for", "k", lambda a, n: "3"),
    ("backups_for", "conflicts", lambda a, n: np.r_[a, [[-1, 0]]]),
    ("backups_for", "conflicts", lambda a, n: a[:, 0]),
    ("backups_for", "option_wall", lambda a, n: a[:-1]),
    ("backups_for", "option_building", lambda a, n: a[:-1]),
    ("backups_for", "option_building", lambda a, n: np.where(np.arange(len(a)) == 3, None, a).astype(object)),
]


BAD_CALLS = [(func, arg, spoil) for which, arg, spoil in BAD_ARGUMENTS for func in ("rank_chosen", "backups_for")
             if which in ("both", func)]


@pytest.mark.parametrize("func,arg,spoil", BAD_CALLS, ids=[f"{f}-{a}-{i}" for i, (f, a, _) in enumerate(BAD_CALLS)])
def test_bad_argument_raises_siting_error(func, arg, spoil):
    # reference: the docstrings (SitingError names the argument that is wrong), as _validate does for solve_coverage
    case = small_case()
    n_opt = case["cover"].shape[0]
    case[arg] = spoil(case[arg] if arg != "k" else 3, n_opt)
    if func == "rank_chosen":
        call = lambda: opt.rank_chosen(case["chosen"], case["cover"], case["weight"])
    else:
        call = lambda: opt.backups_for(case["chosen"], case["cover"], case["weight"], case["cost"], case["option_site"],
                                       k=case.get("k", 3), conflicts=case["conflicts"], option_wall=case["option_wall"],
                                       option_building=case["option_building"])
    with pytest.raises(SitingError, match=f"argument '{arg}'"):
        call()


def _covers(D):
    """The relation of the boolean ``D`` in other encodings, by name (the last three store values other than 0/1)."""
    rows, cols = np.nonzero(D)
    off = np.flatnonzero(~D.any(0))[:5]  # users nobody covers: explicit zeros go there
    return {
        "duplicate_coo_entries": sp.coo_array((np.ones(2 * len(rows)), (np.r_[rows, rows], np.r_[cols, cols])),
                                              shape=D.shape),  # scipy sums each pair to 2.0
        "explicit_zeros": sp.csr_array((np.r_[np.ones(len(rows)), np.zeros(len(off))],
                                        (np.r_[rows, np.zeros(len(off), np.int64)], np.r_[cols, off])), shape=D.shape),
        "int_ones": sp.csc_array(D.astype(np.int64)),
        "dense_float_ones": D.astype(float),
        "twos": sp.csr_array(D * 2.0),
        "int_sevens": sp.csr_array(D.astype(np.int64) * 7),
        "halves": D * 0.5,
    }


def _ranking_and_backups(case, cover):
    kw = dict(k=3, conflicts=case["conflicts"], option_wall=case["option_wall"],
              option_building=case["option_building"])
    return (opt.rank_chosen(case["chosen"], cover, case["weight"]),
            opt.backups_for(case["chosen"], cover, case["weight"], case["cost"], case["option_site"], **kw))


@pytest.mark.parametrize("form", ["duplicate_coo_entries", "explicit_zeros", "int_ones", "dense_float_ones"])
def test_duplicate_entry_cover_reads_as_its_boolean_version(form):
    # reference: solve_coverage's reading of the cover (an entry covers or not; a duplicate COO entry, which
    # scipy sums to 2, still covers once) and the brute force above on the boolean matrix
    case = small_case()
    D = case["cover"].toarray()
    rank, got = _ranking_and_backups(case, _covers(D)[form])
    rank_b, got_b = _ranking_and_backups(case, sp.csr_array(D))
    pd.testing.assert_frame_equal(rank, rank_b, check_exact=True)
    pd.testing.assert_frame_equal(got, got_b, check_exact=True)
    assert rank["cumulative_weight"].iloc[-1] == case["weight"][D[case["chosen"]].any(0)].sum()
    assert len(got) and as_rows(got) == reference_backups(case["chosen"], D, case["weight"], case["cost"],
                                                          case["option_site"], 3, case["conflicts"],
                                                          case["option_wall"], case["option_building"])


@pytest.mark.parametrize("form", ["twos", "int_sevens", "halves"])
def test_non_binary_cover_is_read_as_solve_coverage_reads_it(form):
    # reference: solve_coverage on the same matrix; what it refuses is refused (SitingError naming 'cover'),
    # what it accepts reads as the boolean relation (nonzero covers), never as a weight multiplier
    case = small_case()
    D = case["cover"].toarray()
    cover = _covers(D)[form]
    try:
        opt.solve_coverage(cover, case["weight"], case["cost"], case["option_site"], budget=0.0)
    except SitingError as e:
        assert "argument 'cover'" in str(e)
        for f in (lambda: opt.rank_chosen(case["chosen"], cover, case["weight"]),
                  lambda: _ranking_and_backups(case, cover)):
            with pytest.raises(SitingError, match="argument 'cover'"):
                f()
        return
    for a, b in zip(_ranking_and_backups(case, cover), _ranking_and_backups(case, sp.csr_array(D))):
        pd.testing.assert_frame_equal(a, b, check_exact=True)


@pytest.mark.parametrize("seed", range(3))
def test_backups_do_not_depend_on_site_labels(seed):
    # property: relabelling the sites (here to ids near 1e12, in shuffled order, conflicts relabelled alike and
    # joined by pairs with sites that carry no option) does not change the backups; arrays stay per site, not
    # per site id (an array per id would need terabytes)
    D, w, c, site, wall, bldg, conflicts, chosen = random_case(seed, n_sites=60, n_users=300, density=0.05)
    rng = np.random.default_rng(seed)
    label = 10**12 + rng.permutation(10 * (site.max() + 1))[:site.max() + 1] * 7919
    far = np.c_[label[:3], 10**12 - 1 - np.arange(3)]  # conflicts with sites that carry no option
    kw = dict(k=3, option_wall=wall, option_building=bldg.astype(str))
    small = opt.backups_for(chosen, sp.csr_array(D), w, c, site, conflicts=conflicts, **kw)
    large = opt.backups_for(chosen, sp.csr_array(D), w, c, label[site], conflicts=np.r_[label[conflicts], far], **kw)
    assert len(small) > 10
    pd.testing.assert_frame_equal(large, small, check_exact=True)
