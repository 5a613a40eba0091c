"""Base station antenna patterns: the 3GPP sector element pattern and an omnidirectional antenna.

Azimuths are degrees clockwise from north; downtilt is positive below the horizontal; offsets (dx, dy, dz) are
metres east, north and up from the antenna to the target.

References
----------
.. [1] 3GPP TR 38.901 v19.4.0, "Study on channel model for frequencies from 0.5 to 100 GHz",
   Table 7.3-1 (radiation power pattern of a single antenna element) and section 7.1 (coordinate
   rotation, Eqs. 7.1-7 and 7.1-8).
"""

from __future__ import annotations

import numpy as np

from ._checks import RadioInputError, as_float, scalar_or_array

__all__ = ["sector_gain_dbi", "bs_gain_toward_dbi", "local_angles_deg"]


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
