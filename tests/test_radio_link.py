"""Noise, coherent SNR and spectral efficiency (CHECKS.md §5, §8; 3GPP TR 36.942 Annex A.2)."""

import numpy as np
import pytest
from scipy import constants

from siting.radio import (SHANNON_DL, RadioInputError, coherent_snr_db, db_to_linear, linear_to_db,
                          noise_power_dbm, spectral_efficiency_bps_hz)


@pytest.mark.parametrize("b_hz, nf_db, expected", [
    (100e6, 0.0, -94.0000), (100e6, 7.0, -87.000), (100e6, 10.0, -84.000),
    (400e6, 0.0, -87.9794), (400e6, 7.0, -80.979), (400e6, 10.0, -77.979)])
def test_noise_CHECKS_section5(b_hz, nf_db, expected):
    # CHECKS §5 table, -174 dBm/Hz + 10 log10 B + NF (arXiv:1906.03949 code convention)
    assert noise_power_dbm(b_hz, nf_db) == pytest.approx(expected, abs=1e-3)


def test_noise_close_to_exact_kT0B():
    # CHECKS §5: kT0B with T0 = 290 K (scipy.constants.k) differs from the -174 convention by 0.025 dB
    b = np.array([1e6, 100e6, 400e6])
    exact = 10 * np.log10(constants.k * 290.0 * b / 1e-3)
    np.testing.assert_allclose(noise_power_dbm(b, 0.0), exact, atol=0.03)


def test_coherent_amplitudes_add():
    # CHECKS §8 / arXiv:1906.03949: SNR = P (sqrt(b_d) + sqrt(b_s))^2 / sigma^2; equal paths -> +6.02 dB
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
