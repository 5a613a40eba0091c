"""Exact element-by-element references for the surface gain: the co-phased sum and the sum with any phase
profile at any frequencies.  The tile sums of :func:`siting.radio.surface_gain` are tested against them.

References
----------
.. [1] W. Tang et al., "Wireless Communications With Reconfigurable Intelligent Surface: Path Loss Modeling
   and Experimental Measurement", IEEE Trans. Wireless Commun., 2021, arXiv:1911.05326.
.. [2] E. Björnson and L. Sanguinetti, "Power Scaling Laws and Near-Field Behaviors of Massive MIMO and
   Intelligent Reflecting Surfaces", IEEE Open J. Commun. Soc., 2020, arXiv:2002.04960.
"""

from __future__ import annotations

import numpy as np

from ._checks import SPEED_OF_LIGHT_M_S, RadioInputError, as_float, scalar_or_array
from .surface_beams import CONTROLS, nearest_beam
from .surface_tiles import _CHUNK_ENTRIES, _at, _prepare, _tile_amplitude_sum

__all__ = ["element_sum_gain", "element_sum_gain_profile"]


def element_sum_gain(tx_xyz, rx_xyz, centre_xyz, normal_az_deg, n_x, n_y, element_width_m,
                     element_height_m, efficiency=1.0, phase_bits=None):
    r"""Exact element-by-element co-phased gain of an n_x x n_y array (the reference for the tile sum).

    Parameters
    ----------
    tx_xyz, rx_xyz, centre_xyz : array_like, shape (..., 3)
        Positions [m] as in :func:`surface_gain`.
    normal_az_deg : float or array_like
        Outward normal, clockwise from north [deg].
    n_x, n_y : int
        Elements along the width and the height.
    element_width_m, element_height_m : float
        Element pitch dx, dy [m].
    efficiency, phase_bits
        As :func:`surface_gain`.

    Returns
    -------
    float or ndarray
        Linear gain (isotropic ends).

    Notes
    -----
    Tang's general model [1] with unit-cell pattern F = cos, aperture element gain G = 4 pi dx dy / lambda^2,
    unit amplitudes and phases that co-phase every element at the receiver:

    .. math:: \beta = \eta L_q \left(\sum_{n} \frac{dx\,dy\sqrt{\cos\theta_{t,n}\cos\theta_{r,n}}}
              {4\pi r_{t,n} r_{r,n}}\right)^2

    (the wavelength cancels).  Same as [2], Eq. (42) with per-element far-field gains.  Vectorised over
    triples and elements (chunked), with no Python loop per triple.

    References
    ----------
    .. [1] W. Tang et al., IEEE Trans. Wireless Commun., 2021, arXiv:1911.05326 (general model).
    .. [2] E. Björnson and L. Sanguinetti, IEEE Open J. Commun. Soc., 2020, arXiv:2002.04960, Eq. (42).
    """
    n_x, n_y = int(n_x), int(n_y)
    if n_x < 1 or n_y < 1:
        raise RadioInputError(f"n_x, n_y: expected at least one element per side, got {n_x} x {n_y}")
    dx = float(element_width_m)
    dy = float(element_height_m)
    shape, loc, w, h, f, scale = _prepare(tx_xyz, rx_xyz, centre_xyz, normal_az_deg, n_x * dx, n_y * dy,
                                          1.0, efficiency, phase_bits)
    front = (loc[2] > 0) & (loc[5] > 0)
    amp = np.zeros(front.shape)
    idx = np.flatnonzero(front)
    if idx.size:
        amp[idx] = _tile_amplitude_sum(tuple(x[idx] for x in loc), _at(w, idx), _at(h, idx), n_x, n_y)
    return scalar_or_array((scale * amp**2).reshape(shape))


