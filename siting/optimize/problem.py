"""The validated problem: argument checks and the instance every other step works on."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NoReturn

import numpy as np
import pandas as pd
import scipy.sparse as sp

from ..errors import SitingError, SolverError

_INF = math.inf
_TINY = 1e-12
_EPS_SHARE = 1e-4  # whole tie-break cost term < this share of the smallest positive user weight
_REAL_KINDS = "biuf"  # numpy dtype kinds read as real numbers: bool, signed and unsigned integer, float


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


def _array(name, a) -> np.ndarray:
    """``numpy.asarray(a)``, with a ragged nested sequence reported as an error naming the argument."""
    try:
        return np.asarray(a)
    except ValueError as e:
        raise SitingError(
            f"optimiser argument '{name}': expected an array, got a sequence numpy cannot read as one ({e}); "
            f"pass rows of equal length"
        ) from None


def _real_values(name, arr: np.ndarray) -> np.ndarray:
    """``arr`` itself when it holds real numbers (bool, integer, float), an object array as floats when every
    entry converts; :class:`SitingError` naming the argument for text, complex numbers and anything else."""
    kind = arr.dtype.kind
    if kind in _REAL_KINDS:
        return arr
    if kind == "c":
        raise SitingError(
            f"optimiser argument '{name}': expected real numbers, got complex numbers (dtype {arr.dtype}); pass "
            f"real values ({name}.real if every imaginary part is 0)"
        )
    if kind == "O":
        try:
            return arr.astype(float)
        except (TypeError, ValueError):
            pass
    got = "text" if kind in "US" else "values that are not numbers"
    raise SitingError(
        f"optimiser argument '{name}': expected numbers, got {got} (dtype {arr.dtype}); convert them first, "
        f"e.g. numpy.asarray({name}, dtype=float)"
    )


def _as_1d(name, a, n, kind="f"):
    """A 1-D array of length ``n``: finite floats >= 0 (``kind='f'``) or integer indices >= 0 (``kind='i'``)."""
    arr = _array(name, a)
    if arr.ndim != 1 or arr.shape[0] != n:
        raise SitingError(
            f"optimiser argument '{name}': expected a 1-D array of length {n}, got shape {arr.shape}; "
            f"pass one value per {'user' if name == 'weight' else 'option'}"
        )
    arr = _real_values(name, arr)
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


def _finite_total(name, arr):
    """The sum of ``arr`` (checked finite, >= 0) is finite too: objective and cost totals must not overflow."""
    with np.errstate(over="ignore"):
        total = arr.sum()
    if not np.isfinite(total):
        raise SitingError(
            f"optimiser argument '{name}': expected values with a finite total, got a sum that overflows to "
            f"{total} (largest value {arr.max():g}); rescale {name} to smaller units"
        )


def _is_scalar(x) -> bool:
    """``x`` is one real number: a Python or numpy bool, integer or float, also as a 0-d array (not text, a complex
    number, a list or a longer array)."""
    return np.ndim(x) == 0 and np.asarray(x).dtype.kind in _REAL_KINDS


def _finite_number(name: str, value, expected: str, fix: str, low: float = -_INF, integer: bool = False) -> float:
    """``value`` as a float when it is one finite real number >= ``low`` (a whole number if ``integer``);
    :class:`SitingError` naming ``name`` (with what was ``expected``, what was got and the ``fix``) otherwise."""
    if not _is_scalar(value) or not np.isfinite(value) or value < low or (integer and int(value) != value):
        raise SitingError(f"optimiser argument '{name}': expected {expected}, got {value!r}; {fix}")
    return float(value)


def _budget_list(budgets) -> np.ndarray:
    """The budgets of a sweep as a 1-D float array (a single number: one budget); :class:`SitingError` naming
    'budgets' for a table of budgets, values that are not numbers, NaN/inf and negative values."""
    b = _array("budgets", budgets)
    if b.ndim > 1:
        raise SitingError(
            f"optimiser argument 'budgets': expected a 1-D list of budgets, got shape {b.shape}; pass one flat "
            f"list, e.g. budgets=[1000, 2000, 5000]"
        )
    b = _real_values("budgets", b.ravel()).astype(float)
    if b.size and (not np.all(np.isfinite(b)) or b.min() < 0):
        raise SitingError(
            f"optimiser argument 'budgets': expected finite numbers >= 0, got {b.tolist()}; drop or fix those "
            f"budgets"
        )
    return b


def _validate(cover, weight, cost, option_site, budget=None, max_count=None, conflicts=None, load_cap=None,
              option_wall=None) -> _Instance:
    """The checked instance of the caller's arrays; :class:`SitingError` naming the argument otherwise."""
    C = _cover_matrix(cover)
    n_opt, n_user = C.shape
    w = _as_1d("weight", weight, n_user)
    c = _as_1d("cost", cost, n_opt)
    _finite_total("weight", w)
    _finite_total("cost", c)
    site = _as_1d("option_site", option_site, n_opt, "i")
    if budget is not None:
        budget = _finite_number("budget", budget, "a finite number >= 0 or None",
                                "pass the cost limit as a number, or None for no limit", low=0.0)
    if max_count is not None:
        max_count = int(_finite_number("max_count", max_count, "an integer >= 0 or None",
                                       "pass the panel limit as a whole number, or None for no limit", low=0.0,
                                       integer=True))
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
        if len(cover.shape) != 2:
            raise SitingError(
                f"optimiser argument 'cover': expected a 2-D options x users matrix, got shape {cover.shape}"
            )
        # the stored entries as given (duplicates of a COO or non-canonical CSR not summed; DIA without padding)
        data = cover.data if cover.format in ("csr", "csc", "coo", "bsr") else cover.tocoo().data
        if _cover_values(data) is not None:
            coo = cover.tocoo()
            bad = _cover_values(coo.data)
            _bad_cover_entry(coo.data[bad], coo.row[bad], coo.col[bad])
        C = sp.csr_array(cover.astype(bool, copy=False))
    else:
        arr = _array("cover", cover)
        if arr.ndim != 2:
            raise SitingError(
                f"optimiser argument 'cover': expected a 2-D options x users matrix, got shape {arr.shape}"
            )
        if arr.dtype.kind != "b":
            arr = _cover_dtype(arr)
            bad = _cover_values(arr.ravel())
            if bad is not None:
                row, col = np.unravel_index(bad, arr.shape)
                _bad_cover_entry(arr.flat[bad], row, col)
        C = sp.csr_array(arr.astype(bool, copy=False))
    C.sum_duplicates()  # boolean: an entry given twice still reads 'covers'
    C.eliminate_zeros()
    C.sort_indices()
    return C


