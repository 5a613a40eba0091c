"""From chosen options to a :class:`Plan`: covered users, bound, gap, status and message."""

from __future__ import annotations

import math

import numpy as np
import scipy.sparse as sp

from ..errors import SolverError
from .backends import SolveResult
from .heuristics import _prune
from .model import _satisfies
from .problem import _INF, _TINY, Plan, _Instance
from .reductions import _Reduced


def _covered_users(inst: _Instance, chosen: np.ndarray) -> np.ndarray:
    cov = np.zeros(inst.C.shape[1], bool)
    if len(chosen):
        cov[inst.C[chosen].indices] = True
    return cov


def _capped_served(inst: _Instance, red: _Reduced, chosen_red: np.ndarray, z: np.ndarray | None) -> np.ndarray:
    """Users served under a load cap: from the solver's assignment z, or by a greedy assignment."""
    C = red.C
    n_cls = C.shape[1]
    served_cls = np.zeros(n_cls)
    if z is not None:
        served_cls = np.bincount(C.indices, weights=np.round(z), minlength=n_cls)
    elif len(chosen_red):
        # greedy assignment: users by descending weight to the covering surface with most room
        room = {int(j): float(red.cap[j]) for j in chosen_red}
        Cc = sp.csc_array(C[:, :][chosen_red])
        for i in np.argsort(-red.w, kind="stable"):
            rows = chosen_red[Cc.indices[Cc.indptr[i]:Cc.indptr[i + 1]]]
            for _ in range(int(red.mult[i])):
                best = max(rows, key=lambda j: room[int(j)], default=None)
                if best is None or room[int(best)] + 1e-9 < red.w[i]:
                    break
                room[int(best)] -= red.w[i]
                served_cls[i] += 1
    served = np.zeros(inst.C.shape[1], bool)
    uc = red.user_class
    ok = uc >= 0
    order = np.flatnonzero(ok)
    cls = uc[order]
    srt = np.argsort(cls, kind="stable")
    order, cls = order[srt], cls[srt]
    first = np.searchsorted(cls, cls)
    rank_in = np.arange(len(cls)) - first
    served[order[rank_in < served_cls[cls]]] = True
    return served


def _message(mode, status, objective, bound, gap, cost, n, total, solver, target=None, reason=""):
    share = objective / total if total > 0 else 0.0
    if n == 0 and reason:
        return f"No surface is placed: {reason}."
    what = (f"{n} surface(s) costing {cost:g} cover weight {objective:g} ({100 * share:.1f} % of the weight "
            f"that no base station covers directly)")
    if mode == "min_cost":
        what = f"The cheapest plan found to cover weight {target:g}: " + what
    if status == "optimal":
        return f"{what}; proven optimal by {solver} (gap {100 * gap:.3g} %)."
    if status == "time_limit":
        return f"{what}; the time limit stopped {solver} with a proven gap of {100 * gap:.3g} % (bound {bound:g})."
    if status == "greedy_only":
        return (f"{what}; {solver} found nothing better than the greedy plan within the time limit "
                f"(proven bound {bound:g}, gap {100 * gap:.3g} %).")
    return f"{what}; solver status {status}."


def _finish_gap(mode, objective, cost, bound):
    if mode == "max_coverage":
        bound = max(bound, objective)
        return bound, (bound - objective) / max(bound, _TINY) if bound > 0 else 0.0
    bound = min(bound, cost)
    return bound, (cost - bound) / max(cost, _TINY) if cost > 0 else 0.0


def _plan_from_result(res, red, milp, greedy_red, greedy_obj, plan_from, mode, target, solver, time_limit_s):
    n = milp.n_x
    if res.values is not None and not _satisfies(milp, res.values):
        # CBC stopped inside the root LP ("Stopped on iterations") writes the LP's current point, which can break
        # the budget and the one-size-per-site rows: never a plan
        res = SolveResult(None, _INF, res.dual, res.status, res.detail + "; its point breaks the model and is ignored")
    if res.status in ("error", "other") and res.values is None:
        raise SolverError(f"{solver} stopped without a plan or a bound ({res.detail}); the run gives no proof, so "
                          f"no plan is reported; check the solver options (threads, time limit) or try the other "
                          f"solver ('highs' or 'cbc')")
    if res.status == "infeasible":
        if mode == "min":
            raise SolverError(
                f"no plan can cover the target weight {target:g} under the given constraints ({solver} proved the "
                f"model infeasible); lower the target, raise the budget or count, or add candidate spots"
            )
        raise SolverError(f"{solver} reported the coverage model infeasible, which should not happen; "
                          f"check the budget and count arguments")
    # bound on the plan's objective (covered weight, or cost for min-cost)
    if mode == "max":
        # without a solver bound (stopped before the root LP), the weight of every coverable user is one
        bound_raw = -res.dual + milp.delta if np.isfinite(res.dual) else float((red.w * red.mult).sum())
        if red.cap is None:
            bound_raw = min(bound_raw, float(red.w.sum()))
        if np.isfinite(bound_raw) and np.all(np.mod(red.w, 1) == 0):
            bound_raw = math.floor(bound_raw + 1e-6)  # integral weights: the bound is an integer
    else:
        bound_raw = res.dual if np.isfinite(res.dual) else 0.0
        if np.all(np.mod(red.c, 1) == 0):
            bound_raw = math.ceil(bound_raw - 1e-6)
    if res.values is not None:
        x = res.values[:n] > 0.5
        chosen_red = np.flatnonzero(x)
        z = res.values[n:] if red.cap is not None else None
        if mode == "max" and red.cap is None:
            chosen_red = _prune(red, chosen_red)
        p = plan_from(chosen_red, "optimal" if res.status == "optimal" else "time_limit", bound_raw, greedy_obj,
                      solver, z=z, milp=milp)
        # never return less than the warm start (a time-limited solver may not have used it)
        if mode == "max" and greedy_red is not None and len(greedy_red) and greedy_obj > p.objective + 1e-9:
            return plan_from(greedy_red, "greedy_only", bound_raw, greedy_obj, solver, milp=milp)
        return p
    if greedy_red is not None and len(greedy_red):
        return plan_from(greedy_red, "greedy_only", bound_raw, greedy_obj, solver, milp=milp)
    raise SolverError(
        f"{solver} found no plan within {time_limit_s:g} s ({res.detail}) and there is no warm start; "
        f"raise time_limit_s or keep warm_start=True"
    )


def _value_red(red, inst, chosen_red):
    if len(chosen_red) == 0:
        return 0.0
    if inst.load_cap is not None:
        return float(inst.w[_capped_served(inst, red, chosen_red, None)].sum())
    return float(inst.w[_covered_users(inst, red.opt[chosen_red])].sum())


def _sweep_plan(inst, red, chosen_red, status, bound_raw, greedy_obj, solver_name, z, mip_rel_gap):
    chosen = red.opt[chosen_red] if len(chosen_red) else np.zeros(0, np.int64)
    covered = _capped_served(inst, red, chosen_red, z) if inst.load_cap is not None else _covered_users(inst, chosen)
    objective = float(inst.w[covered].sum())
    cost = float(inst.c[chosen].sum()) if len(chosen) else 0.0
    bound, gap = _finish_gap("max_coverage", objective, cost, bound_raw)
    if status == "optimal" and gap > max(mip_rel_gap, 1e-9) * 1.0001:
        status = "time_limit"
    if len(chosen) == 0 and status == "optimal":
        status = "empty"
    return Plan(chosen, covered, objective, bound, gap, status, solver_name, cost, greedy_obj, "", {}, {})
