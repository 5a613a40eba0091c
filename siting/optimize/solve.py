"""Solving: reduce, warm start, build, run the back end, assemble; one budget at a time or a sweep over budgets.

Every step of one optimisation shares one wall-clock deadline (``time_limit_s`` after the public function
was called): reductions, greedy and local search, both lexicographic solves.  Every solver result is
checked against the objective of the point it returns (:func:`_run`).
"""

from __future__ import annotations

import time
from dataclasses import replace
from typing import cast

import numpy as np

from ..errors import SolverError
from .assemble import Assembly, Plan, covered_weight, plan_from_result, settled_plan
from .backends import Backend, Session, SolveResult, objectives_agree, stale_start_note
from .decompose import solve_split
from .heuristics import _greedy_plan, _min_cost_greedy, _prune
from .model import _build, _Milp, _satisfies, _start_vector
from .problem import _INF, TargetUnreachable, _Instance
from .reductions import _reduce, _Reduced
from .settings import SolverSettings

_NONE = np.zeros(0, np.int64)
_MIN_SOLVE_S = 0.05  # a solver run gets at least this long, even past the deadline (it then stops at once)


def _left(deadline: float) -> float:
    return max(_MIN_SOLVE_S, deadline - time.perf_counter())


def _run(backend: Backend, milp: _Milp, start, settings: SolverSettings, deadline: float, staged: bool,
         session: Session | None = None) -> SolveResult:
    """One solver run within the deadline, its point's objective recomputed and compared with the solver's.

    On a mismatch after a warm start (HiGHS 1.16 can report a better incumbent and hand back the start),
    the model is solved again without the start; the result's notes say so.  When no consistent answer
    comes back, the better point is kept with its true objective and no bound is claimed.
    """
    s = replace(settings, time_limit_s=_left(deadline))
    res = session.run(start, s.time_limit_s) if session is not None else backend.solve(milp, start, s, staged=staged)
    point = _point_objective(milp, res)
    if point is None or objectives_agree(res.primal, point):
        return res
    note = stale_start_note(backend.name, res.primal, point)
    if start is not None:
        res2 = backend.solve(milp, None, replace(settings, time_limit_s=_left(deadline)), staged=staged)
        point2 = _point_objective(milp, res2)
        notes = (*res.notes, *res2.notes, note)
        if point2 is not None and objectives_agree(res2.primal, point2):
            return replace(res2, notes=notes)
        if point2 is not None and point2 < point:
            res, point = res2, point2
        return replace(res, primal=point, dual=-_INF, status="stopped",
                       notes=(*notes[:-1], note[:-1] + "; that run disagreed too, so no bound is claimed."))
    return replace(res, primal=point, dual=-_INF, status="stopped", notes=(*res.notes, (
        f"{backend.name} reported the objective {res.primal:.10g} for a point of objective {point:.10g}; no bound "
        f"is claimed")))


def _point_objective(milp: _Milp, res: SolveResult):
    """Objective of the returned point in the solver's minimising form, or None without a usable point."""
    v = res.values
    if v is None or np.shape(v) != milp.obj.shape or not np.all(np.isfinite(v)):
        return None
    return float(milp.obj @ v)


def _solve(inst: _Instance, mode, target, settings: SolverSettings, backend: Backend, reduce, warm_start,
           red: _Reduced | None = None, t0: float | None = None, deadline: float | None = None,
           tie_break: bool = True) -> Plan:
    """One plan: maximum coverage (``mode='max'``) or minimum cost for ``target`` weight (``mode='min'``).

    ``red`` is the reduced instance when the caller has it already (the reductions do not depend on the
    budget or the count).  ``t0``: when the optimise step started (default now); ``deadline``: when it must
    end (default ``t0 + settings.time_limit_s``).
    """
    t0 = time.perf_counter() if t0 is None else t0
    deadline = t0 + float(settings.time_limit_s) if deadline is None else deadline
    timings = {}
    red = _reduce(inst, reduce) if red is None else red
    timings["reduce"] = time.perf_counter() - t0
    asm = Assembly.start(inst, red, mode, target, settings.mip_gap, backend.name, reduce, timings, t0,
                         settings.time_limit_s)
    plan = settled_plan(asm)
    if plan is not None:
        return plan
    if mode == "max" and reduce and tie_break:  # independent parts under a shared limit: exact split
        split = solve_split(inst, red, None, settings, backend, t0, deadline)
        if split is not None:
            return split[0]
    model_target = _model_target(inst, mode, target)

    t1 = time.perf_counter()
    greedy_red, greedy_obj = _warm_start(inst, red, mode, model_target, deadline) if warm_start else (_NONE, 0.0)
    timings["greedy"] = time.perf_counter() - t1

    t2 = time.perf_counter()
    milp = _build(red, inst.budget, inst.max_count, mode=mode, target=model_target)
    timings["build"] = time.perf_counter() - t2
    usable = warm_start and greedy_red is not None and len(greedy_red) > 0
    start = _start_vector(red, milp, greedy_red) if usable else None
    t3 = time.perf_counter()
    res = _run(backend, milp, start, settings, deadline, staged=reduce)
    timings["solve"] = time.perf_counter() - t3
    red.stats["options_fixed_by_lp"] = res.n_fixed
    plan = plan_from_result(res, asm, milp, greedy_red, greedy_obj, settings.time_limit_s)
    if tie_break:
        t4 = time.perf_counter()
        plan = _tie_break_solve(asm, plan, milp, bound_of(res, asm, milp), settings, backend, reduce, deadline,
                                res.notes, res.lp)
        timings["tie_break"] = time.perf_counter() - t4
    timings["total"] = time.perf_counter() - t0
    return plan


