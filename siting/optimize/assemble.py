"""From chosen options to a :class:`Plan`: the one assembly path of maximum coverage, minimum cost and the sweep.

Every plan (solver plan, warm start, or a plan settled without a solve) goes through :meth:`Assembly.plan`:
covered users, objective, cost, bound and gap, status, ranking, message and model size are computed there
and nowhere else.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from typing import cast

import numpy as np
import scipy.sparse as sp

from ..errors import SolverError
from .backends import SolveResult
from .heuristics import _prune
from .model import _Milp, _satisfies
from .problem import _INF, _TINY, TargetUnreachable, _Instance, _raw_size
from .ranking import rank_chosen
from .reductions import _components, _Reduced

_NO_MODEL = {"rows": 0, "cols": 0, "nonzeros": 0}


@dataclass
class Plan:
    """Result of an optimisation.

    Attributes
    ----------
    chosen : option indices (into the caller's option arrays), in rank order (see :func:`rank_chosen`).
    covered : bool per user of the caller: covered by the chosen options (with a load cap: served).
    objective : covered weight of the plan, surface-covered users only [weight units].
    bound : proven upper bound on ``objective`` (maximum coverage) or proven lower bound on ``cost``
        (minimum cost, ``mode == 'min_cost'``).
    gap : relative distance between plan and bound, 0 when proven optimal.
    status : 'optimal' (the bound proves the plan within the relative gap asked, whatever stopped the
        solver), 'time_limit' (the time limit was reached; usable plan, gap reported), 'stopped' (the
        solver stopped before the time limit without closing the gap, e.g. a point that disagreed with
        its reported objective; gap reported), 'greedy_only' (the solver found nothing better than the
        warm start), 'empty' (nothing to choose: no candidate option covers a user who needs coverage).
    solver : 'highs', 'cbc' or 'greedy'.
    cost : plan cost [currency units].
    greedy_objective : covered weight of the greedy + local search plan.
    message : plain sentence for the report.
    model_size : rows, cols, nonzeros before and after reductions, users/options dropped, components.
    timings_s : wall-clock seconds per step.
    mode : 'max_coverage' or 'min_cost'.
    empty_reason : why a plan proven optimal (or 'empty') chooses nothing, '' otherwise:
        'nothing_affordable' (no option within the budget adds covered weight; a budget below the cheapest
        useful option is one case), 'count_zero' (the panel count is 0), 'target_met' (minimum cost: the
        target is met without surfaces), 'no_candidates' (status 'empty').
    tie_break : how ties were settled by the second, lexicographic solve: 'proven' (maximum coverage: no
        plan covering as much weight is cheaper; minimum cost: no plan of this cost or less covers more
        weight; both within the relative gap asked), 'not_proven' (the second solve ran out of time: the
        plan is the best of both solves), 'skipped' (no time was left, or the first plan is not proven),
        '' (nothing to break: an empty plan).
    """

    chosen: np.ndarray
    covered: np.ndarray
    objective: float
    bound: float
    gap: float
    status: str
    solver: str
    cost: float
    greedy_objective: float
    message: str
    model_size: dict = field(default_factory=dict)
    timings_s: dict = field(default_factory=dict)
    mode: str = "max_coverage"
    empty_reason: str = ""
    tie_break: str = ""


def _covered_users(inst: _Instance, chosen: np.ndarray) -> np.ndarray:
    """Bool per caller's user: covered by one of the options ``chosen`` (caller's numbering)."""
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
        cap = cast(np.ndarray, red.cap)  # a load cap is set on this path
        room = {int(j): float(cap[j]) for j in chosen_red}
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


def _message(mode, status, objective, bound, gap, cost, n, total, solver, target=None, reason="",
             solver_status="", time_limit_s=None, notes=()):
    """The plan in one plain sentence for the report (plus any notes on how it was found)."""
    share = objective / total if total > 0 else 0.0
    if n == 0 and reason:
        return " ".join([f"No surface is placed: {reason}.", *notes])
    what = (f"{n} surface(s) costing {cost:g} cover weight {objective:g} ({100 * share:.1f} % of the weight "
            f"that no base station covers directly)")
    if mode == "min_cost":
        what = f"The cheapest plan found to cover weight {target:g}: " + what
    limit = f" of {time_limit_s:g} s" if time_limit_s else ""
    if status == "optimal":
        text = f"{what}; proven optimal by {solver} (gap {100 * gap:.3g} %, bound {bound:g})."
    elif status == "time_limit":
        text = f"{what}; the time limit{limit} stopped {solver} with a proven gap of {100 * gap:.3g} % (bound {bound:g})."
    elif status == "stopped":
        text = (f"{what}; {solver} stopped before the time limit ({solver_status or 'no reason given'}) with a "
                f"proven gap of {100 * gap:.3g} % (bound {bound:g}).")
    elif status == "greedy_only":
        why = f"within the time limit{limit}" if solver_status in ("time_limit", "killed") else \
            f"(solver status '{solver_status}')"
        text = (f"{what}; {solver} found nothing better than the greedy plan {why} "
                f"(proven bound {bound:g}, gap {100 * gap:.3g} %).")
    else:
        text = f"{what}; solver status {status}."
    return " ".join([text, *notes])


def _final_status(status: str, gap: float, mip_gap: float) -> str:
    """The plan's status from how the solver stopped and the gap the bound proves.

    A gap within the asked relative gap is 'optimal' whatever stopped the solver; otherwise the solver's
    own reason stands, and a run that claimed optimality without a bound to match becomes 'stopped',
    never 'time_limit' (no limit was reached).
    """
    if status == "empty":
        return status
    if gap <= max(mip_gap, 1e-9) * 1.0001 + 1e-12:
        return "optimal"
    if status == "greedy_only":
        return status
    if status in ("time_limit", "killed"):
        return "time_limit"
    return "stopped"


def _finish_gap(mode, objective, cost, bound):
    """(bound, relative gap) once the plan is known: a bound never weaker than the plan itself."""
    if mode == "max_coverage":
        bound = max(bound, objective)
        return bound, (bound - objective) / max(bound, _TINY) if bound > 0 else 0.0
    bound = min(bound, cost)
    return bound, (cost - bound) / max(cost, _TINY) if cost > 0 else 0.0


def covered_weight(inst: _Instance, red: _Reduced, chosen_red: np.ndarray) -> float:
    """Covered (with a load cap: served) weight of options given in reduced numbering."""
    if len(chosen_red) == 0:
        return 0.0
    if inst.load_cap is not None:
        return float(inst.w[_capped_served(inst, red, chosen_red, None)].sum())
    return float(inst.w[_covered_users(inst, red.opt[chosen_red])].sum())


@dataclass
class Assembly:
    """What turning chosen options into a :class:`Plan` needs besides the options: one per solve.

    ``mode`` is 'max' (maximum coverage) or 'min' (minimum cost, ``target`` weight).  ``sizes`` holds the
    parts of ``Plan.model_size`` that do not depend on the budget (raw model size, components), computed
    once and shared by the budgets of a sweep.
    """

    inst: _Instance
    red: _Reduced
    mode: str
    target: float | None
    mip_gap: float
    solver: str
    timings: dict
    t0: float
    sizes: dict
    time_limit_s: float | None = None

    @classmethod
    def start(cls, inst, red, mode, target, mip_gap, solver, reduce, timings, t0, time_limit_s=None) -> Assembly:
        sizes = {"raw": _raw_size(inst), "components": _components(red) if reduce else None}
        return cls(inst, red, mode, target, mip_gap, solver, timings, t0, sizes, time_limit_s)

    def for_budget(self, budget: float) -> Assembly:
        """The same assembly for another budget (sweep), with its own timings."""
        inst = _Instance(self.inst.C, self.inst.w, self.inst.c, self.inst.site, float(budget), self.inst.max_count,
                         self.inst.conflicts, self.inst.load_cap)
        return Assembly(inst, self.red, self.mode, self.target, self.mip_gap, self.solver, {}, time.perf_counter(),
                        self.sizes, self.time_limit_s)

    @property
    def plan_mode(self) -> str:
        return "min_cost" if self.mode == "min" else "max_coverage"

    def plan(self, chosen_red, status, bound_raw, greedy_obj, z=None, milp: _Milp | None = None,
             empty_reason="", reason="", solver_status="", notes=(), tie_break="") -> Plan:
        """The plan of options ``chosen_red`` (reduced numbering); ``bound_raw`` before it meets the plan."""
        inst, red = self.inst, self.red
        chosen = red.opt[chosen_red] if len(chosen_red) else np.zeros(0, np.int64)
        if inst.load_cap is not None:
            covered = _capped_served(inst, red, chosen_red, z)
        else:
            covered = _covered_users(inst, chosen)
        objective = float(inst.w[covered].sum())
        cost = float(inst.c[chosen].sum()) if len(chosen) else 0.0
        m = self.plan_mode
        bound, gap = _finish_gap(m, objective, cost, bound_raw)
        solver_status = solver_status or status
        status = _final_status(status, gap, self.mip_gap)
        if len(chosen):
            chosen = rank_chosen(chosen, inst.C, inst.w)["option"].to_numpy(np.int64)
        elif status == "optimal" and not empty_reason:
            empty_reason = "target_met" if m == "min_cost" else "nothing_affordable"
            reason = reason or ("the target is already met without surfaces" if m == "min_cost"
                                else "no affordable option adds covered weight")
        msg = _message(m, status, objective, bound, gap, cost, len(chosen), float(inst.w.sum()), self.solver,
                       self.target, reason, solver_status, self.time_limit_s, tuple(notes))
        size = {"raw": self.sizes["raw"], "reduced": milp.size if milp is not None else dict(_NO_MODEL)}
        size.update(red.stats)
        size["components"] = self.sizes["components"]
        self.timings["total"] = time.perf_counter() - self.t0
        return Plan(chosen, covered, objective, float(bound), float(gap), status, self.solver, cost,
                    float(greedy_obj), msg, size, self.timings, m, empty_reason if len(chosen) == 0 else "",
                    tie_break if len(chosen) else "")


def settled_plan(asm: Assembly) -> Plan | None:
    """The plan when no solve is needed (nothing to choose, nothing affordable, target met), else None."""
    inst, red, mode, target = asm.inst, asm.red, asm.mode, asm.target
    empty = np.zeros(0, np.int64)
    n, m = red.C.shape
    # mode "min" always has a target; zero within floating-point noise of the total counts as met
    if mode == "min" and cast(float, target) <= 1e-9 * float(inst.w.sum()):
        return asm.plan(empty, "optimal", 0.0, 0.0, empty_reason="target_met",
                        reason="the target weight is already met")
    if n == 0 or m == 0:
        if mode == "min":
            raise TargetUnreachable(
                f"no plan can cover the target weight {target:g}: no candidate option covers a user who needs "
                f"coverage (a feasible plan covers 0); lower the target or add candidate spots", 0.0, 0.0)
        return asm.plan(empty, "empty", 0.0, 0.0, empty_reason="no_candidates",
                        reason="no candidate option covers any user who still needs coverage")
    if mode == "max" and inst.max_count == 0:
        return asm.plan(empty, "optimal", 0.0, 0.0, empty_reason="count_zero", reason="the panel count is 0")
    if mode == "max" and inst.budget is not None and red.c.min() > inst.budget:
        return asm.plan(empty, "optimal", 0.0, 0.0, empty_reason="nothing_affordable",
                        reason=f"the budget {inst.budget:g} is below the cheapest useful option ({red.c.min():g})")
    return None


def _checked(res: SolveResult, asm: Assembly, milp: _Milp) -> SolveResult:
    """The result with a point that breaks the model removed; errors for runs that prove nothing."""
    solver = asm.solver
    if res.values is not None and not _satisfies(milp, res.values):
        # CBC stopped inside the root LP ("Stopped on iterations") writes the LP's current point, which can break
        # the budget and the one-size-per-site rows: never a plan
        res = SolveResult(None, _INF, res.dual, res.status, res.detail + "; its point breaks the model and is ignored")
    if res.status in ("error", "other") and res.values is None:
        raise SolverError(f"{solver} stopped without a plan or a bound ({res.detail}); the run gives no proof, so "
                          f"no plan is reported; check the solver options (threads, time limit) or try the other "
                          f"solver ('highs' or 'cbc')")
    if res.status == "infeasible":
        if asm.mode == "min":
            raise TargetUnreachable(
                f"no plan can cover the target weight {asm.target:g} under the given constraints ({solver} proved "
                f"the model infeasible); lower the target, raise the budget or count, or add candidate spots")
        raise SolverError(f"{solver} reported the coverage model infeasible, which should not happen; "
                          f"check the budget and count arguments")
    return res


def _bound_raw(res: SolveResult, red: _Reduced, milp: _Milp, mode: str) -> float:
    """Bound on the plan's objective (covered weight, or cost for min-cost) from the solver's dual bound."""
    if mode == "max":
        # without a solver bound (stopped before the root LP), the weight of every coverable user is one
        bound_raw = -res.dual / milp.w_scale if np.isfinite(res.dual) else float((red.w * red.mult).sum())
        if red.cap is None:
            bound_raw = min(bound_raw, float(red.w.sum()))
        if np.isfinite(bound_raw) and np.all(np.mod(red.w, 1) == 0):
            bound_raw = math.floor(bound_raw + 1e-6)  # integral weights: the bound is an integer
        return bound_raw
    bound_raw = res.dual / milp.c_scale if np.isfinite(res.dual) else 0.0
    if np.all(np.mod(red.c, 1) == 0):
        bound_raw = math.ceil(bound_raw - 1e-6)
    return bound_raw


def plan_from_result(res: SolveResult, asm: Assembly, milp: _Milp, greedy_red, greedy_obj, time_limit_s) -> Plan:
    """The plan of a solver run: its point, or the warm start when that is better or the run found none."""
    res = _checked(res, asm, milp)
    red, mode, n = asm.red, asm.mode, milp.n_x
    bound_raw = _bound_raw(res, red, milp, mode)
    has_greedy = greedy_red is not None and len(greedy_red) > 0
    if res.values is not None:
        chosen_red = np.flatnonzero(res.values[:n] > 0.5)
        z = res.values[n:] if red.cap is not None else None
        if mode == "max" and red.cap is None:
            chosen_red = _prune(red, chosen_red)
        p = asm.plan(chosen_red, res.status, bound_raw, greedy_obj, z=z, milp=milp, notes=res.notes)
        # never return less than the warm start (a time-limited solver may not have used it)
        if not (mode == "max" and has_greedy and greedy_obj > p.objective + 1e-9):
            return p
    if has_greedy:
        return asm.plan(greedy_red, "greedy_only", bound_raw, greedy_obj, milp=milp, solver_status=res.status,
                        notes=res.notes)
    raise SolverError(
        f"{asm.solver} found no plan within {time_limit_s:g} s ({res.detail}) and there is no warm start; "
        f"raise time_limit_s or keep warm_start=True"
    )
