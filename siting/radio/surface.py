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

_CONTROLS = ("focus", "beams")
# Band averaging (beam squint), near field: Gauss-Legendre in frequency, one node when omega = pi B tau is below
# _SQUINT_OMEGA_MIN [rad], else ceil(a omega) + b nodes (calibrated against a dense average).
_SQUINT_OMEGA_MIN = 0.2
_SQUINT_NODES_PER_RAD = 0.5
_SQUINT_NODES_EXTRA = 1
_SINC_EPS = 1e-9
# Band averaging keeps the in-tile sinc factors at the band centre when their argument moves by less than this
# across the band [rad] (power change below 0.4 % near the main lobe).
_SINC_SQUINT_MAX = 0.1
# Far field: Gauss-Legendre in frequency, one node below this omega = pi B tau [rad], else ceil(omega / 2) + 1
# (within 0.03 dB of a dense average up to omega = 10, checked numerically).
_FAR_OMEGA_MIN = 0.3
_TWO_PI = 2.0 * np.pi
_TINY32 = np.float32(1e-18)
# Beams: tile side divided by this factor relative to tile_counts (in-tile quadratic phase error / factor^2).
_BEAM_TILE_REFINE = 1.0
_NODE_LADDER = np.array([1, 2, 3, 4, 5, 6, 8, 10, 12, 16, 20, 24, 32, 40, 48, 64, 80, 96, 128], dtype=np.int64)
# Work arrays of the tile sum are chunked to about this many (triple, tile) entries.
_CHUNK_ENTRIES = 1 << 21
# The complex (beam / squint) tile kernel keeps some 20 work arrays: chunks this small stay in cache.
_TILE_CHUNK_ENTRIES = 1 << 13
# Tile counts per side are rounded up to this ladder so that few groups form.
_LADDER = np.unique(np.concatenate([np.arange(1, 17), np.round(16 * 1.25 ** np.arange(1, 40))])).astype(np.int64)


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


# -------------------------------------------------------------------------------------------- geometry

def _frame(normal_az_deg):
    """Unit normal n and along-wall unit u (horizontal, n rotated 90 deg clockwise seen from above)."""
    a = np.radians(normal_az_deg)
    sa, ca = np.sin(a), np.cos(a)
    return sa, ca  # n = (sa, ca, 0); u = (ca, -sa, 0); v = (0, 0, 1)


def _local(p, c, sa, ca):
    """Offsets of points p from the centre c in the panel frame: (along u, along v (up), along n)."""
    dx = p[..., 0] - c[..., 0]
    dy = p[..., 1] - c[..., 1]
    dz = p[..., 2] - c[..., 2]
    return dx * ca - dy * sa, dz, dx * sa + dy * ca


def _positions(name, xyz):
    arr = as_float(name, xyz)
    if arr.ndim == 0 or arr.shape[-1] != 3:
        raise RadioInputError(f"{name}: expected positions of shape (..., 3) [x east, y north, z up in m], "
                              f"got shape {arr.shape}")
    return arr


def _min_distance_to_panel(lu, lv, ln, w, h):
    """Exact shortest distance from a point (panel frame) to the w x h rectangle."""
    eu = np.maximum(np.abs(lu) - 0.5 * w, 0.0)
    ev = np.maximum(np.abs(lv) - 0.5 * h, 0.0)
    return np.sqrt(eu * eu + ev * ev + ln * ln)


