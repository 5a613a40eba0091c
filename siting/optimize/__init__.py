"""Which facades get which panel size: budgeted maximum coverage as an integer program.

The core functions take plain arrays (spopt-style ``from_cost_matrix`` shape); :func:`solve_tables` is the
thin adapter over the pipeline tables (``options``, ``coverage``, ``users``, ``direct`` of
:mod:`siting.tables`).

Formulation
-----------
Sets: options ``j`` (a panel size at a candidate spot, ``site(j)``), users ``i`` with weight ``w_i >= 0``,
``C`` the boolean coverage relation (``C[j, i]`` = option ``j`` brings user ``i`` to the SNR target).
Users already covered by a base station directly are constants and not part of the model.

Maximum coverage (:func:`solve_coverage`)::

    maximise    sum_i w_i y_i
    subject to  y_i <= sum_j C[j, i] x_j                 for every user i               (cover)
                sum_{j: site(j) = s} x_j <= 1             for every site s               (one size per site)
                sum_{j: site(j) in {s, t}} x_j <= 1      for every conflicting site pair (spacing on a wall)
                sum_j c_j x_j <= B                        if a budget is given
                sum_j x_j <= K                            if a panel count is given
                x_j in {0, 1},  0 <= y_i <= 1

Ties are broken by a second, lexicographic solve (:func:`solve._tie_break_solve`): minimise
``sum_j c_j x_j`` subject to ``sum_i w_i y_i >= W1`` (the first plan's weight) and the same rows, so among
plans of equal covered weight the cheapest is returned; the solver's bound is a bound on the covered weight
itself (no tie-break term in the objective).

Per-surface load cap ``L_j`` (only built when asked): a surface is steered to one user at a time, so it can
carry at most ``L_j`` weight.  Users are assigned to surfaces with integer assignment variables ``z_ji``
(``C[j, i] = 1``)::

    maximise    sum_{j,i} w_i z_ji
    subject to  sum_j z_ji <= m_i                         (user class i holds m_i identical users)
                z_ji <= m_i x_j                           (assign only to chosen surfaces)
                sum_i w_i z_ji <= L_j x_j                 (load cap)
                + the site, conflict, budget and count rows above;  z_ji integer in [0, m_i]

Minimum cost (:func:`min_cost_cover`): minimise ``sum_j c_j x_j`` subject to ``sum_i w_i y_i >= T`` (or
``sum w z >= T``) and the same rows; then the most weight among plans of that cost (second solve).  ``T`` is
a weight or a share of the most weight a feasible plan covers (a maximum-coverage solve first).

Certificates: every solver point's objective is recomputed and compared with the solver's (on a mismatch
after a warm start the model is solved again without it); CBC's bound is read from its own output; the
status says 'time_limit' only when the time limit was reached; ``time_limit_s`` is the wall clock of the
whole call (docs/MODELS.md, section 3).

Reductions (``reduce=True``; each keeps the optimum, see tests/test_optimize.py)
---------------------------------------------------------------------------------
1. drop users of zero weight and users no option covers;
2. drop options that cover no remaining user;
3. drop option k when another option j covers a superset of its users at no greater cost (with a load
   cap, no smaller cap) and either

   a. j sits at the same site as k: in any plan k can be swapped for j one-for-one, so the budget, count,
      conflicts and caps that held still hold; or
   b. (no load cap) j sits at another site that takes part in no spacing conflict, and *every* option at
      j's site covers all of k's users.  In a plan with k, either j's site is free (swap k for j: same
      site count, no more cost, no fewer users) or some option there already covers k's users (drop k).

   Coverage is checked on the instance, never assumed from the panel size.  Candidates are strictly
   ordered (cost, then larger coverage, then larger cap, then index), so all dominated options of a round
   go at once; rounds repeat while options go, since fewer options at a site can make (b) hold.  On
   street-like instances, where spots a few metres apart cover nested sets of users, (b) drops about half
   of the options (real district: 1,616 -> 874 after (a));
4. merge users with identical covering sets into one class, summing weights.  With a load cap a merged
   user may not be split across surfaces, so only users of identical covering set *and* identical weight
   are merged and the class becomes an integer count ``m_i``.
5. (HiGHS, when solving) fix to 0 every option that the LP relaxation leaves at 0 with a reduced cost
   above the gap between the LP bound and the incumbent: no plan with it beats the incumbent.

Independent components (connected components of the option-user graph, joined through sites and
conflicts) are counted and reported in ``Plan.model_size``; with a global budget or count they are kept
in one model rather than solved apart and combined by a knapsack over their coverage-versus-budget
curves: HiGHS detects the block structure in presolve, and one model keeps a single proven bound.

Solving
-------
The default path builds the HiGHS model directly from the sparse arrays (``highspy``), warm-started by
lazy greedy plus swap local search: the better of the cost-effectiveness greedy and the best single
option, as in S. Khuller, A. Moss and J. Naor, "The budgeted maximum coverage problem", Information
Processing Letters 70(1), 1999, DOI 10.1016/S0020-0190(99)00031-9.  With ``reduce=True`` it is staged
(:class:`HighsBackend`, ``backends._StagedSolve``): LP relaxation; the warm start improved by an exact
solve over the options the LP uses; reduced-cost fixing against that incumbent (5. in the list above); then
the integer program with HiGHS's defaults, preceded on models of middle size by a few nodes without root
restarts.  ``solver="cbc"``
builds the same model through PuLP and runs the CBC binary bundled with PuLP under a hard wall-clock timer
(CBC ignores its own limit during the root LP).  The status is read from the solver's solution status and
its dual bound, never from a status string alone (PuLP reports "Optimal" for time-limited runs).

The solver is chosen by passing a back end object (``backend=HighsBackend(...)`` or ``CbcBackend()``, or
anything with their ``solve``/``open`` methods, see :class:`Backend`); the solver keywords may be given as
one :class:`SolverSettings`.

Modules
-------
``problem``     argument checks, the validated instance
``settings``    :class:`SolverSettings`
``reductions``  reductions 1-4 and the component count
``model``       the integer program as sparse arrays (rows, start vectors, feasibility check, PuLP export)
``backends``    the :class:`Backend` protocol, :class:`HighsBackend` (staged path), :class:`CbcBackend`
``heuristics``  greedy, swap local search, the min-cost greedy, pruning of a solver plan
``assemble``    :class:`Plan` and the one assembly path from chosen options to a plan
``solve``       one solve, and the sweep over budgets
``ranking``     ranking of the chosen options and backup spots
``api``         the public functions
"""

from .api import budget_sweep, greedy, lp_relaxation_bound, min_cost_cover, solve_coverage, solve_tables, write_lp
from .assemble import Plan
from .backends import Backend, CbcBackend, HighsBackend, Session, SolveResult
from .problem import TargetUnreachable, _validate  # noqa: F401  (_validate: a private name the tests use)
from .ranking import backups_for, rank_chosen
from .reductions import _reduce, _superset_pairs  # noqa: F401
from .settings import SolverSettings

__all__ = [
    "Plan",
    "solve_coverage",
    "min_cost_cover",
    "budget_sweep",
    "greedy",
    "rank_chosen",
    "backups_for",
    "solve_tables",
    "lp_relaxation_bound",
    "write_lp",
    "SolverSettings",
    "TargetUnreachable",
    "Backend",
    "Session",
    "SolveResult",
    "HighsBackend",
    "CbcBackend",
]
