"""Checks of the chosen plan for the field: what its links depend on, what they expose people to, and what the
model's assumptions are worth.

Stage contract: in go the stage tables (base stations, spots, sizes, users, options, the direct table and the
direct links), the chosen option ids and the radio parameters; out come

* ``site_checks``: one row per chosen option (``option_id``) with the feeding station (``feed_bs_idx``), how far
  the surface sits below that station's boresight (``feed_below_peak_db``; more than
  :data:`BACK_LOBE_DB` flags a back-lobe feed: re-aiming the station may serve those users without a panel), the
  links whose line of sight depends on guessed building heights (``guessed_height_links``), and the highest RF
  power density the surface's beams and its feed put where people may stand (``exposure_*``);
* ``sensitivity``: the covered weight of the same plan under the planning model, under the upper-bound model
  (:meth:`siting.gains.RadioParams.upper_bound`) and with each planning choice relaxed alone.

Only the chosen sites are recomputed, so this costs a small share of the gain stage.

RF exposure (a screening figure, not a compliance assessment): the power density at a point is the power an
isotropic antenna there would receive times 4 pi / lambda^2 (:func:`siting.radio.density_from_isotropic_power_w_m2`);
the panel is assumed focused on the point (the worst case) at the served points and at points 0.5, 1 and 2 m in
front of its centre, and the station beam's density at the panel is EIRP / (4 pi d^2)
(:func:`siting.radio.power_density_w_m2`).  The reference is the general-public whole-body level of the ICNIRP
2020 guidelines (:func:`siting.radio.icnirp_reference_level_w_m2`); local rules decide.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd

from . import radio
from .gains import RadioParams, surface_links
from .visibility import Obstacles, line_of_sight

#: A surface fed more than this far below the feeding station's boresight gain is flagged [dB] (common practice).
BACK_LOBE_DB = 20.0
#: Distances in front of the panel centre at which the exposure check looks [m].
EXPOSURE_FRONT_M = (0.5, 1.0, 2.0)

#: The planning choices relaxed one at a time in the sensitivity table, with the report's words.
RELAXATIONS = (
    ("coherent combining", dict(combining="coherent")),
    ("per-user focusing", dict(control="focus")),
    ("no beam squint", dict(squint=False)),
    ("projected-aperture cells (q = 1), constant efficiency", dict(element_q=1.0, efficiency_curve=None)),
    ("free-space surface hops", dict(surface_hop_model="free_space")),
    ("best station beam toward every user", dict(station_beam="envelope")),
    ("bare-ray line of sight", dict(fresnel_clearance=0.0)),
    ("no shadow fading", dict(shadow_fading=False)),
)


def guessed_heights(buildings: pd.DataFrame) -> np.ndarray:
    """True for buildings whose height came from ``building:levels`` or from the default height."""
    return buildings["height_rule"].isin(["levels", "default"]).to_numpy(bool)


def planning_heights(buildings: pd.DataFrame, uncertainty_m: float, robust: bool) -> np.ndarray:
    """Heights the plan is made with: as read, or with guessed heights at the top of their band (``robust``)."""
    h = buildings["height_m"].to_numpy(float)
    return h + uncertainty_m * guessed_heights(buildings) if robust else h


def chosen_rows(obstacles, bs, sites, sizes, users, options, bs_user, direct, chosen, p: RadioParams) -> pd.DataFrame:
    """Coverage rows (with the surface-path detail) of the chosen options only, recomputed under ``p``."""
    chosen = np.asarray(chosen, np.int64)
    if not len(chosen):
        return pd.DataFrame({"option_id": np.zeros(0, np.int64), "user_id": np.zeros(0, np.int64),
                             "snr_db": np.zeros(0), "bs_idx": np.zeros(0, np.int64)})
    site_index = np.unique(options["site_id"].to_numpy(np.int64)[chosen])
    rows, _, _ = surface_links(obstacles, bs, sites, sizes, users, options, bs_user, direct, p,
                               site_index=site_index, detail=True)
    return rows[np.isin(rows["option_id"].to_numpy(), chosen)].reset_index(drop=True)


def site_checks(buildings, bs, sites, sizes, users, options, bs_user, direct, chosen, p: RadioParams, *,
                obstacles: Obstacles, heights_m: np.ndarray, uncertainty_m: float) -> pd.DataFrame:
    """The per-surface field checks (see the module docstring) for the chosen option ids; ``obstacles`` are the
    buildings at ``heights_m``, the heights the plan was made with."""
    chosen = np.asarray(chosen, np.int64)
    geoms = buildings.geometry.values
    rows = chosen_rows(obstacles, bs, sites, sizes, users, options, bs_user, direct, chosen, p)
    served = rows[rows["snr_db"] >= p.snr_target_db]
    guessed = guessed_heights(buildings)
    raised = Obstacles.from_buildings(geoms, heights_m + uncertainty_m * guessed) if uncertainty_m > 0 \
        and guessed.any() else None
    out = []
    for option in chosen:  # one iteration per chosen surface (tens), each vectorised over its links
        mine = served[served["option_id"] == option]
        every = rows[rows["option_id"] == option]
        site = int(options["site_id"].iloc[option])
        size = int(options["size_idx"].iloc[option])
        feed_rows = mine if len(mine) else every
        feed = int(feed_rows["bs_idx"].mode().iloc[0]) if len(feed_rows) else -1
        out.append({"option_id": int(option), "feed_bs_idx": feed,
                    **_feed_figures(bs, sites, feed, site),
                    "guessed_height_links": _height_dependent(raised, bs, sites, users, feed, site, mine, p),
                    **_exposure(bs, sites, sizes, users, feed, site, size, mine, p)})
    cols = ["option_id", "feed_bs_idx", "feed_below_peak_db", "back_lobe_feed", "guessed_height_links",
            "exposure_w_m2", "exposure_where", "exposure_reference_w_m2", "exposure_share"]
    return pd.DataFrame(out, columns=cols)


def _feed_figures(bs, sites, feed: int, site: int) -> dict:
    if feed < 0:
        return {"feed_below_peak_db": np.nan, "back_lobe_feed": False}
    st, s = bs.iloc[feed], sites.iloc[site]
    gain = radio.bs_gain_toward_dbi(s.x - st.x, s.y - st.y, s.z_m - st.z_m, st.azimuth_deg, st.downtilt_deg,
                                    st.max_gain_dbi, st.pattern == "omni")
    below = float(st.max_gain_dbi - gain)
    return {"feed_below_peak_db": below, "back_lobe_feed": bool(below > BACK_LOBE_DB)}


def _height_dependent(raised, bs, sites, users, feed: int, site: int, served: pd.DataFrame, p: RadioParams) -> int:
    """How many of the surface's links (feed and served users) lose line of sight when guessed heights are raised."""
    if raised is None or feed < 0:
        return 0
    s = sites[["x", "y", "z_m"]].to_numpy(float)[site]
    ends = np.vstack([bs[["x", "y", "z_m"]].to_numpy(float)[feed], users[["x", "y", "z_m"]].to_numpy(float)[
        served["user_id"].to_numpy(np.int64)]])
    clear = line_of_sight(raised, np.broadcast_to(s, ends.shape), ends, clearance_fraction=p.fresnel_clearance,
                          wavelength_m=p.wavelength_m)
    return int((~clear).sum())


