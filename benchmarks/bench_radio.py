"""Throughput of the surface-gain kernels, as ratios against a naive per-triple Python loop run in the same process.

    /tmp/venv/bin/python benchmarks/bench_radio.py [--far N] [--near N]

Far field: N (BS, spot, user) triples (default 10 million, processed in chunks of 1 million) through
``surface_gain`` with every hop beyond the Fraunhofer distance, and through ``far_field_gain`` given distances
and cosines.  Near field: N triples (default 100 000) close enough to 0.3-1 m panels (users 1-27 m away) at 28 GHz that the tile
sum is used.  Baselines, on a small sample of the same triples: a pure-Python loop with the math module
(far field) and a loop calling ``surface_gain`` once per triple (both).  Target: far field >= 5 million
triples/s on one core.

Panel control: N mixed triples (default 200 000, a quarter of them near field as above, the rest far field)
through ``surface_gain`` with today's ``control="focus"`` and with the planning default ``control="beams"``
plus a 400 MHz band average (beam squint), printed as a time ratio on the same triples (best of 5 runs of
each, interleaved; process CPU time, so that other work on a shared machine does not skew the ratio).
Target: at most about 2-3x.
"""

from __future__ import annotations

import argparse
import math
import os
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402

from siting.radio import far_field_gain, fraunhofer_distance_m, surface_gain  # noqa: E402

F_HZ = 28e9


def far_triples(rng, n):
    """Panels at 5 m facing north at random x; BS 60-300 m away at 10-30 m, users 40-250 m at 1.5 m."""
    c = np.column_stack([rng.uniform(-500, 500, n), np.zeros(n), np.full(n, 5.0)])
    tx = c + np.column_stack([rng.uniform(-150, 150, n), rng.uniform(60, 300, n), rng.uniform(5, 25, n)])
    rx = c + np.column_stack([rng.uniform(-150, 150, n), rng.uniform(40, 250, n), np.full(n, -3.5)])
    return tx, rx, c


def near_triples(rng, n):
    """0.3-1 m panels; users 1-27 m in front, BS 20-150 m: inside the Fraunhofer distance."""
    c = np.column_stack([rng.uniform(-500, 500, n), np.zeros(n), np.full(n, 5.0)])
    tx = c + np.column_stack([rng.uniform(-60, 60, n), rng.uniform(20, 150, n), rng.uniform(5, 25, n)])
    rx = c + np.column_stack([rng.uniform(-10, 10, n), rng.uniform(1, 25, n), np.full(n, -3.5)])
    side = rng.choice([0.3, 0.5, 0.75, 1.0], n)
    return tx, rx, c, side


def naive_far(tx, rx, c, width, height):
    """Pure-Python far-field formula, one triple at a time (baseline)."""
    out = []
    s = width * height
    for i in range(len(tx)):
        ax, ay, az = tx[i][0] - c[i][0], tx[i][1] - c[i][1], tx[i][2] - c[i][2]
        bx, by, bz = rx[i][0] - c[i][0], rx[i][1] - c[i][1], rx[i][2] - c[i][2]
        d1 = math.sqrt(ax * ax + ay * ay + az * az)
        d2 = math.sqrt(bx * bx + by * by + bz * bz)
        ci, co = ay / d1, by / d2  # normal (0, 1, 0)
        out.append(s * s * ci * co / (4 * math.pi * d1 * d2) ** 2 if ci > 0 and co > 0 else 0.0)
    return np.array(out)


