"""Path loss of the direct base station -> user path: free space and 3GPP TR 38.901 UMi / UMa; Fresnel zone.

All functions are vectorised: scalars in give a float out, arrays broadcast against each other.
Losses are positive dB (gain = -loss).

Decisions for the 3GPP models (documented once here, repeated in each docstring):

* **Below d2D = 10 m** (outside the fitted range) the fitted law is *not* extrapolated.  The model is
  evaluated at d2D = 10 m (same heights) and the loss is moved down with the free-space slope,
  ``PL(d2D) = PL(10 m) + 20 log10(d3D / d3D(10 m))``.  This is continuous at 10 m and falls no faster than
  free space towards the mast.  For UMi the result stays above the exact free-space loss; UMa LOS is, by its
  published constant, below free space for d3D up to ~170 m and that property is kept as published.
* **Beyond 5 km** the formulas are evaluated as published (the LOS PL2 branch has a 40 dB/decade slope,
  already steeper than any physical mmWave path) and a :class:`RadioValidityWarning` is issued.
* Outside 0.5-100 GHz the formulas are evaluated as published with a :class:`RadioValidityWarning`.
* **Heights below 1.5 m** (the lowest terminal height of the table) are evaluated at 1.5 m, with a
  :class:`RadioValidityWarning`; the distance d3D keeps the true heights where it is a distance (the
  free-space slope below 10 m, the free-space loss of :func:`los_excess_db`).  As published, a height at or
  below the 1 m effective environment height collapses the breakpoint distance to 0 and the LOS law jumps
  20-40 dB (28 GHz, 100 m: 123.3 dB at hUT = 1.0 m against 103.4 dB at 1.05 m) -- a degenerate limit, not
  a propagation effect.  Surface hops (a panel mounted low, a user below it) pass through the same rule.
* **No path has a gain**: every loss here is floored at 0 dB.  The far-field formulas fall below 0 dB within
  lambda / (4 pi) of an antenna (2.4 cm at 1 GHz), where they do not apply; a passive path cannot deliver
  more power than was sent (conservation of energy).
* The LOS/NLOS choice is deterministic (from the building geometry, :mod:`siting.visibility`), not drawn with the
  LOS probability; :func:`los_probability_umi` and :func:`los_probability_uma` are for information.
* Shadow fading is not drawn; margins and coverage quantiles are in :mod:`siting.radio.fading`.

References
----------
.. [1] 3GPP TR 38.901 v19.4.0, "Study on channel model for frequencies from 0.5 to 100 GHz",
   Table 7.4.1-1 (path loss, NOTE 1 breakpoint) and Table 7.4.2-1 (LOS probability).
.. [2] ITU-R P.525-5, "Calculation of free-space attenuation", 2024.
.. [3] ITU-R P.530, "Propagation data and prediction methods required for the design of terrestrial
   line-of-sight systems", and ITU-R P.526, "Propagation by diffraction" (first Fresnel zone radius).
"""

from __future__ import annotations

import numpy as np

from ._checks import SPEED_OF_LIGHT_M_S, RadioInputError, as_float, scalar_or_array, warn_outside

__all__ = [
    "free_space_path_loss_db",
    "umi_street_canyon_los_db",
    "umi_street_canyon_nlos_db",
    "uma_los_db",
    "uma_nlos_db",
    "direct_path_loss_db",
    "los_probability_umi",
    "los_probability_uma",
    "breakpoint_distance_m",
    "los_excess_db",
    "direct_model_fit",
    "fresnel_radius_m",
    "MODELS",
]

#: Direct-path models accepted by :func:`direct_path_loss_db`.
MODELS = ("umi", "uma", "free_space")

_MIN_D2D_M = 10.0     # [1], Table 7.4.1-1: 10 m <= d2D
_MAX_D2D_M = 5000.0   # [1], Table 7.4.1-1: d2D <= 5 km
_H_E_M = 1.0          # [1], NOTE 1: effective environment height 1 m (UMi; UMa with hUT < 13 m)
_MIN_H_M = 1.5        # [1], Table 7.4.1-1: 1.5 m <= hUT (the lowest fitted terminal height)
_C_BREAKPOINT = 3.0e8  # [1], NOTE 1 uses c = 3.0e8 m/s in d'BP


