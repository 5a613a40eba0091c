"""Beam-set panels and beam squint of a reflecting surface: the beam grid, the band average over the channel
(Gauss-Legendre nodes in frequency) and the complex tile sum with each tile's phase error and in-tile sinc
factors.  The model is documented in :func:`siting.radio.surface_gain` (Notes, "Beams and squint").

References
----------
.. [1] W. Tang et al., "Wireless Communications With Reconfigurable Intelligent Surface: Path Loss Modeling
   and Experimental Measurement", IEEE Trans. Wireless Commun., 2021, arXiv:1911.05326.
.. [2] E. Björnson and L. Sanguinetti, "Power Scaling Laws and Near-Field Behaviors of Massive MIMO and
   Intelligent Reflecting Surfaces", IEEE Open J. Commun. Soc., 2020, arXiv:2002.04960.
.. [4] R. J. Mailloux, "Phased Array Antenna Handbook", 3rd ed., Artech House, 2017 (uniform-aperture array
   factor; beam squint of phase-shifter steering) -- from memory.
"""

from __future__ import annotations

import numpy as np

from ._checks import SPEED_OF_LIGHT_M_S, as_float, scalar_or_array
from .surface_tiles import _groups, _min_distance_either_end, _min_distance_to_panel, tile_counts

__all__ = ["nearest_beam"]

#: Panel control modes of :func:`siting.radio.surface_gain` (``control``).
CONTROLS = ("focus", "beams")
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
# Beams: tile side divided by this factor relative to tile_counts (in-tile quadratic phase error / factor^2);
# focusing keeps the tiles of tile_counts (its phases follow the geometry), with or without squint.
# 2: within 0.03 dB of the exact element sum on 219 random near-field geometries (28 GHz, 0.5-1 m panels, users
# 2-20 m); 1 (the tiles of focusing) was off by up to 0.16 dB within 10 dB of focus and 0.43 dB within 20 dB.
# Cost: near-field rows only; the gains stage of the real district 2.0-2.2 s either way.
_BEAM_TILE_REFINE = 2.0
_NODE_LADDER = np.array([1, 2, 3, 4, 5, 6, 8, 10, 12, 16, 20, 24, 32, 40, 48, 64, 80, 96, 128], dtype=np.int64)
# The complex (beam / squint) tile kernel keeps some 20 work arrays: chunks this small stay in cache.
_TILE_CHUNK_ENTRIES = 1 << 13


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
        r_min = _min_distance_either_end(Ln, w_n, h_n)
        nx, ny = tile_counts(w_n, h_n, lam_n, r_min / _BEAM_TILE_REFINE ** 2 if beams else r_min)
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
    lu_i, lv_i, ln_i, lu_o, lv_o, ln_o, dsum, w, h, k0, bw = (np.ascontiguousarray(x, dtype=np.float64)
                                                             for x in (*loc, dsum, w, h, k0, bw))
    beams = pu is not None
    zero = np.zeros(dsum.shape)
    out = np.empty(dsum.shape)
    tile_power_sum(lu_i, lv_i, ln_i, lu_o, lv_o, ln_o, dsum, w, h, k0, bw,
                   np.ascontiguousarray(pu if beams else zero, dtype=np.float64),
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


