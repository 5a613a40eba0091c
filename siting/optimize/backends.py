"""Solver back ends behind one small protocol: HiGHS through highspy, CBC through PuLP's bundled binary.

A back end is an object passed in (``backend=`` of the public functions); nothing here is switched by
patching module globals.  The tuning constants of the HiGHS path are fields of :class:`HighsBackend`.
"""

from __future__ import annotations

import os
import subprocess
import tempfile
import time
import warnings
from dataclasses import dataclass, replace
from typing import ClassVar, Protocol

import numpy as np

from .model import _Milp, _pulp_problem, _satisfies
from .problem import _INF, _TINY
from .settings import SolverSettings

# a start point: (column indices, values); HiGHS completes a partial one
Start = tuple[np.ndarray, np.ndarray]


@dataclass
class SolveResult:
    """What a back end reports for one model, in the solver's minimising form."""

    values: np.ndarray | None
    primal: float  # solver objective (minimise), inf if none
    dual: float  # solver dual bound (minimise), -inf if none
    status: str  # 'optimal', 'time_limit', 'stopped' (another limit), 'infeasible', 'killed', 'other', 'error'
    detail: str = ""
    n_fixed: int = 0  # options set to 0 by reduced-cost fixing (staged HiGHS path)
    notes: tuple = ()  # plain sentences for the plan's message (a re-solve, a recovered fault)
    lp: tuple | None = None  # (objective, row duals) of the LP relaxation (staged HiGHS path), minimising form


def objectives_agree(reported: float, recomputed: float) -> bool:
    """The solver's objective and the objective of the point it returned agree (within its tolerances)."""
    return abs(reported - recomputed) <= 1e-6 * (1.0 + abs(recomputed))


def stale_start_note(solver: str, reported: float, recomputed: float) -> str:
    return (f"{solver} reported the objective {reported:.10g} but handed back a point of objective "
            f"{recomputed:.10g} (its warm start); the model was solved again without the start.")


class Session(Protocol):
    """One model kept in the solver between runs (the budget sweep changes one row bound per run)."""

    def set_row_upper(self, row: int, value: float) -> None: ...

    def run(self, start: Start | None, time_limit_s: float | None = None) -> SolveResult: ...


class Backend(Protocol):
    """A MILP solver.

    ``solve`` runs one model from an optional start within ``settings``; ``staged`` asks for the back end's
    staged path where it has one (the reductions are on).  ``open`` keeps a model for repeated runs, or
    returns None when the back end cannot (then the caller solves each variant afresh).
    """

    @property
    def name(self) -> str:
        """The solver name ('highs', 'cbc'), as reported in the plan."""
        ...

    def solve(self, milp: _Milp, start: Start | None, settings: SolverSettings, staged: bool) -> SolveResult: ...

    def open(self, milp: _Milp, settings: SolverSettings) -> Session | None: ...


def backend_for(name: str) -> Backend:
    """The back end of a solver name ('highs' or 'cbc'), with its default tuning."""
    return CbcBackend() if name == "cbc" else HighsBackend()


# ----------------------------------------------------------------------------------------------------
# HiGHS
# ----------------------------------------------------------------------------------------------------

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


# thread count HiGHS's process-wide scheduler was last (re)started with: the scheduler itself is process-wide
_highs_threads: list[int | None] = [None]


def _use_highs_threads(threads):
    """Restart HiGHS's process-wide thread scheduler when a different thread count is asked for.

    The scheduler is started once per process by the first solve; a later ``threads`` option that differs
    makes ``Highs.run`` fail with an error instead of solving (highspy 1.16).
    """
    import highspy

    if threads is not None and int(threads) != _highs_threads[0]:
        highspy.Highs.resetGlobalScheduler(True)
        _highs_threads[0] = int(threads)


def _highs_lp(milp: _Milp, relax: bool):
    """The model as a ``highspy.HighsLp`` (row-wise matrix; integrality unless ``relax``)."""
    import highspy

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
    return lp