def free_space_path_loss_db(distance_m, freq_hz):
    r"""Free-space path loss between isotropic antennas (Friis).

    Parameters
    ----------
    distance_m : float or array_like
        3-D distance between the antennas [m], > 0.
    freq_hz : float or array_like
        Carrier frequency [Hz], > 0.

    Returns
    -------
    float or ndarray
        Loss [dB], >= 0.

    Notes
    -----
    Exact form with c = 299 792 458 m/s ([2], section 2.2):

    .. math:: L_{bf} = 20 \log_{10}(4 \pi d f / c)

    floored at 0 dB: below d = lambda / (4 pi) the far-field formula would promise a gain (module notes).

    The practical-unit form 32.4 + 20 log10 f[MHz] + 20 log10 d[km] differs from it by 0.048 dB.

    References
    ----------
    .. [2] ITU-R P.525-5, "Calculation of free-space attenuation", 2024.
    """
    d = as_float("distance_m", distance_m, min_value=0.0, strict=True)
    f = as_float("freq_hz", freq_hz, min_value=0.0, strict=True)
    with np.errstate(divide="ignore"):
        loss = 20.0 * np.log10(4.0 * np.pi * d * f / SPEED_OF_LIGHT_M_S)  # [2]
    return scalar_or_array(np.maximum(loss, 0.0))  # no gain within lambda / (4 pi): module notes


def breakpoint_distance_m(h_bs_m, h_ut_m, freq_hz, h_e_m=_H_E_M):
    r"""Breakpoint distance d'BP of 3GPP TR 38.901 Table 7.4.1-1 NOTE 1.

    Parameters
    ----------
    h_bs_m, h_ut_m : float or array_like
        Antenna heights above ground [m].
    freq_hz : float or array_like
        Carrier frequency [Hz].
    h_e_m : float
        Effective environment height [m]; 1 m for UMi and for UMa with hUT < 13 m.

    Returns
    -------
    float or ndarray
        d'BP [m].

    Notes
    -----
    .. math:: d'_{BP} = 4 h'_{BS} h'_{UT} f_c / c,\quad h' = h - h_E,\ c = 3.0\times10^8

    (fc in Hz). Effective heights are floored at 0.

    References
    ----------
    .. [1] 3GPP TR 38.901 v19.4.0, Table 7.4.1-1, NOTE 1.
    """
    hb = np.maximum(as_float("h_bs_m", h_bs_m, min_value=0.0) - h_e_m, 0.0)
    hu = np.maximum(as_float("h_ut_m", h_ut_m, min_value=0.0) - h_e_m, 0.0)
    f = as_float("freq_hz", freq_hz, min_value=0.0, strict=True)
    return scalar_or_array(4.0 * hb * hu * f / _C_BREAKPOINT)  # [1], NOTE 1


# --------------------------------------------------------------------------------------------- internals

def _inputs(d2d_m, h_bs_m, h_ut_m, freq_hz, model: str):
    d2d = as_float("d2d_m", d2d_m, min_value=0.0)
    hbs = as_float("h_bs_m", h_bs_m, min_value=0.0)
    hut = as_float("h_ut_m", h_ut_m, min_value=0.0)
    f = as_float("freq_hz", freq_hz, min_value=0.0, strict=True)
    warn_outside("freq_hz", f, 0.5e9, 100e9, model, "the formula is extrapolated", stacklevel=5)
    warn_outside("d2d_m", d2d, _MIN_D2D_M, _MAX_D2D_M, model,
                 "below 10 m the loss follows free space from the 10 m value; beyond 5 km it is extrapolated",
                 stacklevel=5)
    for name, h in (("h_bs_m", hbs), ("h_ut_m", hut)):
        warn_outside(name, h, _MIN_H_M, np.inf, model,
                     f"heights below {_MIN_H_M:g} m are evaluated at {_MIN_H_M:g} m (module notes)", stacklevel=5)
    return np.broadcast_arrays(d2d, hbs, hut, f)


