"""RF exposure: Friis power density and ICNIRP 2020 general-public reference levels (2-300 GHz)."""

import numpy as np
import pytest
from scipy.constants import c

from siting.radio import (
    RadioInputError,
    density_from_isotropic_power_w_m2,
    free_space_path_loss_db,
    icnirp_reference_level_w_m2,
    power_density_w_m2,
)


def test_power_density_worked_values():
    # Friis: S = EIRP / (4 pi d^2); EIRP 58 dBm = 631 W -> 5.02e-3 W/m2 at 100 m, 0.502 W/m2 at 10 m
    np.testing.assert_allclose(power_density_w_m2(58.0, [100.0, 10.0]), [5.021e-3, 0.5021], rtol=1e-3)
    assert isinstance(power_density_w_m2(58.0, 100.0), float)
    with pytest.raises(RadioInputError):
        power_density_w_m2(58.0, 0.0)


def test_density_from_isotropic_power_inverts_friis():
    # effective area of an isotropic antenna lambda^2 / (4 pi) (Friis): EIRP - FSPL back to EIRP / (4 pi d^2)
    rng = np.random.default_rng(8)
    eirp = rng.uniform(20, 70, 50)
    d = rng.uniform(1, 1000, 50)
    f = rng.uniform(2e9, 100e9, 50)
    got = density_from_isotropic_power_w_m2(eirp - free_space_path_loss_db(d, f), f)
    np.testing.assert_allclose(got, power_density_w_m2(eirp, d), rtol=1e-12)
    # by definition: 0 dBm at 28 GHz -> 1e-3 W x 4 pi / lambda^2
    lam = c / 28e9
    assert density_from_isotropic_power_w_m2(0.0, 28e9) == pytest.approx(1e-3 * 4 * np.pi / lam**2)


def test_icnirp_2020_reference_levels():
    # ICNIRP 2020 (Health Physics 118(5):483-524), general public: whole body 10 W/m2 at 2-300 GHz (from memory);
    # local: 40 W/m2 above 2 to 6 GHz, 55 f_GHz^-0.177 above 6 GHz (read in a reproduction of the table):
    # about 30.5 W/m2 at 28 GHz and 20 W/m2 at 300 GHz
    assert icnirp_reference_level_w_m2(28e9) == 10.0
    assert icnirp_reference_level_w_m2(3.5e9, "local") == 40.0
    assert icnirp_reference_level_w_m2(28e9, "local") == pytest.approx(55 * 28**-0.177)
    assert icnirp_reference_level_w_m2(28e9, "local") == pytest.approx(30.5, abs=0.05)
    assert icnirp_reference_level_w_m2(300e9, "local") == pytest.approx(20.0, abs=0.1)
    np.testing.assert_allclose(icnirp_reference_level_w_m2(np.array([3.5e9, 28e9])), [10.0, 10.0])
    # property: local level decreases with frequency above 6 GHz and is never below the whole-body level
    f = np.linspace(6.1e9, 300e9, 200)
    loc = icnirp_reference_level_w_m2(f, "local")
    assert np.all(np.diff(loc) < 0) and np.all(loc >= 10.0)


def test_icnirp_outside_range_raises():
    for f in (1e9, 400e9):
        with pytest.raises(RadioInputError):
            icnirp_reference_level_w_m2(f)
    with pytest.raises(RadioInputError):
        icnirp_reference_level_w_m2(28e9, "head")
