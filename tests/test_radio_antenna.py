"""Base station antenna pattern: 3GPP TR 38.901 Table 7.3-1 and the antenna-frame rotation."""

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from siting.radio import (
    RadioInputError,
    array_size_for_gain,
    bs_beam_gain_dbi,
    bs_gain_toward_dbi,
    local_angles_deg,
    sector_gain_dbi,
)


def test_boresight_is_max_gain():
    # TR 38.901 Table 7.3-1: A = 0 at boresight; scaled so that boresight = max_gain_dbi
    assert sector_gain_dbi(0.0, 0.0, 17.5) == 17.5


@pytest.mark.parametrize("az, el", [(32.5, 0.0), (-32.5, 0.0), (0.0, 32.5), (0.0, -32.5)])
def test_3db_at_half_beamwidth(az, el):
    # TR 38.901 Table 7.3-1: 65 deg 3 dB beamwidths -> 12 (32.5/65)^2 = 3 dB down at +-32.5 deg
    assert sector_gain_dbi(az, el, 10.0) == pytest.approx(7.0, abs=1e-12)


@pytest.mark.parametrize("az, el", [(180.0, 0.0), (120.0, 0.0), (-150.0, 10.0), (90.0, 60.0)])
def test_30db_floor(az, el):
    # TR 38.901 Table 7.3-1: A_max = SLA_V = 30 dB and A = -min(-(A_V + A_H), 30)
    assert sector_gain_dbi(az, el, 10.0) == pytest.approx(-20.0)


def test_zenith_below_vertical_floor():
    # TR 38.901 Table 7.3-1: at theta'' = 0 (zenith) A_V = -min(12 (90/65)^2, 30) = -23.0 dB, not capped
    assert sector_gain_dbi(0.0, 90.0, 0.0) == pytest.approx(-12 * (90 / 65) ** 2)
    assert sector_gain_dbi(0.0, -90.0, 0.0) == pytest.approx(-12 * (90 / 65) ** 2)


def test_combined_attenuation_adds_then_caps():
    # TR 38.901 Table 7.3-1: A_V and A_H add (dB) before the 30 dB cap
    a_h = 12 * (40 / 65) ** 2
    a_v = 12 * (20 / 65) ** 2
    assert sector_gain_dbi(40.0, 20.0, 0.0) == pytest.approx(-(a_h + a_v))
    assert sector_gain_dbi(400.0, 20.0, 0.0) == pytest.approx(-(a_h + a_v))  # azimuth wraps at 360


def _reference_local_angles(dx, dy, dz, az_deg, tilt_deg):
    # independent reference: scipy rotations.  Antenna frame: boresight +y (north), x east, z up; first tilt
    # down about x, then bearing clockwise about z (negative rotation about z, since z is up); extrinsic "xz"
    rot = Rotation.from_euler("xz", [-tilt_deg, -az_deg], degrees=True)
    local = rot.inv().apply(np.array([dx, dy, dz], float))
    local /= np.linalg.norm(local)
    return np.degrees(np.arctan2(local[0], local[1])), np.degrees(np.arcsin(local[2]))


def test_local_angles_match_scipy_rotation_random_sample():
    # reference: scipy.spatial.transform.Rotation (TR 38.901 section 7.1 rotation with slant 0)
    rng = np.random.default_rng(42)
    n = 60
    d = rng.normal(size=(n, 3)) * [100, 100, 20]
    az = rng.uniform(0, 360, n)
    tilt = rng.uniform(-10, 20, n)
    got_az, got_el = local_angles_deg(d[:, 0], d[:, 1], d[:, 2], az, tilt)
    for i in range(n):
        ref_az, ref_el = _reference_local_angles(*d[i], az[i], tilt[i])
        assert got_az[i] == pytest.approx(ref_az, abs=1e-9)
        assert got_el[i] == pytest.approx(ref_el, abs=1e-9)