def _exposure(bs, sites, sizes, users, feed: int, site: int, size: int, served: pd.DataFrame,
              p: RadioParams) -> dict:
    """Highest power density [W/m^2] from the surface and its feed, where, and against the reference level."""
    reference = float(radio.icnirp_reference_level_w_m2(p.frequency_hz, "whole_body"))
    if feed < 0:
        return {"exposure_w_m2": 0.0, "exposure_where": "", "exposure_reference_w_m2": reference,
                "exposure_share": 0.0}
    st, s, z = bs.iloc[feed], sites.iloc[site], sizes.iloc[size]
    centre = np.array([s.x, s.y, s.z_m])
    bxyz = np.array([st.x, st.y, st.z_m])
    dx, dy, dz = centre - bxyz
    eirp = float(st.tx_power_dbm + radio.bs_gain_toward_dbi(dx, dy, dz, st.azimuth_deg, st.downtilt_deg,
                                                              st.max_gain_dbi, st.pattern == "omni"))
    at_panel = float(radio.power_density_w_m2(eirp, np.linalg.norm(centre - bxyz)))
    normal = np.array([np.sin(np.radians(s.normal_az_deg)), np.cos(np.radians(s.normal_az_deg)), 0.0])
    points = np.vstack([centre + d * normal for d in EXPOSURE_FRONT_M]
                       + [users[["x", "y", "z_m"]].to_numpy(float)[served["user_id"].to_numpy(np.int64)]])
    n = len(points)
    beta = radio.surface_gain(np.broadcast_to(bxyz, (n, 3)), points, np.broadcast_to(centre, (n, 3)),
                              np.full(n, s.normal_az_deg), np.full(n, z.width_m), np.full(n, z.height_m),
                              p.frequency_hz, p.reflection_efficiency, p.phase_bits)  # focused: worst case
    with np.errstate(divide="ignore"):
        density = radio.density_from_isotropic_power_w_m2(eirp + 10.0 * np.log10(beta), p.frequency_hz)
    k_front = len(EXPOSURE_FRONT_M)
    candidates = [(at_panel, "at the panel (station beam)"),
                  (float(np.max(density[:k_front])), f"within {max(EXPOSURE_FRONT_M):g} m in front of the panel")]
    if n > k_front:
        candidates.append((float(np.max(density[k_front:])), "at a served point"))
    value, where = max(candidates)
    return {"exposure_w_m2": value, "exposure_where": where, "exposure_reference_w_m2": reference,
            "exposure_share": value / reference}


