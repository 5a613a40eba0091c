"""One solve: reduce, warm start, build, run the back end, assemble the plan."""

from __future__ import annotations

import time

import numpy as np

from ..errors import SolverError
from .assemble import _capped_served, _covered_users, _finish_gap, _message, _plan_from_result
from .backends import Backend
from .heuristics import _greedy_plan, _min_cost_greedy
from .model import _build, _start_vector
from .problem import Plan, _Instance, _raw_size
from .ranking import rank_chosen
from .reductions import _components, _reduce
from .settings import SolverSettings


def _solve(inst: _Instance, mode, target, settings: SolverSettings, backend: Backend, reduce, warm_start):
    t = {}
    t0 = time.perf_counter()
    solver, time_limit_s, mip_rel_gap = backend.name, settings.time_limit_s, settings.mip_gap
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
    res = backend.solve(milp, start, settings, staged=reduce)
    t["solve"] = time.perf_counter() - t3
    red.stats["options_fixed_by_lp"] = res.n_fixed
    return _plan_from_result(res, red, milp, greedy_red, greedy_obj, plan_from, mode, target, solver, time_limit_s)
