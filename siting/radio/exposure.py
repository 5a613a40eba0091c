"""Radio-frequency exposure: far-field power density and the ICNIRP 2020 reference levels for the public.

The tool reports power densities against a reference level and a margin; national rules differ and the local
regulation decides.

References
----------
.. [1] H. T. Friis, "A Note on a Simple Transmission Formula", Proc. IRE 34(5), 1946 (power density
   EIRP / (4 pi d^2) and the effective area lambda^2 / (4 pi) of an isotropic antenna).
.. [2] International Commission on Non-Ionizing Radiation Protection (ICNIRP), "Guidelines for Limiting
   Exposure to Electromagnetic Fields (100 kHz to 300 GHz)", Health Physics 118(5):483-524, 2020,
   DOI 10.1097/HP.0000000000001210.
"""

from __future__ import annotations

import numpy as np

from ._checks import SPEED_OF_LIGHT_M_S, RadioInputError, as_float, scalar_or_array

__all__ = ["power_density_w_m2", "density_from_isotropic_power_w_m2", "icnirp_reference_level_w_m2"]

_EXPOSURES = ("whole_body", "local")
_F_MIN_HZ = 2e9      # range implemented here: 2-300 GHz
_F_MAX_HZ = 300e9


def power_density_w_m2(eirp_dbm, distance_m):
    r"""Far-field power density at a distance from an antenna.

    Parameters
    ----------
    eirp_dbm : float or array_like
        Equivalent isotropically radiated power toward the point [dBm].
    distance_m : float or array_like
        Distance [m], > 0 (in the antenna's far field).

    Returns
    -------
    float or ndarray
        Power density S [W/m^2].

    Notes
    -----
    .. math:: S = \mathrm{EIRP} / (4\pi d^2)

    ([1]).  Example: EIRP 58 dBm (631 W) gives 5.02e-3 W/m^2 at 100 m and 0.502 W/m^2 at 10 m.

    References
    ----------
    .. [1] H. T. Friis, Proc. IRE, 1946.
    """
    eirp_w = 10.0 ** ((as_float("eirp_dbm", eirp_dbm) - 30.0) / 10.0)
    d = as_float("distance_m", distance_m, min_value=0.0, strict=True)
    return scalar_or_array(eirp_w / (4.0 * np.pi * d**2))  # [1]


def density_from_isotropic_power_w_m2(rx_power_dbm, freq_hz):
    r"""Power density that an isotropic antenna turns into a given received power.

    Parameters
    ----------
    rx_power_dbm : float or array_like
        Power received by a 0 dBi antenna [dBm] (e.g. EIRP minus path loss).
    freq_hz : float or array_like
        Frequency [Hz], > 0.

    Returns
    -------
    float or ndarray
        Power density [W/m^2].

    Notes
    -----
    An isotropic antenna has the effective area lambda^2 / (4 pi) ([1]), so

    .. math:: S = P \cdot 4\pi / \lambda^2,\qquad \lambda = c / f .

    With a free-space path loss this gives back EIRP / (4 pi d^2).

    References
    ----------
    .. [1] H. T. Friis, Proc. IRE, 1946.
    """
    p_w = 10.0 ** ((as_float("rx_power_dbm", rx_power_dbm) - 30.0) / 10.0)
    f = as_float("freq_hz", freq_hz, min_value=0.0, strict=True)
    lam = SPEED_OF_LIGHT_M_S / f
    return scalar_or_array(p_w * 4.0 * np.pi / lam**2)  # [1]


def icnirp_reference_level_w_m2(freq_hz, exposure="whole_body"):
    r"""ICNIRP 2020 reference level of incident power density for the general public, 2-300 GHz.

    Parameters
    ----------
    freq_hz : float or array_like
        Frequency [Hz], 2-300 GHz; outside that range a :class:`RadioInputError` is raised.
    exposure : {"whole_body", "local"}
        "whole_body": whole-body average (30 min average); "local": local exposure (6 min average).

    Returns
    -------
    float or ndarray
        Reference level [W/m^2].

    Notes
    -----
    General public ([2]):

    * whole body, 2-300 GHz: 10 W/m^2, averaged over 30 min and the projected whole body (from memory);
    * local, above 2 up to 6 GHz: 40 W/m^2; above 6 up to 300 GHz: 55 / f_GHz^0.177 W/m^2 (about 30.5 W/m^2 at
      28 GHz, 20 W/m^2 at 300 GHz), averaged over 6 min.  These local values were read in a reproduction of
      the guidelines' local-exposure table; the spatial average over 4 cm^2 above 6 GHz is from memory.

    National rules differ; the local regulation decides.

    References
    ----------
    .. [2] ICNIRP, Health Physics 118(5):483-524, 2020, DOI 10.1097/HP.0000000000001210.
    """
    if exposure not in _EXPOSURES:
        raise RadioInputError(f"exposure: expected one of {_EXPOSURES}, got {exposure!r}")
    f = as_float("freq_hz", freq_hz, min_value=0.0, strict=True)
    if np.any((f < _F_MIN_HZ) | (f > _F_MAX_HZ)):
        raise RadioInputError("freq_hz: reference levels are implemented for 2-300 GHz only; check the "
                              "frequency (in Hz) or the regulation that applies")
    if exposure == "whole_body":
        return scalar_or_array(np.full(f.shape, 10.0))                    # [2], whole body, 2-300 GHz
    f_ghz = f / 1e9
    return scalar_or_array(np.where(f_ghz > 6.0, 55.0 * f_ghz**-0.177, 40.0))   # [2], local
