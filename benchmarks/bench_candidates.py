"""Benchmark: facade spots and street-grid demand for ~10,000 synthetic buildings.

Builds a seeded synthetic district on a street grid (rectangles, L-shapes, courtyard blocks and rows of
terraced houses that share party walls), then times

* the vectorised :func:`siting.candidates.facade_spots` and :func:`siting.candidates.street_grid`, and
* a straightforward reference written the obvious way: a Python loop per building and per wall with scalar
  shapely calls (spots), and a loop per grid point with one spatial-index query each (street grid).

The reference loops run on a random subset (``--loop-buildings``, ``--loop-points``) and are scaled linearly to
the whole district; the ratio printed is scaled-loop time / vectorised time, both measured in this run.
Run: ``python benchmarks/bench_candidates.py [--buildings 10000]``.
"""

from __future__ import annotations

import argparse
import math
import time

import geopandas as gpd
import numpy as np
import shapely
from shapely.geometry import Polygon, box

from siting import candidates as cand


def synthetic_district(n_buildings: int, seed: int = 1, pitch_m: float = 50.0, street_m: float = 14.0):
    """Seeded blocks on a square street grid; each block holds one building kind."""
    rng = np.random.default_rng(seed)
    polys = []
    side = pitch_m - street_m
    nb = math.ceil(math.sqrt(n_buildings / 1.4))  # ~1.6 buildings per block on average, with slack
    x0, y0 = 400_000.0, 5_500_000.0
    for i in range(nb * nb):
        if len(polys) >= n_buildings:
            break
        bx, by = x0 + (i % nb) * pitch_m, y0 + (i // nb) * pitch_m
        kind = rng.choice(4, p=[0.4, 0.2, 0.15, 0.25])
        if kind == 0:  # rectangle
            w, d = rng.uniform(8, side), rng.uniform(8, side)
            polys.append(box(bx, by, bx + w, by + d))
        elif kind == 1:  # L-shape
            t = rng.uniform(6, 12)
            polys.append(Polygon([(bx, by), (bx + side, by), (bx + side, by + t), (bx + t, by + t),
                                  (bx + t, by + side), (bx, by + side)]))
        elif kind == 2:  # courtyard block
            m = rng.uniform(7, 11)
            polys.append(Polygon([(bx, by), (bx + side, by), (bx + side, by + side), (bx, by + side)],
                                 [[(bx + m, by + m), (bx + m, by + side - m), (bx + side - m, by + side - m),
                                   (bx + side - m, by + m)]]))
        else:  # row of terraced houses sharing party walls
            k = int(rng.integers(2, 5))
            d = rng.uniform(9, 14)
            edges = np.linspace(bx, bx + side, k + 1)
            polys.extend(box(a, by, b, by + d) for a, b in zip(edges[:-1], edges[1:]))
    polys = polys[:n_buildings]
    n = len(polys)
    return gpd.GeoDataFrame({"building_id": [f"s{i}" for i in range(n)], "part": np.zeros(n, np.int64),
                             "height_m": rng.uniform(6, 30, n).round(1), "height_rule": "column", "name": "",
                             "address": ""}, geometry=polys, crs="EPSG:32633")


def loop_spots(buildings, subset, *, spacing_m=5.0, heights=(4.0, 8.0), roof_margin_m=1.0, offset_m=0.05,
               party_gap_m=0.5, front_clear_m=1.0, min_wall_m=0.5):
    """Reference: per building, per wall, scalar shapely calls (same rules as facade_spots, simplify off)."""
    geoms = list(buildings.geometry)
    zone = shapely.buffer(np.asarray(geoms, dtype=object), party_gap_m)
    tree_zone, tree = shapely.STRtree(zone), shapely.STRtree(geoms)
    out = []
    for i in subset:
        poly = shapely.orient_polygons(geoms[i], exterior_cw=False)
        nb = [j for j in tree_zone.query(poly, predicate="intersects") if j != i]
        party = shapely.union_all(zone[nb]) if nb else None
        hs = [h for h in heights if h <= buildings.height_m.iloc[i] - roof_margin_m]
        for ring in [poly.exterior, *poly.interiors]:
            c = list(ring.coords)
            for p, q in zip(c[:-1], c[1:]):
                wall = shapely.LineString([p, q])
                free = wall.difference(party) if party is not None else wall
                for piece in shapely.get_parts(free):
                    L = piece.length
                    if L < min_wall_m:
                        continue
                    (ax, ay), (bx, by) = piece.coords[0], piece.coords[-1]
                    nx, ny = (by - ay) / L, -(bx - ax) / L
                    n = max(1, math.floor(L / spacing_m))
                    for k in range(n):
                        w = piece.interpolate((k + 0.5) * L / n)
                        sx, sy = w.x + offset_m * nx, w.y + offset_m * ny
                        front = shapely.LineString([(w.x, w.y), (sx + front_clear_m * nx, sy + front_clear_m * ny)])
                        if any(j != i for j in tree.query(front, predicate="intersects")):
                            continue
                        ahead = shapely.LineString([(sx, sy), (sx + front_clear_m * nx, sy + front_clear_m * ny)])
                        if ahead.intersects(geoms[i]):  # own building in front (notch, narrow courtyard)
                            continue
                        out.extend((i, sx, sy, h) for h in hs)
    return out


def loop_street(buildings, xs, ys, clearance_m=0.5):
    tree = shapely.STRtree(np.asarray(buildings.geometry.array))
    return [k for k, (x, y) in enumerate(zip(xs, ys))
            if not len(tree.query(shapely.Point(x, y), predicate="dwithin", distance=clearance_m))]


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--buildings", type=int, default=10_000)
    ap.add_argument("--loop-buildings", type=int, default=400)
    ap.add_argument("--loop-points", type=int, default=20_000)
    ap.add_argument("--grid-m", type=float, default=5.0)
    a = ap.parse_args()
    rng = np.random.default_rng(2)

    b = synthetic_district(a.buildings)
    print(f"district: {len(b)} buildings, bounds {np.ptp(b.total_bounds[[0, 2]]):.0f} m x "
          f"{np.ptp(b.total_bounds[[1, 3]]):.0f} m")

    t = time.perf_counter()
    sites = cand.facade_spots(b, simplify_m=0.0)
    t_spots = time.perf_counter() - t
    t = time.perf_counter()
    users = cand.street_grid(b, grid_m=a.grid_m)
    t_grid = time.perf_counter() - t
    print(f"vectorised: facade_spots {t_spots:.2f} s ({len(sites)} spots), street_grid {t_grid:.2f} s "
          f"({len(users)} points)")

    sub = np.sort(rng.choice(len(b), min(a.loop_buildings, len(b)), replace=False))
    t = time.perf_counter()
    ref = loop_spots(b, sub)
    t_loop_spots = (time.perf_counter() - t) * len(b) / len(sub)
    # the same subset from the vectorised result must match the loop (same rules, simplify off)
    mine = sites[sites.building_idx.isin(sub)]
    print(f"loop spots on {len(sub)} buildings: {len(ref)} spots, vectorised on the same buildings: {len(mine)}")

    x0, y0, x1, y1 = b.total_bounds + np.array([-20, -20, 20, 20])
    ix = np.arange(math.ceil(x0 / a.grid_m), math.floor(x1 / a.grid_m) + 1)
    iy = np.arange(math.ceil(y0 / a.grid_m), math.floor(y1 / a.grid_m) + 1)
    n_grid = len(ix) * len(iy)
    k = rng.choice(n_grid, min(a.loop_points, n_grid), replace=False)
    t = time.perf_counter()
    loop_street(b, ix[k % len(ix)] * a.grid_m, iy[k // len(ix)] * a.grid_m)
    t_loop_grid = (time.perf_counter() - t) * n_grid / len(k)

    print(f"loop (scaled from {len(sub)} buildings / {len(k)} grid points): spots {t_loop_spots:.1f} s, "
          f"street grid {t_loop_grid:.1f} s")
    print(f"speed-up: spots x{t_loop_spots / t_spots:.1f}, street grid x{t_loop_grid / t_grid:.1f}, "
          f"both x{(t_loop_spots + t_loop_grid) / (t_spots + t_grid):.1f}; vectorised total "
          f"{t_spots + t_grid:.2f} s (target: >= 10x, < 30 s)")


if __name__ == "__main__":
    main()