def _d3d(d2d, hbs, hut):
    return np.sqrt(d2d**2 + (hbs - hut) ** 2)


def _short_range(fit, d2d, hbs, hut, hb_fit, hu_fit, fc_ghz, dbp):
    """Evaluate ``fit`` at max(d2D, 10 m) and move it with the free-space slope below 10 m (module notes).

    ``hb_fit``, ``hu_fit``: the heights the fit is evaluated at; the slope uses the true heights.
    """
    d_eval = np.maximum(d2d, _MIN_D2D_M)
    pl = fit(d_eval, _d3d(d_eval, hb_fit, hu_fit), hb_fit, hu_fit, fc_ghz, dbp)
    with np.errstate(divide="ignore"):
        # d3D = 0 (co-located antennas) is degenerate; a 1 cm floor keeps the loss finite.
        shift = 20.0 * np.log10(np.maximum(_d3d(d2d, hbs, hut), 0.01) / _d3d(d_eval, hbs, hut))
    return pl + np.where(d2d < _MIN_D2D_M, shift, 0.0)


def _umi_los_fit(d2d, d3d, hbs, hut, fc, dbp):
    pl1 = 32.4 + 21.0 * np.log10(d3d) + 20.0 * np.log10(fc)  # [1], Table 7.4.1-1, UMi LOS PL1
    pl2 = (32.4 + 40.0 * np.log10(d3d) + 20.0 * np.log10(fc)
           - 9.5 * np.log10(np.maximum(dbp**2 + (hbs - hut) ** 2, 1e-12)))  # [1], UMi LOS PL2
    return np.where(d2d <= dbp, pl1, pl2)


def _umi_nlos_prime(d2d, d3d, hbs, hut, fc, dbp):
    return 35.3 * np.log10(d3d) + 22.4 + 21.3 * np.log10(fc) - 0.3 * (hut - 1.5)  # [1], UMi NLOS PL'


def _uma_los_fit(d2d, d3d, hbs, hut, fc, dbp):
    pl1 = 28.0 + 22.0 * np.log10(d3d) + 20.0 * np.log10(fc)  # [1], Table 7.4.1-1, UMa LOS PL1
    pl2 = (28.0 + 40.0 * np.log10(d3d) + 20.0 * np.log10(fc)
           - 9.0 * np.log10(np.maximum(dbp**2 + (hbs - hut) ** 2, 1e-12)))  # [1], UMa LOS PL2
    return np.where(d2d <= dbp, pl1, pl2)


def _uma_nlos_prime(d2d, d3d, hbs, hut, fc, dbp):
    return 13.54 + 39.08 * np.log10(d3d) + 20.0 * np.log10(fc) - 0.6 * (hut - 1.5)  # [1], UMa NLOS PL'


_FITS = {"umi": (_umi_los_fit, _umi_nlos_prime), "uma": (_uma_los_fit, _uma_nlos_prime)}


def _los_nlos(model, d2d_m, h_bs_m, h_ut_m, freq_hz):
    """Return (PL_LOS, PL_NLOS) of a 3GPP model, arrays of the broadcast shape."""
    name = {"umi": "3GPP TR 38.901 UMi-Street Canyon", "uma": "3GPP TR 38.901 UMa"}[model]
    d2d, hbs, hut, f = _inputs(d2d_m, h_bs_m, h_ut_m, freq_hz, name)
    fc = f / 1e9  # [1], NOTE 2: fc in GHz in the formulas
    hb_fit, hu_fit = np.maximum(hbs, _MIN_H_M), np.maximum(hut, _MIN_H_M)  # module notes: heights below 1.5 m
    dbp = 4.0 * (hb_fit - _H_E_M) * (hu_fit - _H_E_M) * f / _C_BREAKPOINT  # NOTE 1
    los_fit, nlos_fit = _FITS[model]
    pl_los = _short_range(los_fit, d2d, hbs, hut, hb_fit, hu_fit, fc, dbp)
    pl_nlos_prime = _short_range(nlos_fit, d2d, hbs, hut, hb_fit, hu_fit, fc, dbp)
    # [1], NLOS = max(PL_LOS, PL'_NLOS); no path has a gain (module notes)
    return np.maximum(pl_los, 0.0), np.maximum(np.maximum(pl_los, pl_nlos_prime), 0.0)