def timed(fn, *args, repeat=1, **kw):
    best = math.inf
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn(*args, **kw)
        best = min(best, time.perf_counter() - t)
    return best, out


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--far", type=int, default=10_000_000)
    ap.add_argument("--near", type=int, default=100_000)
    ap.add_argument("--sample", type=int, default=20_000, help="triples in the naive pure-Python baseline")
    ap.add_argument("--mixed", type=int, default=200_000, help="triples in the focus-versus-beams comparison")
    ap.add_argument("--near-share", type=float, default=0.25, help="near-field share of the mixed triples")
    args = ap.parse_args()
    rng = np.random.default_rng(12345)
    side = 0.3

    # ---------------------------------------------------------------------------------------- far field
    chunk = 1_000_000
    total_t = 0.0
    n_done = 0
    _ = surface_gain(*far_triples(rng, 1000), 0.0, side, side, F_HZ)  # warm-up
    while n_done < args.far:
        m = min(chunk, args.far - n_done)
        tx, rx, c = far_triples(rng, m)
        dt, g = timed(surface_gain, tx, rx, c, 0.0, side, side, F_HZ)
        total_t += dt
        n_done += m
    assert np.all(np.linalg.norm(tx - c, axis=1) >= fraunhofer_distance_m(side, side, F_HZ))
    far_rate = n_done / total_t

    d1 = np.linalg.norm(tx - c, axis=1)
    d2 = np.linalg.norm(rx - c, axis=1)
    ci, co = (tx - c)[:, 1] / d1, (rx - c)[:, 1] / d2
    dt_ff, _ = timed(far_field_gain, d1, d2, ci, co, side * side, repeat=3)
    ff_rate = len(d1) / dt_ff

    k = min(args.sample, len(tx))
    dt_naive, ref = timed(naive_far, tx[:k].tolist(), rx[:k].tolist(), c[:k].tolist(), side, side)
    naive_rate = k / dt_naive
    np.testing.assert_allclose(g[:k], ref, rtol=1e-9)
    k2 = min(2000, k)
    dt_call, _ = timed(lambda: [surface_gain(tx[i], rx[i], c[i], 0.0, side, side, F_HZ) for i in range(k2)])
    call_rate = k2 / dt_call

    print(f"far field, surface_gain : {n_done:>11,d} triples  {far_rate / 1e6:8.2f} M triples/s")
    print(f"far field, far_field_gain: {len(d1):>10,d} triples  {ff_rate / 1e6:8.2f} M triples/s")
    print(f"  baseline pure-Python loop ({k:,d}): {naive_rate / 1e6:8.3f} M triples/s  -> ratio "
          f"{far_rate / naive_rate:7.1f}x")
    print(f"  baseline one surface_gain call per triple ({k2:,d}): {call_rate:10.0f} triples/s  -> ratio "
          f"{far_rate / call_rate:7.0f}x")
    print(f"  target >= 5 M triples/s: {'met' if far_rate >= 5e6 else 'NOT met'}")

    # --------------------------------------------------------------------------------------- near field
    tx, rx, c, sides = near_triples(rng, args.near)
    assert np.all(np.linalg.norm(rx - c, axis=1) < fraunhofer_distance_m(sides, sides, F_HZ))
    dt_near, g = timed(surface_gain, tx, rx, c, 0.0, sides, sides, F_HZ)
    near_rate = len(tx) / dt_near
    k3 = min(500, len(tx))
    dt_loop, ref = timed(lambda: np.array([surface_gain(tx[i], rx[i], c[i], 0.0, sides[i], sides[i], F_HZ)
                                           for i in range(k3)]))
    np.testing.assert_allclose(g[:k3], ref, rtol=1e-9)
    loop_rate = k3 / dt_loop
    print(f"near field (tile sum)   : {len(tx):>11,d} triples  {near_rate / 1e3:8.1f} k triples/s")
    print(f"  baseline one surface_gain call per triple ({k3:,d}): {loop_rate / 1e3:8.2f} k triples/s  -> ratio "
          f"{near_rate / loop_rate:7.1f}x")

    # ------------------------------------------------------------------- panel control: beams vs focus
    n_near = int(round(args.mixed * args.near_share))
    tx_f, rx_f, c_f = far_triples(rng, args.mixed - n_near)
    tx_n, rx_n, c_n, s_n = near_triples(rng, n_near)
    tx, rx, c = np.vstack([tx_f, tx_n]), np.vstack([rx_f, rx_n]), np.vstack([c_f, c_n])
    sides = np.r_[np.full(len(tx_f), side), s_n]
    runs = {
        "focus (today)": dict(),
        "beams": dict(control="beams"),
        "beams + 400 MHz squint": dict(control="beams", bandwidth_hz=400e6),
        "focus + 400 MHz squint": dict(bandwidth_hz=400e6),
    }
    times = {name: math.inf for name in runs}
    g_focus = surface_gain(tx, rx, c, 0.0, sides, sides, F_HZ)
    for _ in range(5):  # interleaved repeats, best CPU time of each
        for name, kw in runs.items():
            t = time.process_time()
            g = surface_gain(tx, rx, c, 0.0, sides, sides, F_HZ, **kw)
            times[name] = min(times[name], time.process_time() - t)
            assert np.all(g <= g_focus * (1 + 1e-9))  # more realistic control never beats ideal focusing
    base = times["focus (today)"]
    print(f"panel control on {len(tx):,d} mixed triples ({n_near:,d} near field, {len(tx) - n_near:,d} far field):")
    for name, t in times.items():
        print(f"  {name:<24s}: {t * 1e3:8.1f} ms  -> {t / base:5.2f}x focus")
    ratio = times["beams + 400 MHz squint"] / base
    print(f"  default beams + squint vs focus: {ratio:.2f}x ({'within' if ratio <= 3.0 else 'ABOVE'} the ~2-3x target)")


if __name__ == "__main__":
    main()