def _min_cost(inst: _Instance, target, share, settings: SolverSettings, backend: Backend, reduce, warm_start,
              t0: float) -> Plan:
    """The cheapest plan reaching ``target`` weight, or ``share`` of the most weight a feasible plan covers.

    With ``share``, a maximum-coverage solve under the same rows (one size per site, spacing, budget, count)
    first finds the reachable weight, with at most half of the time; the target is that share of the plan
    it finds (reachable by construction; when that plan is not proven optimal, its bound is stated too).
    A target no feasible plan reaches raises :class:`TargetUnreachable`, which states what is reachable.
    """
    deadline = t0 + float(settings.time_limit_s)
    red = _reduce(inst, reduce)
    note = ""
    reach = None
    if share is not None:
        mx = _solve(inst, "max", None, settings, backend, reduce, warm_start, red=red, t0=t0,
                    deadline=t0 + 0.5 * float(settings.time_limit_s), tie_break=False)
        reach = mx
        target = float(share) * mx.objective
        proof = "proven" if mx.status == "optimal" else f"the best found; at most {mx.bound:g}"
        note = (f"The target is {100 * float(share):.4g} % of the weight the best feasible plan covers "
                f"({mx.objective:g}, {proof}).")
    try:
        plan = _solve(inst, "min", target, settings, backend, reduce, warm_start, red=red, t0=t0, deadline=deadline)
    except TargetUnreachable as e:
        mx = reach or _solve(inst, "max", None, settings, backend, reduce, warm_start, red=red, deadline=deadline,
                             tie_break=False)
        total = float(inst.w.sum())
        proof = "proven optimal" if mx.status == "optimal" else f"the best found; no plan covers more than {mx.bound:g}"
        raise TargetUnreachable(
            f"no plan can cover the target weight {target:g} under the given constraints (one size per site, "
            f"spacing, budget, panel count): the most a feasible plan covers is {mx.objective:g} "
            f"({100 * mx.objective / total if total > 0 else 0:.1f} % of the weight; {proof}); {e.advice}",
            reachable=mx.objective, bound=mx.bound) from None
    if reach is not None:
        plan.model_size["reachable_weight"] = reach.objective
        plan.model_size["reachable_bound"] = reach.bound
        plan.message = f"{plan.message} {note}"
    return plan


def bound_of(res: SolveResult, asm: Assembly, milp: _Milp) -> float:
    """The raw bound of a run (before it meets the plan), as :func:`plan_from_result` computes it."""
    from .assemble import _bound_raw

    return _bound_raw(res, asm.red, milp, asm.mode) if res.status != "infeasible" else _INF