# ----------------------------------------------------------------------------------------------- public

_COMMON_NOTES = """
    Heights enter the breakpoint distance d'BP = 4 h'BS h'UT fc / c (NOTE 1, hE = 1 m, c = 3.0e8 m/s, fc in
    Hz) and d3D = sqrt(d2D^2 + (hBS - hUT)^2).  Below d2D = 10 m the model is evaluated at 10 m and moved
    with the free-space slope (module notes); beyond 5 km and outside 0.5-100 GHz it is extrapolated with a
    :class:`~siting.radio.RadioValidityWarning` (one per call and kind).
"""


def umi_street_canyon_los_db(d2d_m, h_bs_m, h_ut_m, freq_hz):
    r"""3GPP UMi-Street Canyon line-of-sight path loss.

    Parameters
    ----------
    d2d_m : float or array_like
        Horizontal distance [m], >= 0.  Stated validity 10 m - 5 km.
    h_bs_m : float or array_like
        Base station antenna height [m] (the model is fitted for 10 m).
    h_ut_m : float or array_like
        Terminal height [m] (fitted for 1.5 - 22.5 m).
    freq_hz : float or array_like
        Carrier frequency [Hz] (0.5 - 100 GHz).

    Returns
    -------
    float or ndarray
        Path loss [dB].

    Notes
    -----
    .. math::
        PL_1 = 32.4 + 21\log_{10} d_{3D} + 20\log_{10} f_c \quad (10\,\mathrm{m} \le d_{2D} \le d'_{BP})

        PL_2 = 32.4 + 40\log_{10} d_{3D} + 20\log_{10} f_c - 9.5\log_{10}(d'^2_{BP} + (h_{BS}-h_{UT})^2)
    {notes}
    References
    ----------
    .. [1] 3GPP TR 38.901 v19.4.0, Table 7.4.1-1 (UMi-Street Canyon, LOS) and NOTE 1.
    """
    return scalar_or_array(_los_nlos("umi", d2d_m, h_bs_m, h_ut_m, freq_hz)[0])


def umi_street_canyon_nlos_db(d2d_m, h_bs_m, h_ut_m, freq_hz):
    r"""3GPP UMi-Street Canyon non-line-of-sight path loss.

    Parameters
    ----------
    d2d_m, h_bs_m, h_ut_m, freq_hz
        As :func:`umi_street_canyon_los_db`.

    Returns
    -------
    float or ndarray
        Path loss [dB], never below the LOS loss at the same geometry.

    Notes
    -----
    .. math::
        PL'_{NLOS} = 35.3\log_{10} d_{3D} + 22.4 + 21.3\log_{10} f_c - 0.3(h_{UT} - 1.5)

        PL_{NLOS} = \max(PL_{LOS}, PL'_{NLOS})
    {notes}
    References
    ----------
    .. [1] 3GPP TR 38.901 v19.4.0, Table 7.4.1-1 (UMi-Street Canyon, NLOS).
    """
    return scalar_or_array(_los_nlos("umi", d2d_m, h_bs_m, h_ut_m, freq_hz)[1])


def uma_los_db(d2d_m, h_bs_m, h_ut_m, freq_hz):
    r"""3GPP UMa line-of-sight path loss (hE = 1 m, the deterministic NOTE 1 case for hUT < 13 m).

    Parameters
    ----------
    d2d_m, h_bs_m, h_ut_m, freq_hz
        As :func:`umi_street_canyon_los_db` (the model is fitted for hBS = 25 m).

    Returns
    -------
    float or ndarray
        Path loss [dB].

    Notes
    -----
    .. math::
        PL_1 = 28.0 + 22\log_{10} d_{3D} + 20\log_{10} f_c

        PL_2 = 28.0 + 40\log_{10} d_{3D} + 20\log_{10} f_c - 9\log_{10}(d'^2_{BP} + (h_{BS}-h_{UT})^2)

    The random hE of NOTE 1 for hUT >= 13 m is not drawn: hE = 1 m throughout.
    {notes}
    References
    ----------
    .. [1] 3GPP TR 38.901 v19.4.0, Table 7.4.1-1 (UMa, LOS) and NOTE 1.
    """
    return scalar_or_array(_los_nlos("uma", d2d_m, h_bs_m, h_ut_m, freq_hz)[0])


