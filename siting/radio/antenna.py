"""Base station antenna patterns: the 3GPP sector element pattern, a steered planar array beam, omnidirectional.

Azimuths are degrees clockwise from north; downtilt is positive below the horizontal; offsets (dx, dy, dz) are
metres east, north and up from the antenna to the target.

References
----------
.. [1] 3GPP TR 38.901 v19.4.0, "Study on channel model for frequencies from 0.5 to 100 GHz",
   Table 7.3-1 (radiation power pattern of a single antenna element) and section 7.1 (coordinate
   rotation, Eqs. 7.1-7 and 7.1-8).
.. [2] C. A. Balanis, "Antenna Theory: Analysis and Design", Wiley, uniform linear and planar array factors
   (chapter 6; section and equation numbers from memory).
"""

from __future__ import annotations

import numpy as np

from ._checks import RadioInputError, as_float, scalar_or_array

__all__ = ["sector_gain_dbi", "bs_gain_toward_dbi", "local_angles_deg", "bs_beam_gain_dbi", "array_size_for_gain",
           "ELEMENT_GAIN_DBI"]

#: Maximum directional gain of one antenna element [dBi], [1], Table 7.3-1.
ELEMENT_GAIN_DBI = 8.0


def sector_gain_dbi(az_offset_deg, el_offset_deg, max_gain_dbi, hpbw_h_deg=65.0, hpbw_v_deg=65.0,
                    front_back_db=30.0, side_lobe_v_db=30.0):
    r"""Gain of the 3GPP sector pattern, scaled so that boresight gives ``max_gain_dbi``.

    Parameters
    ----------
    az_offset_deg : float or array_like
        Azimuth of the target relative to boresight, in the antenna's frame [deg]; any real value (wrapped).
    el_offset_deg : float or array_like
        Elevation of the target relative to boresight, in the antenna's frame, positive up [deg], in
        [-90, 90].
    max_gain_dbi : float or array_like
        Boresight gain including array gain [dBi].
    hpbw_h_deg, hpbw_v_deg : float, default 65
        Horizontal and vertical 3 dB beamwidths [deg] ([1]: 65 deg).
    front_back_db : float, default 30
        Maximum attenuation A_max [dB] ([1]: 30 dB).
    side_lobe_v_db : float, default 30
        Vertical side-lobe limit SLA_V [dB] ([1]: 30 dB).

    Returns
    -------
    float or ndarray
        Gain [dBi] = max_gain_dbi + A, with A in [-A_max, 0].

    Notes
    -----
    With the zenith angle theta'' = 90 - el and the azimuth phi'' in (-180, 180] ([1], Table 7.3-1):

    .. math::
        A_V = -\min\left(12\left(\frac{\theta''-90}{\theta_{3dB}}\right)^2, SLA_V\right),\quad
        A_H = -\min\left(12\left(\frac{\phi''}{\phi_{3dB}}\right)^2, A_{max}\right),\quad
        A = -\min(-(A_V + A_H), A_{max})

    The element maximum of 8 dBi in [1] is replaced by ``max_gain_dbi`` (the whole array's boresight gain).

    References
    ----------
    .. [1] 3GPP TR 38.901 v19.4.0, Table 7.3-1.
    """
    az = as_float("az_offset_deg", az_offset_deg)
    el = as_float("el_offset_deg", el_offset_deg)
    g = as_float("max_gain_dbi", max_gain_dbi)
    phi = (az + 180.0) % 360.0 - 180.0                       # wrap to [-180, 180)
    a_v = -np.minimum(12.0 * (el / hpbw_v_deg) ** 2, side_lobe_v_db)   # [1], Table 7.3-1, theta''-90 = -el
    a_h = -np.minimum(12.0 * (phi / hpbw_h_deg) ** 2, front_back_db)   # [1], Table 7.3-1
    a = -np.minimum(-(a_v + a_h), front_back_db)                       # [1], Table 7.3-1
    return scalar_or_array(g + a)


