"""The integer program as sparse arrays: rows, bounds, start vectors, feasibility check, PuLP export."""

from __future__ import annotations

import warnings
from dataclasses import dataclass, replace
from typing import cast

import numpy as np
import scipy.sparse as sp

from .problem import _INF
from .reductions import _Reduced, _site_local


@dataclass
class _Milp:
    """min obj.x  s.t. row_lo <= A x <= row_hi, col_lo <= x <= col_hi, x[integer] integral."""

    obj: np.ndarray
    A: sp.csr_array
    row_lo: np.ndarray
    row_hi: np.ndarray
    col_lo: np.ndarray
    col_hi: np.ndarray
    integer: np.ndarray
    n_x: int
    budget_row: int = -1
    target_row: int = -1
    delta: float = 0.0  # kept for callers of older versions: no tie-break term is in the objective any more
    obj_sign: float = -1.0  # objective of the plan = obj_sign * solver objective
    eps: float = 0.0  # kept for callers of older versions (ties are broken by a second, lexicographic solve)
    count_row: int = -1
    w_scale: float = 1.0  # weights in the model = weights x w_scale (objective of 'max', target and load rows)
    c_scale: float = 1.0  # costs in the model = costs x c_scale (objective of 'min', budget row)

    @property
    def obj_scale(self) -> float:
        """Model objective units per plan unit (weight for maximum coverage, cost for minimum cost)."""
        return self.w_scale if self.obj_sign < 0 else self.c_scale

    @property
    def size(self):
        return {"rows": int(self.A.shape[0]), "cols": int(self.A.shape[1]), "nonzeros": int(self.A.nnz)}


def _site_rows(site, conflicts):
    """Rows 'at most one option per site' (sites with 2+ options) and per conflicting site pair."""
    n = len(site)
    if n == 0:
        return sp.csr_array((0, 0))
    lookup, sidx = np.unique(site, return_inverse=True)
    S = sp.csr_array((np.ones(n), (sidx, np.arange(n))), shape=(len(lookup), n))
    rows = [S[np.flatnonzero(np.diff(S.indptr) > 1)]]
    if len(conflicts):
        known = np.isin(conflicts, lookup).all(axis=1)
        cf = conflicts[known]
        if len(cf):
            a = np.searchsorted(lookup, cf[:, 0])
            b = np.searchsorted(lookup, cf[:, 1])
            k = len(cf)
            P = sp.csr_array((np.ones(2 * k), (np.r_[np.arange(k), np.arange(k)], np.r_[a, b])), shape=(k, len(lookup)))
            rows.append(sp.csr_array(P @ S))
    return sp.csr_array(sp.vstack(rows, format="csr"))


def _unit_scale(values: np.ndarray) -> float:
    """A power of two that brings the largest of ``values`` into [1, 2) when it is below 1, else 1."""
    top = float(values.max()) if len(values) else 0.0
    if not 0.0 < top < 1.0:
        return 1.0
    return float(np.ldexp(1.0, 1 - int(np.frexp(top)[1])))


