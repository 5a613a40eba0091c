"""Path loss: free space (ITU-R P.525) and 3GPP TR 38.901 UMi / UMa.

Worked values are computed here from the published formulas: free space from ITU-R P.525 (exact
20 log10(4 pi d f / c)), the UMi-Street Canyon and UMa rows from 3GPP TR 38.901 v19.4.0, "Study on channel model for
frequencies from 0.5 to 100 GHz", Table 7.4.1-1 (path loss, NOTE 1 for the breakpoint) and Table 7.4.2-1 (LOS
probability).
"""

import warnings

import numpy as np
import pytest
from scipy.constants import c

from siting.errors import SitingError
from siting.radio import (
    RadioInputError,
    RadioValidityWarning,
    breakpoint_distance_m,
    direct_model_fit,
    direct_path_loss_db,
    free_space_path_loss_db,
    fresnel_radius_m,
    los_excess_db,
    los_probability_uma,
    los_probability_umi,
    uma_los_db,
    uma_nlos_db,
    umi_street_canyon_los_db,
    umi_street_canyon_nlos_db,
)

# ------------------------------------------------------------------------------------------- free space

@pytest.mark.parametrize("freq_hz, expected_db", [(28e9, 101.391), (3.5e9, 83.329)])
def test_fspl_worked_values(freq_hz, expected_db):
    # ITU-R P.525 free-space loss 20 log10(4 pi d f / c) with the exact c, worked at d = 100 m
    assert free_space_path_loss_db(100.0, freq_hz) == pytest.approx(expected_db, abs=1e-3)


def test_fspl_practical_units_form():
    # ITU-R P.525 practical-units form L = 32.4 + 20 log10 f[MHz] + 20 log10 d[km]; its rounded constant differs
    # from the exact 20 log10(4 pi 1e9 / c) = 32.4478 dB by < 0.05 dB
    rng = np.random.default_rng(1)
    d = rng.uniform(1, 5000, 50)
    f = rng.uniform(0.5e9, 100e9, 50)
    practical = 32.4 + 20 * np.log10(f / 1e6) + 20 * np.log10(d / 1e3)
    np.testing.assert_allclose(free_space_path_loss_db(d, f), practical, atol=0.05)


def test_fspl_6db_per_distance_doubling():
    # Friis inverse-square law (common practice): doubling distance adds 20 log10 2 = 6.02 dB
    d = np.array([3.0, 30.0, 300.0])
    np.testing.assert_allclose(free_space_path_loss_db(2 * d, 28e9) - free_space_path_loss_db(d, 28e9),
                               20 * np.log10(2), rtol=1e-12)


# -------------------------------------------------------------------------------------------------- UMi

# Worked values computed from 3GPP TR 38.901 v19.4.0 Table 7.4.1-1 (UMi-Street Canyon), hBS = 10 m, hUT = 1.5 m:
# (fc GHz, d2D, PL_LOS, PL_NLOS)
UMI_TABLE = [
    (28, 10, 84.823, 92.693),
    (28, 50, 97.151, 113.416),
    (28, 100, 103.376, 123.880),
    (28, 200, 109.673, 134.465),
    (28, 500, 118.023, 148.500),
    (3.5, 50, 79.090, 94.181),
    (3.5, 100, 85.314, 104.644),
    (3.5, 200, 91.611, 115.229),
    (3.5, 300, 98.244, 121.437),   # PL2 branch
]


@pytest.mark.parametrize("fc, d2d, los, nlos", UMI_TABLE)
def test_umi_worked_table(fc, d2d, los, nlos):
    # 3GPP TR 38.901 v19.4.0 Table 7.4.1-1, UMi-Street Canyon (values computed from its formulas, UMI_TABLE)
    assert umi_street_canyon_los_db(d2d, 10.0, 1.5, fc * 1e9) == pytest.approx(los, abs=1e-3)
    assert umi_street_canyon_nlos_db(d2d, 10.0, 1.5, fc * 1e9) == pytest.approx(nlos, abs=1e-3)


def test_umi_table_vectorised():
    # vectorisation property: one array call equals the table row by row
    fc = np.array([r[0] for r in UMI_TABLE]) * 1e9
    d = np.array([r[1] for r in UMI_TABLE], float)
    np.testing.assert_allclose(umi_street_canyon_los_db(d, 10.0, 1.5, fc), [r[2] for r in UMI_TABLE], atol=1e-3)
    np.testing.assert_allclose(umi_street_canyon_nlos_db(d, 10.0, 1.5, fc), [r[3] for r in UMI_TABLE], atol=1e-3)


