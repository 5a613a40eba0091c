"""Cascaded gain of a passive reflecting surface: ideal focusing or a finite beam set, narrowband or band-averaged.

Conventions:

* Element gain by aperture, G = 4 pi dx dy / lambda^2, so the far-field gain depends on the panel area
  S = N dx dy only, not on the element pitch.
* Angle factor (cos(theta_in) cos(theta_out))^q: unit-cell power pattern cos^q on both hops ([1] with F = cos^q),
  normalised to the aperture gain at broadside; q = 1 (default) is the projected aperture ([2], Eq. 48).
* Isotropic ends: the returned linear gain excludes the transmit and receive antenna gains.
* Fraunhofer distance 2 D^2 / lambda with D the panel diagonal.  When both hops are at least that long the
  far-field formula with the angles at the panel centre is used; otherwise the panel is split into tiles
  that are each in their own far field for that triple and the tile amplitudes are summed.
* Panel control (:func:`surface_gain`, ``control``): ``"focus"`` co-phases every element at the served point
  (the upper bound); ``"beams"`` drives the panel with a fixed grid of far-field (plane-wave) beams
  (:func:`nearest_beam`) and evaluates the chosen beam's phase profile at the true geometry, as complex tile
  amplitudes with each tile's phase error and in-tile sinc factors.
* Beam squint (``bandwidth_hz``): phases are set at the centre frequency; the power is averaged over the
  channel.
* Exact references: :func:`element_sum_gain` (co-phased) and :func:`element_sum_gain_profile` (any phase
  profile, any frequencies, cos^q cells) sum element by element.

Geometry: the panel is vertical, its outward normal horizontal at ``normal_az_deg`` (clockwise from north),
width along the wall (horizontal, axis u), height vertical (axis v), centred at ``centre_xyz``.  Positions are
(x east, y north, z up) in metres.

The formulas live in modules by concern, all re-exported here: :mod:`siting.radio.surface_farfield` (closed
forms), :mod:`siting.radio.surface_tiles` (panel frame, tile grid, co-phased tile sum),
:mod:`siting.radio.surface_beams` (beam grid, band average, complex tile sum) and
:mod:`siting.radio.surface_reference` (exact element sums).

References
----------
.. [1] W. Tang et al., "Wireless Communications With Reconfigurable Intelligent Surface: Path Loss Modeling
   and Experimental Measurement", IEEE Trans. Wireless Commun., 2021, arXiv:1911.05326.
.. [2] E. Björnson and L. Sanguinetti, "Power Scaling Laws and Near-Field Behaviors of Massive MIMO and
   Intelligent Reflecting Surfaces", IEEE Open J. Commun. Soc., 2020, arXiv:2002.04960.
.. [3] Q. Wu and R. Zhang, "Beamforming Optimization for Wireless Network Aided by Intelligent Reflecting
   Surface with Discrete Phase Shifts", IEEE Trans. Commun., 2020, arXiv:1906.03165.
.. [4] R. J. Mailloux, "Phased Array Antenna Handbook", 3rd ed., Artech House, 2017 (uniform-aperture array
   factor; beam squint of phase-shifter steering) -- from memory.
.. [5] W. Tang et al., "Path Loss Modeling and Measurements for Reconfigurable Intelligent Surfaces in the
   Millimeter-Wave Frequency Band", IEEE Trans. Commun., 2022, doi:10.1109/TCOMM.2022.3193400,
   arXiv:2101.08607.
"""

from __future__ import annotations

import numpy as np

from ._checks import SPEED_OF_LIGHT_M_S, RadioInputError, as_float, scalar_or_array
from .surface_beams import CONTROLS as _CONTROLS
from .surface_beams import _general_gain, nearest_beam
from .surface_farfield import far_field_gain, fraunhofer_distance_m, quantisation_efficiency
from .surface_reference import element_sum_gain, element_sum_gain_profile
from .surface_tiles import _at, _grouped_tile_sum, _min_distance_either_end, _prepare, tile_counts

__all__ = [
    "quantisation_efficiency",
    "far_field_gain",
    "fraunhofer_distance_m",
    "surface_gain",
    "element_sum_gain",
    "element_sum_gain_profile",
    "nearest_beam",
    "tile_counts",
    "DEFAULT_ELEMENT_Q",
]

