"""Public entry points: maximum coverage, minimum cost, budget sweep, greedy, LP bound, LP file, tables."""

from __future__ import annotations

import time

import numpy as np
import pandas as pd
import scipy.sparse as sp

from ..errors import SitingError
from .assemble import Plan
from .backends import Backend, HighsBackend, backend_for
from .heuristics import _greedy_plan
from .model import _build, _pulp_problem
from .problem import _budget_list, _finite_number, _is_scalar, _validate
from .reductions import _reduce
from .settings import SolverSettings, settings_from
from .solve import _min_cost, _solve, _sweep

_SWEEP_COLUMNS = ["budget", "covered_weight", "bound", "gap", "cost", "n_sites", "status"]


def solve_coverage(cover, weight, cost, option_site, *, budget=None, max_count=None, conflicts=None, load_cap=None,
                   option_wall=None, solver="highs", time_limit_s=60.0, mip_rel_gap=1e-4, reduce=True,
                   warm_start=True, threads=None, solver_seed=0, settings: SolverSettings | None = None,
                   backend: Backend | None = None) -> Plan:
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
    time_limit_s : wall-clock limit [s] of the whole call: reductions, greedy and local search, and both
        lexicographic solves (the plan is returned within 5 % or 1 s of it).
    mip_rel_gap : relative gap at which the solver stops and reports optimal (also the gap of the second,
        tie-breaking solve on cost).
    reduce : apply the optimum-preserving reductions of the module docstring and, with HiGHS, the staged
        solve (LP, incumbent, reduced-cost fixing); ``False`` passes the raw model to the solver as is.
    warm_start : start from greedy + swap local search.
    threads : solver threads (None: solver default).
    solver_seed : the solver's random seed; the same seed gives the same plan (solve times can differ a lot
        between seeds, see docs/MODELS.md).
    settings : the five solver keywords above as one :class:`SolverSettings` (then leave those keywords at
        their defaults).
    backend : the solver back end object (:class:`HighsBackend`, :class:`CbcBackend` or anything with their
        ``solve``/``open`` methods); default: the back end named by ``solver`` / ``settings.name``.

    Returns
    -------
    Plan
        See :class:`Plan`; ``chosen`` in rank order.  Without budget and count every useful option may
        be chosen (one per site).  Among plans of equal covered weight the cheapest is returned: a second
        solve minimises the cost subject to covering at least the first plan's weight (``Plan.tie_break``).
    """
    t0 = time.perf_counter()
    inst = _validate(cover, weight, cost, option_site, budget, max_count, conflicts, load_cap, option_wall)
    settings = settings_from(settings, solver, time_limit_s, mip_rel_gap, threads, solver_seed)
    return _solve(inst, "max", None, settings, backend or backend_for(settings.name), reduce, warm_start, t0=t0)


def min_cost_cover(cover, weight, cost, option_site, target_weight=None, *, target_share=None, budget=None,
                   max_count=None, conflicts=None, load_cap=None, option_wall=None, solver="highs", time_limit_s=60.0,
                   mip_rel_gap=1e-4, reduce=True, warm_start=True, threads=None, solver_seed=0,
                   settings: SolverSettings | None = None, backend: Backend | None = None) -> Plan:
    """Cheapest set of options covering at least ``target_weight`` of user weight (or ``target_share``).

    Same arguments as :func:`solve_coverage`; ``Plan.mode == 'min_cost'`` and ``Plan.bound`` is a proven
    lower bound on the cost.  Give exactly one of

    target_weight : the weight to cover [weight units].
    target_share : a share in [0, 1] of the most weight a *feasible* plan covers (one size per site,
        spacing, budget, count), found by a maximum-coverage solve first (with at most half of
        ``time_limit_s``); ``Plan.model_size['reachable_weight']`` holds that weight and
        ``['reachable_bound']`` its proven upper bound.

    Among the cheapest plans the one covering the most weight is returned (second solve, see
    ``Plan.tie_break``).  Raises :class:`~siting.optimize.TargetUnreachable` (a :class:`SolverError`) when
    no feasible plan reaches the target; its message and its ``reachable`` / ``bound`` attributes state
    how much weight is reachable.  A target at or below 1e-9 of the total weight counts as met by the
    empty plan.
    """
    t0 = time.perf_counter()
    inst = _validate(cover, weight, cost, option_site, budget, max_count, conflicts, load_cap, option_wall)
    if (target_weight is None) == (target_share is None):
        raise SitingError("optimiser arguments: give exactly one of 'target_weight' and 'target_share'")
    if target_weight is not None:
        target_weight = _finite_number("target_weight", target_weight, "a finite number",
                                       "pass the weight to cover as a number, or give target_share")
    if target_share is not None and (not _is_scalar(target_share) or not 0 <= float(target_share) <= 1):
        raise SitingError(f"optimiser argument 'target_share': expected a share in [0, 1], got {target_share!r}")
    settings = settings_from(settings, solver, time_limit_s, mip_rel_gap, threads, solver_seed)
    return _min_cost(inst, None if target_weight is None else float(target_weight),
                     None if target_share is None else float(target_share), settings,
                     backend or backend_for(settings.name), reduce, warm_start, t0)


def budget_sweep(cover, weight, cost, option_site, budgets, *, max_count=None, conflicts=None, load_cap=None,
                 option_wall=None, solver="highs", time_limit_s=60.0, mip_rel_gap=1e-4, reduce=True,
                 warm_start=True, threads=None, solver_seed=0, settings: SolverSettings | None = None,
                 backend: Backend | None = None, total_time_s: float | None = None) -> pd.DataFrame:
    """Covered weight against budget, for the report's curve.

    Budgets are solved in increasing order on one model where the back end keeps models (HiGHS: only the
    budget row changes), each warm-started from the better of the previous plan (still feasible under a
    larger budget) and greedy; with other back ends each budget is solved afresh.  ``time_limit_s`` applies
    to each budget (its greedy and both lexicographic solves).  ``total_time_s`` (None: no such limit) is a
    time pool for the whole curve: each budget gets the time left in the pool divided by the budgets left
    (at most ``time_limit_s``), so the time an easy budget does not use goes to the harder ones after it.
    Ties are broken toward the cheaper plan as in
    :func:`solve_coverage`.  Every point is assembled exactly as :func:`solve_coverage` assembles its plan, so the
    statuses agree (a budget below the cheapest useful option: 'optimal' with nothing chosen).

    Returns
    -------
    DataFrame with columns budget, covered_weight, bound, gap, cost, n_sites, status (in the caller's
    budget order).
    """
    b = _budget_list(budgets)
    if b.size == 0:
        return pd.DataFrame(columns=_SWEEP_COLUMNS)
    settings = settings_from(settings, solver, time_limit_s, mip_rel_gap, threads, solver_seed)
    inst = _validate(cover, weight, cost, option_site, float(b.max()), max_count, conflicts, load_cap, option_wall)
    if total_time_s is not None:
        _finite_number("total_time_s", total_time_s, "a positive number or None", "pass the sweep's whole time in "
                       "seconds", low=1e-9)
    plans = _sweep(inst, b, settings, backend or backend_for(settings.name), reduce, warm_start, total_time_s)
    rows = [(x, p.objective, p.bound, p.gap, p.cost, len(p.chosen), p.status) for x, p in zip(b, plans)]
    return pd.DataFrame(rows, columns=_SWEEP_COLUMNS)


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


def lp_relaxation_bound(cover, weight, cost, option_site, *, budget=None, max_count=None, conflicts=None,
                        load_cap=None, reduce=True, backend: HighsBackend | None = None) -> float:
    """Optimum of the LP relaxation of the maximum-coverage model: an upper bound on any plan's covered weight.

    Solved by HiGHS (``backend``: a :class:`HighsBackend` with other tuning, default its defaults).
    """
    inst = _validate(cover, weight, cost, option_site, budget, max_count, conflicts, load_cap)
    red = _reduce(inst, reduce)
    if red.C.shape[0] == 0 or red.C.shape[1] == 0:
        return 0.0
    milp = _build(red, inst.budget, inst.max_count)
    return -(backend or HighsBackend()).relaxation_value(milp) / milp.w_scale


def write_lp(path, cover, weight, cost, option_site, *, budget=None, max_count=None, conflicts=None, load_cap=None,
             target_weight=None, reduce=True) -> str:
    """Write the (reduced) model as a CPLEX-LP file through PuLP, for inspection or another solver.

    Variables ``x<j>`` are the kept options in reduced numbering.  Returns the path written.
    """
    inst = _validate(cover, weight, cost, option_site, budget, max_count, conflicts, load_cap)
    red = _reduce(inst, reduce)
    mode = "max" if target_weight is None else "min"
    milp = _build(red, inst.budget, inst.max_count, mode=mode, target=target_weight, scaled=False)  # caller's units
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
    cover, dcov = _table_arrays(options, coverage, users, direct)
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


def _table_arrays(options, coverage, users, direct):
    """(cover relation without directly covered users, directly covered per user) from the pipeline tables."""
    from ..tables import check

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
    return cover, dcov