def local_angles_deg(dx_m, dy_m, dz_m, azimuth_deg, downtilt_deg):
    """Azimuth and elevation of targets in the frame of a tilted antenna.

    Parameters
    ----------
    dx_m, dy_m, dz_m : float or array_like
        Offset from the antenna to the target: east, north, up [m].
    azimuth_deg : float or array_like
        Boresight azimuth, clockwise from north [deg].
    downtilt_deg : float or array_like
        Boresight tilt below the horizontal [deg].

    Returns
    -------
    (az_offset_deg, el_offset_deg) : tuple of float or ndarray
        Azimuth offset clockwise from boresight in (-180, 180] and elevation above the boresight plane, in the
        antenna's own frame [deg].

    Notes
    -----
    The direction is rotated into the antenna frame by the boresight bearing and the downtilt (slant 0),
    which is the rotation of [1], Eqs. 7.1-7 and 7.1-8, with the bearing measured clockwise from north.
    Boresight b, right-hand horizontal r and tilted up-vector w of the antenna are

    b = (sin a cos t, cos a cos t, -sin t), r = (cos a, -sin a, 0), w = (sin a sin t, cos a sin t, cos t),

    and the local angles are atan2(u.r, u.b) and asin(u.w) for the unit direction u.

    References
    ----------
    .. [1] 3GPP TR 38.901 v19.4.0, section 7.1.
    """
    dx = as_float("dx_m", dx_m)
    dy = as_float("dy_m", dy_m)
    dz = as_float("dz_m", dz_m)
    a = np.radians(as_float("azimuth_deg", azimuth_deg))
    t = np.radians(as_float("downtilt_deg", downtilt_deg))
    sa, ca, st, ct = np.sin(a), np.cos(a), np.sin(t), np.cos(t)
    xb = dx * sa * ct + dy * ca * ct - dz * st   # u . b
    yr = dx * ca - dy * sa                        # u . r
    zw = dx * sa * st + dy * ca * st + dz * ct   # u . w
    horiz = np.hypot(xb, yr)
    az = np.degrees(np.arctan2(yr, xb))
    el = np.degrees(np.arctan2(zw, horiz))
    return scalar_or_array(az), scalar_or_array(el)


def bs_gain_toward_dbi(dx_m, dy_m, dz_m, azimuth_deg, downtilt_deg, max_gain_dbi, omni=False, **pattern):
    """Base station antenna gain toward targets.

    Parameters
    ----------
    dx_m, dy_m, dz_m : float or array_like
        Offset from the antenna to the target: east, north, up [m].
    azimuth_deg : float or array_like
        Boresight azimuth, clockwise from north [deg].
    downtilt_deg : float or array_like
        Boresight downtilt, positive below the horizontal [deg].
    max_gain_dbi : float or array_like
        Boresight gain [dBi].
    omni : bool or array_like of bool, default False
        True: omnidirectional antenna, ``max_gain_dbi`` in every direction.
    **pattern
        Passed to :func:`sector_gain_dbi` (beamwidths and attenuation limits).

    Returns
    -------
    float or ndarray
        Gain [dBi]; all arguments broadcast (e.g. stations as a column, targets as a row).  A target at the
        antenna itself (zero offset) gets the boresight gain.

    References
    ----------
    .. [1] 3GPP TR 38.901 v19.4.0, Table 7.3-1 and section 7.1.
    """
    omni_arr = np.asarray(omni)
    if omni_arr.dtype != bool:
        raise RadioInputError(f"omni: expected booleans, got dtype {omni_arr.dtype}; pass pattern == 'omni'")
    az, el = local_angles_deg(dx_m, dy_m, dz_m, azimuth_deg, downtilt_deg)
    g = np.asarray(sector_gain_dbi(az, el, max_gain_dbi, **pattern))
    gmax = as_float("max_gain_dbi", max_gain_dbi)
    return scalar_or_array(np.where(omni_arr, gmax, g))


def array_size_for_gain(max_gain_dbi):
    r"""Smallest square array of 8 dBi elements whose boresight gain reaches ``max_gain_dbi``.

    Parameters
    ----------
    max_gain_dbi : float or array_like
        Boresight gain of the whole antenna [dBi].

    Returns
    -------
    (rows, cols) : tuple of int or ndarray of int
        n x n with n the smallest integer such that 8 + 10 log10(n^2) >= max_gain_dbi; (1, 1) when
        max_gain_dbi <= 8 dBi ([1], Table 7.3-1 element).
    """
    g = as_float("max_gain_dbi", max_gain_dbi)
    need = 10.0 ** ((g - ELEMENT_GAIN_DBI) / 10.0)                     # elements needed
    n = np.maximum(np.ceil(np.sqrt(need) - 1e-9), 1.0).astype(int)    # 1e-9: exact powers stay exact
    if n.ndim == 0:
        return int(n), int(n)
    return n, n.copy()


def _ula_factor(x, n):
    """|sum_k exp(j 2 k x)|^2 / n^2 = (sin(n x) / (n sin x))^2, the normalised uniform array factor ([2])."""
    sx = np.sin(x)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.sin(n * x) / (n * sx)
    return np.where(np.abs(sx) < 1e-12, 1.0, r * r)   # grating/main lobe: x a multiple of pi