@pytest.mark.parametrize("fc_hz, expected_m", [(28e9, 1680.0), (3.5e9, 210.0)])
def test_umi_breakpoint_worked(fc_hz, expected_m):
    # 3GPP TR 38.901 v19.4.0 Table 7.4.1-1 NOTE 1: d'BP = 4 h'BS h'UT fc / c, hE = 1 m, c = 3e8; 4 * 9 * 0.5 * 28e9 / 3e8 = 1680 m
    assert breakpoint_distance_m(10.0, 1.5, fc_hz) == pytest.approx(expected_m, rel=1e-12)


def test_umi_breakpoint_continuity_worked():
    # 3GPP TR 38.901 v19.4.0 Table 7.4.1-1 (UMi): PL1 = PL2 at d2D = d'BP (d3D^2 = d'BP^2 + (hBS - hUT)^2 there); computed
    # from the formulas: 92.0554 dB at d'BP = 210 m, 3.5 GHz
    below = umi_street_canyon_los_db(210.0, 10.0, 1.5, 3.5e9)
    above = umi_street_canyon_los_db(210.0 * (1 + 1e-9), 10.0, 1.5, 3.5e9)
    assert below == pytest.approx(92.0554, abs=1e-4)
    assert above == pytest.approx(below, abs=1e-6)


# -------------------------------------------------------------------------------------------------- UMa

# Worked values computed from 3GPP TR 38.901 v19.4.0 Table 7.4.1-1 (UMa), hBS = 25 m, hUT = 1.5 m (so hE = 1 m):
# (fc GHz, d2D, LOS, NLOS)
UMA_TABLE = [
    (28, 50, 95.274, 110.573),
    (28, 100, 101.200, 121.099),
    (28, 200, 107.631, 132.524),
    (3.5, 1000, 109.412, 141.666),  # PL2 branch
]


@pytest.mark.parametrize("fc, d2d, los, nlos", UMA_TABLE)
def test_uma_worked_table(fc, d2d, los, nlos):
    # 3GPP TR 38.901 v19.4.0 Table 7.4.1-1, UMa (values computed from its formulas, UMA_TABLE)
    assert uma_los_db(d2d, 25.0, 1.5, fc * 1e9) == pytest.approx(los, abs=1e-3)
    assert uma_nlos_db(d2d, 25.0, 1.5, fc * 1e9) == pytest.approx(nlos, abs=1e-3)


def test_uma_breakpoint_continuity_worked():
    # 3GPP TR 38.901 v19.4.0 Table 7.4.1-1 (UMa): PL1 = PL2 at d2D = d'BP; computed from the formulas: 99.3499 dB at
    # d'BP = 560 m, 3.5 GHz
    assert breakpoint_distance_m(25.0, 1.5, 3.5e9) == pytest.approx(560.0)
    below = uma_los_db(560.0, 25.0, 1.5, 3.5e9)
    above = uma_los_db(560.0 * (1 + 1e-9), 25.0, 1.5, 3.5e9)
    assert below == pytest.approx(99.3499, abs=1e-4)
    assert above == pytest.approx(below, abs=1e-6)


# ---------------------------------------------------------------------------------------- LOS probability

@pytest.mark.parametrize("d2d, p", [(10, 1.0), (50, 0.51959), (100, 0.23098), (200, 0.09352), (300, 0.06023),
                                    (500, 0.03600)])
def test_los_probability_umi_worked(d2d, p):
    # 3GPP TR 38.901 v19.4.0 Table 7.4.2-1 (UMi-Street Canyon): 18/d + exp(-d/36) (1 - 18/d) beyond 18 m; values computed
    assert los_probability_umi(d2d) == pytest.approx(p, abs=1e-5)


@pytest.mark.parametrize("d2d, p", [(50, 0.64940), (100, 0.34767), (200, 0.12805), (1000, 0.01800)])
def test_los_probability_uma_worked(d2d, p):
    # 3GPP TR 38.901 v19.4.0 Table 7.4.2-1 (UMa), hUT = 1.5 m (C'(hUT) = 0): 18/d + exp(-d/63) (1 - 18/d); values computed
    assert los_probability_uma(d2d, 1.5) == pytest.approx(p, abs=1e-5)


def test_los_probability_uma_tall_terminal_raises_it():
    # TR 38.901 Table 7.4.2-1: C'(hUT) > 0 above 13 m raises Pr_LOS at mid distances (formula property)
    assert los_probability_uma(150.0, 20.0) > los_probability_uma(150.0, 1.5)
    assert los_probability_uma(np.array([5.0, 18.0]), 20.0).tolist() == [1.0, 1.0]


