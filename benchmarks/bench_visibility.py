"""Benchmark of siting.visibility on real footprints (pyrosm's test.osm.pbf, about 2,200 buildings).

Scene (generated here with plain shapely; the real candidates module is not used):
* facade spots every 5 m along exterior walls, 5 cm outside, at 4 m, facing the outward normal (spots that
  fall inside another footprint are dropped);
* users on a 10 m street grid at 1.5 m, outside every footprint;
* 5 base stations at 12 m on random street points (seeded).
Heights: 3 m per ``building:levels`` where tagged, otherwise a seeded random height in [4, 25] m (the file has
no height tags).

Measured in the same run: the fused kernel on all spot -> user pairs within 200 m (pair generation included),
bare and with first-Fresnel-zone clearance (k = 0.6 at 28 and 3.5 GHz, interleaved runs, ratio printed),
a per-pair shapely loop (sample) and a vectorised STRtree-intersects reference (sample); ratios are
pairs-per-second against those baselines.  Compile time (first call, or loading numba's cache) is reported
separately.  Peak memory: resource.getrusage max RSS of this process.

Run:  /tmp/venv/bin/python benchmarks/bench_visibility.py
"""

from __future__ import annotations

import importlib.util
import os
import resource
import sys
import time

import numpy as np
import pandas as pd
import shapely

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))

from siting.constants import SPEED_OF_LIGHT_M_S  # noqa: E402
from siting.tables import Points  # noqa: E402
from siting.visibility import Obstacles, line_of_sight, visible_pairs  # noqa: E402
from tests.test_visibility import reference_los  # noqa: E402

RANGE_M = 200.0


def rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def load_buildings():
    import pyrosm

    path = importlib.util.find_spec("pyrosm").submodule_search_locations[0] + "/data/test.osm.pbf"
    gdf = pyrosm.OSM(path).get_buildings()
    gdf = gdf.to_crs(gdf.estimate_utm_crs())
    geom = shapely.make_valid(gdf.geometry.values)
    geom = np.array(
        [
            g
            if g.geom_type in ("Polygon", "MultiPolygon")
            else shapely.union_all([p for p in shapely.get_parts(g) if p.geom_type in ("Polygon", "MultiPolygon")])
            for g in geom
        ],
        dtype=object,
    )
    levels = pd.to_numeric(gdf["building:levels"], errors="coerce").to_numpy()
    heights = np.where(np.isfinite(levels), 3.0 * levels, np.random.default_rng(2024).uniform(4, 25, len(gdf)))
    keep = ~shapely.is_empty(geom)
    return geom[keep], heights[keep]


def facade_spots(polys, spacing_m=5.0, offset_m=0.05, z_m=4.0):
    """Spots every ``spacing_m`` along exterior walls (vectorised over walls)."""
    parts = shapely.get_parts(shapely.orient_polygons(polys))
    coords, ring = shapely.get_coordinates(shapely.get_exterior_ring(parts), return_index=True)
    same = ring[1:] == ring[:-1]
    p0, p1 = coords[:-1][same], coords[1:][same]
    d = p1 - p0
    length = np.hypot(d[:, 0], d[:, 1])
    n = np.round(length / spacing_m).astype(int)  # walls of 2.5 m or more get at least one spot
    w = np.repeat(np.arange(len(p0)), n)
    k = np.arange(n.sum()) - np.repeat(np.cumsum(n) - n, n)
    frac = (k + 0.5) * spacing_m / length[w]
    u = d[w] / length[w, None]
    out = np.c_[u[:, 1], -u[:, 0]]  # right-hand normal of a counter-clockwise ring points outward
    xy = p0[w] + frac[:, None] * d[w] + offset_m * out
    az = np.degrees(np.arctan2(out[:, 0], out[:, 1])) % 360
    inside = _inside_any(polys, xy)
    xy, az = xy[~inside], az[~inside]
    return Points(xy[:, 0], xy[:, 1], np.full(len(xy), z_m), az, np.full(len(xy), -1, np.int64))


def _inside_any(polys, xy):
    tree = shapely.STRtree(polys)
    ip, _ = tree.query(shapely.points(xy), predicate="intersects")
    out = np.zeros(len(xy), bool)
    out[ip] = True
    return out


def street_grid(polys, step_m=10.0, z_m=1.5):
    xmin, ymin, xmax, ymax = shapely.total_bounds(polys)
    gx, gy = np.meshgrid(np.arange(xmin, xmax, step_m), np.arange(ymin, ymax, step_m))
    xy = np.c_[gx.ravel(), gy.ravel()]
    xy = xy[~_inside_any(polys, xy)]
    n = len(xy)
    return Points(xy[:, 0], xy[:, 1], np.full(n, z_m), np.full(n, np.nan), np.full(n, -1, np.int64))


