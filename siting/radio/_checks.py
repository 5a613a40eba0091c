"""Input checks and warnings shared by the radio modules."""

from __future__ import annotations

import warnings

import numpy as np

from ..constants import SPEED_OF_LIGHT_M_S  # noqa: F401  (defined once in siting.constants; re-exported)
from ..errors import SitingError, SitingWarning


class RadioInputError(SitingError, ValueError):
    """A radio function got a value it cannot use (NaN, negative distance, zero frequency, ...)."""


class RadioValidityWarning(SitingWarning):
    """A model is evaluated outside the range its source states it is valid for."""


def as_float(name: str, value, *, allow_nan: bool = False, min_value: float | None = None,
             strict: bool = False) -> np.ndarray:
    """Return ``value`` as a float array, raising :class:`RadioInputError` on NaN or values below ``min_value``.

    ``strict`` makes the bound exclusive (value must be > min_value).
    """
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError) as exc:
        raise RadioInputError(f"{name}: expected numbers, got {value!r}; pass a float or a numeric array") from exc
    if not allow_nan and np.isnan(arr).any():
        n = int(np.isnan(arr).sum())
        raise RadioInputError(f"{name}: expected numbers, found {n} NaN value(s); drop or fill those rows first")
    if min_value is not None:
        with np.errstate(invalid="ignore"):
            bad = (arr <= min_value) if strict else (arr < min_value)
        if bad.any():
            first = arr[bad].flat[0]
            rel = ">" if strict else ">="
            raise RadioInputError(
                f"{name}: expected values {rel} {min_value:g}, found {int(bad.sum())} value(s) outside, e.g. {first:g};"
                f" check the units and the geometry that produced them")
    return arr


def warn_outside(name: str, arr: np.ndarray, low: float, high: float, model: str, what: str,
                 stacklevel: int = 3) -> None:
    """Issue one :class:`RadioValidityWarning` if any element of ``arr`` lies outside [low, high]."""
    outside = (arr < low) | (arr > high)
    if np.any(outside):
        warnings.warn(
            f"{model}: {int(np.count_nonzero(outside))} value(s) of {name} outside the stated validity range "
            f"[{low:g}, {high:g}]; {what}", RadioValidityWarning, stacklevel=stacklevel)


def scalar_or_array(x: np.ndarray | float) -> np.ndarray | float:
    """Return a Python float for 0-d results, else the array (scalar in -> scalar out)."""
    return float(x) if np.ndim(x) == 0 else x
