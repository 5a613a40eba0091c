"""The validated problem: argument checks and the instance every other step works on."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
import scipy.sparse as sp

from ..errors import SitingError, SolverError

_INF = math.inf
_TINY = 1e-12
_EPS_SHARE = 1e-4  # whole tie-break cost term < this share of the smallest positive user weight


class TargetUnreachable(SolverError):
    """No feasible plan reaches the minimum-cost target; ``reachable`` is the most weight one covers (the
    best plan found), ``bound`` a proven upper bound on it."""

    def __init__(self, message: str, reachable: float = float("nan"), bound: float = float("nan"),
                 advice: str = "lower the target, raise the budget or count, or add candidate spots"):
        super().__init__(message)
        self.reachable, self.bound, self.advice = reachable, bound, advice


@dataclass
class _Instance:
    """The caller's problem after the argument checks (caller's numbering of options and users)."""

    C: sp.csr_array  # options x users, bool
    w: np.ndarray
    c: np.ndarray
    site: np.ndarray
    budget: float | None
    max_count: int | None
    conflicts: np.ndarray  # (k, 2) site pairs, a != b
    load_cap: np.ndarray | None  # per option


def _as_1d(name, a, n, kind="f"):
    """A 1-D array of length ``n``: finite floats >= 0 (``kind='f'``) or integer indices >= 0 (``kind='i'``)."""
    arr = np.asarray(a)
    if arr.ndim != 1 or arr.shape[0] != n:
        raise SitingError(
            f"optimiser argument '{name}': expected a 1-D array of length {n}, got shape {arr.shape}; "
            f"pass one value per {'user' if name == 'weight' else 'option'}"
        )
    if kind == "i":
        if not (np.issubdtype(arr.dtype, np.integer) or (arr.size and np.all(np.mod(arr, 1) == 0))) and arr.size:
            raise SitingError(f"optimiser argument '{name}': expected integer indices, got dtype {arr.dtype}")
        arr = arr.astype(np.int64)
        if arr.size and arr.min() < 0:
            raise SitingError(f"optimiser argument '{name}': expected indices >= 0, found {arr.min()}")
        return arr
    arr = arr.astype(float)
    bad = ~np.isfinite(arr)
    if bad.any():
        raise SitingError(
            f"optimiser argument '{name}': expected finite numbers, found NaN/inf at position "
            f"{int(np.flatnonzero(bad)[0])}; fill or drop those rows"
        )
    if arr.size and arr.min() < 0:
        raise SitingError(
            f"optimiser argument '{name}': expected values >= 0, found {arr.min():g} at position "
            f"{int(np.argmin(arr))}; {name} cannot be negative"
        )
    return arr


def _is_scalar(x: object) -> bool:
    """``numpy.isscalar`` as a plain bool (its TypeGuard would narrow a number to numpy's scalar union)."""
    return bool(np.isscalar(x))


def _validate(cover, weight, cost, option_site, budget=None, max_count=None, conflicts=None, load_cap=None,
              option_wall=None) -> _Instance:
    """The checked instance of the caller's arrays; :class:`SitingError` naming the argument otherwise."""
    C = _cover_matrix(cover)
    n_opt, n_user = C.shape
    w = _as_1d("weight", weight, n_user)
    c = _as_1d("cost", cost, n_opt)
    site = _as_1d("option_site", option_site, n_opt, "i")
    if budget is not None:
        if not _is_scalar(budget) or not np.isfinite(budget) or budget < 0:
            raise SitingError(f"optimiser argument 'budget': expected a finite number >= 0 or None, got {budget!r}")
        budget = float(budget)
    if max_count is not None:
        if not _is_scalar(max_count) or not np.isfinite(max_count) or max_count < 0 or int(max_count) != max_count:
            raise SitingError(f"optimiser argument 'max_count': expected an integer >= 0 or None, got {max_count!r}")
        max_count = int(max_count)
    conf = _conflict_pairs(conflicts)
    if option_wall is not None:
        wall = _as_1d("option_wall", option_wall, n_opt, "i")
        if len(conf) and n_opt:
            _check_walls(wall, site, conf)
    return _Instance(C, w, c, site, budget, max_count, conf, _load_caps(load_cap, n_opt))


def _cover_matrix(cover) -> sp.csr_array:
    """The coverage relation as a boolean CSR array, explicit zeros dropped, indices sorted."""
    if cover is None:
        raise SitingError("optimiser argument 'cover': expected a sparse options x users matrix, got None")
    if sp.issparse(cover):
        C = sp.csr_array(cover)
    else:
        arr = np.asarray(cover)
        if arr.ndim != 2:
            raise SitingError(
                f"optimiser argument 'cover': expected a 2-D options x users matrix, got shape {arr.shape}"
            )
        C = sp.csr_array(arr)
    if C.dtype != bool:
        if C.nnz and not np.all(np.isfinite(C.data)):
            raise SitingError("optimiser argument 'cover': found NaN/inf entries; expected a boolean relation")
        C = sp.csr_array(C != 0)
    C.eliminate_zeros()
    C.sort_indices()
    return C


def _conflict_pairs(conflicts) -> np.ndarray:
    """Conflicting site pairs as a sorted (k, 2) int array, each pair once as (low, high), self-pairs dropped."""
    if conflicts is None:
        return np.zeros((0, 2), np.int64)
    conf = np.asarray(conflicts)
    if conf.size == 0:
        conf = np.zeros((0, 2), np.int64)
    if conf.ndim != 2 or conf.shape[1] != 2:
        raise SitingError(
            f"optimiser argument 'conflicts': expected an int array of shape (k, 2) of site pairs, got shape "
            f"{conf.shape}"
        )
    if conf.size and (not np.all(np.isfinite(conf)) or np.any(np.mod(conf, 1) != 0) or conf.min() < 0):
        raise SitingError("optimiser argument 'conflicts': expected non-negative integer site indices")
    conf = conf.astype(np.int64)
    conf = conf[conf[:, 0] != conf[:, 1]]
    return np.unique(np.sort(conf, axis=1), axis=0) if len(conf) else conf


def _check_walls(wall, site, conf):
    """Every site sits on one wall, and every conflict joins two sites on the same wall."""
    site_wall = pd.Series(wall).groupby(site).agg(["min", "max"])
    if (site_wall["min"] != site_wall["max"]).any():
        s = int(site_wall.index[(site_wall["min"] != site_wall["max"]).to_numpy()][0])
        raise SitingError(f"optimiser argument 'option_wall': options of site {s} sit on different walls")
    sw = site_wall["min"]
    known = np.isin(conf, sw.index.to_numpy())
    both = known.all(axis=1)
    wa = sw.reindex(conf[both, 0]).to_numpy()
    wb = sw.reindex(conf[both, 1]).to_numpy()
    if np.any(wa != wb):
        k = np.flatnonzero(both)[np.flatnonzero(wa != wb)[0]]
        raise SitingError(
            f"optimiser argument 'conflicts': pair {k} joins sites {conf[k, 0]} and {conf[k, 1]} on different "
            f"walls; spacing conflicts apply to spots on the same wall only"
        )


def _load_caps(load_cap, n_opt) -> np.ndarray | None:
    """One load cap per option (a scalar applies to all), or None."""
    if load_cap is None:
        return None
    if _is_scalar(load_cap):
        if not np.isfinite(load_cap) or load_cap < 0:
            raise SitingError(f"optimiser argument 'load_cap': expected a finite weight >= 0, got {load_cap!r}")
        return np.full(n_opt, float(load_cap))
    return _as_1d("load_cap", load_cap, n_opt)


def _raw_size(inst: _Instance):
    """Rows, columns and nonzeros of the unreduced maximum-coverage model (for ``Plan.model_size``)."""
    n, m = inst.C.shape
    site_multi = np.bincount(np.unique(inst.site, return_inverse=True)[1]) if n else np.zeros(0)
    rows = m + int((site_multi > 1).sum()) + len(inst.conflicts)
    rows += (inst.budget is not None) + (inst.max_count is not None)
    return {"rows": rows, "cols": n + m, "nonzeros": int(inst.C.nnz + m)}
