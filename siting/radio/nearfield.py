"""Exact near-field gains of planar arrays and surfaces from Björnson & Sanguinetti (reference formulas).

These closed forms include the distance, the projected area and the polarisation mismatch of each element,
so they bound every near-field gain: an infinitely large array captures 1/3 of an isotropic source's power
(1/2 without the polarisation factor).  The project's surface model (:mod:`siting.radio.surface`) keeps the
projected-area factor only; these functions are used to check its limits and to report the physical bound.

References
----------
.. [1] E. Björnson and L. Sanguinetti, "Power Scaling Laws and Near-Field Behaviors of Massive MIMO and
   Intelligent Reflecting Surfaces", IEEE Open J. Commun. Soc., vol. 1, 2020, arXiv:2002.04960.
"""

from __future__ import annotations

import numpy as np

from ._checks import RadioInputError, as_float, scalar_or_array

__all__ = [
    "planar_array_gain",
    "planar_array_gain_broadside",
    "element_gain_exact",
    "irs_gain_exact",
    "mirror_limit_gain",
    "n_max_far_field",
]


def planar_array_gain(n_elements, element_area_m2, distance_m, angle_rad=0.0):
    r"""Exact total gain of an N-element square planar array seen from an isotropic source ([1], Eq. 27).

    Parameters
    ----------
    n_elements : float or array_like
        Number of elements N (the array is square, side sqrt(N A)).
    element_area_m2 : float or array_like
        Element area A [m^2].
    distance_m : float or array_like
        Distance from the source to the array centre [m], > 0.
    angle_rad : float or array_like, default 0
        Angle eta between the array normal and the direction to the source, in the plane of one array axis
        [rad], |eta| < pi/2.

    Returns
    -------
    float or ndarray
        Fraction of the transmitted power collected by the array (linear).

    Notes
    -----
    With :math:`B = N A / (4 d^2 \cos^2\eta)` and :math:`s_i = (-1)^i \sqrt{B}\tan\eta`:

    .. math::
        \eta_{d,\eta,N} = \sum_{i=1,2}\left[\frac{B + s_i}{6\pi(B+1)\sqrt{2B + \tan^2\eta + 1 + 2 s_i}}
        + \frac{1}{3\pi}\arctan\frac{B + s_i}{\sqrt{2B + \tan^2\eta + 1 + 2 s_i}}\right]

    Tends to N A cos(eta) / (4 pi d^2) for B << 1 and to 1/3 as N -> infinity.

    References
    ----------
    .. [1] E. Björnson and L. Sanguinetti, IEEE Open J. Commun. Soc., 2020, arXiv:2002.04960, Eq. (27).
    """
    n = as_float("n_elements", n_elements, min_value=0.0)
    a = as_float("element_area_m2", element_area_m2, min_value=0.0)
    d = as_float("distance_m", distance_m, min_value=0.0, strict=True)
    eta = as_float("angle_rad", angle_rad)
    if np.any(np.abs(eta) >= np.pi / 2):
        raise RadioInputError("angle_rad: expected |angle| < pi/2 (source in front of the array)")
    t = np.tan(eta)
    b = n * a / (4.0 * d**2 * np.cos(eta) ** 2)  # [1], Eq. 27, B
    total = 0.0
    for sign in (-1.0, 1.0):  # the two terms i = 1, 2 of [1], Eq. 27
        num = b + sign * np.sqrt(b) * t
        root = np.sqrt(2.0 * b + t**2 + 1.0 + 2.0 * sign * np.sqrt(b) * t)
        total = total + num / (6.0 * np.pi * (b + 1.0) * root) + np.arctan(num / root) / (3.0 * np.pi)
    return scalar_or_array(total)


