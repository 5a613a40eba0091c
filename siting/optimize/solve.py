"""Solving: reduce, warm start, build, run the back end, assemble; one budget at a time or a sweep over budgets."""

from __future__ import annotations

import time

import numpy as np

from .assemble import Assembly, Plan, covered_weight, plan_from_result, settled_plan
from .backends import Backend, Session
from .heuristics import _greedy_plan, _min_cost_greedy
from .model import _build, _Milp, _start_vector
from .problem import _Instance
from .reductions import _reduce, _Reduced
from .settings import SolverSettings

_NONE = np.zeros(0, np.int64)


def _solve(inst: _Instance, mode, target, settings: SolverSettings, backend: Backend, reduce, warm_start,
           red: _Reduced | None = None) -> Plan:
    """One plan: maximum coverage (``mode='max'``) or minimum cost for ``target`` weight (``mode='min'``).

    ``red`` is the reduced instance when the caller has it already (the reductions do not depend on the
    budget or the count).
    """
    t0 = time.perf_counter()
    timings = {}
    red = _reduce(inst, reduce) if red is None else red
    timings["reduce"] = time.perf_counter() - t0
    asm = Assembly.start(inst, red, mode, target, settings.mip_gap, backend.name, reduce, timings, t0)
    plan = settled_plan(asm)
    if plan is not None:
        return plan
    model_target = _model_target(inst, mode, target)

    t1 = time.perf_counter()
    greedy_red, greedy_obj = _warm_start(inst, red, mode, model_target, settings) if warm_start else (_NONE, 0.0)
    timings["greedy"] = time.perf_counter() - t1

    t2 = time.perf_counter()
    milp = _build(red, inst.budget, inst.max_count, mode=mode, target=model_target)
    timings["build"] = time.perf_counter() - t2
    usable = warm_start and greedy_red is not None and len(greedy_red) > 0
    start = _start_vector(red, milp, greedy_red) if usable else None
    t3 = time.perf_counter()
    res = backend.solve(milp, start, settings, staged=reduce)
    timings["solve"] = time.perf_counter() - t3
    red.stats["options_fixed_by_lp"] = res.n_fixed
    return plan_from_result(res, asm, milp, greedy_red, greedy_obj, settings.time_limit_s)


def _model_target(inst: _Instance, mode, target):
    """The target row's right-hand side (minimum cost only)."""
    if mode != "min":
        return target
    # any plan that covers some weight covers at least the smallest positive user weight, so a smaller
    # target is the same target; raising it keeps the target row far above the solvers' feasibility
    # tolerances (a target of 1e-6 was met within tolerance by a point covering nobody)
    return max(target, float(inst.w[inst.w > 0].min()))


def _warm_start(inst: _Instance, red: _Reduced, mode, model_target, settings: SolverSettings):
    """(greedy plan in reduced numbering or None when it misses the target, its covered weight)."""
    if mode == "max":
        ls_time_s = max(1.0, 0.1 * settings.time_limit_s)
        greedy_red, _ = _greedy_plan(red, inst.budget, inst.max_count, ls_time_s=ls_time_s)
    else:
        greedy_red, _ = _min_cost_greedy(red, model_target, inst.budget, inst.max_count)
    greedy_obj = covered_weight(inst, red, greedy_red)
    if mode == "min" and greedy_obj < model_target * (1 - 1e-12):
        return None, greedy_obj  # greedy could not reach the target: no usable start
    return greedy_red, greedy_obj


def _sweep(inst: _Instance, budgets: np.ndarray, settings: SolverSettings, backend: Backend, reduce,
           warm_start) -> list[Plan]:
    """Plans for each budget (``inst`` holds the largest); one plan per budget, in the order given.

    Where the back end keeps a model (:meth:`Backend.open`), it is built once with the largest budget and
    only the budget row changes; budgets are solved in increasing order, each warm-started from the better
    of the previous plan (still feasible under a larger budget) and greedy.  Otherwise each budget is
    solved afresh on the shared reduced instance.
    """
    red = _reduce(inst, reduce)
    milp = _build(red, inst.budget, inst.max_count) if red.C.shape[0] and red.C.shape[1] else None
    session = backend.open(milp, settings) if milp is not None and budgets.max() > 0 else None
    order = np.argsort(budgets, kind="stable")
    plans = [None] * len(budgets)
    if session is None:
        for k in order:
            inst_k = _Instance(inst.C, inst.w, inst.c, inst.site, float(budgets[k]), inst.max_count, inst.conflicts,
                               inst.load_cap)
            plans[k] = _solve(inst_k, "max", None, settings, backend, reduce, warm_start, red=red)
        return plans
    asm = Assembly.start(inst, red, "max", None, settings.mip_gap, backend.name, reduce, {}, time.perf_counter())
    prev = _NONE
    for k in order:
        plans[k] = _sweep_step(asm.for_budget(budgets[k]), milp, session, prev, settings, warm_start)
        if len(plans[k].chosen):
            prev = np.sort(np.searchsorted(red.opt, plans[k].chosen))
    return plans


def _sweep_step(asm: Assembly, milp: _Milp, session: Session, prev, settings: SolverSettings, warm_start) -> Plan:
    """One budget of the sweep on the kept model (budget row lowered to ``asm.inst.budget``)."""
    plan = settled_plan(asm)
    if plan is not None:
        return plan
    inst, red, budget = asm.inst, asm.red, asm.inst.budget
    t1 = time.perf_counter()
    g_red = _greedy_plan(red, budget, inst.max_count)[0] if warm_start else _NONE
    gval = covered_weight(inst, red, g_red)
    start_red = prev if covered_weight(inst, red, prev) >= gval and len(prev) else g_red
    asm.timings["greedy"] = time.perf_counter() - t1
    session.set_row_upper(milp.budget_row, budget)
    milp.row_hi[milp.budget_row] = budget
    start = _start_vector(red, milp, start_red) if len(start_red) else None
    t3 = time.perf_counter()
    res = session.run(start)
    asm.timings["solve"] = time.perf_counter() - t3
    return plan_from_result(res, asm, milp, g_red, max(gval, 0.0), settings.time_limit_s)