def _highs_status(ms) -> str:
    import highspy

    M = highspy.HighsModelStatus
    if ms == M.kOptimal:
        return "optimal"
    if ms in (M.kInfeasible,):
        return "infeasible"
    if ms == M.kTimeLimit:
        return "time_limit"
    if ms in (M.kInterrupt, M.kSolutionLimit, M.kIterationLimit):
        return "stopped"  # a limit other than time (the staged path's node limit): never called a time limit
    return "other"


@dataclass(frozen=True)
class HighsBackend:
    """HiGHS through highspy; the model is passed as arrays.

    Attributes
    ----------
    ipm_nonzeros, ipm_row_nonzeros : from ``ipm_nonzeros`` nonzeros on, HiGHS solves the LPs of a model
        with a covered-weight target row (minimum cost, and the tie-break solve), or of one with at least
        ``ipm_row_nonzeros`` nonzeros per row on average, with its interior point method instead of the dual
        simplex.  Measured (docs/MODELS.md): on the dense geometric coverage models (483,114 and 1,078,353
        nonzeros, 22 and 48 per row) the dual simplex had not finished the root LP after 60 s, the interior
        point method took 9 and 22 s; on the synthetic cities' maximum-coverage models (7.4 per row) the
        dual simplex is faster (100,000 buildings, 743,808 nonzeros: 5.2 s against 30.7 s; 5,000 buildings:
        19 s against 27 s to the proven optimum), but not on the same city's tie-break model, whose target
        row holds a nonzero per user class (interior point 30.6 s; dual simplex unfinished after 90 s).
    first_pass_nodes : the staged path first runs without root restarts and stops after this many
        branch-and-bound nodes; only a model still open then is solved again with HiGHS's defaults.
        Measured (docs/MODELS.md): after the fixing, the real district closes in 3 nodes without restarts
        (2-3 s) but spends 6-8 s in a cascade of a dozen root restarts with them; the synthetic cities need
        40-550 nodes without restarts and close at the root with them.
    first_pass_min_free, first_pass_max_free : ... and only when the number of options left free by
        reduced-cost fixing lies between these: on larger models a repeated root (LP and cuts) costs more
        than the first pass can save; on tiny ones root restarts are cheap and close the model sooner (the
        demo, 69 free options: 19-25 ms with restarts, 28-38 ms without).
    """

    name: ClassVar[str] = "highs"
    ipm_nonzeros: int = 300_000
    ipm_row_nonzeros: float = 15.0
    first_pass_nodes: int = 16
    first_pass_min_free: int = 100
    first_pass_max_free: int = 2000

    def solve(self, milp: _Milp, start, settings: SolverSettings, staged: bool = True) -> SolveResult:
        if staged:
            return _StagedSolve(self, milp, start, settings).run()
        return self.run(self.new_model(milp, settings), start, settings.time_limit_s)

    def open(self, milp: _Milp, settings: SolverSettings) -> _HighsSession:
        return _HighsSession(self, self.new_model(milp, settings), settings.time_limit_s)

    def use_threads(self, threads):
        """Make HiGHS's process-wide scheduler serve ``threads`` (see :func:`_use_highs_threads`)."""
        _use_highs_threads(threads)

    def new_model(self, milp: _Milp, settings: SolverSettings, relax: bool = False):
        """A ``highspy.Highs`` holding the model (its LP relaxation when ``relax``), options set."""
        self.use_threads(settings.threads)
        h = _quiet_highs()
        h.setOptionValue("output_flag", False)
        h.setOptionValue("random_seed", int(settings.seed))
        h.setOptionValue("mip_rel_gap", float(settings.mip_gap))
        if self.uses_ipm(milp):
            h.setOptionValue("solver" if relax else "mip_lp_solver", "ipm")
        if settings.threads is not None:
            h.setOptionValue("threads", int(settings.threads))
        h.passModel(_highs_lp(milp, relax))
        return h

    def uses_ipm(self, milp: _Milp) -> bool:
        """True when the model's LPs go to the interior point method (see ``ipm_nonzeros``)."""
        return milp.A.nnz >= self.ipm_nonzeros and (milp.target_row >= 0
                                                    or milp.A.nnz >= self.ipm_row_nonzeros * milp.A.shape[0])

    def run(self, h, start, time_limit_s) -> SolveResult:
        """One run of a prepared model from an optional start, its point checked against its objective.

        HiGHS 1.16 can log a better incumbent "in the reduced space", report it as optimal and hand back the
        warm start unchanged.  So the objective of the returned point is recomputed; when it disagrees with
        the reported one after a start was passed in, the model is solved again (a fresh copy, same options)
        without the start, and the result says so in its notes.  When that run disagrees too, the better
        point is returned with its true objective and no bound.
        """
        t_end = time.perf_counter() + float(time_limit_s)
        res = self._run_once(h, start, time_limit_s)
        if res.status == "infeasible":
            return self._infeasible_checked(h, res, t_end)
        if res.values is None:
            return res
        cost = np.asarray(h.getLp().col_cost_, float)
        point = float(cost @ res.values)
        if objectives_agree(res.primal, point):
            return res
        note = stale_start_note("HiGHS", res.primal, point)
        if start is None:
            text = (f"HiGHS reported the objective {res.primal:.10g} for a point of objective {point:.10g}; "
                    f"no bound is claimed.")
            return replace(res, primal=point, dual=-_INF, status="stopped", notes=(text,))
        h2 = _quiet_highs()
        h2.passOptions(h.getOptions())
        h2.passModel(h.getLp())
        res2 = self._run_once(h2, None, max(0.05, t_end - time.perf_counter()))
        if res2.values is not None:
            point2 = float(cost @ res2.values)
            if objectives_agree(res2.primal, point2):
                return replace(res2, notes=(note,))
            if point2 < point:
                res, point = res2, point2
        return replace(res, primal=point, dual=-_INF, status="stopped",
                       notes=(note[:-1] + "; that run disagreed too, so no bound is claimed.",))

    def _infeasible_checked(self, h, res: SolveResult, t_end: float) -> SolveResult:
        """An 'infeasible' verdict checked by a second run without presolve (a fresh copy, same options).

        HiGHS 1.x presolve can call a feasible model infeasible: a target row a hair below a reachable weight
        was 'infeasible' with presolve and optimal without.  Only the second run's verdict is kept.
        """
        h2 = _quiet_highs()
        h2.passOptions(h.getOptions())
        h2.setOptionValue("presolve", "off")
        h2.passModel(h.getLp())
        res2 = self._run_once(h2, None, max(0.05, t_end - time.perf_counter()))
        if res2.status == "infeasible":
            return res
        return replace(res2, notes=(*res2.notes, "HiGHS presolve reported the model infeasible; solved again "
                                                 "without presolve, it is not."))

    def _run_once(self, h, start, time_limit_s) -> SolveResult:
        import highspy

        # HiGHS overruns its limit by a few percent: ask for a little less
        h.setOptionValue("time_limit", max(0.05, 0.95 * float(time_limit_s)))
        if start is not None:
            idx, val = start
            h.setSolution(len(idx), np.asarray(idx, np.int32), np.asarray(val, np.float64))
        run_status = h.run()
        ms = h.getModelStatus()
        info = h.getInfo()
        detail = h.modelStatusToString(ms)
        if run_status == highspy.HighsStatus.kError:
            # nothing was solved: its info fields (a dual bound of 0, say) are no certificate
            return SolveResult(None, _INF, -_INF, "error", f"HiGHS returned an error, model status '{detail}'")
        feasible = info.primal_solution_status == 2
        is_mip = h.getLp().integrality_ is not None and len(h.getLp().integrality_) > 0
        status = _highs_status(ms)
        vals = np.asarray(h.getSolution().col_value) if feasible else None
        primal = info.objective_function_value if feasible else _INF
        if is_mip and status != "other":
            dual = info.mip_dual_bound if np.isfinite(info.mip_dual_bound) else -_INF
        else:
            dual = primal if status == "optimal" else -_INF
        return SolveResult(vals, primal, dual, status, detail)

    def relaxation_value(self, milp: _Milp) -> float:
        """Optimum of the model's LP relaxation (solver's minimising form)."""
        h = self.new_model(milp, SolverSettings(mip_gap=1e-9), relax=True)
        h.run()
        return float(h.getInfo().objective_function_value)


