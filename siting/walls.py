"""Wall geometry the optimiser needs: which candidate spots on one wall are too close to both hold a panel.

Spots are the ``sites`` table of :mod:`siting.tables` (x, y, z_m [m] and the ``wall_id`` of the wall piece they
sit on, from :func:`siting.candidates.facade_spots`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.spatial import cKDTree

__all__ = ["wall_conflicts"]


def wall_conflicts(sites: pd.DataFrame, min_spacing_m: float) -> np.ndarray:
    """Pairs of site rows on the same wall closer than ``min_spacing_m`` (3-D), as an int array (k, 2)."""
    if min_spacing_m <= 0 or len(sites) < 2:
        return np.zeros((0, 2), np.int64)
    xyz = sites[["x", "y", "z_m"]].to_numpy(float)
    pairs = cKDTree(xyz).query_pairs(min_spacing_m - 1e-9, output_type="ndarray")
    wall = sites["wall_id"].to_numpy()
    return pairs[wall[pairs[:, 0]] == wall[pairs[:, 1]]].astype(np.int64)