# ------------------------------------------------------------------------------------ model properties

def test_nlos_never_below_los_random_sample():
    # 3GPP TR 38.901 v19.4.0 Table 7.4.1-1: PL_NLOS = max(PL_LOS, PL'_NLOS) >= PL_LOS by construction (formula property)
    rng = np.random.default_rng(5)
    d = rng.uniform(0, 5000, 2000)
    h = rng.uniform(1.5, 22.5, 2000)
    f = rng.uniform(0.5e9, 100e9, 2000)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RadioValidityWarning)
        assert np.all(umi_street_canyon_nlos_db(d, 10.0, h, f) >= umi_street_canyon_los_db(d, 10.0, h, f))
        assert np.all(uma_nlos_db(d, 25.0, h, f) >= uma_los_db(d, 25.0, h, f))


def test_short_range_no_fitted_extrapolation():
    # design decision (pathloss module notes): below 10 m, model value at 10 m moved with the free-space
    # slope: continuous at 10 m, monotone in distance, UMi never below the exact free-space loss (Friis)
    d = np.linspace(0.0, 20.0, 401)
    with pytest.warns(RadioValidityWarning):
        los = umi_street_canyon_los_db(d, 10.0, 1.5, 28e9)
    with pytest.warns(RadioValidityWarning):
        nlos = umi_street_canyon_nlos_db(d, 10.0, 1.5, 28e9)
    assert np.all(np.diff(los) >= 0) and np.all(np.diff(nlos) >= 0)
    i10 = np.searchsorted(d, 10.0)
    with pytest.warns(RadioValidityWarning):
        just_below = umi_street_canyon_los_db(10.0 - 1e-9, 10.0, 1.5, 28e9)
    assert just_below == pytest.approx(los[i10], abs=1e-8)       # continuous at 10 m
    d3d = np.hypot(d, 8.5)
    assert np.all(los >= free_space_path_loss_db(d3d, 28e9))
    # free-space slope below 10 m: PL(0) - PL(10) = 20 log10(d3D(0) / d3D(10))
    assert los[i10] - los[0] == pytest.approx(20 * np.log10(np.hypot(10, 8.5) / 8.5), abs=1e-9)


def test_validity_warnings_once_per_call():
    # TR 38.901: 0.5-100 GHz and 10 m-5 km; one warning per kind and call, however many elements are outside
    with warnings.catch_warnings(record=True) as rec:
        warnings.simplefilter("always")
        umi_street_canyon_los_db(np.array([1.0, 2.0, 6000.0, 7000.0]), 10.0, 1.5, 28e9)
    assert len([w for w in rec if issubclass(w.category, RadioValidityWarning)]) == 1
    with pytest.warns(RadioValidityWarning, match="freq_hz"):
        uma_los_db(100.0, 25.0, 1.5, 150e9)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        umi_street_canyon_los_db(np.array([10.0, 100.0, 5000.0]), 10.0, 1.5, 28e9)  # in range: silent


def test_beyond_5km_extrapolates_pl2():
    # module decision: beyond 5 km the published PL2 formula is evaluated (40 dB/decade in d3D)
    with pytest.warns(RadioValidityWarning):
        a, b = umi_street_canyon_los_db(np.array([6000.0, 12000.0]), 10.0, 1.5, 3.5e9)
    d3 = np.hypot([6000.0, 12000.0], 8.5)
    assert b - a == pytest.approx(40 * np.log10(d3[1] / d3[0]), abs=1e-9)


# ------------------------------------------------------------------------------------------- dispatcher

def test_direct_path_loss_dispatch():
    # dispatcher equals the individual TR 38.901 formulas element by element; free space = Friis over d3D
    d = np.array([20.0, 80.0, 150.0, 400.0])
    los = np.array([True, False, True, False])
    got = direct_path_loss_db("umi", los, d, 10.0, 1.5, 28e9)
    want = np.where(los, umi_street_canyon_los_db(d, 10.0, 1.5, 28e9), umi_street_canyon_nlos_db(d, 10.0, 1.5, 28e9))
    np.testing.assert_array_equal(got, want)
    got = direct_path_loss_db("uma", los, d, 25.0, 1.5, 3.5e9)
    want = np.where(los, uma_los_db(d, 25.0, 1.5, 3.5e9), uma_nlos_db(d, 25.0, 1.5, 3.5e9))
    np.testing.assert_array_equal(got, want)
    fs = direct_path_loss_db("free_space", los, d, 10.0, 1.5, 28e9)
    np.testing.assert_allclose(fs, free_space_path_loss_db(np.hypot(d, 8.5), 28e9), rtol=1e-12)
    assert isinstance(direct_path_loss_db("umi", True, 100.0, 10.0, 1.5, 28e9), float)


