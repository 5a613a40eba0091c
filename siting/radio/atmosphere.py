"""Specific attenuation by atmospheric gases (oxygen and water vapour) on terrestrial paths.

The line-by-line method of ITU-R P.676 Annex 1 (sections 1 and 2): the sum of the oxygen and water-vapour
resonance lines of Tables 1 and 2 plus the dry-air continuum.  Valid 1-1000 GHz; the project uses 1-100 GHz.

References
----------
.. [1] ITU-R P.676-12, "Attenuation by atmospheric gases and related effects", 08/2019, Annex 1,
   Eqs. (1)-(9) and Tables 1-2 (spectroscopic line data, reproduced below as published).
"""

from __future__ import annotations

import numpy as np

from ._checks import as_float, scalar_or_array, warn_outside

__all__ = ["gaseous_attenuation_db_per_km", "gaseous_attenuation_db", "water_vapour_pressure_hpa"]

# [1], Table 1: oxygen lines.  f0 [GHz], a1, a2, a3, a4, a5, a6
_OXYGEN_TABLE1 = np.array([float(x) for x in """
    50.474214 0.975 9.651 6.69 0.0 2.566 6.85
    50.987745 2.529 8.653 7.17 0.0 2.246 6.8
    51.50336 6.193 7.709 7.64 0.0 1.947 6.729
    52.021429 14.32 6.819 8.11 0.0 1.667 6.64
    52.542418 31.24 5.983 8.58 0.0 1.388 6.526
    53.066934 64.29 5.201 9.06 0.0 1.349 6.206
    53.595775 124.6 4.474 9.55 0.0 2.227 5.085
    54.130025 227.3 3.8 9.96 0.0 3.17 3.75
    54.67118 389.7 3.182 10.37 0.0 3.558 2.654
    55.221384 627.1 2.618 10.89 0.0 2.56 2.952
    55.783815 945.3 2.109 11.34 0.0 -1.172 6.135
    56.264774 543.4 0.014 17.03 0.0 3.525 -0.978
    56.363399 1331.8 1.654 11.89 0.0 -2.378 6.547
    56.968211 1746.6 1.255 12.23 0.0 -3.545 6.451
    57.612486 2120.1 0.91 12.62 0.0 -5.416 6.056
    58.323877 2363.7 0.621 12.95 0.0 -1.932 0.436
    58.446588 1442.1 0.083 14.91 0.0 6.768 -1.273
    59.164204 2379.9 0.387 13.53 0.0 -6.561 2.309
    59.590983 2090.7 0.207 14.08 0.0 6.957 -0.776
    60.306056 2103.4 0.207 14.15 0.0 -6.395 0.699
    60.434778 2438.0 0.386 13.39 0.0 6.342 -2.825
    61.150562 2479.5 0.621 12.92 0.0 1.014 -0.584
    61.800158 2275.9 0.91 12.63 0.0 5.014 -6.619
    62.41122 1915.4 1.255 12.17 0.0 3.029 -6.759
    62.486253 1503.0 0.083 15.13 0.0 -4.499 0.844
    62.997984 1490.2 1.654 11.74 0.0 1.856 -6.675
    63.568526 1078.0 2.108 11.34 0.0 0.658 -6.139
    64.127775 728.7 2.617 10.88 0.0 -3.036 -2.895
    64.67891 461.3 3.181 10.38 0.0 -3.968 -2.59
    65.224078 274.0 3.8 9.96 0.0 -3.528 -3.68
    65.764779 153.0 4.473 9.55 0.0 -2.548 -5.002
    66.302096 80.4 5.2 9.06 0.0 -1.66 -6.091
    66.836834 39.8 5.982 8.58 0.0 -1.68 -6.393
    67.369601 18.56 6.818 8.11 0.0 -1.956 -6.475
    67.900868 8.172 7.708 7.64 0.0 -2.216 -6.545
    68.431006 3.397 8.652 7.17 0.0 -2.492 -6.6
    68.960312 1.334 9.65 6.69 0.0 -2.773 -6.65
    118.750334 940.3 0.01 16.64 0.0 -0.439 0.079
    368.498246 67.4 0.048 16.4 0.0 0.0 0.0
    424.76302 637.7 0.044 16.4 0.0 0.0 0.0
    487.249273 237.4 0.049 16.0 0.0 0.0 0.0
    715.392902 98.1 0.145 16.0 0.0 0.0 0.0
    773.83949 572.3 0.141 16.2 0.0 0.0 0.0
    834.145546 183.1 0.145 14.7 0.0 0.0 0.0
""".split()]).reshape(-1, 7)

