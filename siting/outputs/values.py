"""Small value helpers shared by every output: ids and names as text, angles, compass points, lon/lat, notes.

Each takes plain values or arrays and returns the text or numbers the outputs print, so one quantity prints
the same way in the layers, the survey list, the report and ``run.json``.
"""

from __future__ import annotations

import re
from typing import Any

import numpy as np
import pandas as pd

from ..district import to_lonlat as district_to_lonlat

COMPASS_16 = ("N", "NNE", "NE", "ENE", "E", "ESE", "SE", "SSE", "S", "SSW", "SW", "WSW", "W", "WNW", "NW", "NNW")


def compass_point(azimuth_deg) -> np.ndarray:
    """16-point compass name of azimuths in degrees clockwise from north (each point spans 22.5 deg)."""
    az = np.mod(np.asarray(azimuth_deg, dtype=float), 360.0)
    idx = np.floor((az + 11.25) / 22.5).astype(np.int64) % 16
    return np.asarray(COMPASS_16, dtype=object)[idx]


def _one_text(v: Any) -> str:
    if v is None or v is pd.NA:
        return ""
    if isinstance(v, (float, np.floating)):
        f = float(v)
        if not np.isfinite(f):
            return "" if np.isnan(f) else str(f)
        return str(int(f)) if f.is_integer() and abs(f) < 2 ** 63 else repr(f)
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    return str(v)


def text_values(values) -> np.ndarray:
    """Ids and names from input data as text: missing -> "", integral numbers without a decimal point
    (``2106``, not ``2106.0``), everything else as ``str``."""
    arr = values if isinstance(values, pd.Series) else pd.Series(values, dtype=object)
    if pd.api.types.is_integer_dtype(arr.dtype) or pd.api.types.is_bool_dtype(arr.dtype):
        return arr.astype(str).to_numpy(object)
    return np.asarray([_one_text(v) for v in arr.to_numpy(object)], dtype=object)


def angle_deg(az_deg, decimals: int = 1) -> np.ndarray:
    """Azimuths rounded to ``decimals`` and folded into [0, 360): 359.97 prints as 0.0, never as 360.0."""
    a = np.round(np.mod(np.asarray(az_deg, dtype=float), 360.0), decimals)
    return np.where(a >= 360.0, a - 360.0, a) + 0.0  # + 0.0 turns -0.0 into 0.0


_COUNTED = re.compile(r" \((\d+) (tiles|times)\)$")


def dedupe_notes(notes) -> list[str]:
    """Each distinct note once, in first-seen order, with a count when it repeats ("... (3 times)").

    A note that already carries a count of its own ("... (34 tiles)", see :func:`siting.stages.count_notes`)
    is kept as it is.
    """
    counts: dict[str, int] = {}
    for n in notes or []:
        counts[str(n)] = counts.get(str(n), 0) + 1
    return [n if c == 1 or _COUNTED.search(n) else f"{n} ({c} times)" for n, c in counts.items()]


def to_lonlat(crs, x, y) -> tuple[np.ndarray, np.ndarray]:
    """Projected x, y [m] -> WGS84 longitude, latitude [deg], rounded to 7 decimals (about 1 cm)."""
    lon, lat = district_to_lonlat(x, y, crs)
    return np.round(np.asarray(lon, dtype=float), 7), np.round(np.asarray(lat, dtype=float), 7)


def plan_attr(plan, name: str, default=None):
    """``plan.<name>`` of a plan object or a plan dict, ``default`` when missing."""
    if isinstance(plan, dict):
        return plan.get(name, default)
    return getattr(plan, name, default)


def chosen_ids(plan) -> np.ndarray:
    """The plan's chosen option ids as an array (accepts a list, a tuple, an array or None)."""
    chosen = plan_attr(plan, "chosen", None)
    return np.asarray([] if chosen is None else list(chosen))


def float_or_none(v) -> float | None:
    """``float(v)`` when it is a finite number, else None."""
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if np.isfinite(f) else None


def currency_label(currency) -> str:
    """The unit printed beside every cost: the job's currency, or "cost units" when it gives none."""
    text = "" if currency is None else str(currency).strip()
    return text or "cost units"
