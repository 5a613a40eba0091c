"""Noise, coherent SNR and spectral efficiency.

Sources: thermal noise -174 dBm/Hz + 10 log10 B + NF (the kT0B convention with T0 = 290 K, rounded; the form used
in the released code of [DF]; values computed); the co-phased SNR P (sqrt(b_d) + sqrt(b_s))^2 / sigma^2 of [DF];
truncated Shannon spectral efficiency of 3GPP TR 36.942, Annex A.2.

[DF] E. Björnson, Ö. Özdogan and E. G. Larsson, "Intelligent Reflecting Surface vs. Decode-and-Forward: How Large
Surfaces Are Needed to Beat Relaying?", IEEE Wireless Commun. Lett., 2020, arXiv:1906.03949.
"""

import numpy as np
import pytest
from scipy import constants
from scipy.integrate import quad

from siting.radio import (
    SHANNON_DL,
    RadioInputError,
    band_average_two_path_power,
    coherent_snr_db,
    db_to_linear,
    linear_to_db,
    noise_power_dbm,
    power_sum_snr_db,
    spectral_efficiency_bps_hz,
)


@pytest.mark.parametrize("b_hz, nf_db, expected", [
    (100e6, 0.0, -94.0000), (100e6, 7.0, -87.000), (100e6, 10.0, -84.000),
    (400e6, 0.0, -87.9794), (400e6, 7.0, -80.979), (400e6, 10.0, -77.979)])
def test_noise_worked_values(b_hz, nf_db, expected):
    # -174 dBm/Hz + 10 log10 B + NF ([DF] code convention), values computed: 100 MHz -> -94.000 dBm + NF
    assert noise_power_dbm(b_hz, nf_db) == pytest.approx(expected, abs=1e-3)


def test_noise_close_to_exact_kT0B():
    # kT0B with T0 = 290 K (scipy.constants.k, exact SI) is -173.975 dBm/Hz: the -174 convention differs by 0.025 dB
    b = np.array([1e6, 100e6, 400e6])
    exact = 10 * np.log10(constants.k * 290.0 * b / 1e-3)
    np.testing.assert_allclose(noise_power_dbm(b, 0.0), exact, atol=0.03)


def test_coherent_amplitudes_add():
    # [DF]: SNR = P (sqrt(b_d) + sqrt(b_s))^2 / sigma^2 with optimal phases; equal paths -> +6.02 dB
    one = coherent_snr_db(20.0, -100.0, -np.inf, -90.0)
    both = coherent_snr_db(20.0, -100.0, -100.0, -90.0)
    assert one == pytest.approx(10.0)
    assert both - one == pytest.approx(20 * np.log10(2), abs=1e-12)
    # formula check with unequal paths
    bd, bs = db_to_linear(-95.0), db_to_linear(-101.0)
    want = 10 * np.log10(db_to_linear(20.0) * (np.sqrt(bd) + np.sqrt(bs)) ** 2 / db_to_linear(-90.0))
    assert coherent_snr_db(20.0, -95.0, -101.0, -90.0) == pytest.approx(want, abs=1e-12)


def test_coherent_no_path():
    # -inf gain means "no path": both missing gives -inf SNR, one missing gives the other alone
    assert coherent_snr_db(30.0, -np.inf, -np.inf, -80.0) == -np.inf
    snr = coherent_snr_db(30.0, np.array([-np.inf, -90.0]), np.array([-90.0, -np.inf]), -80.0)
    np.testing.assert_allclose(snr, [20.0, 20.0])


def test_coherent_bad_input():
    with pytest.raises(RadioInputError):
        coherent_snr_db(30.0, np.inf, -90.0, -80.0)
    with pytest.raises(RadioInputError, match="noise_dbm"):
        coherent_snr_db(30.0, -90.0, -90.0, np.nan)


def test_spectral_efficiency_truncated_shannon():
    # 3GPP TR 36.942 Annex A.2 (downlink: alpha 0.6, SNR_min -10 dB, Thr_max 4.4 bps/Hz)
    snr = np.array([-np.inf, -10.5, -10.0, 0.0, 10.0, 22.0, 22.1, 40.0])
    se = spectral_efficiency_bps_hz(snr)
    assert se[0] == 0.0 and se[1] == 0.0
    assert se[2] == pytest.approx(0.6 * np.log2(1 + 0.1))
    assert se[3] == pytest.approx(0.6)
    assert se[4] == pytest.approx(0.6 * np.log2(11.0))
    assert se[5] == pytest.approx(0.6 * np.log2(1 + 10**2.2)) and se[5] < 4.4   # TR 36.942: SNR_max = 22 dB
    assert se[6] == 4.4 and se[7] == 4.4
    assert SHANNON_DL == {"alpha": 0.6, "snr_min_db": -10.0, "max_bps_hz": 4.4}


def test_spectral_efficiency_monotone_and_overridable():
    # property: non-decreasing in SNR; parameters override (here an uplink-like setting)
    snr = np.linspace(-20, 40, 601)
    se = spectral_efficiency_bps_hz(snr, alpha=0.4, snr_min_db=-5.0, max_bps_hz=2.0)
    assert np.all(np.diff(se) >= 0) and se.max() == 2.0 and se[snr < -5].max() == 0.0
    with pytest.raises(RadioInputError):
        spectral_efficiency_bps_hz(10.0, alpha=0.0)