def uma_nlos_db(d2d_m, h_bs_m, h_ut_m, freq_hz):
    r"""3GPP UMa non-line-of-sight path loss.

    Parameters
    ----------
    d2d_m, h_bs_m, h_ut_m, freq_hz
        As :func:`uma_los_db`.

    Returns
    -------
    float or ndarray
        Path loss [dB].

    Notes
    -----
    .. math::
        PL'_{NLOS} = 13.54 + 39.08\log_{10} d_{3D} + 20\log_{10} f_c - 0.6(h_{UT} - 1.5)

        PL_{NLOS} = \max(PL_{LOS}, PL'_{NLOS})
    {notes}
    References
    ----------
    .. [1] 3GPP TR 38.901 v19.4.0, Table 7.4.1-1 (UMa, NLOS).
    """
    return scalar_or_array(_los_nlos("uma", d2d_m, h_bs_m, h_ut_m, freq_hz)[1])


for _f in (umi_street_canyon_los_db, umi_street_canyon_nlos_db, uma_los_db, uma_nlos_db):
    _f.__doc__ = (_f.__doc__ or "").replace("{notes}", _COMMON_NOTES)


def direct_path_loss_db(model: str, los, d2d_m, h_bs_m, h_ut_m, freq_hz):
    """Direct-path loss with the LOS or NLOS formula chosen per element.

    Parameters
    ----------
    model : {"umi", "uma", "free_space"}
        "umi": 3GPP UMi-Street Canyon; "uma": 3GPP UMa; "free_space": exact Friis loss over d3D (``los`` is
        then ignored).
    los : bool or array_like of bool
        True where the geometry gives line of sight (deterministic, the rule of :mod:`siting.visibility`).
    d2d_m, h_bs_m, h_ut_m, freq_hz
        As :func:`umi_street_canyon_los_db`; all arguments broadcast together.

    Returns
    -------
    float or ndarray
        Path loss [dB].

    References
    ----------
    .. [1] 3GPP TR 38.901 v19.4.0, Table 7.4.1-1.
    .. [2] ITU-R P.525-5.
    """
    if model not in MODELS:
        raise RadioInputError(f"direct path model: expected one of {MODELS}, got {model!r}; fix the job's radio model")
    if model == "free_space":
        d2d = as_float("d2d_m", d2d_m, min_value=0.0)
        hbs = as_float("h_bs_m", h_bs_m, min_value=0.0)
        hut = as_float("h_ut_m", h_ut_m, min_value=0.0)
        d3d = np.maximum(_d3d(d2d, hbs, hut), 0.01)
        out = free_space_path_loss_db(d3d, freq_hz)
        shape = np.broadcast_shapes(np.shape(out), np.shape(los))
        return scalar_or_array(np.broadcast_to(out, shape).copy() if shape else np.asarray(out))
    los_arr = np.asarray(los)
    if los_arr.dtype != bool:
        raise RadioInputError(f"los: expected booleans, got dtype {los_arr.dtype}; pass the visibility 'los' column")
    pl_los, pl_nlos = _los_nlos(model, d2d_m, h_bs_m, h_ut_m, freq_hz)
    return scalar_or_array(np.where(los_arr, pl_los, pl_nlos))


def los_probability_umi(d2d_m):
    r"""LOS probability, UMi-Street Canyon (for information; the pipeline uses geometric LOS).

    Parameters
    ----------
    d2d_m : float or array_like
        Horizontal outdoor distance [m], >= 0.

    Returns
    -------
    float or ndarray
        Probability in [0, 1].

    Notes
    -----
    .. math:: P = 1 \ (d \le 18\,\mathrm{m});\quad P = 18/d + e^{-d/36}(1 - 18/d)\ \text{otherwise}

    References
    ----------
    .. [1] 3GPP TR 38.901 v19.4.0, Table 7.4.2-1 (UMi-Street Canyon).
    """
    d = as_float("d2d_m", d2d_m, min_value=0.0)
    dd = np.maximum(d, 18.0)
    p = 18.0 / dd + np.exp(-dd / 36.0) * (1.0 - 18.0 / dd)  # [1], Table 7.4.2-1
    return scalar_or_array(np.where(d <= 18.0, 1.0, p))