class _HighsSession:
    """A HiGHS model kept between runs; only row bounds change."""

    def __init__(self, backend: HighsBackend, h, time_limit_s):
        self.backend, self.h, self.time_limit_s = backend, h, time_limit_s

    def set_row_upper(self, row: int, value: float) -> None:
        import highspy

        self.h.changeRowBounds(row, -highspy.kHighsInf, float(value))

    def run(self, start, time_limit_s=None) -> SolveResult:
        return self.backend.run(self.h, start, self.time_limit_s if time_limit_s is None else time_limit_s)


class _StagedSolve:
    """The default HiGHS path: LP relaxation, incumbent, reduced-cost fixing, then the integer program.

    1. Solve the LP relaxation (bound ``z_lp`` in the solver's minimising form, reduced costs ``d``).
    2. Incumbent: the better of the warm start and an exact solve restricted to the options the LP uses
       or the warm start chooses (small: a few dozen options on the pipeline instances).
    3. Reduced-cost fixing: an option at 0 in the LP with ``d_j > z_inc - z_lp`` cannot be part of any plan
       better than the incumbent (every such plan costs at least ``z_lp + d_j`` in the minimising form), so
       its upper bound becomes 0 (reduced-cost fixing: H. Crowder, E. L. Johnson and M. Padberg, "Solving
       large-scale zero-one linear programming problems", Operations Research 31(5), 1983,
       DOI 10.1287/opre.31.5.803; reference from memory, the method is textbook material).
    4. Solve the fixed model: when ``first_pass_min_free`` to ``first_pass_max_free`` options are left
       free, first without root restarts for at most ``first_pass_nodes`` nodes; if it is still open (or
       the pass was skipped), with HiGHS's defaults from the best plan so far.  Steps 2 and 4 switch
       HiGHS's feasibility jump heuristic off whenever they pass in a feasible plan.

    Every plan the fixing removes is worse than the incumbent, so ``min(bound of the fixed model, z_inc)``
    and ``z_lp`` are lower bounds of the full model; the larger is reported.  All steps are deterministic
    (node limits, not time limits, choose the path) and share ``time_limit_s``.
    """

    def __init__(self, backend: HighsBackend, milp: _Milp, start, settings: SolverSettings):
        self.backend, self.milp, self.start, self.settings = backend, milp, start, settings
        self.t_end = time.perf_counter() + float(settings.time_limit_s)
        self.n, self.nv = milp.n_x, len(milp.obj)
        self.notes: list[str] = []

    def brun(self, h, start, time_limit_s) -> SolveResult:
        """A run of the back end; its notes are kept for the final result."""
        res = self.backend.run(h, start, time_limit_s)
        self.notes.extend(res.notes)
        return res

    def left(self):
        return max(0.05, self.t_end - time.perf_counter())

    def new(self, m, feasible_start):
        h = self.backend.new_model(m, self.settings)
        if feasible_start is not None:
            # HiGHS's feasibility jump heuristic hunts for a first feasible point (B. Luteberget and G. Sartor,
            # "Feasibility Jump: an LP-free Lagrangian MIP heuristic", Mathematical Programming Computation,
            # 2023, DOI 10.1007/s12532-023-00234-8; reference from memory); a feasible plan is passed in, so it
            # only costs time (demo: 10-15 ms of a 45 ms solve; no change on the larger instances)
            h.setOptionValue("mip_heuristic_run_feasibility_jump", False)
        return h

    def run(self) -> SolveResult:
        self.lp: tuple | None = None
        res = self.stages()
        notes = tuple(dict.fromkeys((*self.notes, *res.notes)))
        return replace(res, notes=notes, lp=self.lp)

    def stages(self) -> SolveResult:
        milp, n, nv = self.milp, self.n, self.nv
        lp = self.lp_relaxation()
        if lp is None:  # no LP certificate to work from: the plain solve decides
            return self.brun(self.new(milp, None), self.start, self.left())
        x_lp, d, z_lp, row_dual = lp
        self.lp = (z_lp, row_dual)
        start_pt = self.feasible_start()
        if start_pt is not None:
            z_start = float(milp.obj @ start_pt)
            if z_start - z_lp <= self.settings.mip_gap * max(abs(z_start), _TINY):
                # the LP bound already proves the warm start (the tie-break solve on the demo): no more runs
                return SolveResult(start_pt, z_start, z_lp, "optimal", "the LP bound meets the warm start")
        inc, from_solver = self.incumbent(x_lp)
        if inc is None:
            return self.fixed_model(milp, self.start, lambda res: res)
        z_inc = float(milp.obj @ inc)
        if z_inc - z_lp <= self.settings.mip_gap * max(abs(z_inc), _TINY):
            return SolveResult(inc, z_inc, z_lp, "optimal", "the LP bound meets the incumbent")
        drop = (x_lp <= 1e-9) & (d > z_inc - z_lp + 1e-6 * (1.0 + abs(z_lp)))
        fixed = replace(milp, col_hi=np.where(np.r_[drop, np.zeros(nv - n, bool)], 0.0, milp.col_hi))
        n_fixed = int(drop.sum())
        return self.fixed_model(fixed, (np.arange(nv), inc),
                                lambda res: self.merged(res, inc, z_inc, z_lp, from_solver, n_fixed))

    def lp_relaxation(self):
        """(x, reduced costs, objective, row duals) of the LP relaxation, or None without an optimal LP."""
        import highspy

        lp = self.backend.new_model(self.milp, self.settings, relax=True)
        lp.setOptionValue("time_limit", self.left())
        if not self.backend.uses_ipm(self.milp):
            # the reductions have done what presolve would: the synthetic cities' LPs take the same number of
            # simplex iterations without it and 30 % less time (100,000 buildings 5.8 -> 4.2 s, 30,000 buildings
            # 0.79-0.90 -> 0.57-0.58 s; real district 0.08 s either way)
            lp.setOptionValue("presolve", "off")
            # Devex pricing instead of HiGHS's choice (dual steepest edge here): cheaper iterations on these
            # coverage LPs, 100,000 buildings 4.4-4.7 -> 3.0-3.4 s, real district 4.9-5.9 -> 4.8-5.1 s (same
            # plan weight and cost), 10,000 buildings 0.08-0.13 s either way (docs/MODELS.md)
            lp.setOptionValue("simplex_dual_edge_weight_strategy", 1)
        if lp.run() == highspy.HighsStatus.kError or lp.getModelStatus() != highspy.HighsModelStatus.kOptimal:
            return None
        sol = lp.getSolution()
        n = self.n
        return (np.asarray(sol.col_value)[:n], np.asarray(sol.col_dual)[:n], float(lp.getInfo().objective_function_value),
                np.asarray(sol.row_dual))

    def feasible_start(self):
        """The warm start as a full point when it is complete and meets the model, else None."""
        start, nv = self.start, self.nv
        if start is None or len(start[0]) != nv:
            return None
        v = np.zeros(nv)
        v[start[0]] = start[1]
        return v if _satisfies(self.milp, v) else None

    def incumbent(self, x_lp):
        """Step 2: (the best feasible point, whether a solver found it rather than the warm start)."""
        milp, start, n, nv = self.milp, self.start, self.n, self.nv
        inc = self.feasible_start()
        keep = np.r_[x_lp > 1e-6, np.ones(nv - n, bool)]
        if start is not None:
            idx, val = np.asarray(start[0]), np.asarray(start[1])
            keep[idx[(idx < n) & (val > 0.5)]] = True
        r = self.brun(self.new(replace(milp, col_hi=np.where(keep, milp.col_hi, 0.0)), inc), start,
                             min(self.left(), max(1.0, 0.1 * float(self.settings.time_limit_s))))
        feasible = r.values is not None and _satisfies(milp, r.values)
        if feasible and (inc is None or milp.obj @ r.values < milp.obj @ inc):
            return r.values, True
        return inc, False

    def fixed_model(self, fixed: _Milp, first, merged) -> SolveResult:
        """Step 4: the first pass without root restarts where it pays, then HiGHS's defaults if still open."""
        import highspy

        b = self.backend
        if b.first_pass_min_free <= np.count_nonzero(fixed.col_hi[: self.n] > 0) <= b.first_pass_max_free:
            h = self.new(fixed, first)
            h.setOptionValue("mip_allow_restart", False)
            h.setOptionValue("mip_max_nodes", b.first_pass_nodes)
            res = self.brun(h, first, self.left())
            if h.getModelStatus() != highspy.HighsModelStatus.kSolutionLimit:  # closed, or out of time
                return merged(res)
            if res.values is not None and _satisfies(self.milp, res.values):
                first = (np.arange(self.nv), res.values)
        return merged(self.brun(self.new(fixed, first), first, self.left()))

    def merged(self, res, inc, z_inc, z_lp, from_solver, n_fixed) -> SolveResult:
        """A result of the fixed model against the incumbent: the better plan, the larger valid bound."""
        milp = self.milp
        vals = res.values
        if vals is None or not _satisfies(milp, vals) or milp.obj @ vals > z_inc + 1e-9 * (1.0 + abs(z_inc)):
            # a warm start the solvers could not improve goes back as no solver plan ('greedy_only')
            vals = inc if from_solver else None
        dual = max(z_lp, min(res.dual, z_inc))
        return SolveResult(vals, _INF if vals is None else float(milp.obj @ vals), dual, res.status, res.detail,
                           n_fixed, res.notes)


