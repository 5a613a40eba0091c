"""Solver back ends: HiGHS through highspy and CBC through PuLP's bundled binary."""

from __future__ import annotations

import os
import subprocess
import tempfile
import time
import warnings
from dataclasses import dataclass, replace

import numpy as np

from .model import _Milp, _pulp_problem, _satisfies
from .problem import _INF, _TINY


@dataclass
class _Result:
    values: np.ndarray | None
    primal: float  # solver objective (minimise), inf if none
    dual: float  # solver dual bound (minimise), -inf if none
    status: str  # 'optimal', 'time_limit', 'infeasible', 'killed', 'other', 'error'
    detail: str = ""
    n_fixed: int = 0  # options set to 0 by reduced-cost fixing (staged HiGHS path)


_highs_banner_done = [False]


def _quiet_highs():
    """A ``highspy.Highs`` instance; the licence banner HiGHS prints to stdout on the first one is swallowed."""
    import sys

    import highspy

    if _highs_banner_done[0]:
        return highspy.Highs()
    _highs_banner_done[0] = True
    try:
        fd = sys.stdout.fileno()
    except (AttributeError, OSError, ValueError):  # no real stdout (e.g. captured): nothing to protect
        return highspy.Highs()
    sys.stdout.flush()
    saved = os.dup(fd)
    try:
        with open(os.devnull, "w") as null:
            os.dup2(null.fileno(), fd)
            return highspy.Highs()
    finally:
        os.dup2(saved, fd)
        os.close(saved)


_highs_threads = [None]  # thread count HiGHS's process-wide scheduler was last (re)started with


def _use_highs_threads(threads):
    """Restart HiGHS's process-wide thread scheduler when a different thread count is asked for.

    The scheduler is started once per process by the first solve; a later ``threads`` option that differs
    makes ``Highs.run`` fail with an error instead of solving (highspy 1.16).
    """
    import highspy

    if threads is not None and int(threads) != _highs_threads[0]:
        highspy.Highs.resetGlobalScheduler(True)
        _highs_threads[0] = int(threads)


# From this many nonzeros on, HiGHS solves the model's LPs with its interior point method instead of the dual
# simplex.  Measured (docs/MODELS.md): on a 21,631-row, 483,114-nonzero coverage model the dual simplex had not
# finished the root LP after 300 s, the interior point method took 13 s; at 192,000 nonzeros (synthetic city of
# 5,000 buildings) the simplex was faster (19 s against 27 s to the proven optimum).
_IPM_NONZEROS = 300_000


def _highs_new(milp: _Milp, mip_rel_gap, threads, relax=False, seed=0):
    import highspy

    _use_highs_threads(threads)
    h = _quiet_highs()
    h.setOptionValue("output_flag", False)
    h.setOptionValue("random_seed", int(seed))
    h.setOptionValue("mip_rel_gap", float(mip_rel_gap))
    if milp.A.nnz >= _IPM_NONZEROS:
        h.setOptionValue("solver" if relax else "mip_lp_solver", "ipm")
    if threads is not None:
        h.setOptionValue("threads", int(threads))
    lp = highspy.HighsLp()
    nv = len(milp.obj)
    lp.num_col_ = nv
    lp.num_row_ = milp.A.shape[0]
    lp.col_cost_ = milp.obj
    lp.col_lower_ = milp.col_lo
    lp.col_upper_ = milp.col_hi
    lp.row_lower_ = np.where(np.isinf(milp.row_lo), -highspy.kHighsInf, milp.row_lo)
    lp.row_upper_ = np.where(np.isinf(milp.row_hi), highspy.kHighsInf, milp.row_hi)
    lp.a_matrix_.format_ = highspy.MatrixFormat.kRowwise
    lp.a_matrix_.num_col_ = nv
    lp.a_matrix_.num_row_ = milp.A.shape[0]
    lp.a_matrix_.start_ = milp.A.indptr.astype(np.int32)
    lp.a_matrix_.index_ = milp.A.indices.astype(np.int32)
    lp.a_matrix_.value_ = milp.A.data.astype(np.float64)
    if not relax and milp.integer.any():
        lp.integrality_ = [highspy.HighsVarType.kInteger if b else highspy.HighsVarType.kContinuous
                           for b in milp.integer]
    h.passModel(lp)
    return h


def _highs_run(h, start, time_limit_s) -> _Result:
    import highspy

    # HiGHS overruns its limit by a few percent: ask for a little less
    h.setOptionValue("time_limit", max(0.05, 0.95 * float(time_limit_s)))
    if start is not None:
        idx, val = start
        h.setSolution(len(idx), np.asarray(idx, np.int32), np.asarray(val, np.float64))
    run_status = h.run()
    ms = h.getModelStatus()
    info = h.getInfo()
    M = highspy.HighsModelStatus
    detail = h.modelStatusToString(ms)
    if run_status == highspy.HighsStatus.kError:
        # nothing was solved: its info fields (a dual bound of 0, say) are no certificate
        return _Result(None, _INF, -_INF, "error", f"HiGHS returned an error, model status '{detail}'")
    feasible = info.primal_solution_status == 2
    is_mip = h.getLp().integrality_ is not None and len(h.getLp().integrality_) > 0
    if ms == M.kOptimal:
        status = "optimal"
    elif ms in (M.kInfeasible,):
        status = "infeasible"
    elif ms in (M.kTimeLimit, M.kInterrupt, M.kSolutionLimit, M.kIterationLimit):
        status = "time_limit"
    else:
        status = "other"
    vals = np.asarray(h.getSolution().col_value) if feasible else None
    primal = info.objective_function_value if feasible else _INF
    if is_mip and status != "other":
        dual = info.mip_dual_bound if np.isfinite(info.mip_dual_bound) else -_INF
    else:
        dual = primal if status == "optimal" else -_INF
    return _Result(vals, primal, dual, status, detail)


