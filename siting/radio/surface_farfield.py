"""Closed forms of a reflecting surface in the far field: phase quantisation efficiency, the far-field gain with
the angles at the panel centre, and the Fraunhofer distance that bounds its use.

Conventions as in :mod:`siting.radio.surface` (element gain by aperture, isotropic ends, cos^q unit cells).

References
----------
.. [1] W. Tang et al., "Wireless Communications With Reconfigurable Intelligent Surface: Path Loss Modeling
   and Experimental Measurement", IEEE Trans. Wireless Commun., 2021, arXiv:1911.05326.
.. [2] E. Björnson and L. Sanguinetti, "Power Scaling Laws and Near-Field Behaviors of Massive MIMO and
   Intelligent Reflecting Surfaces", IEEE Open J. Commun. Soc., 2020, arXiv:2002.04960.
.. [3] Q. Wu and R. Zhang, "Beamforming Optimization for Wireless Network Aided by Intelligent Reflecting
   Surface with Discrete Phase Shifts", IEEE Trans. Commun., 2020, arXiv:1906.03165.
"""

from __future__ import annotations

import numpy as np

from ._checks import SPEED_OF_LIGHT_M_S, RadioInputError, as_float, scalar_or_array

__all__ = ["far_field_gain", "fraunhofer_distance_m", "quantisation_efficiency"]


def quantisation_efficiency(phase_bits):
    r"""Power efficiency of b-bit phase shifters relative to continuous phases.

    Parameters
    ----------
    phase_bits : int, None or array_like of int
        Phase-shifter resolution [bits]; 0 or None means continuous phases.

    Returns
    -------
    float or ndarray
        Linear factor Lq in (0, 1].

    Notes
    -----
    .. math:: L_q(b) = \left(\frac{\sin(\pi / 2^b)}{\pi / 2^b}\right)^2

    the large-N ratio of received power with b-bit phases to continuous phases ([3]).  1 bit: -3.92 dB,
    2 bits: -0.91 dB, 3 bits: -0.22 dB.

    References
    ----------
    .. [3] Q. Wu and R. Zhang, "Beamforming Optimization for Wireless Network Aided by Intelligent
       Reflecting Surface with Discrete Phase Shifts", IEEE Trans. Commun., 2020, arXiv:1906.03165.
    """
    if phase_bits is None:
        return 1.0
    b = as_float("phase_bits", phase_bits, min_value=0.0)
    if np.any(b != np.round(b)):
        raise RadioInputError(f"phase_bits: expected whole numbers of bits, got {phase_bits!r}")
    x = np.pi / 2.0 ** np.maximum(b, 1.0)
    lq = (np.sin(x) / x) ** 2  # [3]
    return scalar_or_array(np.where(b == 0, 1.0, lq))


def far_field_gain(d_in_m, d_out_m, cos_in, cos_out, area_m2, efficiency=1.0, quant_eff=1.0):
    r"""Far-field cascaded power gain of a co-phased surface between isotropic antennas.

    Parameters
    ----------
    d_in_m : float or array_like
        Distance from the transmitter to the panel centre [m], > 0.
    d_out_m : float or array_like
        Distance from the panel centre to the receiver [m], > 0.
    cos_in, cos_out : float or array_like
        Cosines of the angles between the panel normal and the directions to the transmitter and to the
        receiver.  Values <= 0 (behind the panel) give gain 0.
    area_m2 : float or array_like
        Panel area S = N dx dy [m^2].
    efficiency : float or array_like, default 1
        Element reflection power efficiency eta (|Gamma|^2).
    quant_eff : float or array_like, default 1
        Phase quantisation factor Lq (:func:`quantisation_efficiency`).

    Returns
    -------
    float or ndarray
        Linear power gain beta (received over transmitted power, Tx/Rx antenna gains excluded).

    Notes
    -----
    .. math:: \beta = \frac{S^2 \cos\theta_{in}\cos\theta_{out}\,\eta\,L_q}{(4\pi d_1 d_2)^2}

    This is [2], Eq. (48) (N^2 A^2 cos eta cos omega / ((4 pi)^2 d^2 delta^2)) and Tang's far-field
    beamforming formula [1] with F = cos and the aperture element gain 4 pi dx dy / lambda^2.

    References
    ----------
    .. [1] W. Tang et al., IEEE Trans. Wireless Commun., 2021, arXiv:1911.05326.
    .. [2] E. Björnson and L. Sanguinetti, IEEE Open J. Commun. Soc., 2020, arXiv:2002.04960, Eq. (48).
    """
    d1 = as_float("d_in_m", d_in_m, min_value=0.0, strict=True)
    d2 = as_float("d_out_m", d_out_m, min_value=0.0, strict=True)
    ci = np.clip(as_float("cos_in", cos_in), 0.0, 1.0)
    co = np.clip(as_float("cos_out", cos_out), 0.0, 1.0)
    s = as_float("area_m2", area_m2, min_value=0.0)
    eta = as_float("efficiency", efficiency, min_value=0.0)
    lq = as_float("quant_eff", quant_eff, min_value=0.0)
    return scalar_or_array(s * s * ci * co * eta * lq / (4.0 * np.pi * d1 * d2) ** 2)  # [2], Eq. 48


def fraunhofer_distance_m(width_m, height_m, freq_hz):
    r"""Fraunhofer (far-field) distance of a rectangular panel, 2 D^2 / lambda with D the diagonal.

    Parameters
    ----------
    width_m, height_m : float or array_like
        Panel size [m].
    freq_hz : float or array_like
        Carrier frequency [Hz].

    Returns
    -------
    float or ndarray
        Distance [m].

    Notes
    -----
    .. math:: d_F = 2 D^2 / \lambda, \quad D = \sqrt{w^2 + h^2}

    D is the largest aperture dimension, as in E. Björnson, Ö. T. Demir and L. Sanguinetti, "A Primer on
    Near-Field Beamforming for Arrays and Reconfigurable Intelligent Surfaces", Asilomar 2021,
    arXiv:2110.06661.  0.5 m square at 28 GHz: 93.4 m.
    """
    w = as_float("width_m", width_m, min_value=0.0)
    h = as_float("height_m", height_m, min_value=0.0)
    f = as_float("freq_hz", freq_hz, min_value=0.0, strict=True)
    return scalar_or_array(2.0 * (w * w + h * h) * f / SPEED_OF_LIGHT_M_S)

