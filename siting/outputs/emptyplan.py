"""Why a plan chose nothing, in the planner's words: the first true cause, with the fix.

The causes are checked in pipeline order, so the sentence names the stage where the plan became empty:

0. there are no candidate options at all (no facade spot);
1. no candidate facade spot sees a base station within ``radio.bs_range_m`` (stations far away, or every
   station hidden behind buildings);
2. no demand point lies within ``radio.bs_range_m + radio.surface_range_m`` of a base station (far users,
   swapped coordinates, a wrong CRS);
3. no option (a spot with a panel size) brings any demand point that the direct path leaves uncovered up to
   the SNR target;
4. the budget is below the cheapest useful option (one that covers such a point);
5. the panel count limit is 0;
6. otherwise the optimiser's own message.
"""

from __future__ import annotations

import numpy as np
import shapely


def _no_station_seen(b) -> bool:
    """True when the run found no line of sight between any base station and any candidate spot."""
    degrees = ((getattr(b, "run_info", None) or {}).get("visibility_degrees") or {}).get("bs_site") or {}
    sites = degrees.get("b") or {}
    return bool(sites.get("n")) and sites.get("max") == 0


def _nearest_station_m(b) -> float | None:
    """Distance [m] from the nearest base station to the nearest building footprint."""
    bs, bld = b.base_stations, b.buildings
    if not len(bs) or not len(bld):
        return None
    pts = shapely.points(bs["x"].to_numpy(float), bs["y"].to_numpy(float))
    _, dist = shapely.STRtree(bld.geometry.values).query_nearest(pts, return_distance=True, all_matches=False)
    return float(np.min(dist)) if len(dist) else None


def _nearest_user_m(b) -> float | None:
    """Distance [m] from the nearest demand point to the nearest base station (horizontal)."""
    bs, users = b.base_stations, getattr(b, "users", None)
    if users is None or not len(bs) or not len(users):
        return None
    stations = shapely.points(bs["x"].to_numpy(float), bs["y"].to_numpy(float))
    pts = shapely.points(users["x"].to_numpy(float), users["y"].to_numpy(float))
    _, dist = shapely.STRtree(stations).query_nearest(pts, return_distance=True, all_matches=False)
    return float(np.min(dist)) if len(dist) else None


def empty_plan_reason(b, target_db: float, currency: str, message: str = "") -> str:
    """The reason an empty plan is empty (see the module docstring); ``b`` is an
    :class:`~siting.outputs.OutputBundle`, ``currency`` the label printed beside costs."""
    head = "no surface was chosen: "
    if not len(b.options):
        return (head + "there are no candidate options (no facade spot where a panel size fits); check the "
                "footprints, candidates.mount_heights_m, candidates.roof_margin_m and the panel widths")
    if _no_station_seen(b):
        far = _nearest_station_m(b)
        where = f" (the nearest base station is {far:,.0f} m from the nearest building)" if far else ""
        return (head + "no candidate facade spot sees a base station within radio.bs_range_m" + where + "; check "
                "the base stations' coordinates and heights, or raise radio.bs_range_m")
    radio = (getattr(b, "params", None) or {}).get("radio") or {}
    reach = radio.get("bs_range_m", np.inf) + radio.get("surface_range_m", 0.0)
    nearest_user = _nearest_user_m(b)
    if nearest_user is not None and nearest_user > reach:
        return (head + f"no demand point lies within radio.bs_range_m + radio.surface_range_m ({reach:,.0f} m) of a "
                f"base station (the nearest is {nearest_user:,.0f} m away); check the coordinates of the demand "
                "points and the base stations (swapped coordinates, GeoJSON is longitude first, or a wrong CRS)")
    cov, direct = b.coverage, b.direct
    covered = set(direct.loc[direct["covered"].to_numpy(bool), "user_id"].tolist())
    useful = cov[(cov["snr_db"].to_numpy(float) >= target_db) & ~cov["user_id"].isin(covered).to_numpy()]
    if useful.empty:
        return (head + f"no option brings any demand point that the direct path leaves uncovered up to the SNR "
                f"target ({target_db:g} dB); the base stations do not reach the spots that face the coverage holes: "
                "add spots (candidates.mount_heights_m, inputs.sites), a base station, or lower "
                "radio.snr_target_db")
    cost = b.options.set_index("option_id")["cost"]
    cheapest = float(cost.reindex(useful["option_id"].unique()).min())
    budget = getattr(b, "budget", None)
    if budget is not None and float(budget) < cheapest:
        return (head + f"the budget ({float(budget):,.2f} {currency}) is below the cheapest option that covers a "
                f"demand point (the cheapest useful option, {cheapest:,.2f} {currency}); raise budget.max_cost to at least {cheapest:,.2f} {currency} to "
                "place one panel")
    if getattr(b, "max_panels", None) is not None and int(b.max_panels) <= 0:
        return head + "the panel count limit is 0; raise budget.max_panels"
    return (head + "no option within the limits adds covered weight"
            + (f" (optimiser: {message})" if message else ""))
