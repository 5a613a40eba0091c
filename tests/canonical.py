"""Canonical hand-checkable geometries shared by every test module (metres, local projected frame).

Each builder returns a GeoDataFrame with the ``buildings`` contract of :mod:`siting.tables`
(building_id, part, height_m, height_rule, name, address, geometry), CRS EPSG:32633 (UTM 33N), so tests
can hand them straight to any stage.
"""

from __future__ import annotations

import geopandas as gpd
from shapely.geometry import Polygon, box

CRS = "EPSG:32633"
X0, Y0 = 500_000.0, 5_800_000.0  # an arbitrary origin well inside UTM 33N


def _frame(polys, heights, ids=None) -> gpd.GeoDataFrame:
    ids = ids or [f"b{i}" for i in range(len(polys))]
    return gpd.GeoDataFrame(
        {
            "building_id": ids,
            "part": [0] * len(polys),
            "height_m": [float(h) for h in heights],
            "height_rule": ["column"] * len(polys),
            "name": [""] * len(polys),
            "address": [""] * len(polys),
        },
        geometry=list(polys),
        crs=CRS,
    )


def single_box(width_m=20.0, depth_m=10.0, height_m=12.0) -> gpd.GeoDataFrame:
    """A W x D box with its south-west corner at the origin: walls face N, E, S, W exactly."""
    return _frame([box(X0, Y0, X0 + width_m, Y0 + depth_m)], [height_m])


def courtyard_block(outer_m=60.0, inner_m=30.0, height_m=18.0) -> gpd.GeoDataFrame:
    """A square perimeter block with a square courtyard (a hole) in the middle."""
    o, i = outer_m, inner_m
    shell = [(X0, Y0), (X0 + o, Y0), (X0 + o, Y0 + o), (X0, Y0 + o)]
    m = (o - i) / 2
    hole = [(X0 + m, Y0 + m), (X0 + m, Y0 + m + i), (X0 + m + i, Y0 + m + i), (X0 + m + i, Y0 + m)]
    return _frame([Polygon(shell, [hole])], [height_m])


def touching_boxes(height_m=10.0) -> gpd.GeoDataFrame:
    """Two 10 m x 10 m boxes sharing the wall x = X0 + 10 (a party wall)."""
    return _frame([box(X0, Y0, X0 + 10, Y0 + 10), box(X0 + 10, Y0, X0 + 20, Y0 + 10)], [height_m, height_m])


def l_shape(height_m=15.0) -> gpd.GeoDataFrame:
    """An L: 30 m along x, 30 m along y, 10 m thick arms; re-entrant corner at (X0+10, Y0+10)."""
    poly = Polygon([(X0, Y0), (X0 + 30, Y0), (X0 + 30, Y0 + 10), (X0 + 10, Y0 + 10), (X0 + 10, Y0 + 30), (X0, Y0 + 30)])
    return _frame([poly], [height_m])


def street_canyon(length_m=100.0, street_m=20.0, depth_m=15.0, height_m=20.0) -> gpd.GeoDataFrame:
    """Two long building rows facing each other across an east-west street of width ``street_m``."""
    south = box(X0, Y0, X0 + length_m, Y0 + depth_m)
    north = box(X0, Y0 + depth_m + street_m, X0 + length_m, Y0 + 2 * depth_m + street_m)
    return _frame([south, north], [height_m, height_m])


def low_and_tall(low_m=6.0, tall_m=40.0) -> gpd.GeoDataFrame:
    """A low box and a tall box side by side, 20 m apart, both 10 m x 10 m."""
    return _frame([box(X0, Y0, X0 + 10, Y0 + 10), box(X0 + 30, Y0, X0 + 40, Y0 + 10)], [low_m, tall_m])
