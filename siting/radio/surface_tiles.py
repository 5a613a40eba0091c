"""Panel frame and far-field tiles of a reflecting surface: input positions in the panel frame, the tile grid
that keeps every tile in its own far field, and the co-phased tile amplitude sum.

Geometry: the panel is vertical, its outward normal horizontal at ``normal_az_deg`` (clockwise from north),
width along the wall (axis u), height vertical (axis v); positions are (x east, y north, z up) in metres.  The
gain formulas that use these pieces are documented in :func:`siting.radio.surface_gain`.

References
----------
.. [1] W. Tang et al., "Wireless Communications With Reconfigurable Intelligent Surface: Path Loss Modeling
   and Experimental Measurement", IEEE Trans. Wireless Commun., 2021, arXiv:1911.05326.
.. [2] E. Björnson and L. Sanguinetti, "Power Scaling Laws and Near-Field Behaviors of Massive MIMO and
   Intelligent Reflecting Surfaces", IEEE Open J. Commun. Soc., 2020, arXiv:2002.04960.
"""

from __future__ import annotations

import numpy as np

from ._checks import RadioInputError, as_float
from .surface_farfield import quantisation_efficiency

__all__ = ["tile_counts"]

# Work arrays of the tile sum are chunked to about this many (triple, tile) entries.
_CHUNK_ENTRIES = 1 << 21
# Tile counts per side are rounded up to this ladder so that few groups form.
_LADDER = np.unique(np.concatenate([np.arange(1, 17), np.round(16 * 1.25 ** np.arange(1, 40))])).astype(np.int64)


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


def _min_distance_either_end(loc, w, h):
    """Shortest distance from either end of each triple (``loc``, panel frame) to the w x h rectangle."""
    return np.minimum(_min_distance_to_panel(loc[0], loc[1], loc[2], w, h),
                      _min_distance_to_panel(loc[3], loc[4], loc[5], w, h))


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


def _tile_amplitude_sum(loc, w, h, nx, ny, q=1.0):
    r"""Sum over an nx x ny tile grid of S_t (cos_in_t cos_out_t)^(q/2) / (4 pi r_in_t r_out_t).

    ``loc`` = (lu_i, lv_i, ln_i, lu_o, lv_o, ln_o): 1-D arrays of m triples (panel-frame offsets of both
    ends); nx, ny are ints.  Distances are
    expanded without forming 3-D tile positions: for a tile centre at (a, b) in the panel plane,
    r^2 = (lu - a)^2 + (lv - b)^2 + ln^2 and cos = ln / r (the tiles share the panel normal).  q = 1 is the
    projected-aperture factor sqrt(cos_in cos_out).
    """
    lu_i, lv_i, ln_i, lu_o, lv_o, ln_o = loc
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
        amp[sel] = _tile_amplitude_sum(tuple(x[sel] for x in loc), w[sel], h[sel], int(nx[sel[0]]), int(ny[sel[0]]),
                                       q)
    return amp


def _groups(key):
    """Index arrays of the triples sharing each distinct value of an integer key (stable order)."""
    order = np.argsort(key, kind="stable")
    keys_sorted = key[order]
    starts = np.flatnonzero(np.r_[True, keys_sorted[1:] != keys_sorted[:-1]])
    ends = np.r_[starts[1:], keys_sorted.size]
    return [order[s:e] for s, e in zip(starts, ends)]