def tile_counts(width_m, height_m, wavelength_m, r_min_m, max_per_side=None):
    """Tiles per side (nx along the width, ny along the height) so that each tile is in its own far field.

    Parameters
    ----------
    width_m, height_m : array_like
        Panel size [m].
    wavelength_m : array_like
        Wavelength [m].
    r_min_m : array_like
        Shortest distance from the panel to either end of the link [m].
    max_per_side : array_like, optional
        Upper bound per side (e.g. the element count); default: the number of lambda/2 elements.

    Returns
    -------
    (nx, ny) : int ndarrays
        Tile counts, rounded up to a fixed ladder (1..16, then steps of 25 %) so triples group well.

    Notes
    -----
    A tile of diagonal D_t is in its own far field at distance r when 2 D_t^2 / lambda <= r, so
    D_t <= sqrt(lambda r / 2).  Tiles are made square-ish with side D_t / sqrt(2).
    """
    w, h, lam, r = np.broadcast_arrays(*(np.asarray(a, float) for a in (width_m, height_m, wavelength_m, r_min_m)))
    side = np.sqrt(0.5 * lam * np.maximum(r, 1e-9)) / np.sqrt(2.0)
    nx = np.ceil(w / side)
    ny = np.ceil(h / side)
    if max_per_side is None:
        cap_x = np.maximum(np.ceil(w / (0.5 * lam)), 1.0)
        cap_y = np.maximum(np.ceil(h / (0.5 * lam)), 1.0)
    else:
        cap_x = cap_y = np.asarray(max_per_side, float)
    nx = np.clip(nx, 1.0, cap_x)
    ny = np.clip(ny, 1.0, cap_y)
    top = len(_LADDER) - 1
    ix = np.searchsorted(_LADDER, nx)
    iy = np.searchsorted(_LADDER, ny)
    nx = np.where(ix <= top, _LADDER[np.minimum(ix, top)], nx)
    ny = np.where(iy <= top, _LADDER[np.minimum(iy, top)], ny)
    # the ladder may step above the cap; the cap (element count) wins
    nx = np.minimum(nx, np.maximum(cap_x, 1.0)).astype(np.int64)
    ny = np.minimum(ny, np.maximum(cap_y, 1.0)).astype(np.int64)
    return nx, ny