# The staged HiGHS path first runs without root restarts and stops after this many branch-and-bound nodes;
# only a model still open then is solved again with HiGHS's defaults.  Measured (docs/MODELS.md): after the
# fixing, the real district closes in 3 nodes without restarts (2-3 s) but spends 6-8 s in a cascade of a
# dozen root restarts with them; the synthetic cities need 40-550 nodes without restarts and close at the
# root with them.
_FIRST_PASS_NODES = 16
# ... and only when the number of options left free by reduced-cost fixing lies between these: on larger
# models a repeated root (LP and cuts) costs more than the first pass can save; on tiny ones root restarts are
# cheap and close the model sooner (the demo, 69 free options: 19-25 ms with restarts, 28-38 ms without).
_FIRST_PASS_MIN_FREE = 100
_FIRST_PASS_MAX_FREE = 2000


def _highs_staged(milp: _Milp, start, time_limit_s, mip_rel_gap, threads, seed) -> _Result:
    """The default HiGHS path: LP relaxation, incumbent, reduced-cost fixing, then the integer program.

    1. Solve the LP relaxation (bound ``z_lp`` in the solver's minimising form, reduced costs ``d``).
    2. Incumbent: the better of the warm start and an exact solve restricted to the options the LP uses
       or the warm start chooses (small: a few dozen options on the pipeline instances).
    3. Reduced-cost fixing: an option at 0 in the LP with ``d_j > z_inc - z_lp`` cannot be part of any plan
       better than the incumbent (every such plan costs at least ``z_lp + d_j`` in the minimising form), so
       its upper bound becomes 0 (reduced-cost fixing: H. Crowder, E. L. Johnson and M. Padberg, "Solving
       large-scale zero-one linear programming problems", Operations Research 31(5), 1983,
       DOI 10.1287/opre.31.5.803; reference from memory, the method is textbook material).
    4. Solve the fixed model: when ``_FIRST_PASS_MIN_FREE`` to ``_FIRST_PASS_MAX_FREE`` options are left
       free, first without root restarts for at most ``_FIRST_PASS_NODES`` nodes; if it is still open (or
       the pass was skipped), with HiGHS's defaults from the best plan so far.  Steps 2 and 4 switch
       HiGHS's feasibility jump heuristic off whenever they pass in a feasible plan.

    Every plan the fixing removes is worse than the incumbent, so ``min(bound of the fixed model, z_inc)``
    and ``z_lp`` are lower bounds of the full model; the larger is reported.  All steps are deterministic
    (node limits, not time limits, choose the path) and share ``time_limit_s``.
    """
    import highspy

    t_end = time.perf_counter() + float(time_limit_s)

    def left():
        return max(0.05, t_end - time.perf_counter())

    def new(m, feasible_start):
        h = _highs_new(m, mip_rel_gap, threads, seed=seed)
        if feasible_start is not None:
            # HiGHS's feasibility jump heuristic hunts for a first feasible point (B. Luteberget and G. Sartor,
            # "Feasibility Jump: an LP-free Lagrangian MIP heuristic", Mathematical Programming Computation,
            # 2023, DOI 10.1007/s12532-023-00234-8; reference from memory); a feasible plan is passed in, so it
            # only costs time (demo: 10-15 ms of a 45 ms solve; no change on the larger instances)
            h.setOptionValue("mip_heuristic_run_feasibility_jump", False)
        return h

    n, nv = milp.n_x, len(milp.obj)
    lp = _highs_new(milp, mip_rel_gap, threads, relax=True, seed=seed)
    lp.setOptionValue("time_limit", left())
    if lp.run() == highspy.HighsStatus.kError or lp.getModelStatus() != highspy.HighsModelStatus.kOptimal:
        return _highs_run(new(milp, None), start, left())  # no LP certificate to work from: the plain solve decides
    sol = lp.getSolution()
    x_lp, d = np.asarray(sol.col_value)[:n], np.asarray(sol.col_dual)[:n]
    z_lp = float(lp.getInfo().objective_function_value)

    inc = None
    if start is not None and len(start[0]) == nv:
        v = np.zeros(nv)
        v[start[0]] = start[1]
        inc = v if _satisfies(milp, v) else None
    keep = np.r_[x_lp > 1e-6, np.ones(nv - n, bool)]
    if start is not None:
        idx, val = np.asarray(start[0]), np.asarray(start[1])
        keep[idx[(idx < n) & (val > 0.5)]] = True
    r = _highs_run(new(replace(milp, col_hi=np.where(keep, milp.col_hi, 0.0)), inc), start,
                   min(left(), max(1.0, 0.1 * float(time_limit_s))))
    from_solver = False  # the incumbent is a solver's plan, not the warm start
    if r.values is not None and _satisfies(milp, r.values) and (inc is None or milp.obj @ r.values < milp.obj @ inc):
        inc, from_solver = r.values, True

    fixed, first = milp, start
    if inc is not None:
        z_inc = float(milp.obj @ inc)
        if z_inc - z_lp <= mip_rel_gap * max(abs(z_inc), _TINY):
            return _Result(inc, z_inc, z_lp, "optimal", "the LP bound meets the incumbent")
        drop = (x_lp <= 1e-9) & (d > z_inc - z_lp + 1e-6 * (1.0 + abs(z_lp)))
        fixed = replace(milp, col_hi=np.where(np.r_[drop, np.zeros(nv - n, bool)], 0.0, milp.col_hi))
        first = (np.arange(nv), inc)

    def merged(res):
        if inc is None:
            return res
        vals = res.values
        if vals is None or not _satisfies(milp, vals) or milp.obj @ vals > z_inc + 1e-9 * (1.0 + abs(z_inc)):
            # a warm start the solvers could not improve goes back as no solver plan ('greedy_only')
            vals = inc if from_solver else None
        dual = max(z_lp, min(res.dual, z_inc))
        return _Result(vals, _INF if vals is None else float(milp.obj @ vals), dual, res.status, res.detail,
                       int(drop.sum()))

    if _FIRST_PASS_MIN_FREE <= np.count_nonzero(fixed.col_hi[:n] > 0) <= _FIRST_PASS_MAX_FREE:
        h = new(fixed, first)
        h.setOptionValue("mip_allow_restart", False)
        h.setOptionValue("mip_max_nodes", _FIRST_PASS_NODES)
        res = _highs_run(h, first, left())
        if h.getModelStatus() != highspy.HighsModelStatus.kSolutionLimit:  # closed, or out of time
            return merged(res)
        if res.values is not None and _satisfies(milp, res.values):
            first = (np.arange(nv), res.values)
    return merged(_highs_run(new(fixed, first), first, left()))


