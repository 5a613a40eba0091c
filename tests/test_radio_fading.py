"""Shadow fading (3GPP TR 38.901 Table 7.4.1-1) and the quantile of two independently shadowed paths."""

import time

import numpy as np
import pytest
from scipy.optimize import brentq
from scipy.special import ndtr
from scipy.stats import norm

from siting.radio import (
    RadioInputError,
    combined_level_quantile_db,
    fade_margin_db,
    hop_sigma_db,
    shadow_fading_sigma_db,
)
from siting.radio.fading import _solve_rows


def test_sigma_values_TR38901_table_7_4_1_1():
    # 3GPP TR 38.901 v19.4.0 Table 7.4.1-1 as transcribed: UMi-Street Canyon LOS 4, NLOS 7.82; UMa LOS 4, NLOS 6
    assert shadow_fading_sigma_db("umi", True) == 4.0
    assert shadow_fading_sigma_db("umi", False) == 7.82
    assert shadow_fading_sigma_db("uma", True) == 4.0
    assert shadow_fading_sigma_db("uma", False) == 6.0
    # decision: free space takes the UMi values
    np.testing.assert_array_equal(shadow_fading_sigma_db("free_space", np.array([True, False])), [4.0, 7.82])
    with pytest.raises(RadioInputError):
        shadow_fading_sigma_db("rma", True)


def test_fade_margin_normal_quantile():
    # scipy.stats.norm.ppf: Phi^-1(0.9) = 1.2816, Phi^-1(0.95) = 1.6449; UMi NLOS at 90 %: 1.2816 x 7.82 = 10.02 dB
    assert fade_margin_db(1.0, 0.9) == pytest.approx(norm.ppf(0.9), abs=1e-12)
    assert fade_margin_db(1.0, 0.9) == pytest.approx(1.2816, abs=1e-4)
    assert fade_margin_db(1.0, 0.95) == pytest.approx(1.6449, abs=1e-4)
    assert fade_margin_db(7.82, 0.9) == pytest.approx(10.02, abs=5e-3)
    np.testing.assert_allclose(fade_margin_db(np.array([4.0, 7.82]), 0.5), [0.0, 0.0], atol=1e-12)
    with pytest.raises(RadioInputError):
        fade_margin_db(4.0, 1.0)
    with pytest.raises(RadioInputError):
        fade_margin_db(-1.0, 0.9)


def test_hop_sigma_independent_sum():
    # variance of a sum of independent normals (mathematics): 4 and 7.82 dB -> sqrt(16 + 61.15)
    assert hop_sigma_db(4.0, 7.82) == pytest.approx(np.sqrt(4.0**2 + 7.82**2))
    assert hop_sigma_db(3.0, 4.0) == 5.0


def test_single_path_closed_form():
    # one path absent (-inf): the level is the single-path normal quantile D - sigma Phi^-1(p) (scipy norm.ppf)
    got = combined_level_quantile_db(-80.0, 7.82, -np.inf, 4.0, 0.9)
    assert got == pytest.approx(-80.0 - 7.82 * norm.ppf(0.9), abs=1e-12)
    got = combined_level_quantile_db(-np.inf, 7.82, -90.0, 4.0, np.array([0.5, 0.95]), combining="coherent")
    np.testing.assert_allclose(got, [-90.0, -90.0 - 4.0 * norm.ppf(0.95)], atol=1e-12)
    assert combined_level_quantile_db(-np.inf, 1.0, -np.inf, 1.0, 0.9) == -np.inf


def test_deterministic_paths():
    # both sigmas 0: the level is the sum itself; equal paths: +3.01 dB (power), +6.02 dB (amplitudes)
    assert combined_level_quantile_db(-80.0, 0.0, -80.0, 0.0, 0.9) == pytest.approx(-80 + 10 * np.log10(2))
    assert combined_level_quantile_db(-80.0, 0.0, -80.0, 0.0, 0.9, "coherent") == pytest.approx(-80 + 20 * np.log10(2))


def _brute_force(d, sd, s, ss, p, coherent):
    """Independent reference: 40 001-point grid over the shadowing of one path, normal tail of the other, brentq."""
    if sd == 0:
        d, sd, s, ss = s, ss, d, sd
    x = np.linspace(-9.0, 9.0, 40001)
    w = np.exp(-0.5 * x**2)
    w /= w.sum()
    m = 20.0 if coherent else 10.0
    y = 10.0 ** ((s + ss * x) / m)

    def excess(t):
        rest = 10.0 ** (t / m) - y
        with np.errstate(divide="ignore", invalid="ignore"):
            need = m * np.log10(rest)
        return np.where(rest > 0, ndtr((d - need) / sd), 1.0) @ w - p

    return brentq(excess, -400.0, 400.0, xtol=1e-10)


@pytest.mark.parametrize("combining", ["power", "coherent"])
def test_quantile_matches_brute_force_integration(combining):
    # exact reference: direct numerical integration of P(total >= L) and a root search (scipy brentq)
    rng = np.random.default_rng(7)
    n = 40
    d = rng.uniform(-30, 30, n)
    s = rng.uniform(-30, 30, n)
    sd = rng.choice([0.0, 0.3, 4.0, 7.82, 12.0], n)
    ss = rng.choice([0.3, 2.0, 5.66, 8.9, 12.0], n)
    p = rng.choice([0.05, 0.5, 0.9, 0.95, 0.99], n)
    got = combined_level_quantile_db(d, sd, s, ss, p, combining)
    want = np.array([_brute_force(*row, combining == "coherent") for row in zip(d, sd, s, ss, p)])
    np.testing.assert_allclose(got, want, atol=0.01)


