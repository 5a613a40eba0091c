"""Generate the demo district of the invented river town of Ostrellin (buildings.geojson, base_stations.geojson).

The layout is drawn in local metres (x east, y north, origin at the south-west corner of the town) and then
placed at an invented spot by adding the metres to the UTM coordinates of ``ORIGIN_LONLAT`` and converting back to
longitude/latitude.  Everything random comes from ``numpy.random.default_rng(SEED)``, so the committed files
are exactly what this script writes.

Usage::

    python demo_district/make_demo.py            # rewrites the files next to this script
    python demo_district/make_demo.py --out DIR  # writes them into DIR
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path

import numpy as np
import pyproj
import shapely
from shapely import affinity
from shapely.geometry import Polygon, box, mapping

SEED = 20240611
ORIGIN_LONLAT = (1.9040, 46.8120)  # south-west corner of the layout; an invented place for an invented town
UTM_EPSG = 32631  # UTM zone 31N holds the origin
DECIMALS = 7  # about 1 cm

# Street grid (local metres).  Block columns [x0, x1] and rows [y0, y1]; the gaps between them are streets.
COLUMNS = [(10.0, 110.0), (124.0, 224.0), (240.0, 340.0), (354.0, 454.0), (468.0, 590.0)]
ROWS = [(46.0, 136.0), (150.0, 240.0), (256.0, 346.0), (360.0, 450.0)]
EW_STREETS = ["Quay Road", "Saltmarket Street", "Larkspur Boulevard", "Copperbell Street", "Weaver Street"]
NS_STREETS = ["Kestrel Lane", "Oriel Avenue", "Tanners' Row", "Lantern Walk"]

# What stands on each block (row, column); "perimeter" blocks are rings of separate parcels around a courtyard.
BLOCK_KIND = {
    (0, 0): "perimeter", (0, 1): "perimeter", (0, 2): "hall", (0, 3): "perimeter", (0, 4): "perimeter",
    (1, 0): "perimeter", (1, 1): "perimeter", (1, 2): "perimeter", (1, 3): "plaza", (1, 4): "towers",
    (2, 0): "rows", (2, 1): "perimeter", (2, 2): "hall", (2, 3): "perimeter", (2, 4): "rows",
    (3, 0): "rows", (3, 1): "rows", (3, 2): "towers", (3, 3): "perimeter", (3, 4): "rows",
}
NAMED = {
    "hall-0-2": "Ostrellin Market Hall",
    "hall-2-2": "Vell Valley School",
    "plaza": "Lantern Square Pavilion",
    "tower-3-2-0": "Corvin Tower",
    "tower-1-4-0": "Heron Point",
    "quay-0": "Harbourmaster's House",
    "quay-3": "Old Ropeworks",
}


class _Town:
    """Collects buildings as (key, polygon in local metres, properties) in drawing order."""

    def __init__(self, rng: np.random.Generator):
        self.rng = rng
        self.items: list[tuple[str, Polygon, dict]] = []

    def add(self, key: str, poly: Polygon, height_m: float, *, storeys: int | None = None, street: str = "",
            number: int | None = None) -> None:
        """Store a building and draw how its height is tagged (mixed on purpose, as in real data)."""
        props: dict = {}
        u = self.rng.random()
        if u < 0.40:
            props["height"] = round(float(height_m), 1)  # a number
        elif u < 0.58:
            props["height"] = f"{height_m:.0f} m"  # a string with a unit
        elif u < 0.66:
            props["height"] = f"{height_m:.1f}".replace(".", ",")  # a decimal comma
        elif u < 0.90 and storeys is not None:
            props["building:levels"] = int(storeys)  # storeys only
        # else: no height tag at all (the default height applies)
        if key in NAMED:
            props["name"] = NAMED[key]
        if street and number is not None and self.rng.random() < 0.5:
            props["addr:street"] = street
            props["addr:housenumber"] = str(number)
        self.items.append((key, poly, props))


def _split(lo: float, hi: float, rng: np.random.Generator, min_w: float, max_w: float) -> list[float]:
    """Cut [lo, hi] into pieces of width in [min_w, max_w] (the last piece absorbs the rest)."""
    cuts = [lo]
    while hi - cuts[-1] > max_w:
        cuts.append(cuts[-1] + float(rng.uniform(min_w, max_w)))
    if hi - cuts[-1] < min_w and len(cuts) > 1:
        cuts.pop()
    cuts.append(hi)
    return cuts


def _perimeter(town: _Town, r: int, c: int, x0, y0, x1, y1) -> None:
    rng = town.rng
    depth = float(rng.uniform(12.0, 16.0))
    storeys0 = int(rng.integers(4, 8))
    south, north = EW_STREETS[r], EW_STREETS[r + 1]
    west = NS_STREETS[c - 1] if c > 0 else NS_STREETS[0]
    gap = int(rng.integers(0, 4))  # one side gets a passage into the courtyard (0: none)
    n = 1
    sides = [
        ("s", [(a, y0, b, y0 + depth) for a, b in _pairs(_split(x0, x1, rng, 16.0, 28.0))], south),
        ("n", [(a, y1 - depth, b, y1) for a, b in _pairs(_split(x0, x1, rng, 16.0, 28.0))], north),
        ("w", [(x0, a, x0 + depth, b) for a, b in _pairs(_split(y0 + depth, y1 - depth, rng, 16.0, 26.0))], west),
        ("e", [(x1 - depth, a, x1, b) for a, b in _pairs(_split(y0 + depth, y1 - depth, rng, 16.0, 26.0))], west),
    ]
    for k, (side, rects, street) in enumerate(sides):
        for j, (a, b, cc, d) in enumerate(rects):
            if gap and k == gap and j == len(rects) // 2:
                continue  # a gateway into the courtyard
            storeys = int(np.clip(storeys0 + rng.integers(-1, 2), 3, 8))
            h = storeys * 3.0 + float(rng.uniform(0.5, 2.5))  # roof above the top storey
            town.add(f"perim-{r}-{c}-{side}{j}", box(a, b, cc, d), h, storeys=storeys, street=street, number=n)
            n += 2


def _pairs(cuts: list[float]) -> list[tuple[float, float]]:
    return list(zip(cuts[:-1], cuts[1:]))


def _hall(town: _Town, r: int, c: int, x0, y0, x1, y1) -> None:
    """One large building with a courtyard: a single polygon with a hole."""
    m = 8.0
    depth = 18.0
    shell = box(x0 + m, y0 + m, x1 - m, y1 - m)
    hole = box(x0 + m + depth, y0 + m + depth, x1 - m - depth, y1 - m - depth)
    poly = Polygon(shell.exterior.coords, [hole.exterior.coords])
    storeys = int(town.rng.integers(3, 5))
    town.add(f"hall-{r}-{c}", poly, storeys * 4.0 + 1.0, storeys=storeys, street=EW_STREETS[r], number=1)


def _towers(town: _Town, r: int, c: int, x0, y0, x1, y1) -> None:
    rng = town.rng
    spots = [(0.28, 0.30), (0.72, 0.34), (0.50, 0.74)]
    for j, (fx, fy) in enumerate(spots):
        cx, cy = x0 + fx * (x1 - x0), y0 + fy * (y1 - y0)
        w, d = float(rng.uniform(18.0, 24.0)), float(rng.uniform(18.0, 24.0))
        tower = affinity.rotate(box(cx - w / 2, cy - d / 2, cx + w / 2, cy + d / 2), float(rng.uniform(-35, 35)))
        storeys = int(rng.integers(11, 17))
        h = 48.0 if j == 0 and (r, c) == (3, 2) else storeys * 3.2 + 2.0
        # towers are always tagged with a number (the rooftop base station stands on one of them)
        town.items.append((f"tower-{r}-{c}-{j}", tower, {"height": round(h, 1)}))
        if f"tower-{r}-{c}-{j}" in NAMED:
            town.items[-1][2]["name"] = NAMED[f"tower-{r}-{c}-{j}"]


def _rows(town: _Town, r: int, c: int, x0, y0, x1, y1) -> None:
    """Terraces of narrow houses along east-west lanes, gardens behind."""
    rng = town.rng
    depth = 10.0
    y = y0 + 2.0
    n = 1
    while y + depth <= y1 - 2.0:
        cuts = _split(x0 + 4.0, x1 - 4.0, rng, 7.0, 11.0)
        for a, b in _pairs(cuts):
            storeys = int(rng.integers(2, 4))
            town.add(f"row-{r}-{c}-{n}", box(a, y, b, y + depth), storeys * 3.0 + 1.5, storeys=storeys,
                     street=EW_STREETS[r], number=n)
            n += 1
        y += depth + 20.0  # lane and gardens


def _plaza(town: _Town, x0, y0, x1, y1) -> None:
    """Lantern Square: an open plaza with one octagonal pavilion."""
    cx, cy = (x0 + x1) / 2, (y0 + y1) / 2
    pav = shapely.Point(cx, cy).buffer(9.0, quad_segs=2)
    town.items.append(("plaza", Polygon(pav.exterior.coords), {"height": "7 m", "name": NAMED["plaza"]}))


def _waterfront(town: _Town) -> None:
    """Warehouses along the quay between Quay Road and the river, with gaps to the water."""
    rng = town.rng
    x = 14.0
    k = 0
    while x < 580.0:
        w = float(rng.uniform(24.0, 44.0))
        town.add(f"quay-{k}", box(x, 10.0, min(x + w, 590.0), 30.0), float(rng.uniform(7.0, 11.0)), storeys=2,
                 street=EW_STREETS[0], number=2 * k + 2)
        x += w + float(rng.uniform(10.0, 22.0))
        k += 1


def _north_edge(town: _Town) -> None:
    """Low-rise rows along Weaver Street at the north edge."""
    rng = town.rng
    for c, (x0, x1) in enumerate(COLUMNS):
        for j, (a, b) in enumerate(_pairs(_split(x0 + 2.0, x1 - 2.0, rng, 7.0, 12.0))):
            storeys = int(rng.integers(2, 4))
            town.add(f"north-{c}-{j}", box(a, 466.0, b, 478.0), storeys * 3.0 + 1.0, storeys=storeys,
                     street=EW_STREETS[-1], number=2 * j + 1)


def build_town(seed: int = SEED) -> tuple[list[tuple[str, Polygon, dict]], list[tuple[tuple[float, float], dict]]]:
    """Buildings (key, local polygon, properties) and base stations ((x, y) local, properties)."""
    town = _Town(np.random.default_rng(seed))
    _waterfront(town)
    for (r, c), kind in BLOCK_KIND.items():
        (x0, x1), (y0, y1) = COLUMNS[c], ROWS[r]
        if kind == "perimeter":
            _perimeter(town, r, c, x0, y0, x1, y1)
        elif kind == "hall":
            _hall(town, r, c, x0, y0, x1, y1)
        elif kind == "towers":
            _towers(town, r, c, x0, y0, x1, y1)
        elif kind == "rows":
            _rows(town, r, c, x0, y0, x1, y1)
        elif kind == "plaza":
            _plaza(town, x0, y0, x1, y1)
    _north_edge(town)

    # Base stations at 28 GHz.  The rooftop sector stands on Corvin Tower (48 m roof) looking south-west over
    # the old town; two street-level small cells on 7-8 m poles look along Oriel Avenue and Larkspur Boulevard.
    # Courtyards, the cross streets and the east end of the quay are left in the shadow of the blocks.
    corvin = next(p for k, p, _ in town.items if k == "tower-3-2-0")
    cx, cy = corvin.centroid.x, corvin.centroid.y
    stations = [
        ((cx, cy), {"bs_id": "OST-ROOF-1", "z_m": 51.0, "tx_power_dbm": 33.0, "max_gain_dbi": 24.0,
                    "azimuth_deg": 215.0, "downtilt_deg": 8.0, "pattern": "sector"}),
        ((117.0, 40.0), {"bs_id": "OST-POLE-2", "z_m": 8.0, "tx_power_dbm": 30.0, "max_gain_dbi": 22.0,
                         "azimuth_deg": 0.0, "downtilt_deg": 3.0, "pattern": "sector"}),
        ((580.0, 248.0), {"bs_id": "OST-POLE-3", "z_m": 7.0, "tx_power_dbm": 32.0, "max_gain_dbi": 21.0,
                          "azimuth_deg": 270.0, "downtilt_deg": 2.0, "pattern": "sector"}),
    ]
    return town.items, stations


def _local_to_lonlat():
    to_utm = pyproj.Transformer.from_crs(4326, UTM_EPSG, always_xy=True)
    to_ll = pyproj.Transformer.from_crs(UTM_EPSG, 4326, always_xy=True)
    e0, n0 = to_utm.transform(*ORIGIN_LONLAT)

    def f(xy: np.ndarray) -> np.ndarray:
        lon, lat = to_ll.transform(xy[:, 0] + e0, xy[:, 1] + n0)
        return np.round(np.column_stack([lon, lat]), DECIMALS)

    return f


def _feature(geom, props: dict) -> dict:
    return {"type": "Feature", "properties": props, "geometry": mapping(geom)}


def _dump(path: Path, name: str, features: list[dict]) -> None:
    fc = {"type": "FeatureCollection", "name": name, "features": features}
    text = json.dumps(fc, ensure_ascii=False, separators=(",", ":"))
    # one feature per line keeps diffs readable
    text = text.replace(',{"type":"Feature"', ',\n{"type":"Feature"').replace('"features":[{', '"features":[\n{')
    path.write_text(text + "\n", encoding="utf-8")


def write_demo(out_dir: Path, seed: int = SEED) -> tuple[Path, Path]:
    """Write buildings.geojson and base_stations.geojson (RFC 7946: lon/lat, counter-clockwise shells)."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    items, stations = build_town(seed)
    f = _local_to_lonlat()
    feats = []
    for i, (_, poly, props) in enumerate(items):
        g = shapely.orient_polygons(shapely.transform(poly, f), exterior_cw=False)  # RFC 7946 section 3.1.6
        feats.append(_feature(g, {"id": f"OST-{i + 1:04d}", **props}))
    bfile = out_dir / "buildings.geojson"
    _dump(bfile, "buildings", feats)
    sfeats = [_feature(shapely.transform(shapely.Point(xy), f), props) for xy, props in stations]
    sfile = out_dir / "base_stations.geojson"
    _dump(sfile, "base_stations", sfeats)
    return bfile, sfile


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=Path(__file__).resolve().parent, help="output folder")
    ap.add_argument("--seed", type=int, default=SEED)
    args = ap.parse_args(argv)
    b, s = write_demo(args.out, args.seed)
    print(f"wrote {b} and {s}")


if __name__ == "__main__":
    main()
