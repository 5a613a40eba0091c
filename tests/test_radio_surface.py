"""Reflecting-surface gain: worked values from published formulas, exact element sums, near-field limits, properties.

Sources are named beside each check; worked values were computed from the cited formulas (28 GHz, lambda/2 cells,
isotropic ends, unit reflection amplitude).

[TANG] W. Tang et al., "Wireless Communications With Reconfigurable Intelligent Surface: Path Loss Modeling and
       Experimental Measurement", IEEE Trans. Wireless Commun., 2021, arXiv:1911.05326 (general model).
[NF]   E. Björnson and L. Sanguinetti, "Power Scaling Laws and Near-Field Behaviors of Massive MIMO and Intelligent
       Reflecting Surfaces", IEEE Open J. Commun. Soc., 2020, arXiv:2002.04960.
[WZ]   Q. Wu and R. Zhang, "Beamforming Optimization for Wireless Network Aided by Intelligent Reflecting Surface
       with Discrete Phase Shifts", IEEE Trans. Commun., 2020, arXiv:1906.03165.
[PRIMER] E. Björnson, Ö. T. Demir and L. Sanguinetti, "A Primer on Near-Field Beamforming for Arrays and
       Reconfigurable Intelligent Surfaces", Asilomar 2021, arXiv:2110.06661 (Fraunhofer distance, D the diagonal).
"""

import numpy as np
import pytest
import scipy.constants

from siting.errors import SitingError
from siting.radio import (
    RadioInputError,
    coherent_snr_db,
    element_sum_gain,
    far_field_gain,
    fraunhofer_distance_m,
    noise_power_dbm,
    quantisation_efficiency,
    surface_gain,
    tile_counts,
)

C = scipy.constants.c  # speed of light in vacuum [m/s], exact SI value (scipy.constants)
F28 = 28e9
LAM28 = C / F28


def db_loss(beta):
    return -10.0 * np.log10(beta)


def planar_geometry(d1, d2, theta_in_deg, theta_out_deg):
    """Panel at the origin facing north (normal_az 0); Tx to the west side, Rx to the east, same height."""
    ti, to = np.radians(theta_in_deg), np.radians(theta_out_deg)
    tx = np.stack([-d1 * np.sin(ti), d1 * np.cos(ti), np.zeros_like(ti)], axis=-1)
    rx = np.stack([d2 * np.sin(to), d2 * np.cos(to), np.zeros_like(to)], axis=-1)
    return tx, rx


# ------------------------------------------------------------------------------------ quantisation ([WZ])

@pytest.mark.parametrize("bits, loss_db", [(1, -3.9224), (2, -0.9121), (3, -0.2244), (4, -0.0559)])
def test_quantisation_loss_worked(bits, loss_db):
    # [WZ]: b-bit phases lose (sin(pi / 2^b) / (pi / 2^b))^2 (large-N power ratio); values computed
    assert 10 * np.log10(quantisation_efficiency(bits)) == pytest.approx(loss_db, abs=1e-4)


def test_quantisation_continuous_and_array():
    # [WZ]: continuous phases have no quantisation loss; b -> infinity tends to 1 (property)
    assert quantisation_efficiency(None) == 1.0
    assert quantisation_efficiency(0) == 1.0
    arr = quantisation_efficiency(np.array([0, 1, 2, 3, 8]))
    assert arr.shape == (5,)
    assert arr[0] == 1.0 and np.all(np.diff(arr[1:]) > 0) and arr[-1] == pytest.approx(1.0, abs=1e-4)
    assert arr[1] == quantisation_efficiency(1)


@pytest.mark.parametrize("bad", [-1, 1.5, np.nan])
def test_quantisation_bad_bits(bad):
    with pytest.raises(RadioInputError):
        quantisation_efficiency(bad)


# --------------------------------------------------- far field: [TANG] general model, [NF] Eq. (48); values computed

# (elements per side, d1, d2, theta_in, theta_out, closed form [dB], exact element sum [dB])
FAR_FIELD_CASES = [
    (32, 50.0, 20.0, 0.0, 0.0, 112.633, 112.633),
    (32, 50.0, 20.0, 30.0, 45.0, 114.763, 114.763),
    (100, 50.0, 20.0, 0.0, 0.0, 92.839, 92.840),
    (100, 5.0, 5.0, 0.0, 0.0, 60.798, 60.823),
]


@pytest.mark.parametrize("n, d1, d2, ti, to, closed_db, exact_db", FAR_FIELD_CASES)
def test_far_field_closed_form_worked(n, d1, d2, ti, to, closed_db, exact_db):
    # far-field limit of the Tang et al. general model (F = cos, aperture element gain) = [NF] Eq. (48): S^2 cos_in cos_out / (4 pi d1 d2)^2; values computed
    side = n * LAM28 / 2
    beta = far_field_gain(d1, d2, np.cos(np.radians(ti)), np.cos(np.radians(to)), side * side)
    assert db_loss(beta) == pytest.approx(closed_db, abs=1e-3)