def test_broadcast_stations_by_users():
    # vectorisation: a (n_bs, 1) x (1, n_users) call equals element-wise calls
    d = np.array([[30.0, 60.0, 90.0], [120.0, 240.0, 480.0]])
    h_bs = np.array([[8.0], [12.0]])
    grid = umi_street_canyon_nlos_db(d, h_bs, 1.5, 28e9)
    assert grid.shape == (2, 3)
    for i in range(2):
        for j in range(3):
            assert grid[i, j] == umi_street_canyon_nlos_db(d[i, j], h_bs[i, 0], 1.5, 28e9)


# ------------------------------------------------------------------------------------------- bad input

@pytest.mark.parametrize("func", [umi_street_canyon_los_db, umi_street_canyon_nlos_db, uma_los_db, uma_nlos_db])
@pytest.mark.parametrize("d2d", [np.nan, -1.0, np.array([10.0, -5.0])])
def test_bad_distance_raises(func, d2d):
    with pytest.raises(RadioInputError, match="d2d_m") as info:
        func(d2d, 10.0, 1.5, 28e9)
    assert isinstance(info.value, SitingError) and isinstance(info.value, ValueError)


@pytest.mark.parametrize("bad", [dict(distance_m=-3.0), dict(distance_m=0.0), dict(distance_m=np.nan),
                                 dict(freq_hz=0.0), dict(freq_hz=-28e9)])
def test_fspl_bad_input(bad):
    args = dict(distance_m=100.0, freq_hz=28e9)
    args.update(bad)
    with pytest.raises(RadioInputError):
        free_space_path_loss_db(**args)


def test_dispatcher_bad_model_and_los():
    with pytest.raises(RadioInputError, match="umi"):
        direct_path_loss_db("rma", True, 100.0, 10.0, 1.5, 28e9)
    with pytest.raises(RadioInputError, match="los"):
        direct_path_loss_db("umi", np.array([1, 0]), 100.0, 10.0, 1.5, 28e9)
    with pytest.raises(RadioInputError, match="h_ut_m"):
        direct_path_loss_db("umi", True, 100.0, 10.0, -1.5, 28e9)


# ------------------------------------------------------------------------ LOS excess, model fit, Fresnel

def test_los_excess_umi_worked_value():
    # 3GPP TR 38.901 Table 7.4.1-1 UMi LOS, 28 GHz, hBS 10 m, hUT 1.5 m, d2D 100 m: PL_LOS = 103.376 dB;
    # free space over d3D (ITU-R P.525 exact 20 log10(4 pi d f / c))
    d3d = np.hypot(100.0, 8.5)
    fspl = 20 * np.log10(4 * np.pi * d3d * 28e9 / c)
    assert los_excess_db("umi", 100.0, 10.0, 1.5, 28e9) == pytest.approx(103.376 - fspl, abs=1e-3)
    assert los_excess_db("umi", 100.0, 10.0, 1.5, 28e9) == pytest.approx(1.954, abs=1e-3)


def test_los_excess_non_negative_and_free_space_zero():
    # property: max(0, .) is never negative; UMa LOS below free space at short range (published constant) -> 0
    rng = np.random.default_rng(4)
    d = rng.uniform(0, 2000, 300)
    hb = rng.uniform(3, 40, 300)
    hu = rng.uniform(1.5, 20, 300)
    f = rng.uniform(1e9, 90e9, 300)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RadioValidityWarning)
        for model in ("umi", "uma"):
            ex = los_excess_db(model, d, hb, hu, f)
            assert ex.shape == (300,) and np.all(ex >= 0.0)
        assert los_excess_db("uma", 50.0, 25.0, 1.5, 28e9) == 0.0
    np.testing.assert_array_equal(los_excess_db("free_space", d, hb, hu, f), np.zeros(300))
    with pytest.raises(RadioInputError):
        los_excess_db("rma", 100.0, 10.0, 1.5, 28e9)


def test_direct_model_fit_heights():
    # TR 38.901 Table 7.4.1-1: UMi-Street Canyon defined for hBS = 10 m, UMa for hBS = 25 m (decision: flags
    # above 20 m / below 15 m)
    assert direct_model_fit("umi", [6.0, 10.0, 20.0]) is None
    assert direct_model_fit("uma", 25.0) is None
    assert direct_model_fit("free_space", 80.0) is None
    msg = direct_model_fit("umi", [10.0, 30.0])
    assert isinstance(msg, str) and '"uma"' in msg and "30 m" in msg
    msg = direct_model_fit("uma", 8.0)
    assert isinstance(msg, str) and '"umi"' in msg