def per_pair_shapely(polys, heights, a, b):
    """Baseline 1: a Python loop over pairs, shapely per pair (STRtree candidates)."""
    tree = shapely.STRtree(polys)
    out = np.empty(len(a), bool)
    for i in range(len(a)):
        seg = shapely.LineString([a[i, :2], b[i, :2]])
        d = b[i, :2] - a[i, :2]
        L2 = d @ d
        vis = True
        for k in tree.query(seg, predicate="intersects"):
            c = shapely.get_coordinates(seg.intersection(polys[k]))
            t = ((c - a[i, :2]) @ d) / L2
            if np.any(a[i, 2] + t * (b[i, 2] - a[i, 2]) < heights[k]):
                vis = False
                break
        out[i] = vis
    return out


def main():
    t = time.perf_counter()
    polys, heights = load_buildings()
    t_load = time.perf_counter() - t
    spots = facade_spots(polys)
    users = street_grid(polys)
    rng = np.random.default_rng(1)
    pick = rng.choice(len(users), 5, replace=False)
    bs = Points(users.x[pick], users.y[pick], np.full(5, 12.0), np.full(5, np.nan), np.full(5, -1, np.int64))
    print(f"buildings {len(polys)}, spots {len(spots)}, users {len(users)}, base stations 5 (load {t_load:.2f} s)")

    # compile (or load the numba cache) on a tiny case
    t = time.perf_counter()
    tiny = Obstacles.from_buildings(polys[:3], heights[:3])
    visible_pairs(tiny, bs, bs, 10.0)
    line_of_sight(tiny, np.zeros((1, 3)), np.ones((1, 3)))
    t_compile = time.perf_counter() - t
    print(f"compile / cache load: {t_compile:.2f} s")

    t = time.perf_counter()
    ob = Obstacles.from_buildings(polys, heights)
    t_obst = time.perf_counter() - t
    print(f"obstacles: {ob!r}, built in {t_obst:.3f} s")

    rss0 = rss_mb()
    t = time.perf_counter()
    p_bs = visible_pairs(ob, bs, spots, RANGE_M)
    t_bs = time.perf_counter() - t
    print(f"bs -> spot: {len(p_bs):,} pairs, LOS {p_bs['los'].mean():.3f}, {t_bs:.3f} s")

    # the district run, repeated: the machine is shared, so the best of 3 is the figure to compare
    walls, cpus = [], []
    for _ in range(3):
        p = None
        t = time.perf_counter()
        c = time.process_time()
        p = visible_pairs(ob, spots, users, RANGE_M)
        walls.append(time.perf_counter() - t)
        cpus.append(time.process_time() - c)
    t_all = min(walls)
    rss1 = rss_mb()
    n_pairs = len(p)
    rate = n_pairs / t_all
    print(
        f"spot -> user: {n_pairs:,} pairs within {RANGE_M:.0f} m after the front-half-space filter, LOS "
        f"{p['los'].mean():.4f}; wall best {t_all:.2f} s / median {np.median(walls):.2f} s, CPU (both threads) "
        f"best {min(cpus):.2f} s, incl. pair generation and metrics ({rate / 1e6:.1f} M pairs/s); "
        f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores"
    )
    print(f"peak RSS {rss1:.0f} MB (before the district run {rss0:.0f} MB)")

    # first-Fresnel-zone clearance (k = 0.6) against the bare ray, same scene, runs interleaved
    c_mps = SPEED_OF_LIGHT_M_S
    runs = {"bare": {}}
    for f_ghz in (28.0, 3.5):
        runs[f"k=0.6 at {f_ghz:g} GHz"] = {"clearance_fraction": 0.6, "wavelength_m": c_mps / (f_ghz * 1e9)}
    for kw in runs.values():
        visible_pairs(ob, bs, spots, RANGE_M, **kw)  # compile / load the cache
    best = {name: (np.inf, np.inf) for name in runs}
    los_share = {}
    for _ in range(3):
        for name, kw in runs.items():
            t = time.perf_counter()
            c = time.process_time()
            q = visible_pairs(ob, spots, users, RANGE_M, **kw)
            wall, cpu = time.perf_counter() - t, time.process_time() - c
            best[name] = (min(best[name][0], wall), min(best[name][1], cpu))
            los_share[name] = q["los"].mean()
            del q
    for name in runs:
        print(f"spot -> user, {name}: LOS {los_share[name]:.4f}, best wall {best[name][0]:.2f} s, CPU "
              f"{best[name][1]:.2f} s; ratio to bare: wall {best[name][0] / best['bare'][0]:.2f}x, CPU "
              f"{best[name][1] / best['bare'][1]:.2f}x  (target <= 1.5x)")  # fmt: skip

    for kw in ({"float_dtype": np.float32}, {"los_only": True, "float_dtype": np.float32}):
        w = []
        for _ in range(2):
            t = time.perf_counter()
            q = visible_pairs(ob, spots, users, RANGE_M, **kw)
            w.append(time.perf_counter() - t)
            del q
        print(f"spot -> user with {kw}: best {min(w):.2f} s")

    # pair finding alone with a KD-tree (range only, no facade filter, no LOS), as a reference point
    from scipy.spatial import cKDTree

    t = time.perf_counter()
    lists = cKDTree(np.c_[users.x, users.y, users.z_m]).query_ball_point(
        np.c_[spots.x, spots.y, spots.z_m], RANGE_M, workers=2
    )
    kb = np.concatenate([np.sort(v) for v in lists]).astype(np.int64)
    t_kd = time.perf_counter() - t
    print(
        f"KD-tree range query + sort alone (no facade filter, no LOS): {len(kb):,} pairs in {t_kd:.2f} s; "
        f"the fused kernel (range + facade filter + LOS + metrics) took {t_all / t_kd:.2f}x that"
    )
    del lists, kb


    # baselines on samples of the same pairs
    sample = np.random.default_rng(2).choice(n_pairs, 200_000, replace=False)
    ia = p["a"].to_numpy()[sample]
    ib = p["b"].to_numpy()[sample]
    a_xyz = np.c_[spots.x[ia], spots.y[ia], spots.z_m[ia]]
    b_xyz = np.c_[users.x[ib], users.y[ib], users.z_m[ib]]
    los_k = p["los"].to_numpy()[sample]

    t = time.perf_counter()
    ref, graze = reference_los(polys, heights, a_xyz, b_xyz)
    t_vec = time.perf_counter() - t
    rate_vec = len(sample) / t_vec
    dis = int((ref != los_k)[~graze].sum())
    print(
        f"baseline STRtree-intersects (vectorised shapely), {len(sample):,} pairs: {t_vec:.2f} s "
        f"({rate_vec:,.0f} pairs/s); disagreements with the kernel {dis} "
        f"(excluding {int(graze.sum())} grazing within 1 cm)"
    )
    m = 2000
    t = time.perf_counter()
    ref_loop = per_pair_shapely(polys, heights, a_xyz[:m], b_xyz[:m])
    t_loop = time.perf_counter() - t
    rate_loop = m / t_loop
    dis_loop = int((ref_loop != los_k[:m])[~graze[:m]].sum())
    print(f"baseline per-pair shapely loop, {m:,} pairs: {t_loop:.2f} s ({rate_loop:,.0f} pairs/s); "
          f"disagreements {dis_loop}")  # fmt: skip

    t = time.perf_counter()
    los_e = line_of_sight(ob, a_xyz, b_xyz)
    t_el = time.perf_counter() - t
    assert (los_e == los_k).all()
    print(f"element-wise line_of_sight on the sample: {len(sample) / t_el / 1e6:.1f} M pairs/s")
    lam28 = SPEED_OF_LIGHT_M_S / 28e9
    line_of_sight(ob, a_xyz[:10], b_xyz[:10], clearance_fraction=0.6, wavelength_m=lam28)
    t = time.perf_counter()
    los_c = line_of_sight(ob, a_xyz, b_xyz, clearance_fraction=0.6, wavelength_m=lam28)
    t_elc = time.perf_counter() - t
    print(f"element-wise line_of_sight with k = 0.6 at 28 GHz: {len(sample) / t_elc / 1e6:.1f} M pairs/s "
          f"({t_elc / t_el:.2f}x the bare time)")  # fmt: skip
    from tests.test_visibility import reference_clearance  # noqa: E402

    m = 50_000
    t = time.perf_counter()
    ref_c, graze_c = reference_clearance(polys, heights, a_xyz[:m], b_xyz[:m], 0.6, lam28)
    print(f"clearance k = 0.6 at 28 GHz vs the shapely interval reference, {m:,} pairs: disagreements "
          f"{int((ref_c != los_c[:m])[~graze_c].sum())} (excluding {int(graze_c.sum())} within 1 cm), "
          f"reference {time.perf_counter() - t:.1f} s")  # fmt: skip

    print("--- ratios (same run)")
    print(f"fused kernel vs vectorised STRtree: {rate / rate_vec:,.0f}x  (target >= 60x)")
    print(f"fused kernel vs per-pair shapely loop: {rate / rate_loop:,.0f}x")
    print(f"district spot -> user run: {t_all:.2f} s best of 3 (target < 5 s), peak RSS {rss1:.0f} MB "
          f"(target < 4096 MB); compile {t_compile:.2f} s (cached after the first run)")  # fmt: skip


if __name__ == "__main__":
    main()