@pytest.mark.parametrize("n, d1, d2, ti, to, closed_db, exact_db", FAR_FIELD_CASES)
def test_element_sum_worked(n, d1, d2, ti, to, closed_db, exact_db):
    # [TANG] general model summed element by element (F = cos, G = pi for lambda/2 cells, co-phased; [NF] Eq. (42));
    # values computed
    tx, rx = planar_geometry(d1, d2, ti, to)
    beta = element_sum_gain(tx, rx, [0, 0, 0], 0.0, n, n, LAM28 / 2, LAM28 / 2)
    assert db_loss(beta) == pytest.approx(exact_db, abs=1.5e-3)


@pytest.mark.parametrize("n, d1, d2, ti, to, closed_db, exact_db", FAR_FIELD_CASES)
def test_surface_gain_worked(n, d1, d2, ti, to, closed_db, exact_db):
    # the exact element sum above ([TANG] general model); the tile/far-field model must agree to 0.01 dB on these cases
    tx, rx = planar_geometry(d1, d2, ti, to)
    side = n * LAM28 / 2
    beta = surface_gain(tx, rx, [0, 0, 0], 0.0, side, side, F28)
    assert db_loss(beta) == pytest.approx(exact_db, abs=0.01)


def test_link_budget_snr_worked():
    # link budget from [NF] Eq. (48) (112.633 dB, 32 x 32, 50/20 m) and noise -174 dBm/Hz + 10 log10 B + NF:
    # Pt 30 dBm, Gt 25 dBi, Gr 0 dBi, 400 MHz, NF 10 dB -> 30 + 25 - 112.633 + 77.979 = 20.35 dB (computed)
    tx, rx = planar_geometry(50.0, 20.0, 0.0, 0.0)
    side = 32 * LAM28 / 2
    g_db = 10 * np.log10(surface_gain(tx, rx, [0, 0, 0], 0.0, side, side, F28)) + 25.0 + 0.0
    snr = coherent_snr_db(30.0, -np.inf, g_db, noise_power_dbm(400e6, 10.0))
    assert snr == pytest.approx(20.35, abs=0.01)


@pytest.mark.parametrize("side_m, freq_hz, expected_m", [
    (0.5, 28e9, 93.4), (1.0, 28e9, 373.6), (1.0, 3.5e9, 46.7), (32 * LAM28 / 2, 28e9, 10.96)])
def test_fraunhofer_distance_worked(side_m, freq_hz, expected_m):
    # [PRIMER]: Fraunhofer distance 2 D^2 / lambda with D the largest dimension (the diagonal); values computed
    assert fraunhofer_distance_m(side_m, side_m, freq_hz) == pytest.approx(expected_m, rel=1e-3)


def test_far_field_behind_panel_is_zero():
    # geometry: a point behind the panel plane (cos <= 0) receives nothing from a one-sided reflector
    assert far_field_gain(10.0, 10.0, -0.2, 0.5, 0.25) == 0.0
    tx, rx = planar_geometry(10.0, 10.0, 0.0, 0.0)
    behind = rx * np.array([1, -1, 1])
    assert surface_gain(tx, behind, [0, 0, 0], 0.0, 0.5, 0.5, F28) == 0.0
    in_plane = np.array([10.0, 0.0, 0.0])
    assert surface_gain(tx, in_plane, [0, 0, 0], 0.0, 0.5, 0.5, F28) == 0.0


# ------------------------------------------------------------------ tile sum against the exact element sum

def test_tile_sum_matches_element_sum_random_sample():
    # Reference: exact element-by-element co-phased sum ([TANG] general model, [NF] Eq. (42));
    # requirement: within 0.1 dB for panels up to 100 x 100 lambda/2 elements at 28 GHz, 2-200 m, oblique
    rng = np.random.default_rng(20240611)
    m = 200
    n_side = rng.integers(8, 101, size=(m, 2))
    d = np.exp(rng.uniform(np.log(2.0), np.log(200.0), size=(m, 2)))
    # directions in front of the panel: azimuth within +-70 deg of the normal, elevation within +-50 deg
    az = np.radians(rng.uniform(-70, 70, size=(m, 2)))
    el = np.radians(rng.uniform(-50, 50, size=(m, 2)))
    normal_az = rng.uniform(0, 360, size=m)
    centre = rng.uniform(-50, 50, size=(m, 3))
    world_az = np.radians(normal_az)[:, None] + az
    vec = np.stack([np.sin(world_az) * np.cos(el), np.cos(world_az) * np.cos(el), np.sin(el)], axis=-1)
    tx = centre + d[:, 0, None] * vec[:, 0]
    rx = centre + d[:, 1, None] * vec[:, 1]
    pitch = LAM28 / 2
    exact = np.array([element_sum_gain(tx[i], rx[i], centre[i], normal_az[i], n_side[i, 0], n_side[i, 1],
                                       pitch, pitch) for i in range(m)])  # reference, one panel size each
    model = surface_gain(tx, rx, centre, normal_az, n_side[:, 0] * pitch, n_side[:, 1] * pitch, F28)
    err_db = np.abs(10 * np.log10(model / exact))
    assert err_db.max() < 0.1
    # and the sample really exercises both branches (near and far field)
    d_f = fraunhofer_distance_m(n_side[:, 0] * pitch, n_side[:, 1] * pitch, F28)
    far = (d[:, 0] >= d_f) & (d[:, 1] >= d_f)
    assert far.any() and (~far).any()