def planar_array_gain_broadside(n_elements, element_area_m2, distance_m):
    r"""Exact broadside gain of a square planar array ([1], Corollary 1).

    Parameters
    ----------
    n_elements, element_area_m2, distance_m
        As :func:`planar_array_gain`.

    Returns
    -------
    float or ndarray
        Collected fraction of the power (linear).

    Notes
    -----
    With :math:`\beta_d = A / (4\pi d^2)` ([1], Eq. 1):

    .. math::
        \eta = \frac{N\beta_d}{3(N\beta_d\pi + 1)\sqrt{2N\beta_d\pi + 1}}
               + \frac{2}{3\pi}\arctan\frac{N\beta_d\pi}{\sqrt{2N\beta_d\pi + 1}}

    References
    ----------
    .. [1] E. Björnson and L. Sanguinetti, IEEE Open J. Commun. Soc., 2020, arXiv:2002.04960, Corollary 1.
    """
    n = as_float("n_elements", n_elements, min_value=0.0)
    a = as_float("element_area_m2", element_area_m2, min_value=0.0)
    d = as_float("distance_m", distance_m, min_value=0.0, strict=True)
    nb = n * a / (4.0 * np.pi * d**2)  # N beta_d, [1], Eq. 1
    x = nb * np.pi
    return scalar_or_array(nb / (3.0 * (x + 1.0) * np.sqrt(2.0 * x + 1.0))
                           + 2.0 / (3.0 * np.pi) * np.arctan(x / np.sqrt(2.0 * x + 1.0)))  # Corollary 1


def element_gain_exact(x_n_m, y_n_m, side_m, x_t_m, y_t_m, distance_m):
    r"""Exact gain of one square element from an isotropic source ([1], Eq. 4).

    Parameters
    ----------
    x_n_m, y_n_m : float or array_like
        Element centre in the array plane [m].
    side_m : float or array_like
        Element side a [m].
    x_t_m, y_t_m : float or array_like
        Source position projected on the array plane [m].
    distance_m : float or array_like
        Distance of the source from the array plane [m], > 0.

    Returns
    -------
    float or ndarray
        Collected fraction of the power (linear).

    Notes
    -----
    .. math::
        \zeta = \frac{1}{4\pi}\sum_{x\in X}\sum_{y\in Y}\left[
        \frac{xy/d^2}{3(y^2/d^2+1)\sqrt{x^2/d^2 + y^2/d^2 + 1}}
        + \frac{2}{3}\arctan\frac{xy/d^2}{\sqrt{x^2/d^2 + y^2/d^2 + 1}}\right]

    with X = {a/2 + x_n - x_t, a/2 - x_n + x_t}, Y = {a/2 + y_n - y_t, a/2 - y_n + y_t}.

    References
    ----------
    .. [1] E. Björnson and L. Sanguinetti, IEEE Open J. Commun. Soc., 2020, arXiv:2002.04960, Eq. (4).
    """
    xn = as_float("x_n_m", x_n_m)
    yn = as_float("y_n_m", y_n_m)
    a = as_float("side_m", side_m, min_value=0.0)
    xt = as_float("x_t_m", x_t_m)
    yt = as_float("y_t_m", y_t_m)
    d = as_float("distance_m", distance_m, min_value=0.0, strict=True)
    total = 0.0
    for x in (a / 2 + xn - xt, a / 2 - xn + xt):          # [1], Eq. 4, set X
        for y in (a / 2 + yn - yt, a / 2 - yn + yt):      # [1], Eq. 4, set Y
            xy = x * y / d**2
            root = np.sqrt(x**2 / d**2 + y**2 / d**2 + 1.0)
            total = total + xy / (3.0 * (y**2 / d**2 + 1.0) * root) + 2.0 / 3.0 * np.arctan(xy / root)
    return scalar_or_array(total / (4.0 * np.pi))