#: Recommended exponent q of the unit-cell power pattern cos^q(theta) (``element_q`` of :func:`surface_gain`).
#: q = 1, the projected aperture.  Source: Tang et al. [5] (IEEE Trans. Commun. 2022, arXiv:2101.08607) measured
#: two fabricated mmWave surfaces and report (abstract, verified) that a unit cell's reflecting capability is
#: proportional to its physical aperture and an angle-dependent factor, the form used here with q = 1; the
#: exponent they fit to the measured cells is from memory, not verified in their text.  Tang et al. [1]
#: (arXiv:1911.05326) simulate cells with cos^3 (G = 8); that value is not a measurement (from memory and
#: third-party implementations of their model) and can be set with ``element_q=3``.
DEFAULT_ELEMENT_Q = 1.0



def surface_gain(tx_xyz, rx_xyz, centre_xyz, normal_az_deg, width_m, height_m, freq_hz, efficiency=1.0,
                 phase_bits=None, *, control="focus", beam_oversampling=2, bandwidth_hz=0.0, element_q=1.0,
                 efficiency_curve=None):
    r"""Linear power gain of the path transmitter -> surface -> receiver, near or far field.

    Parameters
    ----------
    tx_xyz, rx_xyz : array_like, shape (..., 3)
        Transmitter and receiver positions (x east, y north, z up) [m].
    centre_xyz : array_like, shape (..., 3)
        Panel centre [m].
    normal_az_deg : float or array_like
        Outward panel normal, clockwise from north [deg]; the normal is horizontal, the panel vertical.
    width_m, height_m : float or array_like
        Panel width along the wall and height [m].
    freq_hz : float or array_like
        Carrier (centre) frequency f0 [Hz]; the element phases are set at f0.
    efficiency : float or array_like, default 1
        Element reflection power efficiency eta (ignored when ``efficiency_curve`` is given).
    phase_bits : int, None or array_like, default None
        Phase resolution; None or 0 for continuous phases (:func:`quantisation_efficiency`).
    control : {"focus", "beams"}, default "focus"
        ``"focus"``: ideal per-user focusing, every element co-phased at the receiver (the upper bound).
        ``"beams"``: the panel is driven by a fixed set of far-field beams (:func:`nearest_beam`); the link is
        served by the beam whose steering direction is nearest to the receiver's direction cosines, and that
        beam's plane-wave phase profile is evaluated at the true (near-field) geometry.
    beam_oversampling : float, default 2
        Beam-grid oversampling o > 0: grid spacing lambda / (o w) in u and lambda / (o h) in v (o = 1: DFT grid).
    bandwidth_hz : float or array_like, default 0
        Channel bandwidth B [Hz]; > 0 returns the power gain averaged over [f0 - B/2, f0 + B/2] with phase-only
        elements set at f0 (beam squint).  Must be < 2 f0.
    element_q : float, default 1
        Exponent q >= 0 of the unit-cell power pattern cos^q(theta), applied on both hops and normalised so that
        broadside keeps the aperture gain 4 pi dx dy / lambda^2; q = 1 is the projected-aperture factor.
        :data:`DEFAULT_ELEMENT_Q` is the value recommended from measurements.
    efficiency_curve : None or (angles_deg, efficiencies), default None
        Reflection power efficiency against the incidence angle at the panel centre [deg from the normal],
        interpolated linearly (numpy.interp, clamped at the ends); replaces ``efficiency``.

    Returns
    -------
    float or ndarray
        Gain beta (linear, isotropic ends) of the broadcast shape of the inputs (positions without their last
        axis).  0 where the transmitter or the receiver is behind or in the plane of the panel.

    Notes
    -----
    Focus, far field (both d1, d2 >= 2 D^2 / lambda): :func:`far_field_gain` with the angles at the centre,

    .. math:: \beta = \frac{S^2 (\cos\theta_{in}\cos\theta_{out})^q\,\eta L_q}{(4\pi d_1 d_2)^2}.

    Focus, near field: the panel is cut into nx x ny tiles (:func:`tile_counts`, from the shortest distance
    between the panel and either end) and

    .. math:: \beta = \eta L_q \left(\sum_t \frac{S_t (\cos\theta_{in,t}\cos\theta_{out,t})^{q/2}}
              {4\pi d_{1,t} d_{2,t}}\right)^2,

    the co-phased amplitude sum of [2], Eq. (42) with far-field tiles ([2], Eq. 48 per tile; [1], general
    model with F = cos^q and aperture element gain).

    Beams and squint.  With a phase profile psi(a, b) on the panel (a along the wall, b up) the general
    model [1] sums the elements with phases k L(a, b) + psi(a, b), L = r_in + r_out.  A beam steering the
    wave arriving from direction cosines (u_i, v_i) (seen from the centre) into (u_s, v_s) has the linear
    profile psi = k0 [(u_i + u_s) a + (v_i + v_s) b].  At frequency f = f0 + df, with kappa = 2 pi df / c and
    Delta = L - (d1 + d2), each tile t contributes

    .. math:: A_t\,e^{-j e_t}\,\mathrm{sinc}(g_{u,t} \Delta a / 2)\,\mathrm{sinc}(g_{v,t} \Delta b / 2),\quad
              e_t = k_0(\Delta_t + p_u a_t + p_v b_t) + \kappa\Delta_t,\quad
              g_{u,t} = k_0 (p_u - U_t) - \kappa U_t

    (p_u = u_i + u_s, U_t = u_{in,t} + u_{out,t} the sum of the direction cosines from the tile centre; same
    in v; focus: e_t = kappa Delta_t, g = -kappa U_t); A_t is the tile amplitude above and sinc(x) = sin x / x
    the continuous-aperture sum of the in-tile linear phase slope.  The in-tile quadratic phase is at most
    k D_t^2 / (8 r) <= pi / 8 per hop at a tile corner (D_t^2 <= lambda r / 2); beams use tiles of half that
    side (a quarter of the phase error), since a beam's phase does not follow the geometry.  Against the
    exact element sum with the same beam profile (219 random geometries at 28 GHz, 0.5-1 m panels, users
    2-20 m, lambda/2 cells) the tile sum is within 0.011 dB where the beam is less than 10 dB below
    focusing, 0.023 dB to 20 dB below and 0.02 dB deeper (tests/test_radio_beams.py); focusing has no
    in-tile phase error at f0.  In the far field the tiles reduce to the separable array factor

    .. math:: \beta = \beta_{focus}\,\mathrm{sinc}^2\!\left(\tfrac{w}{2}(k_0(u_s - u_o) - \kappa(u_i+u_o))\right)
              \mathrm{sinc}^2\!\left(\tfrac{h}{2}(k_0(v_s - v_o) - \kappa(v_i+v_o))\right),

    which at df = 0 is largest for the grid point nearest to the receiver's (u_o, v_o) per axis (|x| <=
    pi / (2 o) lies in the main lobe), hence the beam choice.  In the near field the same nearest beam is used:
    an exhaustive search over the 5 x 5 neighbouring beams (exact element sums) finds nothing better by more
    than 0.1 dB where the beam is within 3 dB of focusing; deeper in the near field the defocused pattern
    ripples and a neighbour can be several dB better (up to about 7 dB measured), so the model is conservative
    there.

    The power is averaged over the band [f0 - B/2, f0 + B/2] by Gauss-Legendre quadrature in frequency with
    a node count from omega = pi B tau (tau: delay spread of L over the aperture): far field 1 node when
    omega < 0.3, else ceil(omega / 2) + 1, with tau = (|u_i + u_o| w + |v_i + v_o| h) / c; near field 1 node
    when omega < 0.2, else ceil(omega / 2) + 1 (rounded up to a short ladder), with tau bounded by the linear
    spread plus the curvature term (w^2 + h^2) / 4 (1 / r_in,min + 1 / r_out,min).  Against a dense average
    this stays within 0.06 dB (3000 random triples, 0.2-1 m panels, 3.5 and 28 GHz, 50 MHz-1 GHz).  Triples
    whose in-tile sinc arguments move by at most 0.1 rad across the band keep the sinc factors at f0.  Squint
    never raises a focused link's gain; a beam's band average can exceed its centre-frequency value (part of
    the band squints toward a user between grid beams).  The near-field complex tile sum (beams, or any
    band) runs in one compiled call over all near-field triples (:mod:`siting.radio._surface_kernel`, double
    precision, equal to the numpy tile sum to rounding; tested).
    ``control="focus"`` with ``bandwidth_hz=0`` is exactly the co-phased model above (bit for bit as before
    these options existed).

    References
    ----------
    .. [1] W. Tang et al., IEEE Trans. Wireless Commun., 2021, arXiv:1911.05326.
    .. [2] E. Björnson and L. Sanguinetti, IEEE Open J. Commun. Soc., 2020, arXiv:2002.04960.
    .. [4] R. J. Mailloux, "Phased Array Antenna Handbook", 3rd ed., Artech House, 2017 (array factor of a
       uniformly excited linear aperture, beam squint of phase-shifter steering; from memory).
    """
    if control not in _CONTROLS:
        raise RadioInputError(f"control: expected one of {_CONTROLS}, got {control!r}")
    os_ = float(as_float("beam_oversampling", beam_oversampling, min_value=0.0, strict=True))
    q = float(as_float("element_q", element_q, min_value=0.0))
    bw = as_float("bandwidth_hz", bandwidth_hz, min_value=0.0)
    shape, loc, w, h, f, scale = _prepare(tx_xyz, rx_xyz, centre_xyz, normal_az_deg, width_m, height_m,
                                          freq_hz, efficiency, phase_bits)
    lu_i, lv_i, ln_i, lu_o, lv_o, ln_o = loc
    if bw.ndim:
        bw = np.broadcast_to(bw, shape).ravel()
    if np.any(bw >= 2.0 * f):
        raise RadioInputError("bandwidth_hz: expected a bandwidth below twice the centre frequency")
    d1 = np.sqrt(lu_i**2 + lv_i**2 + ln_i**2)
    d2 = np.sqrt(lu_o**2 + lv_o**2 + ln_o**2)
    if efficiency_curve is not None:
        scale = _curve_scale(efficiency_curve, ln_i, d1, phase_bits, shape)

    if control == "focus" and not np.any(bw > 0):
        beta = _focus_gain(loc, d1, d2, w, h, f, q)
    else:
        beta = _general_gain(loc, d1, d2, w, h, f, q, bw, control == "beams", os_)
    if scale.ndim or float(scale) != 1.0:
        beta *= scale
    return scalar_or_array(beta.reshape(shape))