def test_element_sum_vectorised_equals_loop():
    # vectorisation property: one call over many triples equals the per-triple calls
    rng = np.random.default_rng(7)
    tx = np.column_stack([rng.uniform(-20, 20, 6), rng.uniform(3, 40, 6), rng.uniform(-5, 5, 6)])
    rx = np.column_stack([rng.uniform(-20, 20, 6), rng.uniform(3, 40, 6), rng.uniform(-5, 5, 6)])
    many = element_sum_gain(tx, rx, [0, 0, 0], 0.0, 20, 12, LAM28 / 2, LAM28 / 2)
    single = [element_sum_gain(tx[i], rx[i], [0, 0, 0], 0.0, 20, 12, LAM28 / 2, LAM28 / 2) for i in range(6)]
    np.testing.assert_allclose(many, single, rtol=1e-12)


def test_tile_counts_put_each_tile_in_its_far_field():
    # definition ([PRIMER]): a tile of diagonal D_t is in its far field when 2 D_t^2 / lambda <= r
    rng = np.random.default_rng(3)
    w = rng.uniform(0.05, 2.0, 200)
    h = rng.uniform(0.05, 2.0, 200)
    r = rng.uniform(0.3, 300.0, 200)
    nx, ny = tile_counts(w, h, LAM28, r)
    capped = (nx >= np.ceil(w / (LAM28 / 2))) | (ny >= np.ceil(h / (LAM28 / 2)))
    tile_df = 2 * ((w / nx) ** 2 + (h / ny) ** 2) / LAM28
    assert np.all((tile_df <= r * (1 + 1e-12)) | capped)
    assert np.all(nx >= 1) and np.all(ny >= 1)


# ----------------------------------------------------------------------------------- common practice

def test_doubling_both_sides_gives_12_db_far_field():
    # common practice ([NF] Eq. (48): beta ~ S^2): power grows with the square of the area; both sides x2 -> +12.04 dB
    tx, rx = planar_geometry(120.0, 150.0, 20.0, 35.0)
    small = surface_gain(tx, rx, [0, 0, 0], 0.0, 0.1, 0.15, F28)
    big = surface_gain(tx, rx, [0, 0, 0], 0.0, 0.2, 0.3, F28)
    assert 10 * np.log10(big / small) == pytest.approx(20 * np.log10(4.0), abs=1e-9)


def test_u_shaped_gain_along_link():
    # common practice (beta ~ 1 / (d1 d2)^2, [NF] Eq. (48)): Tx and Rx 80 m apart, surface 4 m off the line: best near either end,
    # lowest mid-way, symmetric.  The panel faces the line (normal toward -y, azimuth 180 deg).
    x = np.linspace(2.0, 78.0, 39)
    centre = np.column_stack([x, np.full_like(x, 4.0), np.full_like(x, 5.0)])
    tx = np.array([0.0, 0.0, 5.0])
    rx = np.array([80.0, 0.0, 5.0])
    g = 10 * np.log10(surface_gain(tx, rx, centre, 180.0, 0.5, 0.5, F28))
    np.testing.assert_allclose(g, g[::-1], atol=1e-9)           # symmetric
    mid = len(x) // 2
    assert np.argmin(g) == mid                                  # lowest in the middle
    assert np.all(np.diff(g[: mid + 1]) < 0)                    # falls toward the middle ...
    assert np.all(np.diff(g[mid:]) > 0)                         # ... and rises again
    assert g[0] - g[mid] > 10.0


def _solid_angle_square(side_m, d_m):
    # solid angle of a centred square of side L seen at distance d on its axis: 4 asin(a^2 / (a^2 + d^2)),
    # a = L/2 (solid angle of a rectangle seen on its axis; mathematics)
    a = side_m / 2
    return 4 * np.arcsin(a * a / (a * a + d_m * d_m))