# ----------------------------------------------------------------------------------------------------
# CBC
# ----------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CbcBackend:
    """CBC, the binary bundled with PuLP, on an MPS file under a hard wall-clock timer.

    CBC runs on wall-clock time (``-timeMode elapsed``) but ignores its limit during the root LP, so the
    process is killed when the limit is reached (writing the model counts against it); a killed run has
    no plan and no bound.  The status is read from CBC's solution file and the bound from CBC's own
    printed "best possible" objective, never from PuLP's status string (PuLP reports "Optimal" for
    time-limited runs) and never set to the plan's value: a stop at the relative gap keeps that gap.
    """

    name: ClassVar[str] = "cbc"

    def open(self, milp: _Milp, settings: SolverSettings) -> None:
        return None  # every run starts the binary afresh

    def solve(self, milp: _Milp, start, settings: SolverSettings, staged: bool = True) -> SolveResult:
        import pulp

        prob, vs = _pulp_problem(milp)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DeprecationWarning)  # the bundled-binary class is kept for its path
            solver = pulp.PULP_CBC_CMD(msg=False)
        t = float(settings.time_limit_s)
        t_end = time.perf_counter() + t
        with tempfile.TemporaryDirectory(prefix="siting_cbc_") as tmp:
            mps, sol, mst = (os.path.join(tmp, f) for f in ("m.mps", "m.sol", "m.mst"))
            vs_, vnames, cnames, _ = prob.writeMPS(mps, rename=1)
            left = max(0.05, t_end - time.perf_counter())
            args = [solver.path, mps, *_cbc_options(replace(settings, time_limit_s=0.95 * left))]
            if start is not None:
                idx, val = start
                full = np.zeros(len(vs))
                full[idx] = val
                for v, x in zip(vs, full):
                    v.setInitialValue(float(x), check=False)
                solver.writesol(mst, prob, vs_, vnames, cnames)
                args += ["-mips", mst]
            args += ["-solve", "-solution", sol]
            proc = subprocess.Popen(args, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
                                    stdin=subprocess.DEVNULL, text=True)
            try:
                out, _ = proc.communicate(timeout=max(0.05, t_end - time.perf_counter()))
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.communicate()
                return SolveResult(None, _INF, -_INF, "killed", "CBC stopped by the hard timer at the time limit")
            if not os.path.exists(sol):
                return SolveResult(None, _INF, -_INF, "other", out[-300:])
            with open(sol) as f:
                head = f.readline()
            status, values, *_ = solver.readsol_MPS(sol, prob, vs_, vnames, cnames)
        return _cbc_result(head, out, values, vs, time.perf_counter() >= t_end - 0.1 * t)