def test_db_round_trip():
    # definition: dB of power ratios
    x = np.array([0.0, 1e-12, 0.5, 1.0, 100.0])
    np.testing.assert_allclose(db_to_linear(linear_to_db(x)), x, rtol=1e-12)
    assert linear_to_db(0.0) == -np.inf
    with pytest.raises(RadioInputError):
        linear_to_db(-1.0)


# ------------------------------------------------------------------------------- power sum, band average

def test_power_sum_adds_powers():
    # SNR = P (beta_d + beta_s) / sigma^2 (power sum, channel average over a wide band): equal paths -> +3.01 dB
    one = power_sum_snr_db(20.0, -100.0, -np.inf, -90.0)
    both = power_sum_snr_db(20.0, -100.0, -100.0, -90.0)
    assert one == pytest.approx(10.0)
    assert both - one == pytest.approx(10 * np.log10(2), abs=1e-12)
    bd, bs = db_to_linear(-95.0), db_to_linear(-101.0)
    want = 10 * np.log10(db_to_linear(20.0) * (bd + bs) / db_to_linear(-90.0))
    assert power_sum_snr_db(20.0, -95.0, -101.0, -90.0) == pytest.approx(want, abs=1e-12)
    assert power_sum_snr_db(30.0, -np.inf, -np.inf, -80.0) == -np.inf
    np.testing.assert_allclose(power_sum_snr_db(30.0, np.array([-np.inf, -90.0]), np.array([-90.0, -np.inf]), -80.0),
                               [20.0, 20.0])
    # never above the co-phased amplitude sum of [DF] (the upper bound)
    rng = np.random.default_rng(5)
    gd, gs = rng.uniform(-130, -80, 200), rng.uniform(-130, -80, 200)
    assert np.all(power_sum_snr_db(20.0, gd, gs, -90.0) <= coherent_snr_db(20.0, gd, gs, -90.0) + 1e-12)
    with pytest.raises(RadioInputError):
        power_sum_snr_db(30.0, np.inf, -90.0, -80.0)


def _band_average_quad(a, b, tau, bw, phi):
    # direct numerical integration of (1/B) int_{-B/2}^{B/2} |a e^{j phi} + b e^{j 2 pi f tau}|^2 df (scipy quad)
    def integrand(f):
        return abs(a * np.exp(1j * phi) + b * np.exp(2j * np.pi * f * tau)) ** 2

    return quad(integrand, -bw / 2, bw / 2, limit=400, epsabs=1e-13, epsrel=1e-11)[0] / bw


def test_band_average_whole_cycles_is_power_sum():
    # mathematics: the cross term vanishes when B tau is a whole number; checked by scipy quad as well
    a, b = 0.8 - 0.3j, 0.5 + 0.4j
    bw = 400e6
    for cycles in (1, 3, 101):
        tau = cycles / bw
        got = band_average_two_path_power(a, b, tau, bw, phase_rad=0.7)
        assert got == pytest.approx(abs(a) ** 2 + abs(b) ** 2, abs=1e-12)
        assert _band_average_quad(a, b, tau, bw, 0.7) == pytest.approx(abs(a) ** 2 + abs(b) ** 2, abs=1e-9)


def test_band_average_matches_quad_random():
    # closed form |a|^2 + |b|^2 + 2 Re(a conj(b) e^{j phi}) sinc(B tau) against scipy.integrate.quad
    rng = np.random.default_rng(9)
    for _ in range(25):
        a = complex(*rng.normal(size=2))
        b = complex(*rng.normal(size=2))
        bw = rng.uniform(1e6, 400e6)
        tau = rng.uniform(-5.0, 5.0) / bw
        phi = rng.uniform(-np.pi, np.pi)
        got = band_average_two_path_power(a, b, tau, bw, phi)
        assert got == pytest.approx(_band_average_quad(a, b, tau, bw, phi), rel=1e-9, abs=1e-12)
    # narrow band limit (B tau -> 0): the co-phased amplitude sum |a| + |b| squared
    assert band_average_two_path_power(0.6, 0.3, 0.0, 1e6) == pytest.approx(0.9 ** 2)
    # mathematics: B = 400 MHz, tau = 253.5 ns -> |sinc| < 1 / (pi B tau) = 0.31 %
    x = band_average_two_path_power(1.0, 1.0, 253.5e-9, 400e6) - 2.0
    assert abs(x) <= 2.0 / (np.pi * 400e6 * 253.5e-9)
    assert isinstance(band_average_two_path_power(1.0, 1.0, 1e-9, 1e8), float)


def test_speed_of_light_is_the_si_value():
    # one constant for the package, equal to the exact SI value (BIPM, "The International System of Units",
    # 9th ed., 2019, Table 1; scipy.constants.c); siting.radio re-exports the same object
    from siting import radio
    from siting.constants import SPEED_OF_LIGHT_M_S

    assert SPEED_OF_LIGHT_M_S == constants.c == 299_792_458.0
    assert radio.SPEED_OF_LIGHT_M_S is SPEED_OF_LIGHT_M_S