def test_gain_toward_boresight_target():
    # a target exactly on the tilted boresight gets the maximum gain (TR 38.901 Table 7.3-1 + section 7.1)
    tilt, az, dist = 8.0, 135.0, 120.0
    dx = dist * np.cos(np.radians(tilt)) * np.sin(np.radians(az))
    dy = dist * np.cos(np.radians(tilt)) * np.cos(np.radians(az))
    dz = -dist * np.sin(np.radians(tilt))
    assert bs_gain_toward_dbi(dx, dy, dz, az, tilt, 20.0) == pytest.approx(20.0, abs=1e-9)


def test_azimuth_clockwise_from_north():
    # convention (tables.py): boresight at 90 deg points east; a target to the east is at boresight
    assert bs_gain_toward_dbi(100.0, 0.0, 0.0, 90.0, 0.0, 15.0) == pytest.approx(15.0)
    assert bs_gain_toward_dbi(-100.0, 0.0, 0.0, 90.0, 0.0, 15.0) == pytest.approx(-15.0)
    # 32.5 deg clockwise of boresight (horizontal): 3 dB down
    a = np.radians(90.0 + 32.5)
    assert bs_gain_toward_dbi(np.sin(a), np.cos(a), 0.0, 90.0, 0.0, 15.0) == pytest.approx(12.0)


def test_omni_and_vectorised_stations_by_targets():
    # vectorisation property: stations as a column, targets as a row; omni stations give max gain everywhere
    rng = np.random.default_rng(9)
    tx = rng.uniform(-200, 200, size=(3, 1))
    ty = rng.uniform(-200, 200, size=(3, 1))
    ux = rng.uniform(-200, 200, size=(1, 5))
    uy = rng.uniform(-200, 200, size=(1, 5))
    az = np.array([[0.0], [120.0], [240.0]])
    omni = np.array([[False], [True], [False]])
    g = bs_gain_toward_dbi(ux - tx, uy - ty, -10.0, az, 6.0, np.array([[18.0], [5.0], [18.0]]), omni)
    assert g.shape == (3, 5)
    np.testing.assert_array_equal(g[1], 5.0)
    for i in (0, 2):
        for j in range(5):
            one = bs_gain_toward_dbi(ux[0, j] - tx[i, 0], uy[0, j] - ty[i, 0], -10.0, az[i, 0], 6.0, 18.0)
            assert one == pytest.approx(g[i, j], abs=1e-12)
    assert np.all(g <= 18.0) and np.all(g >= 18.0 - 30.0)


def test_bad_input():
    with pytest.raises(RadioInputError, match="dx_m"):
        bs_gain_toward_dbi(np.nan, 1.0, 0.0, 0.0, 0.0, 10.0)
    with pytest.raises(RadioInputError, match="omni"):
        bs_gain_toward_dbi(1.0, 1.0, 0.0, 0.0, 0.0, 10.0, omni="yes")
    with pytest.raises(RadioInputError, match="max_gain_dbi"):
        sector_gain_dbi(0.0, 0.0, np.nan)


# ------------------------------------------------------------------------------- steered planar array beam

def test_array_size_for_gain():
    # smallest square n x n with 8 + 10 log10(n^2) >= G (TR 38.901 Table 7.3-1 element of 8 dBi)
    assert array_size_for_gain(5.0) == (1, 1)
    assert array_size_for_gain(8.0) == (1, 1)
    assert array_size_for_gain(20.0) == (4, 4)                       # 8 + 12.04 >= 20 > 8 + 10 log10(9)
    assert array_size_for_gain(8 + 10 * np.log10(16)) == (4, 4)      # exact power stays 4 x 4
    r, c = array_size_for_gain(np.array([14.0, 25.0, 30.0]))
    np.testing.assert_array_equal(r, [2, 8, 13])
    assert np.all(8 + 10 * np.log10(r * c) >= [14.0, 25.0, 30.0])
    assert np.all(8 + 10 * np.log10((r - 1) ** 2) < [14.0, 25.0, 30.0])


def _direction(az_deg, el_deg):
    a, e = np.radians(az_deg), np.radians(el_deg)
    return np.cos(e) * np.sin(a), np.cos(e) * np.cos(a), np.sin(e)