def _tie_break_solve(asm: Assembly, plan: Plan, milp: _Milp, bound_raw: float, settings: SolverSettings,
                     backend: Backend, reduce, deadline: float, first_notes=(), lp=None) -> Plan:
    """The second, lexicographic solve: among plans as good as ``plan``, the cheapest (or the heaviest).

    Maximum coverage: minimise cost subject to covered weight >= the plan's weight (and the same rows).
    Minimum cost: maximise covered weight subject to cost <= the plan's cost and weight >= the target.
    Run only when the first plan is proven within the asked gap and time is left; started from the first
    plan, and its result is kept only when it is exactly better, so the plan never gets worse.  The first
    solve's bound stays the plan's bound.  ``plan.tie_break`` says how it went.  ``lp``: the first solve's
    LP relaxation (objective, row duals), which can prove the plan the cheapest without a second solve
    (:func:`_cheapest_by_lp_duals`).
    """
    if len(plan.chosen) == 0:
        return plan
    if plan.status != "optimal" or deadline - time.perf_counter() <= 2 * _MIN_SOLVE_S:
        why = "no time was left" if plan.status == "optimal" else "the first plan is not proven"
        return _with_tie_break(plan, "skipped", f"Ties were not broken ({why}).")
    inst, red = asm.inst, asm.red
    chosen_red = np.sort(np.searchsorted(red.opt, plan.chosen))
    tol_w = 1e-9 * max(1.0, abs(plan.objective))
    tol_c = 1e-9 * max(1.0, abs(plan.cost))
    if asm.mode == "max" and lp is not None and _cheapest_by_lp_duals(red, milp, lp, chosen_red, plan.cost, tol_c):
        return _with_tie_break(plan, "proven", "Ties broken by LP duality: the first solve's LP relaxation proves "
                                               "that no plan covering at least as much weight is cheaper.")
    # The second model's new row sits half a grid step away from the plan's value when the values lie on a
    # decimal grid (weights 1, 0.5, 0.125; costs in cents): no plan lies between, and the row stays clear of the
    # solvers' tolerances (HiGHS 1.16 presolve handed back the start as optimal with the row 1e-9 below the
    # plan's weight, although a cheaper plan of that weight exists; it found it with the row 5e-4 below).  Under
    # a load cap the served weight need not lie on the grid of the weights, so the weight row keeps tol_w.
    if asm.mode == "max":
        margin = max(tol_w, 0.5 * _decimal_step(red.w) if red.cap is None else 0.0)
        m2 = _build(red, inst.budget, inst.max_count, mode="min", target=plan.objective - margin)
    else:
        margin = max(tol_c, 0.5 * _decimal_step(red.c))
        budget = plan.cost + margin if inst.budget is None else min(inst.budget, plan.cost + margin)
        m2 = _build(red, budget, inst.max_count, mode="max", target=_model_target(inst, "min", asm.target))
    start = _start_vector(red, m2, chosen_red)
    if red.cap is None and not _satisfies(m2, start[1]):  # (with a load cap the start is partial)
        return _with_tie_break(plan, "skipped", "Ties were not broken (the plan does not fit the second model "
                                                "within tolerance).")
    try:
        res = _run(backend, m2, start, settings, deadline, staged=reduce)
    except SolverError:
        return _with_tie_break(plan, "not_proven", "Ties were not broken (the second solve failed).")
    state = "proven" if res.status == "optimal" else "not_proven"
    better = None
    if res.values is not None and _satisfies(m2, res.values):
        n = m2.n_x
        ch = np.flatnonzero(res.values[:n] > 0.5)
        if asm.mode == "max" and red.cap is None:
            ch = _prune(red, ch)
        z = res.values[n:] if red.cap is not None else None
        cand = asm.plan(ch, "optimal", bound_raw, plan.greedy_objective, z=z, milp=milp,
                        notes=(*first_notes, *res.notes))
        if asm.mode == "max":
            ok = cand.objective >= plan.objective - tol_w and cand.cost < plan.cost - tol_c
        else:
            ok = cand.cost <= plan.cost + tol_c and cand.objective > plan.objective + tol_w
        better = cand if ok else None
    what = ("no plan covering at least as much weight is cheaper" if asm.mode == "max"
            else "no plan of this cost or less covers more weight")
    if state == "proven":
        text = f"Ties broken by a second solve: {what}."
    else:
        text = (f"Ties broken as far as the time allowed: the second solve stopped ({res.status}) before proving "
                f"that {what}.")
    if better is not None:
        better.timings_s = plan.timings_s
        return _with_tie_break(better, state, text)
    return _with_tie_break(plan, state, " ".join((*res.notes, text)))


def _decimal_step(values: np.ndarray) -> float:
    """The coarsest step 10^-k (k = 0..6) of which every value is a whole multiple (within 1e-9), else 0."""
    v = np.abs(values[values != 0])
    for k in range(7):
        q = v * 10.0**k
        if np.all(np.abs(q - np.round(q)) <= 1e-9 * np.maximum(1.0, q)):
            return 10.0**-k
    return 0.0


