"""Synthetic city generator for scale tests: N buildings of realistic form on a street grid.

Blocks of 70-110 m on a grid of streets 14-24 m wide; each block is one of: a perimeter block with a courtyard,
rows of terraced houses, detached villas, a tower with a podium, or an L-shaped slab.  Heights follow the form
(2-5 storeys for rows, 4-7 for perimeter blocks, 12-30 for towers).  Base stations: one rooftop sector site per
~9 blocks and one street-level small cell per ~3 blocks, 28 GHz figures.  Everything is seeded.

    python benchmarks/synthetic_city.py OUT_DIR --buildings 20000 [--seed 1]

writes ``buildings.geojson``, ``base_stations.geojson`` and ``job.toml`` (RFC 7946 lon/lat) into OUT_DIR.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path

import numpy as np
import shapely
from pyproj import Transformer
from shapely.geometry import Polygon, box

CRS = "EPSG:32632"
ORIGIN = (600_000.0, 5_300_000.0)


def _block_buildings(rng, x0, y0, w, h):
    """(polygon, height_m) tuples filling one block with south-west corner (x0, y0), size w x h."""
    form = rng.choice(["perimeter", "rows", "villas", "tower", "slab"], p=[0.3, 0.25, 0.2, 0.1, 0.15])
    out = []
    if form == "perimeter":
        d = rng.uniform(12, 16)
        shell = box(x0, y0, x0 + w, y0 + h)
        hole = box(x0 + d, y0 + d, x0 + w - d, y0 + h - d)
        ring = shell.difference(hole)
        # cut into 3-6 buildings along the ring by vertical/horizontal cuts
        cuts = rng.integers(2, 4)
        xs = np.sort(rng.uniform(x0 + d + 2, x0 + w - d - 2, cuts))
        pieces = [ring]
        for cx in xs:
            blade = box(cx - 0.01, y0 - 1, cx + 0.01, y0 + h + 1)
            pieces = [g for p in pieces for g in getattr(p.difference(blade), "geoms", [p.difference(blade)])]
        for p in pieces:
            if p.area > 30:
                out.append((p, 3.0 * rng.integers(4, 8)))
    elif form == "rows":
        depth = rng.uniform(9, 12)
        for yy in (y0 + 2, y0 + h - depth - 2):
            x = x0 + 2
            while x < x0 + w - 8:
                ww = rng.uniform(6, 9)
                out.append((box(x, yy, min(x + ww, x0 + w - 2), yy + depth), 3.0 * rng.integers(2, 5)))
                x += ww
    elif form == "villas":
        for i in range(3):
            for j in range(3):
                cx, cy = x0 + (i + 0.5) * w / 3, y0 + (j + 0.5) * h / 3
                a, b = rng.uniform(8, 14, 2)
                out.append((box(cx - a / 2, cy - b / 2, cx + a / 2, cy + b / 2), 3.0 * rng.integers(2, 4)))
    elif form == "tower":
        out.append((box(x0 + 5, y0 + 5, x0 + w - 5, y0 + 20), 3.0 * rng.integers(2, 4)))
        s = rng.uniform(20, 30)
        cx, cy = x0 + w / 2, y0 + h / 2 + 10
        out.append((box(cx - s / 2, cy - s / 2, cx + s / 2, cy + s / 2), 3.0 * rng.integers(12, 30)))
    else:
        t = rng.uniform(12, 15)
        out.append((Polygon([(x0 + 4, y0 + 4), (x0 + w - 4, y0 + 4), (x0 + w - 4, y0 + 4 + t),
                             (x0 + 4 + t, y0 + 4 + t), (x0 + 4 + t, y0 + h - 4), (x0 + 4, y0 + h - 4)]),
                    3.0 * rng.integers(5, 9)))
    return out


def make_city(n_buildings: int, seed: int = 1):
    """Buildings (list of (polygon, height)) and base stations (list of dicts), in metres of :data:`CRS`.

    Blocks are filled in square rings around the centre of a grid, so a city cut at ``n_buildings`` stays compact.
    """
    rng = np.random.default_rng(seed)
    side = int(np.ceil(np.sqrt(n_buildings / 4.0))) + 2  # ~>= 4 buildings per block
    widths, heights = rng.uniform(70, 110, side), rng.uniform(70, 110, side)
    streets_x, streets_y = rng.uniform(14, 24, side + 1), rng.uniform(14, 24, side + 1)
    xs = ORIGIN[0] + streets_x[0] + np.concatenate([[0], np.cumsum(widths + streets_x[1:])])
    ys = ORIGIN[1] + streets_y[0] + np.concatenate([[0], np.cumsum(heights + streets_y[1:])])
    c = (side - 1) / 2
    blocks = sorted(((i, j) for i in range(side) for j in range(side)),
                    key=lambda ij: (max(abs(ij[0] - c), abs(ij[1] - c)), ij))
    buildings, stations = [], []
    for k, (i, j) in enumerate(blocks):
        if len(buildings) >= n_buildings:
            break
        buildings.extend(_block_buildings(rng, xs[i], ys[j], widths[i], heights[j]))
        if k % 4 == 0:  # street-level small cell at the block's corner, aimed diagonally across the crossing
            stations.append({"bs_id": f"SC{k}", "x": float(xs[i] - streets_x[i] / 2), "y": float(ys[j] - 3),
                             "z_m": 8.0, "tx_power_dbm": 30.0, "max_gain_dbi": 20.0,
                             "azimuth_deg": float(rng.choice([0, 90, 180, 270]) + 45), "downtilt_deg": 4.0,
                             "pattern": "sector"})
    return buildings[:n_buildings], stations


def write_city(out_dir: Path, n_buildings: int, seed: int = 1) -> Path:
    """Write the synthetic city's layers and a job file; returns the job path."""
    out_dir.mkdir(parents=True, exist_ok=True)
    buildings, stations = make_city(n_buildings, seed)
    to_ll = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    geoms = shapely.orient_polygons(np.array([g for g, _ in buildings], dtype=object))
    geoms = shapely.transform(geoms, lambda xy: np.column_stack(to_ll.transform(xy[:, 0], xy[:, 1])))
    feats = [{"type": "Feature", "properties": {"id": f"B{i}", "height": float(h)},
              "geometry": json.loads(shapely.to_geojson(shapely.set_precision(g, 1e-7)))}
             for i, (g, (_, h)) in enumerate(zip(geoms, buildings))]
    (out_dir / "buildings.geojson").write_text(json.dumps({"type": "FeatureCollection", "features": feats}))
    lon, lat = to_ll.transform([s["x"] for s in stations], [s["y"] for s in stations])
    bs_feats = [{"type": "Feature", "geometry": {"type": "Point", "coordinates": [round(lo, 7), round(la, 7)]},
                 "properties": {k: v for k, v in s.items() if k not in ("x", "y")}}
                for s, lo, la in zip(stations, lon, lat)]
    (out_dir / "base_stations.geojson").write_text(json.dumps({"type": "FeatureCollection", "features": bs_feats}))
    job = out_dir / "job.toml"
    job.write_text(f"""# synthetic city, {n_buildings} buildings, seed {seed}
[inputs]
buildings = "buildings.geojson"
base_stations = "base_stations.geojson"
crs = "{CRS}"
[demand]
grid_m = 10.0
[radio]
surface_range_m = 150.0
bs_range_m = 300.0
[[surfaces.panels]]
size_id = "M"
width_m = 1.0
height_m = 1.0
cost = 4000.0
install_cost = 1500.0
[budget]
max_panels = {max(5, n_buildings // 200)}
sweep_budgets = []
[solver]
time_limit_s = 120.0
[output]
folder = "out"
""")
    return job


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out_dir", type=Path)
    ap.add_argument("--buildings", type=int, default=20000)
    ap.add_argument("--seed", type=int, default=1)
    a = ap.parse_args()
    print(write_city(a.out_dir, a.buildings, a.seed))