def los_probability_uma(d2d_m, h_ut_m):
    r"""LOS probability, UMa (for information; the pipeline uses geometric LOS).

    Parameters
    ----------
    d2d_m : float or array_like
        Horizontal outdoor distance [m], >= 0.
    h_ut_m : float or array_like
        Terminal height [m] (stated for <= 23 m).

    Returns
    -------
    float or ndarray
        Probability in [0, 1].

    Notes
    -----
    .. math::
        P = \left[\frac{18}{d} + e^{-d/63}\left(1-\frac{18}{d}\right)\right]
            \left(1 + C'(h_{UT}) \frac{5}{4}\left(\frac{d}{100}\right)^3 e^{-d/150}\right),

    P = 1 for d <= 18 m; C' = 0 for hUT <= 13 m, ((hUT - 13)/10)^1.5 above.

    References
    ----------
    .. [1] 3GPP TR 38.901 v19.4.0, Table 7.4.2-1 (UMa).
    """
    d = as_float("d2d_m", d2d_m, min_value=0.0)
    h = as_float("h_ut_m", h_ut_m, min_value=0.0)
    dd = np.maximum(d, 18.0)
    c = np.where(h <= 13.0, 0.0, (np.maximum(h - 13.0, 0.0) / 10.0) ** 1.5)
    p = (18.0 / dd + np.exp(-dd / 63.0) * (1.0 - 18.0 / dd)) * (
        1.0 + c * 1.25 * (dd / 100.0) ** 3 * np.exp(-dd / 150.0))  # [1], Table 7.4.2-1
    return scalar_or_array(np.where(d <= 18.0, 1.0, np.minimum(p, 1.0)))


def los_excess_db(model: str, d2d_m, h_bs_m, h_ut_m, freq_hz):
    r"""Extra loss that a model's LOS law puts on a line-of-sight hop beyond free space.

    Parameters
    ----------
    model : {"umi", "uma", "free_space"}
        Direct-path model (as :func:`direct_path_loss_db`).
    d2d_m, h_bs_m, h_ut_m, freq_hz
        As :func:`umi_street_canyon_los_db`.  For a surface hop pass the higher end as ``h_bs_m`` (the
        models place the base station above the terminal).

    Returns
    -------
    float or ndarray
        :math:`\max(0, PL_{LOS} - L_{bf}(d_{3D}))` [dB], >= 0; 0 for "free_space".

    Notes
    -----
    Adding this excess to the free-space loss of each surface hop puts the hops on the same LOS law as the
    direct path (the same model for every line-of-sight link).  PL_LOS is the model's LOS loss with the
    short-range and validity decisions of :func:`umi_street_canyon_los_db`; L_bf is the exact free-space loss
    over d3D = sqrt(d2D^2 + (hBS - hUT)^2) (floored at 1 cm, as in :func:`direct_path_loss_db`).  UMa LOS
    falls below free space at short range by its published constant ([1]); the excess is then 0.

    References
    ----------
    .. [1] 3GPP TR 38.901 v19.4.0, Table 7.4.1-1.
    .. [2] ITU-R P.525-5.
    """
    if model not in MODELS:
        raise RadioInputError(f"direct path model: expected one of {MODELS}, got {model!r}; fix the job's radio model")
    d2d = as_float("d2d_m", d2d_m, min_value=0.0)
    hbs = as_float("h_bs_m", h_bs_m, min_value=0.0)
    hut = as_float("h_ut_m", h_ut_m, min_value=0.0)
    f = as_float("freq_hz", freq_hz, min_value=0.0, strict=True)
    shape = np.broadcast_shapes(d2d.shape, hbs.shape, hut.shape, f.shape)
    if model == "free_space":
        return scalar_or_array(np.zeros(shape))
    pl_los = _los_nlos(model, d2d, hbs, hut, f)[0]
    fspl = free_space_path_loss_db(np.maximum(_d3d(d2d, hbs, hut), 0.01), f)   # [2]
    return scalar_or_array(np.maximum(pl_los - fspl, 0.0))


