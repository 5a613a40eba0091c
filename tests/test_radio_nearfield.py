"""Exact near-field references of [NF]; worked values computed from its equations (numbers as in the paper).

[NF] E. Björnson and L. Sanguinetti, "Power Scaling Laws and Near-Field Behaviors of Massive MIMO and Intelligent
     Reflecting Surfaces", IEEE Open J. Commun. Soc., 2020, arXiv:2002.04960.
"""

import numpy as np
import pytest
import scipy.constants

from siting.radio import (
    RadioInputError,
    far_field_gain,
    irs_gain_exact,
    mirror_limit_gain,
    n_max_far_field,
    planar_array_gain,
    planar_array_gain_broadside,
)

LAM = 0.1
A = (LAM / 4) ** 2


@pytest.mark.parametrize("n, exact", [(1e2, 7.957482e-6), (1e4, 7.931318e-4), (1e6, 6.005607e-2),
                                      (1e8, 0.2885735), (1e12, 0.3328832)])
def test_eq27_figure3_setting_worked(n, exact):
    # [NF] Eq. (27) = Corollary 1, broadside, the paper's Fig. 3 setting: lambda = 0.1 m, A = (lambda/4)^2, d = 25 m;
    # values computed
    assert planar_array_gain(n, A, 25.0) == pytest.approx(exact, rel=1e-6)
    assert planar_array_gain_broadside(n, A, 25.0) == pytest.approx(exact, rel=1e-6)


def test_eq27_oblique_worked():
    # [NF] Eq. (27) at eta = 30 deg, N = 1e4: 6.879404e-4; far field N A cos(eta) / (4 pi d^2) = 6.891611e-4 (computed)
    assert planar_array_gain(1e4, A, 25.0, np.radians(30)) == pytest.approx(6.879404e-4, rel=1e-6)
    assert 1e4 * A * np.cos(np.radians(30)) / (4 * np.pi * 25.0**2) == pytest.approx(6.891611e-4, rel=1e-6)


@pytest.mark.parametrize("n, d, exact_db", [(1024, 5.0, -40.2975), (1e4, 1.0, -16.8125), (1e6, 1.0, -6.0035)])
def test_eq27_28ghz_worked(n, d, exact_db):
    # [NF] Eq. (27) at 28 GHz with A = (lambda/2)^2, broadside; values computed
    lam = scipy.constants.c / 28e9
    assert 10 * np.log10(planar_array_gain(n, (lam / 2) ** 2, d)) == pytest.approx(exact_db, abs=1e-4)


def test_eq27_limits():
    # [NF] Eq. (27): N -> infinity gives 1/3 (distance, projection, polarisation); B << 1 gives the far field
    # N A cos(eta) / (4 pi d^2) (series expansion)
    assert planar_array_gain(1e16, A, 25.0) == pytest.approx(1 / 3, rel=1e-4)
    n = np.array([1.0, 10.0, 100.0])
    for eta in (0.0, 0.4, 1.0):
        ff = n * A * np.cos(eta) / (4 * np.pi * 25.0**2)
        np.testing.assert_allclose(planar_array_gain(n, A, 25.0, eta), ff, rtol=1e-4)
    # symmetric in the sign of the angle (square array)
    assert planar_array_gain(1e6, A, 3.0, 0.5) == pytest.approx(planar_array_gain(1e6, A, 3.0, -0.5), rel=1e-12)


@pytest.mark.parametrize("n_side, exact_db, ff_db", [(10, -81.999, -81.984), (100, -43.255, -41.984),
                                                     (1000, -20.351, -1.984)])
def test_irs_eq42_figure9_worked(n_side, exact_db, ff_db):
    # [NF] Fig. 9 setting: lambda 0.1, A = (lambda/4)^2, d = 25, delta = 2.5, optimal phases (values computed);
    # exact = Eq. (42) with per-element Eq. (4); far field = Eq. (48)
    assert 10 * np.log10(irs_gain_exact(n_side, LAM / 4, 25.0, 2.5)) == pytest.approx(exact_db, abs=1e-3)
    ff = far_field_gain(25.0, 2.5, 1.0, 1.0, n_side**2 * A)
    assert 10 * np.log10(ff) == pytest.approx(ff_db, abs=1e-3)


def test_mirror_limit_and_n_max_worked():
    # [NF] Fig. 9 setting: mirror limit Eq. (54) = -70.771 dB, N_max Eq. (55) = 363.6 (values computed)
    assert 10 * np.log10(mirror_limit_gain(25.0, 2.5, wavelength_m=LAM)) == pytest.approx(-70.771, abs=1e-3)
    n_max = n_max_far_field(A, 25.0, 2.5, wavelength_m=LAM)
    assert n_max == pytest.approx(363.6, abs=0.05)
    # definition of N_max: the far-field Eq. (48) meets the mirror limit there
    assert far_field_gain(25.0, 2.5, 1.0, 1.0, n_max * A) == pytest.approx(
        mirror_limit_gain(25.0, 2.5, wavelength_m=LAM), rel=1e-9)


def test_bad_input():
    with pytest.raises(RadioInputError):
        planar_array_gain(100, A, -1.0)
    with pytest.raises(RadioInputError):
        planar_array_gain(100, A, 1.0, np.pi / 2)
    with pytest.raises(RadioInputError):
        mirror_limit_gain(1.0, 1.0)