def _cbc_options(settings: SolverSettings) -> list:
    seed = str(int(settings.seed) + 1)
    args = ["-timeMode", "elapsed", "-sec", f"{float(settings.time_limit_s):g}", "-ratio", f"{float(settings.mip_gap):g}",
            "-randomSeed", seed, "-randomCbcSeed", seed]
    if settings.threads is not None:
        args += ["-threads", str(int(settings.threads))]
    return args


def _cbc_bound(out: str) -> float:
    """CBC's proven lower bound (minimising form) from its printed output, -inf when it printed none.

    Read from the progress lines "... best possible <value> ..." (full precision; the last one is the
    tightest, the bound only rises during the search) and the summary line "Lower bound: <value>" (printed
    to 3 decimals, so it is lowered by half a unit of its last digit before use).
    """
    best = -_INF
    for line in out.splitlines():
        low = line.lower()
        if "best possible" in low:
            try:
                best = max(best, float(low.split("best possible")[1].split()[0].strip(",")))
            except (ValueError, IndexError):
                pass
        elif low.startswith("lower bound:"):
            try:
                txt = line.split(":")[1].split()[0]
                digits = len(txt.split(".")[1]) if "." in txt else 0
                best = max(best, float(txt) - 0.5 * 10.0 ** (-digits))
            except (ValueError, IndexError):
                pass
    return best