@pytest.mark.parametrize("combining", ["power", "coherent"])
def test_quantile_matches_monte_carlo(combining):
    # Monte-Carlo check (seeded, 10^6 draws): the empirical (1 - p) quantile of the simulated total
    rng = np.random.default_rng(2024)
    n = 1_000_000
    cases = [(-80.0, 4.0, -83.0, 8.9, 0.9), (-95.0, 7.82, -88.0, 5.66, 0.95), (-70.0, 6.0, -70.0, 6.0, 0.5)]
    for d, sd, s, ss, p in cases:
        xd = rng.normal(0.0, sd, n)
        xs = rng.normal(0.0, ss, n)
        if combining == "power":
            total = 10 * np.log10(10 ** ((d + xd) / 10) + 10 ** ((s + xs) / 10))
        else:
            total = 20 * np.log10(10 ** ((d + xd) / 20) + 10 ** ((s + xs) / 20))
        empirical = np.quantile(total, 1.0 - p)
        assert combined_level_quantile_db(d, sd, s, ss, p, combining) == pytest.approx(empirical, abs=0.05)


def test_quantile_monotone_properties():
    # properties: a higher probability gives a lower level; adding a path never lowers the level;
    # the amplitude sum is never below the power sum
    rng = np.random.default_rng(3)
    n = 500
    d = rng.uniform(-100, -60, n)
    s = rng.uniform(-110, -60, n)
    sd = rng.choice([4.0, 7.82], n)
    ss = rng.choice([5.66, 8.9, 11.1], n)
    lo_p = combined_level_quantile_db(d, sd, s, ss, 0.8)
    hi_p = combined_level_quantile_db(d, sd, s, ss, 0.95)
    assert np.all(hi_p < lo_p)
    alone = combined_level_quantile_db(d, sd, -np.inf, ss, 0.9)
    both = combined_level_quantile_db(d, sd, s, ss, 0.9)
    assert np.all(both >= alone - 1e-9)
    assert np.all(both >= combined_level_quantile_db(-np.inf, sd, s, ss, 0.9) - 1e-9)
    assert np.all(combined_level_quantile_db(d, sd, s, ss, 0.9, "coherent") >= both - 1e-9)


def test_quantile_table_path_agrees_with_direct_solution_and_timing():
    # many rows with few (sigma, sigma, p) use a spline table; it must agree with the row-by-row solution
    rng = np.random.default_rng(11)
    n = 1_000_000
    d = rng.uniform(-110, -70, n)
    s = rng.uniform(-130, -60, n)
    sd = rng.choice([4.0, 7.82], n)
    ss = rng.choice([5.66, 8.9], n)
    t0 = time.perf_counter()
    big = combined_level_quantile_db(d, sd, s, ss, 0.9)
    print(f"\ncombined_level_quantile_db: {n} rows in {time.perf_counter() - t0:.2f} s")  # information only
    idx = rng.choice(n, 2000, replace=False)
    exact = _solve_rows(d[idx], sd[idx], s[idx], ss[idx], np.full(idx.size, 0.9), 10.0)   # row by row, no table
    np.testing.assert_allclose(big[idx], exact, atol=1e-3)
    # a small call (a tile of a few hundred rows) takes the same cached table
    mid = combined_level_quantile_db(d[idx[:300]], sd[idx[:300]], s[idx[:300]], ss[idx[:300]], 0.9)
    np.testing.assert_allclose(mid, exact[:300], atol=1e-3)
    # amplitude sum, level differences far beyond the table span (single-path quantile used there)
    m = 50_000
    s_wide = rng.uniform(-400, 200, m)
    big = combined_level_quantile_db(d[:m], sd[:m], s_wide, ss[:m], 0.95, "coherent")
    j = rng.choice(m, 500, replace=False)
    small = _solve_rows(d[j], sd[j], s_wide[j], ss[j], np.full(j.size, 0.95), 20.0)
    np.testing.assert_allclose(big[j], small, atol=2e-3)


def test_quantile_shapes_and_errors():
    # scalar in -> scalar out; broadcasting; bad inputs raise
    assert isinstance(combined_level_quantile_db(-80.0, 4.0, -85.0, 6.0, 0.9), float)
    out = combined_level_quantile_db(np.zeros((3, 1)) - 80, 4.0, np.array([-90.0, -85.0]), 6.0, 0.9)
    assert out.shape == (3, 2)
    with pytest.raises(RadioInputError):
        combined_level_quantile_db(-80.0, 4.0, -85.0, 6.0, 0.9, combining="sum")
    with pytest.raises(RadioInputError):
        combined_level_quantile_db(-80.0, 4.0, np.inf, 6.0, 0.9)
    with pytest.raises(RadioInputError):
        combined_level_quantile_db(-80.0, 4.0, -85.0, 6.0, 0.0)