def _curve_scale(efficiency_curve, ln_i, d1, phase_bits, shape):
    """eta(theta_in) Lq per triple from an (angles_deg, efficiencies) curve."""
    try:
        ang, eff = efficiency_curve
    except (TypeError, ValueError) as exc:
        raise RadioInputError("efficiency_curve: expected a pair (angles_deg, efficiencies)") from exc
    ang = np.atleast_1d(as_float("efficiency_curve angles_deg", ang))
    eff = np.atleast_1d(as_float("efficiency_curve efficiencies", eff, min_value=0.0))
    if ang.ndim != 1 or ang.shape != eff.shape or ang.size < 1 or np.any(np.diff(ang) <= 0):
        raise RadioInputError("efficiency_curve: expected two 1-D arrays of equal length, angles increasing")
    with np.errstate(divide="ignore", invalid="ignore"):
        theta_deg = np.degrees(np.arccos(np.clip(np.where(d1 > 0, ln_i / d1, 1.0), -1.0, 1.0)))
    lq = np.asarray(quantisation_efficiency(phase_bits), float)
    return np.interp(theta_deg, ang, eff) * np.broadcast_to(lq, shape).ravel()


def _focus_gain(loc, d1, d2, w, h, f, q=1.0):
    """Co-phased gain at the centre frequency (far-field closed form or co-phased tile sum), scale excluded."""
    ln_i, ln_o = loc[2], loc[5]
    front = (ln_i > 0) & (ln_o > 0)
    lam = SPEED_OF_LIGHT_M_S / f
    d_f = 2.0 * (w * w + h * h) / lam
    far = front & (d1 >= d_f) & (d2 >= d_f)

    s = w * h
    p = d1 * d2
    # [2], Eq. 48 with cos = ln / d: S^2 ln_i ln_o / (d1 d2)^3 / (4 pi)^2, computed for all, kept where far
    with np.errstate(divide="ignore", invalid="ignore"):  # d = 0 only where `far` is False
        if q == 1.0:
            beta = (s * s / (4.0 * np.pi) ** 2) * (ln_i * ln_o) / (p * p * p)
        else:  # [1] with F = cos^q: S^2 (cos_in cos_out)^q / (4 pi d1 d2)^2
            beta = (s * s / (4.0 * np.pi) ** 2) * (ln_i * ln_o / p) ** q / (p * p)
    beta = np.where(far, beta, 0.0)

    near = np.flatnonzero(front & ~far)
    if near.size:
        loc_n = tuple(x[near] for x in loc)
        w_n, h_n, lam_n = _at(w, near), _at(h, near), _at(lam, near)
        r_min = _min_distance_either_end(loc_n, w_n, h_n)
        nx, ny = tile_counts(w_n, h_n, lam_n, r_min)
        beta[near] = _grouped_tile_sum(loc_n, w_n, h_n, nx, ny, q) ** 2  # [2], Eq. 42
    return beta