def bs_beam_gain_dbi(dx_m, dy_m, dz_m, steer_dx_m, steer_dy_m, steer_dz_m, azimuth_deg, downtilt_deg,
                     max_gain_dbi, omni=False, rows=None, cols=None):
    r"""Gain toward targets of a base station beam steered at another point.

    Parameters
    ----------
    dx_m, dy_m, dz_m : float or array_like
        Offset from the antenna to the target: east, north, up [m].
    steer_dx_m, steer_dy_m, steer_dz_m : float or array_like
        Offset from the antenna to the point the beam is steered at [m].
    azimuth_deg, downtilt_deg : float or array_like
        Boresight azimuth (clockwise from north) and downtilt (positive below the horizontal) [deg].
    max_gain_dbi : float or array_like
        Boresight gain of the whole antenna [dBi].
    omni : bool or array_like of bool, default False
        True: omnidirectional antenna, ``max_gain_dbi`` everywhere (no beam).
    rows, cols : int or array_like of int, optional
        Array size (vertical x horizontal elements); default :func:`array_size_for_gain`.

    Returns
    -------
    float or ndarray
        Gain [dBi]; all arguments broadcast.

    Notes
    -----
    A uniform planar array of rows x cols elements at half-wavelength spacing lies in the plane normal to
    boresight; every element has the pattern of [1], Table 7.3-1 (8 dBi, 65 deg, 30 dB).  With the target and
    steering directions u and s in the antenna frame (:func:`local_angles_deg`), u_h = cos(el) sin(az) and
    u_v = sin(el), the phase-steered array factor normalised to 1 at the steering direction is ([2])

    .. math::
        |AF|^2 = \left(\frac{\sin(N_c \psi_h)}{N_c \sin\psi_h}\right)^2
                 \left(\frac{\sin(N_r \psi_v)}{N_r \sin\psi_v}\right)^2,
        \qquad \psi = \frac{\pi}{2}(u - s)

    and the gain is

    .. math:: G = G_{max} + A(u) + 10\log_{10}|AF|^2,

    i.e. element pattern plus array gain 10 log10(N) |AF|^2, offset so that the steered direction gets the
    envelope :func:`bs_gain_toward_dbi` toward it, G_max + A(s).  Since |AF| <= 1, the result never exceeds the
    envelope toward the target.  Decision: the gain is floored at G_max - 30 dB (the A_max of [1]) so that
    exact nulls of the ideal array do not remove a path.

    References
    ----------
    .. [1] 3GPP TR 38.901 v19.4.0, Table 7.3-1 and section 7.1.
    .. [2] C. A. Balanis, "Antenna Theory", uniform planar array factor (equation number from memory).
    """
    omni_arr = np.asarray(omni)
    if omni_arr.dtype != bool:
        raise RadioInputError(f"omni: expected booleans, got dtype {omni_arr.dtype}; pass pattern == 'omni'")
    g = as_float("max_gain_dbi", max_gain_dbi)
    if (rows is None) != (cols is None):
        raise RadioInputError("rows, cols: give both array dimensions or neither")
    if rows is None:
        rows, cols = array_size_for_gain(g)
    n_r = as_float("rows", rows, min_value=1.0)
    n_c = as_float("cols", cols, min_value=1.0)
    az, el = local_angles_deg(dx_m, dy_m, dz_m, azimuth_deg, downtilt_deg)
    saz, sel = local_angles_deg(steer_dx_m, steer_dy_m, steer_dz_m, azimuth_deg, downtilt_deg)
    env = np.asarray(sector_gain_dbi(az, el, g))                    # [1]: G_max + A(u)
    az, el, saz, sel = (np.radians(v) for v in (az, el, saz, sel))
    psi_h = 0.5 * np.pi * (np.cos(el) * np.sin(az) - np.cos(sel) * np.sin(saz))   # [2], lambda/2 spacing
    psi_v = 0.5 * np.pi * (np.sin(el) - np.sin(sel))
    af = _ula_factor(psi_h, n_c) * _ula_factor(psi_v, n_r)          # [2], separable planar array
    with np.errstate(divide="ignore"):
        beam = np.maximum(env + 10.0 * np.log10(af), g - _FLOOR_DB)
    return scalar_or_array(np.where(omni_arr, g, beam))


_FLOOR_DB = 30.0   # decision: beam gain floor below the boresight gain (A_max of [1], Table 7.3-1)