def sensitivity(buildings, bs, sites, sizes, users, options, bs_user, direct, chosen, p: RadioParams, *,
                obstacles: Obstacles, heights_m: np.ndarray) -> pd.DataFrame:
    """Covered weight of the chosen plan under the planning model, each relaxation alone, and all together.

    Users count as covered when the direct path or one chosen surface brings them to the target (no load cap).
    ``obstacles`` are the buildings at ``heights_m``, the heights the plan was made with; the upper bound uses
    the heights as read (not raised for ``robust_heights``).
    """
    weight = users["weight"].to_numpy(float)
    planning = obstacles
    read = buildings["height_m"].to_numpy(float)
    nominal = planning if np.array_equal(read, heights_m) else Obstacles.from_buildings(
        buildings.geometry.values, read)
    cases = [("planning model", p, planning)]
    cases += [(f"with {label}", replace(p, **change), planning) for label, change in RELAXATIONS]
    cases.append(("upper bound (all of the above)", p.upper_bound(), nominal))
    out = []
    for label, q, obstacles in cases:  # ten cases, each vectorised over the chosen surfaces' links
        median = direct["snr_median_db"].to_numpy(float)
        margin = q.fade_margin_db(direct["los"].to_numpy(bool))
        d = direct.assign(covered=median - margin >= q.snr_target_db)
        rows = chosen_rows(obstacles, bs, sites, sizes, users, options, bs_user, d, chosen, q)
        covered = d["covered"].to_numpy(bool).copy()
        covered[rows.loc[rows["snr_db"] >= q.snr_target_db, "user_id"].to_numpy(np.int64)] = True
        out.append({"model": label, "covered_weight": float(weight[covered].sum()),
                    "covered_directly_weight": float(weight[d["covered"].to_numpy(bool)].sum())})
    return pd.DataFrame(out)