def irs_gain_exact(n_side, side_m, d_in_m, d_out_m):
    r"""Exact gain of a square surface with optimal phases, both ends broadside on its centre ([1], Eq. 42).

    Parameters
    ----------
    n_side : int
        Elements per side (N = n_side^2).
    side_m : float
        Element side a [m].
    d_in_m, d_out_m : float
        Distances of the transmitter and the receiver from the surface plane [m].

    Returns
    -------
    float
        Linear power gain (isotropic ends).

    Notes
    -----
    .. math:: \beta = \left(\sum_n \sqrt{\zeta_n(d)\,\zeta_n(\delta)}\right)^2

    with the per-element gains ζ of :func:`element_gain_exact` ([1], Eq. 4).  Vectorised over the elements.

    References
    ----------
    .. [1] E. Björnson and L. Sanguinetti, IEEE Open J. Commun. Soc., 2020, arXiv:2002.04960, Eqs. (4), (42).
    """
    n_side = int(n_side)
    if n_side < 1:
        raise RadioInputError(f"n_side: expected at least 1 element per side, got {n_side}")
    c = (np.arange(n_side) - (n_side - 1) / 2.0) * side_m
    xn, yn = np.meshgrid(c, c, indexing="ij")
    z_in = element_gain_exact(xn, yn, side_m, 0.0, 0.0, d_in_m)
    z_out = element_gain_exact(xn, yn, side_m, 0.0, 0.0, d_out_m)
    return float(np.sum(np.sqrt(z_in * z_out)) ** 2)  # [1], Eq. 42


def mirror_limit_gain(d_in_m, d_out_m, freq_hz=None, wavelength_m=None):
    r"""Gain of an infinitely large surface acting as a mirror ([1], Eq. 54): free space over d + delta.

    Parameters
    ----------
    d_in_m, d_out_m : float or array_like
        Distances of the two ends from the surface [m].
    freq_hz : float or array_like, optional
        Frequency [Hz] (or give ``wavelength_m``).
    wavelength_m : float or array_like, optional
        Wavelength [m].

    Returns
    -------
    float or ndarray
        Linear gain (lambda / (4 pi (d + delta)))^2.

    References
    ----------
    .. [1] E. Björnson and L. Sanguinetti, IEEE Open J. Commun. Soc., 2020, arXiv:2002.04960, Eq. (54).
    """
    lam = _wavelength(freq_hz, wavelength_m)
    d = as_float("d_in_m", d_in_m, min_value=0.0)
    e = as_float("d_out_m", d_out_m, min_value=0.0)
    return scalar_or_array((lam / (4.0 * np.pi * (d + e))) ** 2)  # [1], Eq. 54


def n_max_far_field(element_area_m2, d_in_m, d_out_m, freq_hz=None, wavelength_m=None):
    r"""Element count at which the far-field formula reaches the mirror limit ([1], Eq. 55).

    Parameters
    ----------
    element_area_m2 : float or array_like
        Element area A [m^2].
    d_in_m, d_out_m : float or array_like
        Distances [m].
    freq_hz, wavelength_m
        As :func:`mirror_limit_gain`.

    Returns
    -------
    float or ndarray
        N_max = (lambda / A) (1/d + 1/delta)^-1.  The far-field formula over-estimates beyond it.

    References
    ----------
    .. [1] E. Björnson and L. Sanguinetti, IEEE Open J. Commun. Soc., 2020, arXiv:2002.04960, Eq. (55).
    """
    lam = _wavelength(freq_hz, wavelength_m)
    a = as_float("element_area_m2", element_area_m2, min_value=0.0, strict=True)
    d = as_float("d_in_m", d_in_m, min_value=0.0, strict=True)
    e = as_float("d_out_m", d_out_m, min_value=0.0, strict=True)
    return scalar_or_array(lam / a / (1.0 / d + 1.0 / e))  # [1], Eq. 55


def _wavelength(freq_hz, wavelength_m):
    from ._checks import SPEED_OF_LIGHT_M_S

    if (freq_hz is None) == (wavelength_m is None):
        raise RadioInputError("give exactly one of freq_hz and wavelength_m")
    if wavelength_m is not None:
        return as_float("wavelength_m", wavelength_m, min_value=0.0, strict=True)
    return SPEED_OF_LIGHT_M_S / as_float("freq_hz", freq_hz, min_value=0.0, strict=True)