# [1], Table 2: water-vapour lines.  f0 [GHz], b1, b2, b3, b4, b5, b6
_WATER_TABLE2 = np.array([float(x) for x in """
    22.23508 0.1079 2.144 26.38 0.76 5.087 1.0
    67.80396 0.0011 8.732 28.58 0.69 4.93 0.82
    119.99594 0.0007 8.353 29.48 0.7 4.78 0.79
    183.310087 2.273 0.668 29.06 0.77 5.022 0.85
    321.22563 0.047 6.179 24.04 0.67 4.398 0.54
    325.152888 1.514 1.541 28.23 0.64 4.893 0.74
    336.227764 0.001 9.825 26.93 0.69 4.74 0.61
    380.197353 11.67 1.048 28.11 0.54 5.063 0.89
    390.134508 0.0045 7.347 21.52 0.63 4.81 0.55
    437.346667 0.0632 5.048 18.45 0.6 4.23 0.48
    439.150807 0.9098 3.595 20.07 0.63 4.483 0.52
    443.018343 0.192 5.048 15.55 0.6 5.083 0.5
    448.001085 10.41 1.405 25.64 0.66 5.028 0.67
    470.888999 0.3254 3.597 21.34 0.66 4.506 0.65
    474.689092 1.26 2.379 23.2 0.65 4.804 0.64
    488.490108 0.2529 2.852 25.86 0.69 5.201 0.72
    503.568532 0.0372 6.731 16.12 0.61 3.98 0.43
    504.482692 0.0124 6.731 16.12 0.61 4.01 0.45
    547.67644 0.9785 0.158 26.0 0.7 4.5 1.0
    552.02096 0.184 0.158 26.0 0.7 4.5 1.0
    556.935985 497.0 0.159 30.86 0.69 4.552 1.0
    620.700807 5.015 2.391 24.38 0.71 4.856 0.68
    645.766085 0.0067 8.633 18.0 0.6 4.0 0.5
    658.00528 0.2732 7.816 32.1 0.69 4.14 1.0
    752.033113 243.4 0.396 30.86 0.68 4.352 0.84
    841.051732 0.0134 8.177 15.9 0.33 5.76 0.45
    859.965698 0.1325 8.055 30.6 0.68 4.09 0.84
    899.303175 0.0547 7.914 29.85 0.68 4.53 0.9
    902.611085 0.0386 8.429 28.65 0.7 5.1 0.95
    906.205957 0.1836 5.11 24.08 0.7 4.7 0.53
    916.171582 8.4 1.441 26.73 0.7 5.15 0.78
    923.112692 0.0079 10.293 29.0 0.7 5.0 0.8
    970.315022 9.009 1.919 25.5 0.64 4.94 0.67
    987.926764 134.6 0.257 29.85 0.68 4.55 0.9
    1780.0 17506.0 0.952 196.3 2.0 24.15 5.0
""".split()]).reshape(-1, 7)


def water_vapour_pressure_hpa(water_vapour_g_m3, temperature_k):
    r"""Water-vapour partial pressure e = rho T / 216.7 [hPa] ([1], Annex 1, Eq. (4)).

    Parameters
    ----------
    water_vapour_g_m3 : float or array_like
        Water-vapour density [g/m^3].
    temperature_k : float or array_like
        Temperature [K].

    Returns
    -------
    float or ndarray
        Partial pressure [hPa].

    References
    ----------
    .. [1] ITU-R P.676-12, Annex 1, Eq. (4).
    """
    rho = as_float("water_vapour_g_m3", water_vapour_g_m3, min_value=0.0)
    t = as_float("temperature_k", temperature_k, min_value=0.0, strict=True)
    return scalar_or_array(rho * t / 216.7)  # [1], Eq. 4


def _line_shape(f, f0, df, delta):
    # [1], Eq. 5: line-shape factor
    return f / f0 * ((df - delta * (f0 - f)) / ((f0 - f) ** 2 + df**2)
                     + (df - delta * (f0 + f)) / ((f0 + f) ** 2 + df**2))