def _cheapest_by_lp_duals(red: _Reduced, milp: _Milp, lp, chosen_red, plan_cost: float, tol_c: float) -> bool:
    """True when the LP relaxation of the maximum-coverage model proves that no plan covering the weight of
    ``chosen_red`` is cheaper than ``plan_cost``.

    The optimal value v(B, K) of the LP relaxation is concave in the right-hand sides of the budget and count
    rows, and their optimal duals mu, lam >= 0 are a supergradient (LP sensitivity analysis: D. Bertsimas and
    J. N. Tsitsiklis, "Introduction to Linear Optimization", Athena Scientific, 1997, section 5.2; from
    memory).  A plan of cost C' and count K' is a point of the relaxation with right-hand sides (C', K'), so
    it covers at most z + mu (C' - B) + lam (K' - K), where z is the LP optimum.  A plan covering at least
    the weight W of this plan therefore has mu (B - C') + lam (K - K') <= s = z - W (plus a tolerance), so
    C' >= B - s / mu and K' >= K - s / lam: its cost is at least the larger of B - s / mu and the sum of the
    ceil(K - s / lam) cheapest options.  When that bound reaches ``plan_cost``, the plan is the cheapest.
    """
    z_min, row_dual = lp
    start_idx, start_val = _start_vector(red, milp, chosen_red)
    x = np.zeros(len(milp.obj))
    x[start_idx] = start_val
    if not _satisfies(milp, x):
        return False
    W = -float(milp.obj @ x)  # weight of the plan in the model's terms (maximising form)
    s = max(0.0, -z_min - W) + 1e-9 * max(1.0, abs(W))
    bound = -_INF
    if milp.budget_row >= 0:
        mu = max(0.0, -float(row_dual[milp.budget_row]))
        if mu > 0:
            bound = (float(milp.row_hi[milp.budget_row]) - s / mu) / milp.c_scale  # model -> plan cost units
    if milp.count_row >= 0:
        lam = max(0.0, -float(row_dual[milp.count_row]))
        if lam > 0:
            k_min = int(np.ceil(float(milp.row_hi[milp.count_row]) - s / lam - 1e-9))
            bound = max(bound, float(np.sort(red.c)[: max(0, k_min)].sum()))
    return bound >= plan_cost - tol_c


def _with_tie_break(plan: Plan, state: str, text: str) -> Plan:
    plan.tie_break = state
    plan.message = f"{plan.message} {text}".strip()
    return plan


def _model_target(inst: _Instance, mode, target):
    """The target row's right-hand side (minimum cost only)."""
    if mode != "min":
        return target
    # any plan that covers some weight covers at least the smallest positive user weight, so a smaller
    # target is the same target; raising it keeps the target row far above the solvers' feasibility
    # tolerances (a target of 1e-6 was met within tolerance by a point covering nobody)
    return max(target, float(inst.w[inst.w > 0].min()))


def _warm_start(inst: _Instance, red: _Reduced, mode, model_target, deadline: float):
    """(greedy plan in reduced numbering or None when it misses the target, its covered weight)."""
    if mode == "max":
        # local search gets at most a quarter of the time left (10 s at most)
        ls_time_s = min(10.0, max(0.0, 0.25 * (deadline - time.perf_counter())))
        greedy_red, _ = _greedy_plan(red, inst.budget, inst.max_count, ls_time_s=ls_time_s)
    else:
        greedy_red, _ = _min_cost_greedy(red, model_target, inst.budget, inst.max_count)
    greedy_obj = covered_weight(inst, red, greedy_red)
    if mode == "min" and greedy_obj < model_target * (1 - 1e-12):
        return None, greedy_obj  # greedy could not reach the target: no usable start
    return greedy_red, greedy_obj


