"""Building heights: the height column, the ``height`` tag, ``building:levels`` x storey height, the default.

The first rule that gives a value wins, per building; values that cannot be parsed fall through to the next
rule with a note; heights <= 0 m or > 1000 m and negative levels are errors naming the ids.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputDataError, SitingWarning
from .common import _listing

MAX_HEIGHT_M = 1000.0
FT_M = 0.3048

_LENGTH_RE = r"^\s*([-+]?\d+(?:[.,]\d+)?|[-+]?[.,]\d+)\s*(m|meters?|metres?|ft|feet|foot|')?\s*$"
_NUMBER_RE = r"^\s*([-+]?\d+(?:[.,]\d+)?)\s*$"


def parse_height_m(values) -> tuple[np.ndarray, np.ndarray]:
    """Parse height tags into metres, vectorised.

    Accepts numbers and strings such as "12", "12 m", "12.5m", "12,5" (decimal comma), "40 ft", "40'".

    Returns
    -------
    height_m : ndarray of float
        Parsed height [m]; NaN where absent or unparseable.
    unparsed : ndarray of bool
        True where a value was present but could not be read (so callers can report it).
    """
    s = pd.Series(values, dtype=object) if not isinstance(values, pd.Series) else values
    if pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s):
        out = s.to_numpy(float)
        return out, np.zeros(len(out), bool)
    present = s.notna().to_numpy() & (s.astype(str).str.strip() != "").to_numpy()
    parts = s.astype(str).str.lower().str.extract(_LENGTH_RE)
    num = pd.to_numeric(parts[0].str.replace(",", ".", regex=False), errors="coerce").to_numpy(float)
    feet = parts[1].isin(["ft", "feet", "foot", "'"]).to_numpy()
    num = np.where(feet, num * FT_M, num)
    num = np.where(present, num, np.nan)
    return num, present & np.isnan(num)


def _parse_levels(values) -> tuple[np.ndarray, np.ndarray]:
    s = values
    if pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s):
        out = s.to_numpy(float)
        return out, np.zeros(len(out), bool)
    present = s.notna().to_numpy() & (s.astype(str).str.strip() != "").to_numpy()
    parts = s.astype(str).str.extract(_NUMBER_RE)
    num = pd.to_numeric(parts[0].str.replace(",", ".", regex=False), errors="coerce").to_numpy(float)
    num = np.where(present, num, np.nan)
    return num, present & np.isnan(num)


def _resolve_heights(
    df: pd.DataFrame,
    ids: np.ndarray,
    *,
    path: Path,
    height_column: str | None,
    storey_height_m: float,
    default_height_m: float | None,
    notes: list[str],
) -> tuple[np.ndarray, np.ndarray]:
    n = len(df)
    height = np.full(n, np.nan)
    rule = np.full(n, "", dtype=object)
    if height_column is not None and height_column not in df.columns:
        raise InputDataError(
            f"buildings file '{path}' has no column '{height_column}' (named as height_column); its columns are "
            f"{_listing([c for c in df.columns if c != df.geometry.name], 40)}; fix the name or leave it unset"
        )
    sources = []
    if height_column is not None:
        sources.append((height_column, "column"))
    if "height" in df.columns and height_column != "height":
        sources.append(("height", "height"))
    for col, name in sources:
        _refuse_non_finite(df[col], ids, col, path)
        val, unparsed = parse_height_m(df[col])
        if unparsed.any():
            notes.append(
                f"{int(unparsed.sum())} value(s) of '{col}' could not be read as a height (buildings "
                f"{_listing(ids[unparsed])}, e.g. {df[col][unparsed].iloc[0]!r}); the next rule was used."
            )
        _check_range(val, ids, f"'{col}'", path)
        take = np.isnan(height) & ~np.isnan(val)
        height[take] = val[take]
        rule[take] = name
    lev_col = next((c for c in ("building:levels", "levels") if c in df.columns), None)
    if lev_col is not None:
        lev, unparsed = _parse_levels(df[lev_col])
        if unparsed.any():
            notes.append(
                f"{int(unparsed.sum())} value(s) of '{lev_col}' could not be read as a number of storeys "
                f"(buildings {_listing(ids[unparsed])}); the next rule was used."
            )
        neg = lev < 0
        if neg.any():
            raise InputDataError(
                f"buildings file '{path}': '{lev_col}' is negative for buildings {_listing(ids[neg])}; storey "
                "counts must be >= 0: correct or remove these values"
            )
        val = lev * float(storey_height_m)
        val[lev == 0] = np.nan  # zero storeys says nothing about the height
        take = np.isnan(height) & ~np.isnan(val)
        height[take] = val[take]
        rule[take] = "levels"
    missing = np.isnan(height)
    if missing.any():
        if default_height_m is None or not np.isfinite(default_height_m):
            raise InputDataError(
                f"buildings file '{path}': {int(missing.sum())} building(s) have no height from any rule "
                f"(height column, 'height', 'building:levels'): {_listing(ids[missing])}; add heights or "
                "set default_height_m"
            )
        height[missing] = float(default_height_m)
        rule[missing] = "default"
        msg = (
            f"{int(missing.sum())} of {n} buildings had no height tag; the default height "
            f"{float(default_height_m):g} m was used."
        )
        notes.append(msg)
        warnings.warn(msg, SitingWarning, stacklevel=4)  # points at the caller of load_district
    _check_range(height, ids, "the resolved height", path)
    return height, rule


_NON_FINITE = frozenset({"inf", "+inf", "-inf", "infinity", "+infinity", "-infinity", "nan", "+nan", "-nan"})


def _refuse_non_finite(values: pd.Series, ids: np.ndarray, col: str, path: Path) -> None:
    """Refuse ``Infinity`` and ``NaN`` given as heights (numbers or words): they are not missing, they are wrong."""
    if pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values):
        bad = np.isinf(values.to_numpy(float))
    else:
        bad = values.astype(str).str.strip().str.lower().isin(_NON_FINITE).to_numpy() & values.notna().to_numpy()
    if bad.any():
        raise InputDataError(
            f"buildings file '{path}': '{col}' is not a finite number for buildings {_listing(ids[bad])} (e.g. "
            f"{values[bad].iloc[0]}); valid: above 0 up to {MAX_HEIGHT_M:g} m (common practice): give the height in "
            "metres, or remove the value to use building:levels or the default height"
        )


def _check_range(val: np.ndarray, ids: np.ndarray, what: str, path: Path) -> None:
    low = val <= 0
    if low.any():
        raise InputDataError(
            f"buildings file '{path}': {what} is zero or negative for buildings {_listing(ids[low])} "
            f"(e.g. {val[low][0]:g} m); heights must be > 0 m above ground: correct or remove these values"
        )
    high = val > MAX_HEIGHT_M
    if high.any():
        raise InputDataError(
            f"buildings file '{path}': {what} exceeds {MAX_HEIGHT_M:g} m for buildings {_listing(ids[high])} "
            f"(e.g. {val[high][0]:g} m; valid: above 0 up to {MAX_HEIGHT_M:g} m, common practice); check the unit "
            "(feet? centimetres?) and correct these values"
        )


# ------------------------------------------------------------------------------------------- attributes