def _build(red: _Reduced, budget, max_count, mode="max", target=None, scaled=True) -> _Milp:
    """The model of the package docstring: maximum coverage (``mode='max'``) or minimum cost (``'min'``).

    ``target``: the row "covered weight >= target" (the minimum-cost target; in maximum coverage the
    floor of the second, lexicographic solve).  The objective is the pure covered weight or the pure cost:
    ties are broken by a second solve (see :func:`siting.optimize.solve._tie_break_solve`), not by a small
    term in the objective, so the solver's bound is a bound on the plan's value itself.

    ``scaled``: weights and costs below 1 enter the model multiplied by a power of two that brings the
    largest into [1, 2) (``_Milp.w_scale``, ``c_scale``; exact in binary floating point).  The solvers'
    tolerances are absolute (about 1e-6 on rows, 1e-7 on reduced costs): without it, costs given in millions
    or weights of 1e-6 let a plan break the budget or the target by less than a tolerance and still count
    as feasible, and a reduced cost inside the tolerance ends the LP early, giving a bound below the optimum.
    """
    w_scale = _unit_scale(red.w) if scaled else 1.0
    c_scale = _unit_scale(red.c) if scaled else 1.0
    if w_scale != 1.0 or c_scale != 1.0:
        red = replace(red, w=red.w * w_scale, c=red.c * c_scale, cap=None if red.cap is None else red.cap * w_scale)
        budget = None if budget is None else budget * c_scale
        target = None if target is None else target * w_scale
    c = red.c
    n = red.C.shape[0]
    eps, cost_cap = 0.0, 0.0
    rows = _Rows()
    if red.cap is None:
        obj, col_hi, integer, val_row = _cover_rows(red, eps, mode, rows)
    else:
        obj, col_hi, integer, val_row = _assignment_rows(red, eps, mode, rows)
    nv = len(obj)
    SR = _site_rows(red.site, red.conflicts)
    if SR.shape[0]:
        rows.add(sp.hstack([SR, sp.csr_array((SR.shape[0], nv - n))], format="csr"), np.full(SR.shape[0], -_INF),
                 np.ones(SR.shape[0]))
    budget_row = target_row = count_row = -1
    if budget is not None:
        budget_row = rows.add(sp.csr_array(np.r_[c, np.zeros(nv - n)][None, :]), [-_INF], [budget])
    if max_count is not None:
        count_row = rows.add(sp.csr_array(np.r_[np.ones(n), np.zeros(nv - n)][None, :]), [-_INF], [float(max_count)])
    if target is not None:
        target_row = rows.add(sp.csr_array(val_row[None, :]), [target], [_INF])
    A, row_lo, row_hi = rows.stacked(nv)
    return _Milp(obj, A, row_lo, row_hi, np.zeros(nv), col_hi, integer, n, budget_row, target_row, eps * cost_cap,
                 -1.0 if mode == "max" else 1.0, eps, count_row, w_scale, c_scale)


class _Rows:
    """Row blocks of a model with their bounds, stacked at the end."""

    def __init__(self):
        self.blocks, self.lo, self.hi, self.n = [], [], [], 0

    def add(self, block, lo, hi) -> int:
        """Append a block of rows; returns the index of its first row."""
        first = self.n
        self.blocks.append(block)
        self.lo.append(lo)
        self.hi.append(hi)
        self.n += block.shape[0]
        return first

    def stacked(self, nv):
        A = sp.csr_array(sp.vstack(self.blocks, format="csr")) if self.blocks else sp.csr_array((0, nv))
        A.sort_indices()
        lo = np.concatenate([np.asarray(v, float) for v in self.lo]) if self.lo else np.zeros(0)
        hi = np.concatenate([np.asarray(v, float) for v in self.hi]) if self.hi else np.zeros(0)
        return A, lo, hi


def _cover_rows(red: _Reduced, eps, mode, rows: _Rows):
    """Without a load cap: variables x (options) and y (user classes), the cover rows ``y_i <= sum_j C x_j``.

    Users whose covering options all sit at one site: y_i = sum_j x_j exactly (at most one option per site,
    and maximising pushes y_i up to it), so their weight moves onto the x_j and the cover row and y_i go
    away.  Same LP relaxation, fewer rows.  Returns (objective, column upper bounds, integrality, weight row).
    """
    C, w, c = red.C, red.w, red.c
    n, m = C.shape
    loc = _site_local(red) if red.reduced else np.zeros(m, bool)
    keep = np.flatnonzero(~loc)
    xw = C.astype(float) @ np.where(loc, w, 0.0)  # weight each option brings through local users
    Ck = C[:, keep]
    wk = w[keep]
    mk = len(keep)
    obj = np.r_[eps * c - xw, -wk] if mode == "max" else np.r_[c, np.zeros(mk)]
    integer = np.r_[np.ones(n, bool), np.zeros(mk, bool)]
    rows.add(sp.hstack([-Ck.T.astype(float), sp.eye_array(mk, format="csr")], format="csr"), np.full(mk, -_INF),
             np.zeros(mk))
    return obj, np.ones(n + mk), integer, np.r_[xw, wk]