def _tile_amplitude_sum(lu_i, lv_i, ln_i, lu_o, lv_o, ln_o, w, h, nx, ny, q=1.0):
    r"""Sum over an nx x ny tile grid of S_t (cos_in_t cos_out_t)^(q/2) / (4 pi r_in_t r_out_t).

    All point arguments are 1-D arrays of m triples (panel-frame offsets); nx, ny are ints.  Distances are
    expanded without forming 3-D tile positions: for a tile centre at (a, b) in the panel plane,
    r^2 = (lu - a)^2 + (lv - b)^2 + ln^2 and cos = ln / r (the tiles share the panel normal).  q = 1 is the
    projected-aperture factor sqrt(cos_in cos_out).
    """
    m = lu_i.shape[0]
    out = np.empty(m)
    per = max(1, _CHUNK_ENTRIES // (nx * ny))
    ga = (np.arange(nx) + 0.5) / nx - 0.5  # tile centres as fractions of the width
    gb = (np.arange(ny) + 0.5) / ny - 0.5
    for s in range(0, m, per):  # loop over memory chunks, not over triples
        sl = slice(s, min(s + per, m))
        a = w[sl, None] * ga[None, :]            # (k, nx)
        b = h[sl, None] * gb[None, :]            # (k, ny)
        qi = (lu_i[sl, None] - a)[:, :, None] ** 2 + (lv_i[sl, None] - b)[:, None, :] ** 2 + (ln_i[sl] ** 2)[:, None, None]
        qo = (lu_o[sl, None] - a)[:, :, None] ** 2 + (lv_o[sl, None] - b)[:, None, :] ** 2 + (ln_o[sl] ** 2)[:, None, None]
        s_t = w[sl] * h[sl] / (nx * ny)
        if q == 1.0:
            # S_t sqrt(ln_i/r_i * ln_o/r_o) / (4 pi r_i r_o) = S_t sqrt(ln_i ln_o) / (4 pi (r_i r_o)^1.5)
            # -> [1], general model / [2], Eq. 42 with far-field tiles ([2], Eq. 48 per tile)
            acc = np.sum((qi * qo) ** -0.75, axis=(1, 2))
            out[sl] = s_t * np.sqrt(ln_i[sl] * ln_o[sl]) * acc / (4.0 * np.pi)
        else:  # [1], general model with F = cos^q: S_t (ln_i ln_o)^(q/2) / (4 pi (r_i r_o)^(1 + q/2))
            acc = np.sum((qi * qo) ** (-0.5 - 0.25 * q), axis=(1, 2))
            out[sl] = s_t * (ln_i[sl] * ln_o[sl]) ** (0.5 * q) * acc / (4.0 * np.pi)
    return out


def _prepare(tx_xyz, rx_xyz, centre_xyz, normal_az_deg, width_m, height_m, freq_hz, efficiency, phase_bits):
    tx = _positions("tx_xyz", tx_xyz)
    rx = _positions("rx_xyz", rx_xyz)
    c = _positions("centre_xyz", centre_xyz)
    az = as_float("normal_az_deg", normal_az_deg)
    w = as_float("width_m", width_m, min_value=0.0)
    h = as_float("height_m", height_m, min_value=0.0)
    f = as_float("freq_hz", freq_hz, min_value=0.0, strict=True)
    eta = as_float("efficiency", efficiency, min_value=0.0)
    lq = np.asarray(quantisation_efficiency(phase_bits), float)
    shape = np.broadcast_shapes(tx.shape[:-1], rx.shape[:-1], c.shape[:-1], az.shape, w.shape, h.shape,
                                f.shape, eta.shape, lq.shape)
    sa, ca = _frame(az)
    lu_i, lv_i, ln_i = (np.broadcast_to(x, shape).ravel() for x in _local(tx, c, sa, ca))
    lu_o, lv_o, ln_o = (np.broadcast_to(x, shape).ravel() for x in _local(rx, c, sa, ca))
    # per-triple parameters stay 0-d when they are scalars (cheaper element-wise work); see _at
    w, h, f, scale = (x.reshape(()) if x.size == 1 else np.broadcast_to(x, shape).ravel()
                      for x in (w, h, f, eta * lq))
    return shape, (lu_i, lv_i, ln_i, lu_o, lv_o, ln_o), w, h, f, scale


def _at(x, idx):
    """x[idx] for a flat per-triple array or a 0-d parameter shared by all triples."""
    return x[idx] if x.ndim else np.full(idx.shape, float(x))


def _grouped_tile_sum(loc, w, h, nx, ny, q=1.0):
    """Tile amplitude sums for 1-D arrays of triples, one vectorised call per distinct (nx, ny) group."""
    amp = np.zeros(w.shape)
    for sel in _groups(nx * (1 << 32) + ny):  # one iteration per tile-count group, not per triple
        amp[sel] = _tile_amplitude_sum(*(x[sel] for x in loc), w[sel], h[sel], int(nx[sel[0]]), int(ny[sel[0]]), q)
    return amp


def _groups(key):
    """Index arrays of the triples sharing each distinct value of an integer key (stable order)."""
    order = np.argsort(key, kind="stable")
    keys_sorted = key[order]
    starts = np.flatnonzero(np.r_[True, keys_sorted[1:] != keys_sorted[:-1]])
    ends = np.r_[starts[1:], keys_sorted.size]
    return [order[s:e] for s, e in zip(starts, ends)]


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
    k D_t^2 / (8 r) <= pi / 8 per hop at a tile corner (D_t^2 <= lambda r / 2).  Against the exact element
    sum with the same beam profile (28 GHz, 0.5-1 m panels, users 2-20 m, lambda/2 cells) the tile sum is
    within 0.07 dB where the beam is less than 10 dB below focusing, 0.2 dB to 20 dB below, and up to about
    0.9 dB in deeper defocus (where the quadratic term no longer averages out); focusing has no in-tile
    phase error at f0.  In the far field the tiles reduce to the separable array factor

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
        r_min = np.minimum(_min_distance_to_panel(*loc_n[:3], w_n, h_n),
                           _min_distance_to_panel(*loc_n[3:], w_n, h_n))
        nx, ny = tile_counts(w_n, h_n, lam_n, r_min)
        beta[near] = _grouped_tile_sum(loc_n, w_n, h_n, nx, ny, q) ** 2  # [2], Eq. 42
    return beta


# ------------------------------------------------------------------------------------ beams and squint

def nearest_beam(u, v, width_m, height_m, freq_hz, beam_oversampling=2):
    r"""Steering direction of the beam-grid point nearest to (u, v), per axis.

    Parameters
    ----------
    u, v : float or array_like
        Direction cosines of the wanted direction along the wall (u) and up (v).
    width_m, height_m : float or array_like
        Panel size [m].
    freq_hz : float or array_like
        Centre frequency [Hz].
    beam_oversampling : float, default 2
        Oversampling o of the grid (o = 1: DFT grid).

    Returns
    -------
    (u_s, v_s) : floats or ndarrays
        Steering direction cosines of the chosen beam.

    Notes
    -----
    The grid is anchored at broadside, u_s = m lambda / (o w), v_s = n lambda / (o h) for integers m, n, so it
    is the same for every link of a panel.  The far-field array factor of a uniform aperture steered to u_s
    and seen at u is sinc((k w / 2)(u - u_s)) (separable in u and v; Mailloux [4], from memory), which is
    decreasing in |u - u_s| over the main lobe: the nearest grid point per axis is the best beam in the far
    field, with a worst-case loss of sinc^2(pi / (2 o)) per axis (0.91 dB for o = 2).
    """
    uu = as_float("u", u)
    vv = as_float("v", v)
    w = as_float("width_m", width_m, min_value=0.0, strict=True)
    h = as_float("height_m", height_m, min_value=0.0, strict=True)
    f = as_float("freq_hz", freq_hz, min_value=0.0, strict=True)
    o = as_float("beam_oversampling", beam_oversampling, min_value=0.0, strict=True)
    lam = SPEED_OF_LIGHT_M_S / f
    su, sv = lam / (o * w), lam / (o * h)
    return scalar_or_array(su * np.rint(uu / su)), scalar_or_array(sv * np.rint(vv / sv))


def _node_counts(loc, w, h, bw):
    """Frequency nodes per triple from the band-edge phase spread omega = pi B tau.

    tau = spread / c bounds the spread (max - min) of the path length L = r_in + r_out over the aperture:
    the linear part from the centre, |u_i + u_o| w + |v_i + v_o| h, plus twice the largest second-order
    remainder, (w^2 + h^2) / 4 (1 / r_in,min + 1 / r_out,min) (the Hessian of a distance r has norm at most
    1 / r), capped by the corner bound (farthest corner minus nearest panel point, per hop).  The
    integrand |sum_t a_t exp(-j x pi B Delta_t / c)|^2 over x in [-1, 1] holds frequencies up to omega; the
    node count is calibrated against dense quadrature.
    """
    lu_i, lv_i, ln_i, lu_o, lv_o, ln_o = loc
    hw, hh = 0.5 * w, 0.5 * h
    corner = 0.0
    curv = 0.0
    lin_u = 0.0
    lin_v = 0.0
    for lu, lv, ln in ((lu_i, lv_i, ln_i), (lu_o, lv_o, ln_o)):
        r0 = np.sqrt(lu * lu + lv * lv + ln * ln)
        r_max = np.sqrt((np.abs(lu) + hw) ** 2 + (np.abs(lv) + hh) ** 2 + ln * ln)
        r_min = _min_distance_to_panel(lu, lv, ln, w, h)
        corner = corner + r_max - r_min
        curv = curv + 1.0 / r_min
        lin_u = lin_u + lu / r0
        lin_v = lin_v + lv / r0
    spread = np.minimum(corner, np.abs(lin_u) * w + np.abs(lin_v) * h + 0.25 * (hw * hw + hh * hh) * 4.0 * curv)
    return _node_count_from_omega(np.pi * bw * spread / SPEED_OF_LIGHT_M_S)


def _reduce(x):
    """x - 2 pi round(x / 2 pi) in double precision, returned in single precision (|value| <= pi)."""
    return (x - _TWO_PI * np.rint(x * (1.0 / _TWO_PI))).astype(np.float32)


def _node_count_from_omega(omega):
    """Gauss-Legendre nodes for a band-edge phase spread omega = pi B tau [rad] (1 below _SQUINT_OMEGA_MIN)."""
    n = np.where(omega < _SQUINT_OMEGA_MIN, 1.0, np.ceil(_SQUINT_NODES_PER_RAD * omega) + _SQUINT_NODES_EXTRA)
    top = len(_NODE_LADDER) - 1
    i = np.minimum(np.searchsorted(_NODE_LADDER, n), top)
    return np.maximum(_NODE_LADDER[i], np.minimum(n, 1024)).astype(np.int64)


def _sinc_small(x):
    """sin(x) / x for |x| below about 1e3 (single-precision sine, no reduction), sinc(0) = 1."""
    xe = x + _SINC_EPS
    return np.minimum(np.sin(xe.astype(np.float32)) / xe, 1.0)  # single-precision rounding never above 1


def _general_gain(loc, d1, d2, w, h, f, q, bw, beams, os_):
    """Band-averaged gain of a beam or focus profile (see :func:`surface_gain`), scale excluded."""
    lu_i, lv_i, ln_i, lu_o, lv_o, ln_o = loc
    m = d1.shape[0]
    front = (ln_i > 0) & (ln_o > 0)
    lam = SPEED_OF_LIGHT_M_S / f
    k0 = (2.0 * np.pi) / lam
    with np.errstate(divide="ignore", invalid="ignore"):  # d = 0 only behind/in the panel plane (masked)
        ui, vi, uo, vo = lu_i / d1, lv_i / d1, lu_o / d2, lv_o / d2
    if beams:  # nearest grid point per axis, grid lambda / (o w) x lambda / (o h) anchored at broadside
        su, sv = lam / (os_ * w), lam / (os_ * h)
        us, vs = su * np.rint(uo / su), sv * np.rint(vo / sv)
    else:
        us, vs = uo, vo
    d_f = 2.0 * (w * w + h * h) / lam
    far = front & (d1 >= d_f) & (d2 >= d_f)
    squint = bool(np.any(bw > 0))
    beta = np.zeros(m)

    # far field: closed form times the band-averaged separable array factor
    fi = np.flatnonzero(far)
    if fi.size:
        every = fi.size == m  # no gathers when every triple is in the far field (0-d parameters stay 0-d)

        def take(x, rows=fi):
            return x if (np.ndim(x) == 0 or (every and rows is fi)) else x[rows]

        wf, hf, kf, bwf = take(w), take(h), take(k0), take(bw)
        uof, vof = take(uo), take(vo)
        au0 = (0.5 * kf * wf) * (take(us) - uof)            # sinc arguments at f0
        av0 = (0.5 * kf * hf) * (take(vs) - vof)
        nf = None
        if squint:  # exact linear delay spread of the far-field aperture: |u_i + u_o| w + |v_i + v_o| h
            gu, gv = (0.5 * wf) * (take(ui) + uof), (0.5 * hf) * (take(vi) + vof)
            omega = (2.0 * np.pi / SPEED_OF_LIGHT_M_S) * bwf * (np.abs(gu) + np.abs(gv))
            nf = np.where(omega < _FAR_OMEGA_MIN, 1, np.ceil(0.5 * omega) + 1).astype(np.int64)
            nf = np.broadcast_to(nf, (fi.size,))
        if nf is None or nf.max() == 1:
            af = (_sinc_small(au0) * _sinc_small(av0)) ** 2                          # [4], array factor
        else:
            af = np.empty(fi.size)
            for n in np.flatnonzero(np.bincount(nf)):  # one iteration per node count
                g = np.flatnonzero(nf == n)
                x, wt = np.polynomial.legendre.leggauss(int(n))                     # Gauss-Legendre in f
                kap = (np.pi / SPEED_OF_LIGHT_M_S) * np.reshape(take(bwf, g), (-1, 1)) * x[None, :]  # (k, n)
                au = np.reshape(take(au0, g), (-1, 1)) - kap * np.reshape(take(gu, g), (-1, 1))
                av = np.reshape(take(av0, g), (-1, 1)) - kap * np.reshape(take(gv, g), (-1, 1))
                af[g] = (_sinc_small(au) * _sinc_small(av)) ** 2 @ (0.5 * wt)
        p = take(d1) * take(d2)
        cc = take(ln_i) * take(ln_o) / p
        val = ((wf * hf / (4.0 * np.pi)) ** 2 / (p * p)) * (cc if q == 1.0 else cc ** q) * af  # [2], Eq. 48
        if every:
            beta = np.broadcast_to(val, (m,)).astype(float)
        else:
            beta[fi] = val

    # near field: complex tile sum with the profile's phase errors and in-tile sinc factors
    ni = np.flatnonzero(front & ~far)
    if ni.size:
        Ln = tuple(x[ni] for x in loc)
        w_n, h_n, k_n, bw_n = (np.broadcast_to(x, (m,))[ni] for x in (w, h, k0, bw))
        lam_n = 2.0 * np.pi / k_n
        r_min = np.minimum(_min_distance_to_panel(*Ln[:3], w_n, h_n),
                           _min_distance_to_panel(*Ln[3:], w_n, h_n))
        nx, ny = tile_counts(w_n, h_n, lam_n, r_min / _BEAM_TILE_REFINE ** 2)
        nf = _node_counts(Ln, w_n, h_n, bw_n) if squint else np.ones(ni.size, np.int64)
        pu = (ui + us)[ni] if beams else None
        pv = (vi + vs)[ni] if beams else None
        dsum = d1[ni] + d2[ni]
        beta[ni] = _near_power_sum(Ln, dsum, w_n, h_n, k_n, bw_n, pu, pv, q, nx, ny, nf)
    return beta


def _near_power_sum(loc, dsum, w, h, k0, bw, pu, pv, q, nx, ny, nf, compiled=True):
    """Band-averaged power of the complex tile sum for 1-D arrays of near-field triples, scale excluded.

    Per triple: tile grid ``nx`` x ``ny`` and ``nf`` Gauss-Legendre nodes; ``pu``/``pv`` None for focus.
    ``compiled`` runs the numba kernel (:mod:`siting.radio._surface_kernel`, all triples in one call);
    False runs the numpy reference :func:`_tile_power_sum` once per (tile grid, node count) group.
    """
    if not compiled:
        out = np.empty(dsum.shape)
        key = (nx * (1 << 20) + ny) * (1 << 12) + nf
        for g in _groups(key):  # one iteration per (tile grid, node count) group, not per triple
            out[g] = _tile_power_sum(
                tuple(x[g] for x in loc), dsum[g], w[g], h[g], k0[g], bw[g],
                None if pu is None else pu[g], None if pv is None else pv[g], q,
                int(nx[g[0]]), int(ny[g[0]]), int(nf[g[0]]))
        return out
    from ._surface_kernel import tile_power_sum

    counts, pos = np.unique(nf, return_inverse=True)
    rules = [np.polynomial.legendre.leggauss(int(n)) for n in counts]
    starts = np.r_[0, np.cumsum(counts)[:-1]].astype(np.int64)
    xs = np.concatenate([r[0] for r in rules])
    ws = 0.5 * np.concatenate([r[1] for r in rules])           # mean over the band
    f64 = [np.ascontiguousarray(x, dtype=np.float64) for x in (*loc, dsum, w, h, k0, bw)]
    beams = pu is not None
    zero = np.zeros(dsum.shape)
    out = np.empty(dsum.shape)
    tile_power_sum(*f64, np.ascontiguousarray(pu if beams else zero, dtype=np.float64),
                   np.ascontiguousarray(pv if beams else zero, dtype=np.float64), beams, float(q),
                   nx.astype(np.int64), ny.astype(np.int64), starts[pos.ravel()], nf.astype(np.int64), xs, ws,
                   int(np.max(nx * ny)) if nx.size else 1, out)
    return out


def _tile_power_sum(loc, dsum, w, h, k0, bw, pu, pv, q, nx, ny, n_nodes):
    r"""Band-averaged |sum_t A_t e^{-j e_t} sinc sinc|^2 over an nx x ny tile grid (see :func:`surface_gain`).

    pu, pv None means focusing (no phase error at f0).  1-D arrays of m triples; ints nx, ny, n_nodes
    (Gauss-Legendre nodes in frequency).  Phases at f0 are reduced to [-pi, pi] in double precision; the node
    loop runs in single precision (cos/sin absolute error below 1e-6, the frequency offset adds at most
    omega = pi B tau rad).  The sinc arguments t = g h / 2 stay below about 1e4, where single-precision
    sin(t) / t is accurate to better than 1e-3 of its envelope 1 / t.
    """
    lu_i, lv_i, ln_i, lu_o, lv_o, ln_o = loc
    m = lu_i.shape[0]
    out = np.empty(m)
    per = max(1, _TILE_CHUNK_ENTRIES // (nx * ny))
    ga = (np.arange(nx) + 0.5) / nx - 0.5
    gb = (np.arange(ny) + 0.5) / ny - 0.5
    x_nodes, w_nodes = np.polynomial.legendre.leggauss(n_nodes)
    w_nodes = 0.5 * w_nodes                                 # mean over the band
    for s in range(0, m, per):  # loop over memory chunks, not over triples
        sl = slice(s, min(s + per, m))
        a = w[sl, None] * ga[None, :]                       # (k, nx) tile centres along u
        b = h[sl, None] * gb[None, :]                       # (k, ny) along v
        eui = (lu_i[sl, None] - a)[:, :, None]              # offsets tile -> Tx (k, nx, 1)
        evi = (lv_i[sl, None] - b)[:, None, :]              # (k, 1, ny)
        euo = (lu_o[sl, None] - a)[:, :, None]
        evo = (lv_o[sl, None] - b)[:, None, :]
        r_i = np.sqrt(eui**2 + evi**2 + (ln_i[sl] ** 2)[:, None, None])
        r_o = np.sqrt(euo**2 + evo**2 + (ln_o[sl] ** 2)[:, None, None])
        inv_i, inv_o = 1.0 / r_i, 1.0 / r_o
        s_t = (w[sl] * h[sl] / (nx * ny) / (4.0 * np.pi))
        # [1], general model, F = cos^q, aperture element gain: S_t (cos_i cos_o)^(q/2) / (4 pi r_i r_o)
        ii = inv_i * inv_o
        if q == 1.0:
            amp = (s_t * np.sqrt(ln_i[sl] * ln_o[sl]))[:, None, None] * (ii * np.sqrt(ii))
        else:
            amp = (s_t * (ln_i[sl] * ln_o[sl]) ** (0.5 * q))[:, None, None] * (ii * ii ** (0.5 * q))
        hu = 0.5 * w[sl, None, None] / nx                   # half tile sides
        hv = 0.5 * h[sl, None, None] / ny
        uu = eui * inv_i + euo * inv_o                      # U_t = u_in,t + u_out,t (direction cosines)
        vv = evi * inv_i + evo * inv_o
        delta = (r_i + r_o) - dsum[sl, None, None]          # path length minus the centre's [m]
        kk = k0[sl, None, None]
        # phase error e_t and sinc arguments t = g h / 2 at f0 (+ 1e-9 so that sinc(0) needs no branch)
        if pu is None:                                      # focus: no error at f0
            e = None
            tu = np.full(uu.shape, _SINC_EPS)
            tv = tu
        else:
            e = kk * (delta + (pu[sl, None, None] * a[:, :, None] + pv[sl, None, None] * b[:, None, :]))
            tu = (kk * pu[sl, None, None] * hu + _SINC_EPS) - (kk * hu) * uu
            tv = (kk * pv[sl, None, None] * hv + _SINC_EPS) - (kk * hv) * vv
        if n_nodes == 1:
            if e is None:
                out[sl] = np.sum(amp, axis=(1, 2)) ** 2
                continue
            er = _reduce(e)
            t = amp * ((np.sin(tu.astype(np.float32)) * np.sin(tv.astype(np.float32))) / (tu * tv))
            re = np.sum(t * np.cos(er), axis=(1, 2))
            im = np.sum(t * np.sin(er), axis=(1, 2))
            # |sum| <= sum |A_t| (co-phased value) holds exactly; the clip only removes single-precision rounding
            out[sl] = np.minimum(re * re + im * im, np.sum(amp, axis=(1, 2)) ** 2)
            continue
        # node loop in single precision: at x in [-1, 1] (f = f0 + x B / 2) the phase is e + x kmax Delta and
        # the sinc arguments t - x kmax h U ([4], squint of a phase-only aperture)
        kmax = (np.pi / SPEED_OF_LIGHT_M_S) * bw[sl, None, None]   # kappa at the band edge [rad/m]
        er = np.zeros(delta.shape, np.float32) if e is None else _reduce(e)
        dph = (kmax * delta).astype(np.float32)
        su = ((kmax * hu) * uu).astype(np.float32)
        sv = ((kmax * hv) * vv).astype(np.float32)
        amp32 = amp.astype(np.float32)
        tu32, tv32 = tu.astype(np.float32), tv.astype(np.float32)
        acc = np.zeros(sl.stop - sl.start)
        # rows (triples) whose in-tile sinc arguments move by at most _SINC_SQUINT_MAX rad at the band edges
        # keep the sinc factors at f0 (decided per triple, so the result does not depend on the grouping)
        move = np.maximum(np.max(np.abs(su), axis=(1, 2)), np.max(np.abs(sv), axis=(1, 2)))
        fixed = move <= _SINC_SQUINT_MAX
        for rows, keep in ((np.flatnonzero(fixed), True), (np.flatnonzero(~fixed), False)):
            if not rows.size:
                continue
            whole = rows.size == fixed.size

            def pick(x, rows=rows, whole=whole):
                return x if whole else x[rows]

            e_r, d_r, a_r = pick(er), pick(dph), pick(amp32)
            tu_r, tv_r = pick(tu32), pick(tv32)
            if keep:
                t = a_r * (np.sin(tu_r) * np.sin(tv_r) / (tu_r * tv_r))
            else:
                su_r, sv_r = pick(su), pick(sv)
            acc_r = np.zeros(rows.size)
            for xj, wj in zip(x_nodes, w_nodes):  # loop over frequency nodes, vectorised over triples and tiles
                ph = e_r + np.float32(xj) * d_r
                if not keep:
                    a_u = tu_r - np.float32(xj) * su_r + _TINY32   # sinc(0) = 1 where t lands on 0
                    a_v = tv_r - np.float32(xj) * sv_r + _TINY32
                    t = a_r * (np.sin(a_u) * np.sin(a_v) / (a_u * a_v))
                re = np.sum(t * np.cos(ph), axis=(1, 2)).astype(np.float64)
                im = np.sum(t * np.sin(ph), axis=(1, 2)).astype(np.float64)
                acc_r += wj * (re * re + im * im)
            acc[rows] = acc_r
        out[sl] = np.minimum(acc, np.sum(amp, axis=(1, 2)) ** 2)  # as above: rounding only
    return out


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
        amp[idx] = _tile_amplitude_sum(*(x[idx] for x in loc), _at(w, idx), _at(h, idx), n_x, n_y)
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
    if control not in _CONTROLS:
        raise RadioInputError(f"control: expected one of {_CONTROLS}, got {control!r}")
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