def test_beam_worked_array_factor_4x4():
    # uniform planar array factor (C. A. Balanis, Antenna Theory, uniform array; equation number from memory):
    # lambda/2 spacing, 4 columns, broadside beam, target at sin(az) = 0.25: psi = pi/8,
    # |AF|^2 / N^2 = (sin(4 psi) / (4 sin psi))^2 = 0.42678 -> -3.698 dB, plus the element A of TR 38.901 Table 7.3-1
    az = np.degrees(np.arcsin(0.25))
    af_db = 10 * np.log10((np.sin(4 * np.pi / 8) / (4 * np.sin(np.pi / 8))) ** 2)
    assert af_db == pytest.approx(-3.698, abs=1e-3)
    got = bs_beam_gain_dbi(*_direction(90 + az, 0.0), *_direction(90.0, 0.0), 90.0, 0.0, 20.0, rows=4, cols=4)
    assert got == pytest.approx(20.0 - 12 * (az / 65) ** 2 + af_db, abs=1e-9)
    # broadside (steered at boresight, target at boresight): the full boresight gain
    assert bs_beam_gain_dbi(*_direction(90.0, 0.0), *_direction(90.0, 0.0), 90.0, 0.0, 20.0) == pytest.approx(20.0)
    # first null of 4 elements at sin(az) = 0.5 (psi = pi/4): floored at G_max - 30 dB (decision)
    got = bs_beam_gain_dbi(*_direction(120.0, 0.0), *_direction(90.0, 0.0), 90.0, 0.0, 20.0, rows=4, cols=4)
    assert got == pytest.approx(-10.0)


def test_beam_never_above_envelope_and_equal_at_steering():
    # property (seeded random): gain toward any target <= TR 38.901 envelope toward that target; at the
    # steering point the beam equals the envelope bs_gain_toward_dbi
    rng = np.random.default_rng(21)
    n = 5000
    tgt = rng.normal(size=(3, n)) * [[200], [200], [15]]
    steer = rng.normal(size=(3, n)) * [[200], [200], [15]]
    az = rng.uniform(0, 360, n)
    tilt = rng.uniform(-5, 15, n)
    g = rng.uniform(5, 30, n)
    beam = bs_beam_gain_dbi(*tgt, *steer, az, tilt, g)
    env = bs_gain_toward_dbi(*tgt, az, tilt, g)
    assert np.all(beam <= env + 1e-9)
    assert np.all(beam >= g - 30.0 - 1e-9)
    at_steer = bs_beam_gain_dbi(*steer, *steer, az, tilt, g)
    np.testing.assert_allclose(at_steer, bs_gain_toward_dbi(*steer, az, tilt, g), atol=1e-9)
    # with explicit array sizes too
    beam2 = bs_beam_gain_dbi(*tgt, *steer, az, tilt, g, rows=2, cols=8)
    assert np.all(beam2 <= env + 1e-9)


def test_beam_omni_and_single_element():
    # omni: max gain everywhere (no beam); a 1 x 1 array (G <= 8 dBi) is the envelope itself
    rng = np.random.default_rng(2)
    tgt = rng.normal(size=(3, 50)) * 100
    steer = rng.normal(size=(3, 50)) * 100
    np.testing.assert_array_equal(bs_beam_gain_dbi(*tgt, *steer, 30.0, 5.0, 12.0, omni=True), np.full(50, 12.0))
    np.testing.assert_allclose(bs_beam_gain_dbi(*tgt, *steer, 30.0, 5.0, 8.0), bs_gain_toward_dbi(*tgt, 30.0, 5.0, 8.0),
                               atol=1e-12)
    assert isinstance(bs_beam_gain_dbi(10.0, 0.0, 0.0, 0.0, 10.0, 0.0, 0.0, 0.0, 20.0), float)
    with pytest.raises(RadioInputError):
        bs_beam_gain_dbi(10.0, 0.0, 0.0, 0.0, 10.0, 0.0, 0.0, 0.0, 20.0, rows=4)