def _sweep(inst: _Instance, budgets: np.ndarray, settings: SolverSettings, backend: Backend, reduce,
           warm_start, total_time_s: float | None = None) -> list[Plan]:
    """Plans for each budget (``inst`` holds the largest); one plan per budget, in the order given.

    Where the back end keeps a model (:meth:`Backend.open`), it is built once with the largest budget and
    only the budget row changes; budgets are solved in increasing order, each warm-started from the better
    of the previous plan (still feasible under a larger budget) and greedy.  Otherwise each budget is
    solved afresh on the shared reduced instance.  Each budget has its own ``time_limit_s``, greedy and
    tie-break solve included; with ``total_time_s`` it is at most the pool's time left over the budgets left.
    """
    t0 = time.perf_counter()
    pool_end = None if total_time_s is None else t0 + float(total_time_s)

    def point_settings(left: int) -> SolverSettings:
        if pool_end is None:
            return settings
        share = max(_MIN_SOLVE_S, (pool_end - time.perf_counter()) / max(1, left))
        return replace(settings, time_limit_s=min(float(settings.time_limit_s), share))

    red = _reduce(inst, reduce)
    if reduce and inst.max_count is None and red.C.shape[0] and red.C.shape[1]:  # independent parts: exact split
        end = t0 + float(settings.time_limit_s) if pool_end is None else min(pool_end, t0 + settings.time_limit_s)
        split = solve_split(inst, red, budgets.tolist(), settings, backend, t0, end)
        if split is not None:
            return split
    milp = _build(red, inst.budget, inst.max_count) if red.C.shape[0] and red.C.shape[1] else None
    session = backend.open(milp, settings) if milp is not None and budgets.max() > 0 else None
    order = np.argsort(budgets, kind="stable")
    plans: list[Plan | None] = [None] * len(budgets)
    if session is None:
        for i, k in enumerate(order):
            inst_k = _Instance(inst.C, inst.w, inst.c, inst.site, float(budgets[k]), inst.max_count, inst.conflicts,
                               inst.load_cap)
            plans[k] = _solve(inst_k, "max", None, point_settings(len(order) - i), backend, reduce, warm_start,
                              red=red)  # fmt: skip
        return cast("list[Plan]", plans)  # every budget filled
    asm = Assembly.start(inst, red, "max", None, settings.mip_gap, backend.name, reduce, {}, time.perf_counter(),
                         settings.time_limit_s)
    prev = _NONE
    for i, k in enumerate(order):
        plans[k] = _sweep_step(asm.for_budget(budgets[k]), cast(_Milp, milp), session, prev,
                               point_settings(len(order) - i), backend, reduce, warm_start)  # fmt: skip
        if len(plans[k].chosen):
            prev = np.sort(np.searchsorted(red.opt, plans[k].chosen))
    return _monotone_bounds(cast("list[Plan]", plans), budgets, settings.mip_gap)  # every budget filled


def _monotone_bounds(plans: list[Plan], budgets: np.ndarray, mip_gap: float) -> list[Plan]:
    """Tighten each point's bound by the bounds of larger budgets (the most weight a plan covers never falls
    as the budget grows, so a bound at a larger budget holds at a smaller one); gap and status follow."""
    ub = _INF
    for k in np.argsort(budgets, kind="stable")[::-1]:
        p = plans[k]
        ub = min(ub, p.bound)
        if ub < p.bound:
            p.bound = max(ub, p.objective)
            p.gap = (p.bound - p.objective) / max(p.bound, 1e-12) if p.bound > 0 else 0.0
            if p.status != "empty" and p.gap <= max(mip_gap, 1e-9) * 1.0001 + 1e-12:
                p.status = "optimal"
    return plans


def _sweep_step(asm: Assembly, milp: _Milp, session: Session, prev, settings: SolverSettings, backend: Backend,
                reduce, warm_start) -> Plan:
    """One budget of the sweep on the kept model (budget row lowered to ``asm.inst.budget``)."""
    deadline = asm.t0 + float(settings.time_limit_s)
    plan = settled_plan(asm)
    if plan is not None:
        return plan
    inst, red, budget = asm.inst, asm.red, asm.inst.budget
    t1 = time.perf_counter()
    ls_time_s = min(10.0, max(0.0, 0.25 * (deadline - time.perf_counter())))
    g_red = _greedy_plan(red, budget, inst.max_count, ls_time_s=ls_time_s)[0] if warm_start else _NONE
    gval = covered_weight(inst, red, g_red)
    start_red = prev if covered_weight(inst, red, prev) >= gval and len(prev) else g_red
    asm.timings["greedy"] = time.perf_counter() - t1
    budget_model = cast(float, budget) * milp.c_scale  # a sweep budget is a number; the model's cost units
    session.set_row_upper(milp.budget_row, budget_model)
    milp.row_hi[milp.budget_row] = budget_model
    start = _start_vector(red, milp, start_red) if len(start_red) else None
    t3 = time.perf_counter()
    res = _run(backend, milp, start, settings, deadline, staged=reduce, session=session)
    asm.timings["solve"] = time.perf_counter() - t3
    plan = plan_from_result(res, asm, milp, g_red, max(gval, 0.0), settings.time_limit_s)
    t4 = time.perf_counter()
    plan = _tie_break_solve(asm, plan, milp, bound_of(res, asm, milp), settings, backend, reduce, deadline,
                            res.notes)
    asm.timings["tie_break"] = time.perf_counter() - t4
    asm.timings["total"] = time.perf_counter() - asm.t0
    return plan