def _cbc_result(head: str, out: str, values: dict, vs, at_limit: bool = False) -> SolveResult:
    """Status, point and bounds from the solution file's first line and CBC's printed output.

    ``at_limit``: the run ended at its time limit (a stop on iterations or nodes then counts as a time
    limit; CBC's root LP reports the time limit as "Stopped on iterations").
    """
    words = head.split()
    # the first line says how CBC stopped, e.g. "Optimal - objective value -12.0",
    # "Optimal (within gap tolerance) - objective value -12.0", "Stopped on time - objective value -10.0",
    # "Infeasible - objective value ...", "Stopped on time - no integer solution"
    has_sol = "objective value" in head and not head.startswith("Infeasible") and "no integer" not in head
    x = np.array([values.get(v.name, 0.0) for v in vs]) if has_sol else None
    primal = float(words[-1]) if has_sol else _INF
    dual = min(_cbc_bound(out), primal)
    if head.startswith("Infeasible") or head.startswith("Integer infeasible"):
        return SolveResult(None, _INF, _INF, "infeasible", head.strip())
    if head.startswith("Optimal"):
        if "gap" not in head.lower():
            dual = primal  # proven optimal outright (no gap tolerance in the status line)
        return SolveResult(x, primal, dual, "optimal", head.strip())
    status = "time_limit" if ("on time" in head or at_limit) else "stopped"
    return SolveResult(x, primal, dual, status, head.strip())
