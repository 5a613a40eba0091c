"""Compiled near-field tile sum of :func:`siting.radio.surface_gain` (beams and beam squint).

One kernel (numba, ``cache=True``, ``nogil=True``, one float64 specialisation, run on threads over chunks of
triples by :func:`tile_power_sum`; serial rather than ``parallel=True``, whose compile costs about twice as
much on the first run for no gain here) evaluates, for every
near-field triple at once, the band-averaged power of the complex tile sum

.. math:: \\bar P = \\sum_j w_j \\left|\\sum_t A_t\\,e^{-j(e_t + x_j \\kappa_{max} \\Delta_t)}
          \\,\\mathrm{sinc}(t_{u,t} - x_j s_{u,t})\\,\\mathrm{sinc}(t_{v,t} - x_j s_{v,t})\\right|^2

with Gauss-Legendre nodes x_j in [-1, 1] (weights summing to 1) over the band; the formulas per tile are
those of :func:`siting.radio.surface_gain` (Tang et al., IEEE Trans. Wireless Commun. 2021, arXiv:1911.05326,
general model with far-field tiles; Mailloux, "Phased Array Antenna Handbook", 3rd ed., 2017, array factor of
a uniform aperture and beam squint, from memory).  Each triple carries its own tile grid and node count, so
no grouping is needed.  Double precision throughout; sines and cosines come from :func:`_sincos` (inline
polynomial, absolute error below 3e-9, no library call, so the tile loops vectorise).  One sine and cosine per
tile serve a pair of nodes -x, +x.  The numpy reference of the same
computation is :func:`siting.radio.surface_beams._tile_power_sum` (kept for the tests).
"""

from __future__ import annotations

import itertools
import math
from concurrent.futures import ThreadPoolExecutor

import numba
import numpy as np
from numba import njit

from ..constants import SPEED_OF_LIGHT_M_S

# The band-edge move of the in-tile sinc arguments below which the sinc factors stay at the centre frequency
# [rad] (same rule as surface_beams._SINC_SQUINT_MAX).
SINC_SQUINT_MAX = 0.1
_TWO_PI = 2.0 * math.pi
_CHUNK = 64  # triples per parallel work item (buffers are allocated once per item)


# Taylor coefficients of sin(h) / h and cos(h) in h^2, to h^12 and h^14 (|h| <= pi / 2 after halving)
_S1, _S2, _S3, _S4, _S5, _S6 = (-1.0 / 6.0, 1.0 / 120.0, -1.0 / 5040.0, 1.0 / 362880.0, -1.0 / 39916800.0,
                                1.0 / 6227020800.0)
_C1, _C2, _C3, _C4, _C5, _C6, _C7 = (-0.5, 1.0 / 24.0, -1.0 / 720.0, 1.0 / 40320.0, -1.0 / 3628800.0,
                                     1.0 / 479001600.0, -1.0 / 87178291200.0)
_FAST = {"reassoc", "contract", "arcp", "nsz"}   # no assumption about NaN or infinities


@njit(cache=True, inline="always", fastmath=_FAST, error_model="numpy")
def _sincos(x):
    """(sin x, cos x) for |x| up to about 1e6: reduction to [-pi, pi], Taylor series at x / 2 (truncation
    below 7e-10 at pi / 2), then the double-angle formulas; absolute error below 3e-9."""
    r = x - _TWO_PI * math.floor(x * (1.0 / _TWO_PI) + 0.5)
    h = 0.5 * r
    z = h * h
    s = h * (1.0 + z * (_S1 + z * (_S2 + z * (_S3 + z * (_S4 + z * (_S5 + z * _S6))))))
    c = 1.0 + z * (_C1 + z * (_C2 + z * (_C3 + z * (_C4 + z * (_C5 + z * (_C6 + z * _C7))))))
    return 2.0 * s * c, 1.0 - 2.0 * s * s


@njit(cache=True, inline="always", fastmath=_FAST, error_model="numpy")
def _sinc(x):
    """sin(x) / x with sinc(0) = 1 (series below |x| = 1e-4)."""
    sx, _ = _sincos(x)
    return 1.0 - x * x * (1.0 / 6.0) if abs(x) < 1e-4 else sx / x