def gaseous_attenuation_db_per_km(freq_hz, pressure_hpa=1013.25, temperature_k=288.15,
                                  water_vapour_g_m3=7.5):
    r"""Specific attenuation by oxygen and water vapour, line-by-line (ITU-R P.676 Annex 1).

    Parameters
    ----------
    freq_hz : float or array_like
        Frequency [Hz]; the method is stated for 1-1000 GHz.
    pressure_hpa : float or array_like, default 1013.25
        **Total** barometric pressure [hPa].  The dry-air pressure of the Recommendation is
        p = pressure_hpa - e, with e the water-vapour partial pressure.
    temperature_k : float or array_like, default 288.15
        Temperature [K].
    water_vapour_g_m3 : float or array_like, default 7.5
        Water-vapour density [g/m^3].  The defaults are the mean annual reference atmosphere at sea level
        (ITU-R P.835), as in the examples of [1].

    Returns
    -------
    float or ndarray
        Specific attenuation gamma = gamma_o + gamma_w [dB/km].

    Notes
    -----
    With theta = 300/T, e = rho T / 216.7 and p the dry-air pressure ([1], Annex 1):

    .. math::
        \gamma = 0.1820\, f \left(\sum_i S_i F_i(	ext{oxygen}) + N''_D(f) + \sum_i S_i F_i(	ext{water})
ight)

    with line strengths S_i (Eq. 3), line shapes F_i (Eq. 5) with the Zeeman-widened oxygen widths and the
    Doppler-widened water widths (Eq. 6a/6b), the oxygen interference correction delta (Eq. 7) and the dry
    continuum N''_D (Eq. 8).  f in GHz inside the formulas.

    Over a terrestrial path of length r the attenuation is gamma * r (:func:`gaseous_attenuation_db`).

    References
    ----------
    .. [1] ITU-R P.676-12, "Attenuation by atmospheric gases and related effects", 08/2019, Annex 1.
    """
    f_hz = as_float("freq_hz", freq_hz, min_value=0.0, strict=True)
    ptot = as_float("pressure_hpa", pressure_hpa, min_value=0.0, strict=True)
    t = as_float("temperature_k", temperature_k, min_value=0.0, strict=True)
    rho = as_float("water_vapour_g_m3", water_vapour_g_m3, min_value=0.0)
    warn_outside("freq_hz", f_hz, 1e9, 1000e9, "ITU-R P.676 Annex 1", "the line sum is extrapolated")
    f_hz, ptot, t, rho = np.broadcast_arrays(f_hz, ptot, t, rho)
    shape = f_hz.shape
    f = f_hz.reshape(-1, 1) / 1e9  # GHz, one row per element, one column per line
    theta = (300.0 / t).reshape(-1, 1)           # [1], Eq. 3 notation
    e = (rho * t / 216.7).reshape(-1, 1)          # [1], Eq. 4
    p = ptot.reshape(-1, 1) - e                   # dry-air pressure
    if np.any(p <= 0):
        from ._checks import RadioInputError
        raise RadioInputError("pressure_hpa: the total pressure must exceed the water-vapour pressure "
                              "rho*T/216.7; check the units (hPa, g/m^3, K)")

    f0, a1, a2, a3, a4, a5, a6 = _OXYGEN_TABLE1.T
    s_ox = a1 * 1e-7 * p * theta**3 * np.exp(a2 * (1.0 - theta))                  # [1], Eq. 3
    df_ox = a3 * 1e-4 * (p * theta ** (0.8 - a4) + 1.1 * e * theta)                # [1], Eq. 6a
    df_ox = np.sqrt(df_ox**2 + 2.25e-6)                                           # [1], Eq. 6a (Zeeman)
    delta = (a5 + a6 * theta) * 1e-4 * (p + e) * theta**0.8                       # [1], Eq. 7
    n_ox = np.sum(s_ox * _line_shape(f, f0, df_ox, delta), axis=1)

    d = 5.6e-4 * (p + e) * theta**0.8                                             # [1], Eq. 9
    n_dry = (f * p * theta**2 * (6.14e-5 / (d * (1.0 + (f / d) ** 2))
                                 + 1.4e-12 * p * theta**1.5 / (1.0 + 1.9e-5 * f**1.5)))[:, 0]  # [1], Eq. 8

    f0, b1, b2, b3, b4, b5, b6 = _WATER_TABLE2.T
    s_w = b1 * 1e-1 * e * theta**3.5 * np.exp(b2 * (1.0 - theta))                 # [1], Eq. 3
    df_w = b3 * 1e-4 * (p * theta**b4 + b5 * e * theta**b6)                       # [1], Eq. 6b
    df_w = 0.535 * df_w + np.sqrt(0.217 * df_w**2 + 2.1316e-12 * f0**2 / theta)   # [1], Eq. 6b (Doppler)
    n_w = np.sum(s_w * _line_shape(f, f0, df_w, 0.0), axis=1)

    gamma = 0.1820 * f[:, 0] * (n_ox + n_dry + n_w)                              # [1], Eqs. 1-2
    return scalar_or_array(gamma.reshape(shape))


def gaseous_attenuation_db(distance_m, freq_hz, pressure_hpa=1013.25, temperature_k=288.15,
                           water_vapour_g_m3=7.5):
    """Gaseous attenuation over a terrestrial (horizontal, constant-atmosphere) path [dB].

    Parameters
    ----------
    distance_m : float or array_like
        Path length [m], >= 0.
    freq_hz, pressure_hpa, temperature_k, water_vapour_g_m3
        As :func:`gaseous_attenuation_db_per_km`.

    Returns
    -------
    float or ndarray
        Attenuation A = gamma * r [dB] ([1], Annex 1, section 5: terrestrial paths).

    References
    ----------
    .. [1] ITU-R P.676-12, Annex 1.
    """
    d = as_float("distance_m", distance_m, min_value=0.0)
    gamma = gaseous_attenuation_db_per_km(freq_hz, pressure_hpa, temperature_k, water_vapour_g_m3)
    return scalar_or_array(np.asarray(gamma) * d / 1000.0)