def test_solid_angle_reference_matches_worked():
    # [NF] (Fig. 3 discussion): keeping only distance and projected area, a very large surface captures 1/2 of an
    # isotropic source's power; computed from the solid angle: a 10 km square at 25 m captures 0.4977
    assert _solid_angle_square(1e4, 25.0) / (4 * np.pi) == pytest.approx(0.4977, abs=1e-4)


@pytest.mark.parametrize("side_m, d_m, freq_hz", [(40.0, 1.0, 1e9), (10.0, 1.0, 1e9), (2.0, 2.0, 28e9)])
def test_large_panel_half_power_bound(side_m, d_m, freq_hz):
    # [NF] (projected-area model, no polarisation loss): each hop captures Omega / (4 pi) <= 1/2 of the power
    # (infinite plane: exactly 1/2).  Tx = Rx on the axis, so beta = (Omega / 4 pi)^2 <= 1/4.
    p = np.array([0.0, d_m, 0.0])
    beta = surface_gain(p, p, [0, 0, 0], 0.0, side_m, side_m, freq_hz)
    assert np.sqrt(beta) == pytest.approx(_solid_angle_square(side_m, d_m) / (4 * np.pi), rel=1e-3)
    assert beta < 0.25


# ------------------------------------------------------------------------ vectorisation and bad input

def test_surface_gain_scalar_array_broadcast():
    # vectorisation property: broadcasting tx (n,1,3) x rx (1,k,3) equals element-wise calls
    rng = np.random.default_rng(11)
    tx = np.column_stack([rng.uniform(-30, 30, 4), rng.uniform(1, 60, 4), rng.uniform(0, 10, 4)])
    rx = np.column_stack([rng.uniform(-30, 30, 5), rng.uniform(1, 60, 5), rng.uniform(0, 10, 5)])
    grid = surface_gain(tx[:, None, :], rx[None, :, :], [0, 0, 3], 0.0, 0.6, 0.4, F28, 0.8, 2)
    assert grid.shape == (4, 5)
    for i in range(4):
        for j in range(5):
            one = surface_gain(tx[i], rx[j], [0, 0, 3], 0.0, 0.6, 0.4, F28, 0.8, 2)
            assert isinstance(one, float)
            assert one == pytest.approx(grid[i, j], rel=1e-12)


def test_efficiency_and_bits_scale_linearly():
    # far_field_gain definition ([NF] Eq. 48 with eta and Lq factors): both multiply the gain
    tx, rx = planar_geometry(8.0, 30.0, 10.0, 40.0)  # near field for a 0.5 m panel at 28 GHz
    base = surface_gain(tx, rx, [0, 0, 0], 0.0, 0.5, 0.5, F28)
    scaled = surface_gain(tx, rx, [0, 0, 0], 0.0, 0.5, 0.5, F28, efficiency=0.5, phase_bits=1)
    assert scaled / base == pytest.approx(0.5 * quantisation_efficiency(1), rel=1e-12)


def test_normal_azimuth_is_clockwise_from_north():
    # convention (tables.py): azimuth clockwise from north; a panel facing east (90) serves points to the east
    east = np.array([30.0, 0.0, 0.0])
    assert surface_gain(east, east + [0, 5, 0], [0, 0, 0], 90.0, 0.3, 0.3, F28) > 0
    assert surface_gain(east, east + [0, 5, 0], [0, 0, 0], 270.0, 0.3, 0.3, F28) == 0


@pytest.mark.parametrize("kwargs", [
    dict(tx_xyz=[np.nan, 1, 1]),
    dict(tx_xyz=[1.0, 1.0]),
    dict(width_m=-0.5),
    dict(freq_hz=0.0),
    dict(efficiency=-0.1),
    dict(phase_bits=-2),
])
def test_surface_gain_bad_input(kwargs):
    args = dict(tx_xyz=[0, 10, 0], rx_xyz=[3, 10, 0], centre_xyz=[0, 0, 0], normal_az_deg=0.0, width_m=0.5,
                height_m=0.5, freq_hz=F28)
    args.update(kwargs)
    with pytest.raises(RadioInputError) as info:
        surface_gain(**args)
    assert isinstance(info.value, SitingError) and isinstance(info.value, ValueError)


@pytest.mark.parametrize("bad", [dict(d_in_m=-1.0), dict(d_out_m=np.nan), dict(d_in_m=0.0)])
def test_far_field_gain_bad_distance(bad):
    args = dict(d_in_m=10.0, d_out_m=10.0, cos_in=1.0, cos_out=1.0, area_m2=0.25)
    args.update(bad)
    with pytest.raises(RadioInputError, match="d_"):
        far_field_gain(**args)