def tile_power_sum(lu_i, lv_i, ln_i, lu_o, lv_o, ln_o, dsum, w, h, k0, bw, pu, pv, beams, q, nx, ny, node_start,
                   node_count, x_nodes, w_nodes, nt_max, out):  # fmt: skip
    """Band-averaged |tile sum|^2 per triple, written to ``out`` (see the module docstring).

    1-D float64 arrays of m triples: panel-frame offsets of both ends, ``dsum`` = d1 + d2, panel ``w``, ``h``
    [m], ``k0`` [rad/m], ``bw`` [Hz], beam slopes ``pu``, ``pv`` (ignored unless ``beams``); int64 ``nx``,
    ``ny`` (tiles per side), ``node_start``/``node_count`` (slice of ``x_nodes``/``w_nodes``, the weights
    summing to 1, symmetric about 0 as Gauss-Legendre nodes are); ``nt_max`` the largest nx * ny.  Focus
    (``beams`` False) has no phase error at f0.
    """
    from .._warmup import wait

    wait("surface")  # a first run compiles this kernel in the background (siting._warmup)
    args = (lu_i, lv_i, ln_i, lu_o, lv_o, ln_o, dsum, w, h, k0, bw, pu, pv, bool(beams), float(q), nx, ny,
            node_start, node_count, x_nodes, w_nodes, int(nt_max), out)  # fmt: skip
    n_items = -(-lu_i.shape[0] // _CHUNK)
    n_threads = min(max(1, numba.get_num_threads()), n_items)
    if n_threads <= 1:
        _tile_power_range(0, n_items, *args)
        return
    counter = itertools.count()

    def work() -> None:
        for c in iter(counter.__next__, None):  # dynamic scheduling: the next work item when done
            if c >= n_items:
                return
            _tile_power_range(c, c + 1, *args)

    with ThreadPoolExecutor(n_threads - 1) as pool:
        futures = [pool.submit(work) for _ in range(n_threads - 1)]
        work()
        for f in futures:
            f.result()


@njit(cache=True, nogil=True, fastmath=_FAST, error_model="numpy")
def _tile_power_range(c_lo, c_hi, lu_i, lv_i, ln_i, lu_o, lv_o, ln_o, dsum, w, h, k0, bw, pu, pv, beams, q, nx, ny,
                      node_start, node_count, x_nodes, w_nodes, nt_max, out):  # fmt: skip
    """Work items [c_lo, c_hi) (``_CHUNK`` triples each) of :func:`tile_power_sum`."""
    m = lu_i.shape[0]
    kq = 0.5 * q
    for c in range(c_lo, c_hi):
        amp = np.empty(nt_max)   # A_t
        ce = np.empty(nt_max)    # cos, sin of the phase error e_t at f0
        se = np.empty(nt_max)
        s0 = np.empty(nt_max)    # sinc factors at f0
        dph = np.empty(nt_max)   # kappa_max Delta_t
        tu = np.empty(nt_max)    # sinc arguments at f0 and their band-edge moves
        tv = np.empty(nt_max)
        su = np.empty(nt_max)
        sv = np.empty(nt_max)
        for r in range(c * _CHUNK, min(m, (c + 1) * _CHUNK)):
            mx = nx[r]
            my = ny[r]
            wr = w[r]
            hr = h[r]
            kk = k0[r]
            kmax = (math.pi / SPEED_OF_LIGHT_M_S) * bw[r]          # kappa at the band edge [rad/m]
            lui = lu_i[r]
            luo = lu_o[r]
            lvi = lv_i[r]
            lvo = lv_o[r]
            lni2 = ln_i[r] * ln_i[r]
            lno2 = ln_o[r] * ln_o[r]
            lnp = ln_i[r] * ln_o[r]
            pre = wr * hr / (mx * my) / (4.0 * math.pi) * (math.sqrt(lnp) if q == 1.0 else lnp ** kq)
            hu = 0.5 * wr / mx                       # half tile sides
            hv = 0.5 * hr / my
            pur = pu[r] if beams else 0.0
            pvr = pv[r] if beams else 0.0
            ds = dsum[r]
            move = 0.0
            total = 0.0
            for i in range(mx):
                a = wr * ((i + 0.5) / mx - 0.5)      # tile centre along the wall
                eui = lui - a
                euo = luo - a
                base = i * my
                for j in range(my):
                    b = hr * ((j + 0.5) / my - 0.5)  # and up
                    evi = lvi - b
                    evo = lvo - b
                    r_i = math.sqrt(eui * eui + evi * evi + lni2)
                    r_o = math.sqrt(euo * euo + evo * evo + lno2)
                    inv_i = 1.0 / r_i
                    inv_o = 1.0 / r_o
                    ii = inv_i * inv_o
                    # S_t (cos_i cos_o)^(q/2) / (4 pi r_i r_o), cos = ln / r (general model, F = cos^q)
                    at = pre * ii * (math.sqrt(ii) if q == 1.0 else ii ** kq)
                    uu = eui * inv_i + euo * inv_o   # U_t, V_t: sums of the direction cosines
                    vv = evi * inv_i + evo * inv_o
                    delta = (r_i + r_o) - ds         # path length minus the centre's [m]
                    t = base + j
                    amp[t] = at
                    total += at
                    if beams:                        # phase error and sinc arguments at f0
                        sn, cs = _sincos(kk * (delta + pur * a + pvr * b))
                        a_u = kk * hu * (pur - uu)
                        a_v = kk * hv * (pvr - vv)
                        se[t] = sn
                        ce[t] = cs
                        tu[t] = a_u
                        tv[t] = a_v
                        s0[t] = _sinc(a_u) * _sinc(a_v)
                    else:
                        se[t] = 0.0
                        ce[t] = 1.0
                        tu[t] = 0.0
                        tv[t] = 0.0
                        s0[t] = 1.0
                    dph[t] = kmax * delta
                    su[t] = kmax * hu * uu
                    sv[t] = kmax * hv * vv
                    mv = max(abs(su[t]), abs(sv[t]))
                    move = mv if mv > move else move
            nt = mx * my
            n0 = node_start[r]
            nn = node_count[r]
            if nn == 1 and not beams:                # focus at f0: co-phased
                out[r] = total * total
                continue
            fixed = nn == 1 or move <= SINC_SQUINT_MAX
            acc = 0.0
            if nn % 2 == 1:                          # the node x = 0 (the centre frequency)
                re = 0.0
                im = 0.0
                for t in range(nt):
                    at = amp[t] * s0[t]
                    re += at * ce[t]
                    im += at * se[t]
                acc += w_nodes[n0 + nn // 2] * (re * re + im * im)
            for k in range(nn // 2):
                # the node pair +-x: e^{j(e_t +- x d_t)} = e^{j e_t} (C +- j S), one sine and cosine per tile
                x = x_nodes[n0 + nn - 1 - k]
                rp = 0.0
                ip = 0.0
                rm = 0.0
                im_ = 0.0
                for t in range(nt):
                    ss, cc = _sincos(x * dph[t])
                    if fixed:
                        ap = amp[t] * s0[t]
                        am = ap
                    else:                            # in-tile squint: the sinc factors move with frequency
                        ap = amp[t] * _sinc(tu[t] - x * su[t]) * _sinc(tv[t] - x * sv[t])
                        am = amp[t] * _sinc(tu[t] + x * su[t]) * _sinc(tv[t] + x * sv[t])
                    pc = ce[t] * cc
                    ps = se[t] * ss
                    qc = se[t] * cc
                    qs = ce[t] * ss
                    rp += ap * (pc - ps)
                    ip += ap * (qc + qs)
                    rm += am * (pc + ps)
                    im_ += am * (qc - qs)
                acc += w_nodes[n0 + nn - 1 - k] * (rp * rp + ip * ip) + w_nodes[n0 + k] * (rm * rm + im_ * im_)
            # |sum| <= sum |A_t| (the co-phased value) holds exactly; the clip only removes rounding
            out[r] = min(acc, total * total)


def compile_kernels() -> None:
    """Compile the kernel (or load it from numba's cache) with one triple of dummy data (first-run warm-up)."""
    one = np.ones(1)
    i1 = np.ones(1, np.int64)
    tile_power_sum(*([one] * 13), True, 1.0, i1, i1, np.zeros(1, np.int64), i1, np.zeros(1), np.ones(1), 1,  # type: ignore[call-arg]
                   np.empty(1))  # fmt: skip


KERNELS = (_tile_power_range,)
