"""Argument checks of the public optimiser functions (``solve_coverage``, ``min_cost_cover``, ``budget_sweep``,
``greedy``, ``lp_relaxation_bound``).

Every bad argument gives a :class:`~siting.errors.SitingError` whose message names the argument, what was expected
and what was got, never a bare numpy/scipy error, and no invalid value is read silently (audit of the optimiser
API, item 6).  Valid inputs keep their meaning: a boolean relation given as bool, integer or float 0/1 entries, in
any sparse format or dense, gives one and the same plan.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from siting import optimize as opt
from siting.errors import SitingError
from siting.optimize.problem import _budget_list

D = np.array([[1, 0, 1, 0], [0, 1, 1, 0], [1, 1, 0, 1]], bool)  # 3 options x 4 users
W = np.array([1.0, 2.0, 3.0, 4.0])
C = np.array([1.0, 2.0, 3.0])
S = np.array([0, 1, 2])


def _solve(**change):
    args = dict(cover=sp.csr_array(D), weight=W, cost=C, option_site=S)
    args.update({k: change.pop(k) for k in list(change) if k in args})
    return opt.solve_coverage(args["cover"], args["weight"], args["cost"], args["option_site"], **change)


BAD_ARGUMENTS = [
    # (case, changed argument(s), argument the message must name)
    ("budget_text", dict(budget="5"), "budget"),
    ("budget_complex", dict(budget=1 + 2j), "budget"),
    ("max_count_text", dict(max_count="2"), "max_count"),
    ("load_cap_text", dict(load_cap="3"), "load_cap"),
    ("weight_text", dict(weight=np.array(["a", "b", "c", "d"])), "weight"),
    ("weight_complex", dict(weight=np.array([1 + 5j, 2, 3, 4])), "weight"),
    ("weight_total_overflows", dict(weight=np.full(4, 1e308)), "weight"),
    ("weight_ragged", dict(weight=[[1.0], [2.0, 3.0]]), "weight"),
    ("cost_complex", dict(cost=np.array([1 + 5j, 2, 3])), "cost"),
    ("cost_total_overflows", dict(cost=np.full(3, 1e308)), "cost"),
    ("option_site_text", dict(option_site=np.array(["a", "b", "c"])), "option_site"),
    ("conflicts_text", dict(conflicts=np.array([["a", "b"]])), "conflicts"),
    ("cover_text", dict(cover=np.where(D, "1", "0")), "cover"),
    ("cover_objects", dict(cover=np.array([[1, 0, None, 0], [0, 1, 1, 0], [1, 1, 0, 1]], object)), "cover"),
    ("cover_object_text", dict(cover=np.array([["x", 0, 1, 0], [0, 1, 1, 0], [1, 1, 0, 1]], object)), "cover"),
    ("cover_complex", dict(cover=sp.csr_array(D.astype(complex))), "cover"),
    ("cover_half_sparse", dict(cover=sp.csr_array(D * 0.5)), "cover"),
    ("cover_negative_sparse", dict(cover=sp.coo_array(-D.astype(float))), "cover"),
    ("cover_seven_dense", dict(cover=D * 7), "cover"),
    ("cover_seven_dok", dict(cover=sp.dok_array(D.astype(np.int64) * 7)), "cover"),
    ("cover_nan_sparse", dict(cover=sp.csr_array(np.where(D, np.nan, 0.0))), "cover"),
    ("cover_ragged", dict(cover=[[1, 0], [1]]), "cover"),
    ("threads_text", dict(threads="x"), "threads"),
    ("threads_negative", dict(threads=-1), "threads"),
    ("threads_zero", dict(threads=0), "threads"),
    ("threads_fraction", dict(threads=1.5), "threads"),
    ("threads_bool", dict(threads=True), "threads"),
    ("time_limit_text", dict(time_limit_s="60"), "time_limit_s"),
    ("mip_gap_text", dict(mip_rel_gap="0.01"), "mip_rel_gap"),
]


@pytest.mark.parametrize("change, name", [c[1:] for c in BAD_ARGUMENTS], ids=[c[0] for c in BAD_ARGUMENTS])
def test_bad_argument_is_refused_naming_it(change, name):
    with pytest.raises(SitingError, match=f"optimiser argument '{name}': expected ") as e:
        _solve(**dict(change))
    assert "got" in str(e.value) or "found" in str(e.value)


@pytest.mark.parametrize("fn", [opt.greedy, opt.lp_relaxation_bound], ids=["greedy", "lp_relaxation_bound"])
@pytest.mark.parametrize(
    "change, name",
    [(dict(budget="5"), "budget"), (dict(cover=D * 7), "cover"), (dict(weight=np.full(4, 1e308)), "weight")],
    ids=["budget_text", "cover_seven", "weight_total_overflows"],
)
def test_other_entry_points_refuse_bad_arguments(fn, change, name):
    args = {**dict(cover=sp.csr_array(D), weight=W, cost=C, option_site=S), **change}
    with pytest.raises(SitingError, match=f"optimiser argument '{name}'"):
        fn(args.pop("cover"), args.pop("weight"), args.pop("cost"), args.pop("option_site"), **args)


@pytest.mark.parametrize(
    "cover, value, where",
    [
        (sp.csr_array(D * 0.5), "0.5", "option 0, user 0"),
        (sp.csc_array(-D.astype(np.int8)), "-1", "option 0, user 0"),
        (np.where(np.arange(12).reshape(3, 4) == 6, 7, D), "7", "option 1, user 2"),
        (sp.dia_array(np.eye(3, 4) * 2.0), "2.0", "option 0, user 0"),
    ],
    ids=["csr_half", "csc_negative", "dense_seven", "dia_two"],
)
def test_cover_message_gives_the_value_its_place_and_the_fix(cover, value, where):
    with pytest.raises(SitingError, match="optimiser argument 'cover'") as e:
        _solve(cover=cover)
    msg = str(e.value)
    assert f"found {value} at {where}" in msg and "exactly 0 or 1" in msg and "cover != 0" in msg


@pytest.mark.parametrize(
    "change, name",
    [(dict(target_weight="3"), "target_weight"), (dict(target_share="0.5"), "target_share"),
     (dict(target_weight=1 + 2j), "target_weight")],
    ids=["target_weight_text", "target_share_text", "target_weight_complex"],
)
def test_min_cost_cover_refuses_a_target_that_is_not_a_number(change, name):
    with pytest.raises(SitingError, match=f"optimiser argument '{name}': expected "):
        opt.min_cost_cover(sp.csr_array(D), W, C, S, **change)


BAD_BUDGETS = [
    ("text", ["a"]),
    ("table", [[1, 2], [3, 4]]),
    ("column", np.array([[1.0], [2.0]])),
    ("complex", [1 + 2j]),
    ("nan", [1.0, np.nan]),
    ("negative", [-1.0, 2.0]),
    ("ragged", [[1.0], [2.0, 3.0]]),
]


@pytest.mark.parametrize("budgets", [b for _, b in BAD_BUDGETS], ids=[i for i, _ in BAD_BUDGETS])
def test_budget_list_refuses_bad_budgets(budgets):
    with pytest.raises(SitingError, match="optimiser argument 'budgets': expected "):
        _budget_list(budgets)


@pytest.mark.parametrize("budgets", [b for _, b in BAD_BUDGETS], ids=[i for i, _ in BAD_BUDGETS])
def test_budget_sweep_refuses_bad_budgets(budgets):
    try:
        opt.budget_sweep(sp.csr_array(D), W, C, S, budgets)
    except SitingError as e:
        assert "optimiser argument 'budgets': expected " in str(e)
    else:
        raise AssertionError(f"budgets {budgets!r} accepted")


@pytest.mark.parametrize("budgets, expected", [([], []), (3.0, [3.0]), ((2, 5), [2.0, 5.0]),
                                               (np.array([4, 1], np.int32), [4.0, 1.0])],
                         ids=["empty", "one_number", "tuple", "int_array"])
def test_budget_list_keeps_valid_budgets(budgets, expected):
    b = _budget_list(budgets)
    assert b.dtype == float and b.ndim == 1 and b.tolist() == expected


# ---------------------------------------------------------------------------------------------------
# valid inputs: one plan whatever the container
# ---------------------------------------------------------------------------------------------------


def _instance(seed=3, n_opt=9, n_user=24):
    rng = np.random.default_rng(seed)
    cover = rng.random((n_opt, n_user)) < 0.3
    return cover, rng.integers(1, 6, n_user).astype(float), rng.integers(1, 4, n_opt).astype(float), \
        np.arange(n_opt) // 2


FORMATS = {
    "dense": lambda a: a,
    "dense_list": lambda a: a.tolist(),
    "matrix": np.asmatrix,
    "csr": sp.csr_array, "csc": sp.csc_array, "coo": sp.coo_array, "dok": sp.dok_array, "lil": sp.lil_array,
    "bsr": sp.bsr_array, "dia": sp.dia_array,
    "csr_matrix": sp.csr_matrix, "csc_matrix": sp.csc_matrix, "coo_matrix": sp.coo_matrix,
    "dok_matrix": sp.dok_matrix,
}
DTYPES = [bool, np.int8, np.uint8, np.int32, np.int64, np.float32, np.float64]


@pytest.mark.filterwarnings("ignore:the matrix subclass:PendingDeprecationWarning")
@pytest.mark.parametrize("dtype", DTYPES, ids=[np.dtype(t).name for t in DTYPES])
@pytest.mark.parametrize("fmt", list(FORMATS))
def test_valid_cover_gives_the_same_plan_in_every_format_and_dtype(fmt, dtype):
    cover, w, c, site = _instance()
    ref = opt.solve_coverage(sp.csr_array(cover), w, c, site, budget=5.0)
    p = opt.solve_coverage(FORMATS[fmt](cover.astype(dtype)), w, c, site, budget=5.0)
    assert p.chosen.tolist() == ref.chosen.tolist()
    assert p.objective == ref.objective and p.cost == ref.cost and p.status == ref.status == "optimal"
    assert np.array_equal(p.covered, ref.covered)


def test_explicit_zeros_and_repeated_entries_keep_their_meaning():
    # a COO with an entry given twice (1 + 1) and a CSR storing explicit zeros read as the relation itself
    cover, w, c, site = _instance()
    rows, cols = np.nonzero(cover)
    twice = sp.coo_array((np.ones(2 * len(rows), np.int64), (np.r_[rows, rows], np.r_[cols, cols])),
                         shape=cover.shape)
    zeros = sp.csr_array((np.r_[np.ones(len(rows)), 0.0], (np.r_[rows, 0], np.r_[cols, 0])), shape=cover.shape)
    ref = opt.solve_coverage(sp.csr_array(cover), w, c, site, budget=5.0)
    for C_ in (twice, zeros):
        p = opt.solve_coverage(C_, w, c, site, budget=5.0)
        assert p.chosen.tolist() == ref.chosen.tolist() and p.objective == ref.objective


@pytest.mark.parametrize(
    "kw",
    [dict(budget=np.float32(5.0), max_count=np.int64(3)), dict(budget=np.int16(5), max_count=np.uint8(3)),
     dict(budget=5, max_count=3.0, threads=np.int64(1)), dict(budget=5.0, max_count=3, load_cap=np.float64(40.0)),
     dict(budget=5.0, max_count=3, time_limit_s=np.float32(30.0), mip_rel_gap=np.float64(1e-4))],
    ids=["numpy_float_and_int", "numpy_small_ints", "python_and_numpy_threads", "numpy_load_cap", "numpy_settings"],
)
def test_numpy_scalars_are_accepted_like_python_numbers(kw):
    cover, w, c, site = _instance()
    ref = opt.solve_coverage(sp.csr_array(cover), w, c, site, budget=5.0, max_count=3,
                             load_cap=40.0 if "load_cap" in kw else None)
    p = opt.solve_coverage(sp.csr_array(cover), w, c, site, **kw)
    assert p.chosen.tolist() == ref.chosen.tolist() and p.objective == ref.objective