#: Decision: heights at which a model is flagged as unsuited ([1], Table 7.4.1-1: UMi-Street Canyon is
#: defined for hBS = 10 m, UMa for hBS = 25 m).  The thresholds sit between the two fitted heights.
_FIT_UMI_MAX_M = 20.0
_FIT_UMA_MIN_M = 15.0


def direct_model_fit(model: str, bs_height_m):
    """Check that the base station heights suit the chosen direct-path model.

    Parameters
    ----------
    model : {"umi", "uma", "free_space"}
        Direct-path model.
    bs_height_m : float or array_like
        Base station antenna heights above ground [m].

    Returns
    -------
    str or None
        None when every height suits the model, else a short message for the user that suggests the other
        model.

    Notes
    -----
    3GPP TR 38.901 Table 7.4.1-1 fits UMi-Street Canyon to hBS = 10 m (below rooftops) and UMa to hBS = 25 m
    (above rooftops) ([1]).  Decision: "umi" is flagged above 20 m and "uma" below 15 m; "free_space" has no
    height condition.

    References
    ----------
    .. [1] 3GPP TR 38.901 v19.4.0, Table 7.4.1-1.
    """
    if model not in MODELS:
        raise RadioInputError(f"direct path model: expected one of {MODELS}, got {model!r}; fix the job's radio model")
    h = np.atleast_1d(as_float("bs_height_m", bs_height_m, min_value=0.0)).ravel()
    if model == "free_space" or h.size == 0:
        return None
    if model == "umi":
        bad = h > _FIT_UMI_MAX_M
        if not bad.any():
            return None
        return (f"{int(bad.sum())} of {h.size} base station(s) stand above {_FIT_UMI_MAX_M:g} m (highest "
                f"{h.max():g} m), but the UMi-Street Canyon model is defined for antennas at 10 m, below the "
                f"rooftops; for rooftop stations set the direct model to \"uma\" (defined for 25 m)")
    bad = h < _FIT_UMA_MIN_M
    if not bad.any():
        return None
    return (f"{int(bad.sum())} of {h.size} base station(s) stand below {_FIT_UMA_MIN_M:g} m (lowest "
            f"{h.min():g} m), but the UMa model is defined for antennas at 25 m, above the rooftops; for "
            f"street-level stations set the direct model to \"umi\" (defined for 10 m)")


def fresnel_radius_m(d1_m, d2_m, freq_hz):
    r"""Radius of the first Fresnel zone at a point on a link.

    Parameters
    ----------
    d1_m, d2_m : float or array_like
        Distances from the point to the two ends [m], >= 0, not both 0.
    freq_hz : float or array_like
        Frequency [Hz], > 0.

    Returns
    -------
    float or ndarray
        F1 [m].

    Notes
    -----
    .. math:: F_1 = \sqrt{\lambda\, d_1 d_2 / (d_1 + d_2)},\qquad \lambda = c / f

    (the definition of [3]).  Clearance of 0.6 F1 is the usual rule for a hop to count as free space
    (common practice).

    References
    ----------
    .. [3] ITU-R P.530 and ITU-R P.526 (first Fresnel zone radius).
    """
    d1 = as_float("d1_m", d1_m, min_value=0.0)
    d2 = as_float("d2_m", d2_m, min_value=0.0)
    f = as_float("freq_hz", freq_hz, min_value=0.0, strict=True)
    if np.any(d1 + d2 <= 0.0):
        raise RadioInputError("d1_m, d2_m: both distances are 0 for some rows; a point on a link needs d1 + d2 > 0")
    lam = SPEED_OF_LIGHT_M_S / f
    return scalar_or_array(np.sqrt(lam * d1 * d2 / (d1 + d2)))  # [3]