@pytest.mark.parametrize("d1, d2, f, expected", [
    (50.0, 50.0, 28e9, 0.5174), (10.0, 90.0, 28e9, 0.3104), (50.0, 50.0, 3.5e9, 1.4633)])
def test_fresnel_radius_worked_values(d1, d2, f, expected):
    # ITU-R P.530 / P.526 first Fresnel zone F1 = sqrt(lambda d1 d2 / (d1 + d2)), worked by hand
    assert fresnel_radius_m(d1, d2, f) == pytest.approx(expected, abs=1e-4)


def test_fresnel_radius_properties():
    # symmetric in d1, d2; maximum at mid-path; 0 at the ends; both ends at 0 raises
    x = np.linspace(0, 100, 101)
    r = fresnel_radius_m(x, 100 - x, 28e9)
    np.testing.assert_allclose(r, r[::-1], rtol=1e-12)
    assert np.argmax(r) == 50 and r[0] == 0.0
    with pytest.raises(RadioInputError):
        fresnel_radius_m(0.0, 0.0, 28e9)


# ------------------------------------------------------------------------------ heights and short range

@pytest.mark.parametrize("h_ut", [1.49, 1.2, 1.05, 1.01, 1.0, 0.5, 0.0])
def test_low_terminals_are_evaluated_at_the_lowest_fitted_height(h_ut):
    # 3GPP TR 38.901 Table 7.4.1-1 is fitted for 1.5 m <= hUT <= 22.5 m; taken literally below it, NOTE 1's
    # breakpoint d'BP = 4 (hBS - 1)(hUT - 1) fc / c collapses at hUT = 1 m and the LOS law jumps ~20 dB.  Below
    # 1.5 m the package evaluates the table at 1.5 m and warns.  Reference: UMi LOS PL1 at hUT = 1.5 m from the
    # table (28 GHz, hBS = 10 m, d2D = 100 m; d'BP = 1680 m, so PL1 applies).
    fc, d2d, h_bs = 28.0, 100.0, 10.0
    pl1_at_1_5 = 32.4 + 21.0 * np.log10(np.hypot(d2d, h_bs - 1.5)) + 20.0 * np.log10(fc)
    with pytest.warns(RadioValidityWarning, match="h_ut_m"):
        got = umi_street_canyon_los_db(d2d, h_bs, h_ut, fc * 1e9)
    assert got == pytest.approx(pl1_at_1_5, abs=1e-9)
    # and a surface hop between two low ends (both below 1.5 m) has a finite, free-space-like excess
    with pytest.warns(RadioValidityWarning):
        excess = los_excess_db("umi", 20.0, 1.0, h_ut, fc * 1e9)
    assert 0.0 <= excess < 3.0


def test_in_range_heights_do_not_warn():
    # the height rule is silent inside the table's range (1.5 m terminals, the default street height)
    with warnings.catch_warnings():
        warnings.simplefilter("error", RadioValidityWarning)
        umi_street_canyon_los_db(100.0, 10.0, 1.5, 28e9)
        uma_nlos_db(200.0, 25.0, 22.5, 3.5e9)


@pytest.mark.parametrize("model", ["free_space", "umi", "uma"])
def test_no_path_has_a_gain_at_centimetre_range(model):
    # Conservation of energy (a passive path delivers at most the power sent): the loss is >= 0 dB even where
    # the far-field formulas (ITU-R P.525; TR 38.901's free-space slope below 10 m) fall below 0 dB, within
    # lambda / (4 pi) of an antenna (4.8 cm at 0.5 GHz).
    d2d = np.array([0.0, 0.005, 0.02, 0.05, 1.0])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RadioValidityWarning)
        loss = direct_path_loss_db(model, np.array([True, True, False, True, False]), d2d, 5.0, 5.0, 0.5e9)
    assert np.all(loss >= 0.0)
    assert loss[-1] > 0.0  # at 1 m the formulas hold again (free space 26.4 dB at 0.5 GHz)
    assert free_space_path_loss_db(0.01, 1e9) == 0.0
    # just beyond lambda / (4 pi) the exact formula is untouched
    lam = c / 1e9
    assert free_space_path_loss_db(2 * lam / (4 * np.pi), 1e9) == pytest.approx(20 * np.log10(2.0), abs=1e-12)
