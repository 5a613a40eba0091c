"""The gain stage against a brute-force reference built independently from the same physics functions.

The reference enumerates every (base station, spot, size, user) combination with plain numpy broadcasting, tests
line of sight pair by pair, and applies the rules (docs/MODELS.md sections 1-2) directly: both hops in LOS and in
range, both angles from the wall normal below the steering limit, the surface and the direct path from the same
station combined as the model states (power sum or co-phased amplitudes, shadow-fading quantile), best station
kept; once with the planning defaults and once with the upper-bound model.  The radio functions themselves are checked against
published values in tests/test_radio_*.py; this file checks the join.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from siting import radio
from siting.candidates import facade_spots, street_grid
from siting.gains import RadioParams, compute_gains, coverage_matrix, make_options
from siting.visibility import Obstacles, line_of_sight
from tests import canonical

P = RadioParams(snr_target_db=20.0, bs_range_m=200.0, surface_range_m=80.0, steer_limit_deg=60.0, keep_margin_db=10.0)


@pytest.fixture(scope="module")
def scene():
    canyon = canonical.street_canyon(length_m=80.0, street_m=20.0, depth_m=12.0, height_m=18.0)
    low_tall = canonical.low_and_tall().assign(building_id=["c0", "c1"])
    low_tall["geometry"] = low_tall.geometry.translate(20.0, 60.0)  # north of the canyon, off its axis
    buildings = pd.concat([canyon, low_tall], ignore_index=True)
    x0, y0 = canonical.X0, canonical.Y0
    bs = pd.DataFrame({
        "bs_id": ["west", "roof"], "x": [x0 - 15.0, x0 + 45.0], "y": [y0 + 22.0, y0 + 6.0],
        "z_m": [8.0, 25.0], "tx_power_dbm": [30.0, 33.0], "max_gain_dbi": [20.0, 23.0],
        "azimuth_deg": [90.0, 0.0], "downtilt_deg": [5.0, 10.0], "pattern": ["sector", "sector"],
    })
    sites = facade_spots(buildings, spacing_m=10.0, mount_heights_m=(5.0,))
    users = street_grid(buildings, grid_m=6.0)
    sizes = pd.DataFrame({"size_id": ["S", "M", "XXL"], "width_m": [0.5, 1.0, 500.0], "height_m": [0.5, 1.0, 1.0],
                          "cost": [1000.0, 2500.0, 1.0], "install_cost": [500.0, 800.0, 0.0]})
    obstacles = Obstacles.from_buildings(buildings.geometry.values, buildings["height_m"].to_numpy())
    return buildings, bs, sites, sizes, users, obstacles


def _angle_deg(px, py, pz, normal_az_deg, qx, qy, qz):
    """3-D angle between a horizontal wall normal at p and the direction p -> q."""
    n = np.stack([np.sin(np.radians(normal_az_deg)), np.cos(np.radians(normal_az_deg)), np.zeros_like(px)])
    d = np.stack([qx - px, qy - py, qz - pz])
    return np.degrees(np.arccos(np.clip((n * d).sum(0) / np.linalg.norm(d, axis=0), -1, 1)))


def _reference(bs, sites, sizes, users, obstacles, p: RadioParams):
    """Direct SNR per user and the best surface SNR per (option, user), by exhaustive enumeration."""
    noise = radio.noise_power_dbm(p.bandwidth_hz, p.noise_figure_db)
    gas = radio.gaseous_attenuation_db_per_km(p.frequency_hz) / 1000.0
    lam = radio.SPEED_OF_LIGHT_M_S / p.frequency_hz
    # Direct: every station x every user, bare-ray line of sight.
    b, u = np.meshgrid(np.arange(len(bs)), np.arange(len(users)), indexing="ij")
    b, u = b.ravel(), u.ravel()
    B = bs.iloc[b].reset_index(drop=True)
    U = users.iloc[u].reset_index(drop=True)
    d2 = np.hypot(U.x - B.x, U.y - B.y).to_numpy()
    d3 = np.sqrt(d2**2 + (U.z_m - B.z_m).to_numpy() ** 2)
    los = line_of_sight(obstacles, B[["x", "y", "z_m"]].to_numpy(), U[["x", "y", "z_m"]].to_numpy())
    gain = radio.bs_gain_toward_dbi((U.x - B.x).to_numpy(), (U.y - B.y).to_numpy(), (U.z_m - B.z_m).to_numpy(),
                                    B.azimuth_deg.to_numpy(), B.downtilt_deg.to_numpy(), B.max_gain_dbi.to_numpy(),
                                    (B.pattern == "omni").to_numpy())
    rx = B.tx_power_dbm.to_numpy() + gain - radio.direct_path_loss_db("umi", los, d2, B.z_m.to_numpy(),
                                                                        U.z_m.to_numpy(), p.frequency_hz) - gas * d3
    rx = np.where(d3 <= p.bs_range_m, rx, -np.inf).reshape(len(bs), len(users))
    los = los.reshape(len(bs), len(users))
    sigma_los = radio.shadow_fading_sigma_db("umi", True) if p.shadow_fading else 0.0
    sigma_nlos = radio.shadow_fading_sigma_db("umi", False) if p.shadow_fading else 0.0
    sigma = np.where(los, sigma_los, sigma_nlos)
    level = rx - radio.fade_margin_db(sigma, p.coverage_probability)
    direct_snr = level.max(axis=0) - noise
    covered = direct_snr >= p.snr_target_db
    sigma_surface = float(np.hypot(sigma_los, sigma_los))

    def excess(h1, h2, d2d):
        if p.surface_hop_model == "free_space":
            return 0.0
        return radio.los_excess_db("umi", d2d, np.maximum(h1, h2), np.minimum(h1, h2), p.frequency_hz)

    options = make_options(sites, sizes)
    best = {}
    for site_row, s in sites.iterrows():
        for k in range(len(bs)):
            st = bs.iloc[k]
            d1 = np.sqrt((s.x - st.x) ** 2 + (s.y - st.y) ** 2 + (s.z_m - st.z_m) ** 2)
            a1 = _angle_deg(np.array([s.x]), np.array([s.y]), np.array([s.z_m]), np.array([s.normal_az_deg]),
                            np.array([st.x]), np.array([st.y]), np.array([st.z_m]))[0]
            if d1 > p.bs_range_m or a1 >= p.steer_limit_deg:
                continue
            if not line_of_sight(obstacles, np.array([[st.x, st.y, st.z_m]]), np.array([[s.x, s.y, s.z_m]]),
                                 clearance_fraction=p.fresnel_clearance, wavelength_m=lam)[0]:
                continue
            want = ~covered
            ux, uy, uz = (users[c].to_numpy()[want] for c in ("x", "y", "z_m"))
            uid = np.flatnonzero(want)
            d2 = np.sqrt((ux - s.x) ** 2 + (uy - s.y) ** 2 + (uz - s.z_m) ** 2)
            a2 = _angle_deg(np.full_like(ux, s.x), np.full_like(ux, s.y), np.full_like(ux, s.z_m),
                            np.full_like(ux, s.normal_az_deg), ux, uy, uz)
            ok = (d2 <= p.surface_range_m) & (d2 > 0) & (a2 < p.steer_limit_deg)
            ok &= line_of_sight(obstacles, np.tile([s.x, s.y, s.z_m], (len(ux), 1)), np.column_stack([ux, uy, uz]),
                                clearance_fraction=p.fresnel_clearance, wavelength_m=lam)
            if not ok.any():
                continue
            ux, uy, uz, uid, d2 = ux[ok], uy[ok], uz[ok], uid[ok], d2[ok]
            n = len(ux)
            g_bs = radio.bs_gain_toward_dbi(s.x - st.x, s.y - st.y, s.z_m - st.z_m, st.azimuth_deg,
                                            st.downtilt_deg, st.max_gain_dbi, st.pattern == "omni")
            hops = excess(st.z_m, s.z_m, np.hypot(s.x - st.x, s.y - st.y)) + excess(s.z_m, uz, np.hypot(ux - s.x,
                                                                                                      uy - s.y))
            direct_db = rx[k, uid] - st.tx_power_dbm
            if p.station_beam == "one_beam":  # the beam sits on the surface; the user sees it off its axis
                direct_db = direct_db - radio.bs_gain_toward_dbi(
                    ux - st.x, uy - st.y, uz - st.z_m, st.azimuth_deg, st.downtilt_deg, st.max_gain_dbi,
                    st.pattern == "omni") + radio.bs_beam_gain_dbi(
                    ux - st.x, uy - st.y, uz - st.z_m, s.x - st.x, s.y - st.y, s.z_m - st.z_m, st.azimuth_deg,
                    st.downtilt_deg, st.max_gain_dbi, st.pattern == "omni")
            coherent = los[k, uid] & (p.combining == "coherent")
            for o in np.flatnonzero(options["site_id"].to_numpy() == site_row):
                size = sizes.iloc[int(options["size_idx"].iloc[o])]
                beta = radio.surface_gain(
                    np.tile([st.x, st.y, st.z_m], (n, 1)), np.column_stack([ux, uy, uz]),
                    np.tile([s.x, s.y, s.z_m], (n, 1)), np.full(n, s.normal_az_deg), np.full(n, size.width_m),
                    np.full(n, size.height_m), p.frequency_hz, p.reflection_efficiency, p.phase_bits,
                    control=p.control, beam_oversampling=p.beam_oversampling,
                    bandwidth_hz=p.bandwidth_hz if p.squint else 0.0, element_q=p.element_q,
                    efficiency_curve=p.efficiency_curve)
                surface_db = g_bs + 10 * np.log10(beta) - gas * (d1 + d2) - hops
                snr = np.empty(n)
                for mode, rows in (("coherent", coherent), ("power", ~coherent)):
                    if rows.any():
                        snr[rows] = radio.combined_level_quantile_db(
                            st.tx_power_dbm + direct_db[rows], sigma[k, uid][rows],
                            st.tx_power_dbm + surface_db[rows], sigma_surface if p.shadow_fading else 0.0,
                            p.coverage_probability, combining=mode) - noise
                for user, value in zip(uid, snr):
                    if value > best.get((o, user), (-np.inf, -1))[0]:
                        best[(o, user)] = (value, k)
    return direct_snr, best


@pytest.mark.parametrize("model", ["planning", "upper_bound"])
def test_gain_stage_matches_brute_force(scene, model):
    buildings, bs, sites, sizes, users, obstacles = scene
    p = P if model == "planning" else P.upper_bound()
    result = compute_gains(obstacles, bs, sites, sizes, users, p)
    direct_snr, best = _reference(bs, sites, sizes, users, obstacles, p)
    np.testing.assert_allclose(result.direct["snr_db"], direct_snr, atol=1e-9)
    assert result.direct["covered"].tolist() == (direct_snr >= p.snr_target_db).tolist()
    kept = {k: v for k, v in best.items() if v[0] >= p.snr_target_db - p.keep_margin_db}
    got = {(int(o), int(u)): (s, int(b)) for o, u, s, b in result.coverage[["option_id", "user_id", "snr_db",
                                                                            "bs_idx"]].itertuples(index=False)}
    assert set(got) == set(kept)
    assert len(kept) > 20
    for key, (snr, k) in kept.items():
        assert got[key][0] == pytest.approx(snr, abs=1e-6)
        assert got[key][1] == k
    # The scene is meant to exercise the join: some users need a surface and some get one.
    assert (~result.direct["covered"]).any() and (result.coverage["snr_db"] >= p.snr_target_db).any()


def test_options_fit_the_wall_and_cost_panel_plus_installation(scene):
    _, _, sites, sizes, _, _ = scene
    options = make_options(sites, sizes)
    assert "XXL" not in set(options["size_id"])  # a 500 m panel fits no wall
    assert len(options) == 2 * len(sites)  # every wall piece here takes the 0.5 m and 1 m panels
    m = options[options["size_id"] == "M"]
    assert (m["cost"] == 3300.0).all()


def test_coverage_matrix_is_sparse_and_thresholded(scene):
    _, bs, sites, sizes, users, obstacles = scene
    result = compute_gains(obstacles, bs, sites, sizes, users, P)
    cover = coverage_matrix(result.coverage, len(result.options), len(users), P.snr_target_db)
    assert cover.nnz == int((result.coverage["snr_db"] >= P.snr_target_db).sum())
    assert cover.shape == (len(result.options), len(users)) and cover.format == "csr"


def test_users_covered_directly_get_no_surface_links_unless_asked(scene):
    _, bs, sites, sizes, users, obstacles = scene
    result = compute_gains(obstacles, bs, sites, sizes, users, P)
    direct_covered = set(np.flatnonzero(result.direct["covered"].to_numpy()))
    assert not direct_covered & set(result.site_user["b"])
    from dataclasses import replace

    everyone = compute_gains(obstacles, bs, sites, sizes, users, replace(P, serve_covered_users=True))
    assert direct_covered & set(everyone.site_user["b"])
    # With the best beam toward every user and no fading, a surface never makes a user worse than the direct path
    # from the same station: powers (or co-phased amplitudes) add.
    for ideal in (P.upper_bound(), replace(P.upper_bound(), combining="power")):
        everyone = compute_gains(obstacles, bs, sites, sizes, users, replace(ideal, serve_covered_users=True))
        direct = everyone.bs_user.rename(columns={"a": "bs_idx", "b": "user_id"})[["bs_idx", "user_id", "rx_dbm"]]
        merged = everyone.coverage.merge(direct, on=["bs_idx", "user_id"])
        assert len(merged) == len(everyone.coverage)
        assert (merged["snr_db"] >= merged["rx_dbm"] - P.noise_dbm - 1e-9).all()


def test_each_planning_choice_never_raises_an_snr(scene):
    """Property: relaxing any one planning choice toward the upper bound never lowers an SNR (so each realistic
    choice never raises one), and every covered row of the planning model is covered under the upper bound."""
    from dataclasses import replace

    from siting.checks import RELAXATIONS

    _, bs, sites, sizes, users, obstacles = scene
    plan = compute_gains(obstacles, bs, sites, sizes, users, replace(P, serve_covered_users=True))
    key = ["option_id", "user_id"]
    for label, change in RELAXATIONS + (("all", {}),):
        q = replace(P, serve_covered_users=True, **change) if change else replace(P.upper_bound(),
                                                                                  serve_covered_users=True)
        base = plan
        if label == "no beam squint":
            # A far-field beam is not co-phased at the carrier, so part of the band can steer it closer to the user
            # (checked against the exact element sum in tests/test_radio_beams.py): squint only lowers focused gain.
            q = replace(q, control="focus")
            base = compute_gains(obstacles, bs, sites, sizes, users, replace(P, serve_covered_users=True,
                                                                             control="focus"))
        loose = compute_gains(obstacles, bs, sites, sizes, users, q)
        assert (loose.direct["snr_db"].to_numpy() >= base.direct["snr_db"].to_numpy() - 1e-9).all(), label
        merged = base.coverage.merge(loose.coverage, on=key, how="left", suffixes=("", "_loose"))
        assert merged["snr_db_loose"].notna().all(), label  # no planning row disappears when relaxed
        assert (merged["snr_db_loose"] >= merged["snr_db"] - 1e-6).all(), label