def element_sum_gain_profile(tx_xyz, rx_xyz, centre_xyz, normal_az_deg, n_x, n_y, element_width_m,
                             element_height_m, freq_hz, *, control="focus", beam_oversampling=2, steer_uv=None,
                             phase_rad=None, eval_freq_hz=None, element_q=1.0, efficiency=1.0, phase_bits=None):
    r"""Exact element-by-element gain of an n_x x n_y array with a given phase profile, at one or many frequencies.

    Parameters
    ----------
    tx_xyz, rx_xyz, centre_xyz : array_like, shape (..., 3)
        Positions [m] as in :func:`surface_gain`.
    normal_az_deg : float or array_like
        Outward normal, clockwise from north [deg].
    n_x, n_y : int
        Elements along the width and the height.
    element_width_m, element_height_m : float
        Element pitch dx, dy [m].
    freq_hz : float
        Centre frequency f0 [Hz] at which the phases are set.
    control : {"focus", "beams"}, default "focus"
        Phase profile: co-phasing every element at the receiver at f0, or the plane-wave beam of the grid
        point nearest to the receiver (:func:`nearest_beam`), as in :func:`surface_gain`.
    beam_oversampling : float, default 2
        Beam-grid oversampling (``control="beams"``).
    steer_uv : (u_s, v_s) of floats or arrays, optional
        Explicit steering direction cosines for a plane-wave profile (overrides ``control``).
    phase_rad : array_like, shape (n_x, n_y), optional
        Explicit element phases psi_n [rad] (overrides ``control`` and ``steer_uv``); element (i, j) sits at
        ((i + 1/2) dx - w/2, (j + 1/2) dy - h/2) along (wall, up).
    eval_freq_hz : array_like, optional
        Frequencies [Hz] at which the power is evaluated and averaged (default: f0 only).
    element_q : float, default 1
        Unit-cell pattern exponent (cos^q on each hop).
    efficiency, phase_bits
        As :func:`surface_gain` (scalar factors eta and Lq).

    Returns
    -------
    float or ndarray
        Linear gain (isotropic ends), mean over ``eval_freq_hz``.

    Notes
    -----
    Tang's general model [1] with unit-cell pattern F = cos^q and aperture element gain 4 pi dx dy / lambda^2:

    .. math:: \beta(f) = \eta L_q \left|\sum_n \frac{dx\,dy\,(\cos\theta_{t,n}\cos\theta_{r,n})^{q/2}}
              {4\pi r_{t,n} r_{r,n}} e^{-j(2\pi f L_n / c + \psi_n)}\right|^2,\quad L_n = r_{t,n} + r_{r,n}.

    Focus: psi_n = -2 pi f0 L_n / c.  Plane-wave beam: psi_n = k0 [(u_i + u_s) a_n + (v_i + v_s) b_n] with
    (u_i, v_i) the direction cosines of the transmitter seen from the centre.  With focus at f0 only and q = 1
    this equals :func:`element_sum_gain`.  Vectorised over triples (chunked) and elements; a loop over the
    evaluation frequencies only.

    References
    ----------
    .. [1] W. Tang et al., IEEE Trans. Wireless Commun., 2021, arXiv:1911.05326 (general model).
    """
    n_x, n_y = int(n_x), int(n_y)
    if n_x < 1 or n_y < 1:
        raise RadioInputError(f"n_x, n_y: expected at least one element per side, got {n_x} x {n_y}")
    if control not in CONTROLS:
        raise RadioInputError(f"control: expected one of {CONTROLS}, got {control!r}")
    dx, dy = float(element_width_m), float(element_height_m)
    f0 = float(as_float("freq_hz", freq_hz, min_value=0.0, strict=True))
    q = float(as_float("element_q", element_q, min_value=0.0))
    fe = np.atleast_1d(as_float("eval_freq_hz", f0 if eval_freq_hz is None else eval_freq_hz,
                                min_value=0.0, strict=True)).ravel()
    shape, loc, w, h, _, scale = _prepare(tx_xyz, rx_xyz, centre_xyz, normal_az_deg, n_x * dx, n_y * dy,
                                          f0, efficiency, phase_bits)
    lu_i, lv_i, ln_i, lu_o, lv_o, ln_o = loc
    m = lu_i.shape[0]
    d1 = np.sqrt(lu_i**2 + lv_i**2 + ln_i**2)
    d2 = np.sqrt(lu_o**2 + lv_o**2 + ln_o**2)
    front = (ln_i > 0) & (ln_o > 0)
    k0 = 2.0 * np.pi * f0 / SPEED_OF_LIGHT_M_S
    wv, hv = float(w), float(h)
    ga = ((np.arange(n_x) + 0.5) * dx - 0.5 * wv)            # element positions along the wall
    gb = ((np.arange(n_y) + 0.5) * dy - 0.5 * hv)            # and up
    mode = "phase" if phase_rad is not None else ("steer" if steer_uv is not None else control)
    if mode == "phase":
        psi_all = np.broadcast_to(as_float("phase_rad", phase_rad), (n_x, n_y))
    if mode in ("steer", "beams"):
        with np.errstate(divide="ignore", invalid="ignore"):
            ui, vi = lu_i / d1, lv_i / d1
            uo, vo = lu_o / d2, lv_o / d2
        if mode == "steer":
            us, vs = (np.broadcast_to(as_float("steer_uv", x), shape).ravel() for x in steer_uv)
        else:
            us, vs = (np.asarray(x, float) for x in nearest_beam(np.nan_to_num(uo), np.nan_to_num(vo), wv, hv, f0,
                                                                 beam_oversampling))
        pu, pv = np.broadcast_to(ui + us, (m,)), np.broadcast_to(vi + vs, (m,))
    out = np.zeros(m)
    idx = np.flatnonzero(front)
    per = max(1, _CHUNK_ENTRIES // (n_x * n_y))
    for s in range(0, idx.size, per):  # loop over memory chunks, not over triples
        sel = idx[s:s + per]
        eui = (lu_i[sel, None] - ga)[:, :, None]
        evi = (lv_i[sel, None] - gb)[:, None, :]
        euo = (lu_o[sel, None] - ga)[:, :, None]
        evo = (lv_o[sel, None] - gb)[:, None, :]
        r_i = np.sqrt(eui**2 + evi**2 + (ln_i[sel] ** 2)[:, None, None])
        r_o = np.sqrt(euo**2 + evo**2 + (ln_o[sel] ** 2)[:, None, None])
        rr = r_i * r_o
        amp = dx * dy * ((ln_i[sel] * ln_o[sel])[:, None, None] / rr) ** (0.5 * q) / (4.0 * np.pi * rr)
        delta = (r_i + r_o) - (d1[sel] + d2[sel])[:, None, None]   # L_n minus the centre's (drops a constant)
        if mode == "focus":
            psi = -k0 * delta
        elif mode == "phase":
            psi = psi_all[None, :, :]
        else:
            psi = k0 * (pu[sel, None, None] * ga[None, :, None] + pv[sel, None, None] * gb[None, None, :])
        acc = np.zeros(sel.size)
        for fj in fe:  # loop over evaluation frequencies
            ph = 2.0 * np.pi * fj / SPEED_OF_LIGHT_M_S * delta + psi   # [1], general model phase
            re = np.sum(amp * np.cos(ph), axis=(1, 2))
            im = np.sum(amp * np.sin(ph), axis=(1, 2))
            acc += re * re + im * im
        out[sel] = acc / fe.size
    return scalar_or_array((scale * out).reshape(shape))
