"""Table contracts between pipeline stages.

Every stage takes and returns pandas DataFrames (GeoDataFrame for buildings) whose columns are declared
here once, with dtype kind, unit and meaning.  :func:`check` is called at stage boundaries and raises a
:class:`~siting.errors.SitingError` naming the table and the missing or mistyped column.

Conventions
-----------
* x, y: metres in the job's projected CRS; z_m: metres above (flat) ground.
* Azimuths: degrees clockwise from north (0 = north, 90 = east), in [0, 360).
* Row position is the index used by every later stage: ``sites.site_id == arange(len(sites))``,
  ``users.user_id == arange(len(users))``, buildings are addressed by row position ``building_idx``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .errors import SitingError

# kind codes: "f" float, "i" integer, "b" bool, "s" string/object
SCHEMAS: dict[str, dict[str, tuple[str, str]]] = {
    "buildings": {
        "building_id": ("s", "id from the input layer (parts of a multipolygon share it)"),
        "part": ("i", "part number within the building id, 0-based"),
        "height_m": ("f", "roof height above ground [m]"),
        "height_rule": ("s", "which rule gave the height: column, height, levels, default"),
        "name": ("s", "name tag from the input, '' if none"),
        "address": ("s", "address tag from the input, '' if none"),
    },
    "base_stations": {
        "bs_id": ("s", "base station id"),
        "x": ("f", "easting [m]"),
        "y": ("f", "northing [m]"),
        "z_m": ("f", "antenna height above ground [m]"),
        "tx_power_dbm": ("f", "conducted transmit power over the channel [dBm]"),
        "max_gain_dbi": ("f", "antenna boresight gain including array gain [dBi]"),
        "azimuth_deg": ("f", "boresight azimuth, clockwise from north [deg]"),
        "downtilt_deg": ("f", "boresight downtilt below horizontal [deg]"),
        "pattern": ("s", "'sector' (3GPP TR 38.901 Table 7.3-1) or 'omni'"),
    },
    "sites": {
        "site_id": ("i", "row position, 0..n-1"),
        "building_idx": ("i", "row position of the carrying building part"),
        "building_id": ("s", "id of the carrying building"),
        "wall_id": ("i", "id of the straight wall segment carrying the spot (unique per district)"),
        "x": ("f", "easting of the spot, offset outward from the wall [m]"),
        "y": ("f", "northing [m]"),
        "z_m": ("f", "mounting height of the panel centre [m]"),
        "normal_az_deg": ("f", "outward wall normal, clockwise from north [deg]"),
        "wall_free_m": ("f", "straight wall length available for a panel centred here [m]"),
        "source": ("s", "'generated' or 'given'"),
    },
    "sizes": {
        "size_id": ("s", "catalogue id"),
        "width_m": ("f", "panel width along the wall [m]"),
        "height_m": ("f", "panel height [m]"),
        "cost": ("f", "panel cost [currency units]"),
        "install_cost": ("f", "installation cost [currency units]"),
    },
    "users": {
        "user_id": ("i", "row position, 0..n-1"),
        "x": ("f", "easting [m]"),
        "y": ("f", "northing [m]"),
        "z_m": ("f", "terminal height above ground [m]"),
        "weight": ("f", "demand weight (households, subscribers or traffic share), >= 0"),
        "kind": ("s", "'given', 'street', 'home' or 'indoor'"),
        "building_idx": ("i", "building part a home/indoor point belongs to, -1 for outdoor points"),
        "normal_az_deg": ("f", "facing of a facade (home) terminal [deg]; NaN for free-standing points"),
    },
    "pairs": {
        "a": ("i", "row position in the first point set"),
        "b": ("i", "row position in the second point set"),
        "distance_m": ("f", "3-D distance [m]"),
        "d2d_m": ("f", "horizontal distance [m]"),
        "los": ("b", "True when no building blocks the 3-D segment (the rule in siting.visibility)"),
        "angle_a_deg": ("f", "3-D angle between a's wall normal and the direction a->b [deg]; NaN if a has no normal"),
        "angle_b_deg": ("f", "3-D angle between b's wall normal and the direction b->a [deg]; NaN if b has no normal"),
        "elevation_deg": ("f", "elevation of b seen from a, positive upward [deg]"),
    },
    "options": {
        "option_id": ("i", "row position, 0..n-1"),
        "site_id": ("i", "candidate spot"),
        "size_id": ("s", "catalogue size"),
        "cost": ("f", "panel plus installation cost [currency units]"),
    },
    "coverage": {
        "option_id": ("i", "option"),
        "user_id": ("i", "user"),
        "snr_db": ("f", "user SNR with this surface steered to it, coherently added to its direct path [dB]"),
        "bs_idx": ("i", "row position of the base station feeding the surface"),
    },
    "direct": {
        "user_id": ("i", "user"),
        "snr_db": ("f", "best direct SNR without any surface [dB] (-inf when no base station in range)"),
        "bs_idx": ("i", "row position of the serving base station, -1 if none"),
        "los": ("b", "direct path to the serving base station is line of sight"),
        "covered": ("b", "snr_db >= the coverage target"),
    },
}

_KIND_CHECK = {
    "f": lambda s: pd.api.types.is_float_dtype(s) or pd.api.types.is_integer_dtype(s),
    "i": pd.api.types.is_integer_dtype,
    "b": pd.api.types.is_bool_dtype,
    "s": lambda s: pd.api.types.is_object_dtype(s) or pd.api.types.is_string_dtype(s),
}


def check(df: pd.DataFrame, table: str, where: str = "") -> pd.DataFrame:
    """Raise :class:`SitingError` if ``df`` lacks a column of ``table`` or has it with the wrong kind."""
    schema = SCHEMAS[table]
    problems = []
    for col, (kind, meaning) in schema.items():
        if col not in df.columns:
            problems.append(f"missing column '{col}' ({meaning})")
        elif len(df) and not _KIND_CHECK[kind](df[col]):
            problems.append(f"column '{col}' has dtype {df[col].dtype}, expected kind '{kind}' ({meaning})")
    if problems:
        loc = f" from {where}" if where else ""
        raise SitingError(f"table '{table}'{loc} breaks its contract: " + "; ".join(problems))
    return df


def empty(table: str) -> pd.DataFrame:
    """An empty DataFrame with the columns and dtypes of ``table``."""
    dtypes = {"f": "float64", "i": "int64", "b": "bool", "s": "object"}
    return pd.DataFrame({c: pd.Series(dtype=dtypes[k]) for c, (k, _) in SCHEMAS[table].items()})


@dataclass(frozen=True)
class Points:
    """A point set as plain arrays, the form the visibility and radio kernels take.

    ``normal_az_deg`` is NaN for points without a facade; ``host`` is the carrying building row (-1: none).
    """

    x: np.ndarray
    y: np.ndarray
    z_m: np.ndarray
    normal_az_deg: np.ndarray
    host: np.ndarray

    @classmethod
    def from_table(cls, df: pd.DataFrame) -> Points:
        n = len(df)
        normal = df["normal_az_deg"].to_numpy(float) if "normal_az_deg" in df else np.full(n, np.nan)
        host = df["building_idx"].to_numpy(np.int64) if "building_idx" in df else np.full(n, -1, np.int64)
        return cls(df["x"].to_numpy(float), df["y"].to_numpy(float), df["z_m"].to_numpy(float), normal, host)

    def __len__(self) -> int:
        return len(self.x)
