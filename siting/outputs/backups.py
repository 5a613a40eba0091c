"""The backup spots of each chosen site, located for a field team: building, address, wall, height, panel,
distance from the primary spot, and what the swap keeps (recovered share, kept weight, a weak flag).

The optimiser (:func:`siting.optimize.backups_for`) chooses and orders them; this module only places them.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .values import angle_deg, compass_point, text_values, to_lonlat

#: Columns of the optimiser's backup table that :func:`backup_rows` reads; any further column is passed through.
BACKUP_INPUT_COLUMNS = ("option", "backup_rank", "backup_option", "recovered_weight", "recovered_share",
                        "kept_weight", "weak", "placement")
#: A backup keeping less than this share of its primary's exclusive weight is weak (the optimiser's rule,
#: :data:`siting.optimize.ranking.WEAK_SHARE`, common practice), used when the optimiser's table has no flag.
WEAK_SHARE = 0.5

#: The columns of :attr:`PlanFigures.backups` and their dtypes, in order.
BACKUP_COLUMNS = {
    "rank": "int64", "site_id": "int64", "backup_rank": "int64", "backup_option_id": "int64",
    "backup_site_id": "int64", "backup_building_id": "object", "backup_name": "object", "backup_address": "object",
    "backup_lon": "float64", "backup_lat": "float64", "backup_facing_deg": "float64", "backup_facing": "object",
    "backup_mount_height_m": "float64", "backup_size_id": "object", "backup_width_m": "float64",
    "backup_height_m": "float64", "backup_distance_m": "float64", "same_building": "bool",
    "placement": "object", "recovered_weight": "float64", "recovered_share": "float64", "kept_weight": "float64",
    "weak": "bool",
}


def empty_backups() -> pd.DataFrame:
    return pd.DataFrame({c: pd.Series(dtype=t) for c, t in BACKUP_COLUMNS.items()})


def _optimiser_rows(backups: pd.DataFrame | None, chosen: np.ndarray, n_options: int) -> pd.DataFrame | None:
    """The optimiser's rows of the chosen options, backup_rank filled in, or None when there are none."""
    if backups is None or not len(backups) or not {"option", "backup_option"} <= set(backups.columns):
        return None
    bk = backups[backups["option"].isin(chosen) & backups["backup_option"].between(0, n_options - 1)].copy()
    if "backup_rank" not in bk.columns:
        bk["backup_rank"] = bk.groupby("option").cumcount() + 1
    return bk.sort_values(["option", "backup_rank"], kind="stable") if len(bk) else None


def _column(bk: pd.DataFrame, name: str, default, dtype) -> np.ndarray:
    return bk[name].to_numpy(dtype) if name in bk.columns else np.full(len(bk), default, dtype=dtype)


def backup_rows(b, chosen: np.ndarray, rank_of_option: np.ndarray, names: np.ndarray,
                addresses: np.ndarray) -> pd.DataFrame:
    """The backups of the chosen options in rank order (see :attr:`PlanFigures.backups`).

    ``names`` and ``addresses`` are the buildings' texts by row position (``sites.building_idx``).
    """
    options, sites = b.options, b.sites
    bk = _optimiser_rows(b.backups, chosen, len(options))
    if bk is None:
        return empty_backups()
    opt_site = options["site_id"].to_numpy(np.int64)
    primary_opt, backup_opt = bk["option"].to_numpy(np.int64), bk["backup_option"].to_numpy(np.int64)
    prim, bsite = opt_site[primary_opt], opt_site[backup_opt]
    sx, sy = sites["x"].to_numpy(float), sites["y"].to_numpy(float)
    lon, lat = to_lonlat(b.crs, sx[bsite], sy[bsite])
    bidx = sites["building_idx"].to_numpy(np.int64)
    ok = (bidx[bsite] >= 0) & (bidx[bsite] < len(names))
    pick = np.clip(bidx[bsite], 0, max(len(names) - 1, 0))
    facing = angle_deg(sites["normal_az_deg"].to_numpy(float)[bsite])
    size = b.sizes.drop_duplicates("size_id").set_index("size_id").reindex(options["size_id"].to_numpy()[backup_opt])
    building_id = text_values(sites["building_id"].iloc[bsite].reset_index(drop=True))
    same_building = building_id == text_values(sites["building_id"].iloc[prim].reset_index(drop=True))
    recovered_share = _column(bk, "recovered_share", np.nan, float)
    weak = (_column(bk, "weak", False, bool) if "weak" in bk.columns
            else np.nan_to_num(recovered_share, nan=1.0) < WEAK_SHARE)
    out = pd.DataFrame({
        "rank": rank_of_option[primary_opt], "site_id": prim, "backup_rank": bk["backup_rank"].to_numpy(np.int64),
        "backup_option_id": backup_opt, "backup_site_id": bsite, "backup_building_id": building_id,
        "backup_name": np.where(ok, names[pick], "") if len(names) else np.full(len(bk), "", object),
        "backup_address": np.where(ok, addresses[pick], "") if len(names) else np.full(len(bk), "", object),
        "backup_lon": lon, "backup_lat": lat, "backup_facing_deg": facing, "backup_facing": compass_point(facing),
        "backup_mount_height_m": sites["z_m"].to_numpy(float)[bsite],
        "backup_size_id": text_values(pd.Series(options["size_id"].to_numpy()[backup_opt], dtype=object)),
        "backup_width_m": size["width_m"].to_numpy(float), "backup_height_m": size["height_m"].to_numpy(float),
        "backup_distance_m": np.round(np.hypot(sx[bsite] - sx[prim], sy[bsite] - sy[prim]), 1),
        "same_building": same_building,
        "placement": _column(bk, "placement", "", object),
        "recovered_weight": _column(bk, "recovered_weight", np.nan, float),
        "recovered_share": recovered_share, "kept_weight": _column(bk, "kept_weight", np.nan, float),
        "weak": weak,
    }).astype(BACKUP_COLUMNS)
    for c in bk.columns:  # further columns of the optimiser, as given
        if c not in BACKUP_INPUT_COLUMNS and c not in out.columns:
            out[c] = bk[c].to_numpy()
    return out.sort_values(["rank", "backup_rank"], kind="stable").reset_index(drop=True)