def _cover_dtype(data: np.ndarray) -> np.ndarray:
    """The entries of ``cover`` when they are numbers (an object array as floats), else :class:`SitingError`."""
    kind = data.dtype.kind
    if kind in _REAL_KINDS:
        return data
    if kind == "O":
        try:
            return data.astype(float)
        except (TypeError, ValueError):
            pass
    raise SitingError(
        f"optimiser argument 'cover': expected a boolean relation (bool, or numbers exactly 0 or 1), got dtype "
        f"{data.dtype}; build it as bool, e.g. cover = snr_db >= target_db"
    )


def _cover_values(data: np.ndarray) -> int | None:
    """Position in ``data`` of the first stored entry of ``cover`` that is not exactly 0 or 1 (None: all are)."""
    data = _cover_dtype(data)
    if data.dtype.kind == "b" or data.size == 0:
        return None
    bad = (data != 0) & (data != 1)
    return int(np.argmax(bad)) if bad.any() else None


def _bad_cover_entry(value, row, col) -> NoReturn:
    """Report the entry ``cover[row, col] == value``, which is neither 0 nor 1."""
    v = value.item()
    if isinstance(v, float) and not math.isfinite(v):
        raise SitingError(
            f"optimiser argument 'cover': expected a boolean relation, found NaN/inf or missing entries ({v!r} at option "
            f"{int(row)}, user {int(col)}); replace them by 0 (does not cover) or 1 (covers)"
        )
    raise SitingError(
        f"optimiser argument 'cover': expected a boolean relation (bool, or numbers exactly 0 or 1), found {v!r} "
        f"at option {int(row)}, user {int(col)}; pass cover != 0 if every nonzero entry means 'covers', or "
        f"threshold the values first (e.g. snr_db >= target_db)"
    )


def _conflict_pairs(conflicts) -> np.ndarray:
    """Conflicting site pairs as a sorted (k, 2) int array, each pair once as (low, high), self-pairs dropped."""
    if conflicts is None:
        return np.zeros((0, 2), np.int64)
    conf = _real_values("conflicts", _array("conflicts", conflicts))
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
    if np.isscalar(load_cap):
        cap = _finite_number("load_cap", load_cap, "a finite weight >= 0 (one number, or one per option)",
                             "pass the weight one surface may carry as a number, or None for no cap", low=0.0)
        return np.full(n_opt, cap)
    return _as_1d("load_cap", load_cap, n_opt)


def _raw_size(inst: _Instance):
    """Rows, columns and nonzeros of the unreduced maximum-coverage model (for ``Plan.model_size``)."""
    n, m = inst.C.shape
    site_multi = np.bincount(np.unique(inst.site, return_inverse=True)[1]) if n else np.zeros(0)
    rows = m + int((site_multi > 1).sum()) + len(inst.conflicts)
    rows += (inst.budget is not None) + (inst.max_count is not None)
    return {"rows": rows, "cols": n + m, "nonzeros": int(inst.C.nnz + m)}