def _assignment_rows(red: _Reduced, eps, mode, rows: _Rows):
    """With a load cap: variables x (options) and z_ji (class i assigned to option j), their three row blocks.

    Returns (objective, column upper bounds, integrality, weight row).
    """
    C, w, c = red.C, red.w, red.c
    n, m = C.shape
    nnz = C.nnz
    rowj = np.repeat(np.arange(n), np.diff(C.indptr))
    coli = C.indices
    nv = n + nnz
    wz = w[coli]
    obj = np.r_[eps * c, -wz] if mode == "max" else np.r_[c, np.zeros(nnz)]
    col_hi = np.r_[np.ones(n), red.mult[coli].astype(float)]
    zk = np.arange(nnz)
    # class rows: sum_j z_ji <= m_i
    rows.add(sp.csr_array((np.ones(nnz), (coli, n + zk)), shape=(m, nv)), np.full(m, -_INF), red.mult.astype(float))
    # z_ji - m_i x_j <= 0
    rows.add(sp.csr_array((np.r_[np.ones(nnz), -red.mult[coli].astype(float)], (np.r_[zk, zk], np.r_[n + zk, rowj])),
                          shape=(nnz, nv)), np.full(nnz, -_INF), np.zeros(nnz))
    # sum_i w_i z_ji - L_j x_j <= 0
    cap = cast(np.ndarray, red.cap)  # this model is built only with a load cap
    rows.add(sp.csr_array((np.r_[wz, -cap], (np.r_[rowj, np.arange(n)], np.r_[n + zk, np.arange(n)])),
                          shape=(n, nv)), np.full(n, -_INF), np.zeros(n))
    return obj, col_hi, np.ones(nv, bool), np.r_[np.zeros(n), wz]


def _start_vector(red: _Reduced, milp: _Milp, chosen_red: np.ndarray):
    """Full start for the uncapped model (x and y), x only (sparse, HiGHS completes it) when capped."""
    n = milp.n_x
    x = np.zeros(n)
    x[chosen_red] = 1.0
    if red.cap is not None:
        return np.arange(n), x
    y = np.minimum(1.0, red.C.T.astype(float) @ x)
    if red.reduced:
        y = y[~_site_local(red)]
    return np.arange(len(milp.obj)), np.r_[x, y]


def _satisfies(milp: _Milp, x, tol=1e-6) -> bool:
    """The point meets the model's bounds, rows and integrality (within solver tolerances)."""
    x = np.asarray(x, float)
    if x.shape != milp.obj.shape or not np.all(np.isfinite(x)):
        return False
    if np.any(x < milp.col_lo - tol) or np.any(x > milp.col_hi + tol):
        return False
    xi = x[milp.integer]
    if np.any(np.abs(xi - np.round(xi)) > 1e-5):
        return False
    act = milp.A @ x
    slack = tol * (1.0 + np.abs(act))
    return bool(np.all(act >= milp.row_lo - slack) and np.all(act <= milp.row_hi + slack))


def _pulp_problem(milp: _Milp, name="siting"):
    import pulp

    prob = pulp.LpProblem(name, pulp.LpMinimize)
    nv = len(milp.obj)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)  # PuLP 3.3 announces a 4.0 variable API
        vs = [
            pulp.LpVariable(f"x{j}" if j < milp.n_x else f"v{j}", lowBound=milp.col_lo[j], upBound=milp.col_hi[j],
                            cat=pulp.LpInteger if milp.integer[j] else pulp.LpContinuous)
            for j in range(nv)
        ]
    nz = np.flatnonzero(milp.obj)
    prob += pulp.LpAffineExpression([(vs[j], float(milp.obj[j])) for j in nz])
    A = milp.A
    for r in range(A.shape[0]):
        sl = slice(A.indptr[r], A.indptr[r + 1])
        expr = pulp.LpAffineExpression([(vs[j], float(v)) for j, v in zip(A.indices[sl], A.data[sl])])
        lo, hi = milp.row_lo[r], milp.row_hi[r]
        if np.isfinite(lo) and np.isfinite(hi) and lo == hi:
            prob += pulp.LpConstraint(expr, pulp.LpConstraintEQ, f"r{r}", hi)
            continue
        if np.isfinite(hi):
            prob += pulp.LpConstraint(expr, pulp.LpConstraintLE, f"r{r}", hi)
        if np.isfinite(lo):
            prob += pulp.LpConstraint(expr, pulp.LpConstraintGE, f"r{r}g", lo)
    return prob, vs