def _cbc_run(milp: _Milp, start, time_limit_s, mip_rel_gap, threads, seed=0) -> _Result:
    import pulp

    prob, vs = _pulp_problem(milp)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)  # the bundled-binary class is kept for its path
        solver = pulp.PULP_CBC_CMD(msg=False)
    with tempfile.TemporaryDirectory(prefix="siting_cbc_") as tmp:
        mps, sol, mst = (os.path.join(tmp, f) for f in ("m.mps", "m.sol", "m.mst"))
        vs_, vnames, cnames, _ = prob.writeMPS(mps, rename=1)
        args = [solver.path, mps, "-sec", f"{float(time_limit_s):g}", "-ratio", f"{float(mip_rel_gap):g}",
                "-randomSeed", str(int(seed) + 1), "-randomCbcSeed", str(int(seed) + 1)]
        if threads is not None:
            args += ["-threads", str(int(threads))]
        if start is not None:
            idx, val = start
            full = np.zeros(len(vs))
            full[idx] = val
            for v, x in zip(vs, full):
                v.setInitialValue(float(x), check=False)
            solver.writesol(mst, prob, vs_, vnames, cnames)
            args += ["-mips", mst]
        args += ["-solve", "-solution", sol]
        proc = subprocess.Popen(args, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL,
                                text=True)
        try:
            out, _ = proc.communicate(timeout=float(time_limit_s) * 1.05 + 5.0)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.communicate()
            return _Result(None, _INF, -_INF, "killed", "CBC stopped by the hard timer")
        if not os.path.exists(sol):
            return _Result(None, _INF, -_INF, "other", out[-300:])
        with open(sol) as f:
            head = f.readline()
        status, values, *_ = solver.readsol_MPS(sol, prob, vs_, vnames, cnames)
    words = head.split()
    # the first line says how CBC stopped, e.g. "Optimal - objective value -12.0",
    # "Stopped on time - objective value -10.0", "Infeasible - objective value ...",
    # "Stopped on time - no integer solution"
    has_sol = "objective value" in head and not head.startswith("Infeasible") and "no integer" not in head
    x = np.array([values.get(v.name, 0.0) for v in vs]) if has_sol else None
    primal = float(words[-1]) if has_sol else _INF
    dual = -_INF
    for line in out.splitlines():
        low = line.lower()
        if low.startswith("lower bound:") or low.startswith("best possible:"):
            try:
                dual = float(line.split(":")[1].split()[0])
            except (ValueError, IndexError):
                pass
    if head.startswith("Optimal"):
        return _Result(x, primal, primal, "optimal", head.strip())
    if head.startswith("Infeasible") or head.startswith("Integer infeasible"):
        return _Result(None, _INF, _INF, "infeasible", head.strip())
    return _Result(x, primal, dual, "time_limit", head.strip())
