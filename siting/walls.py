"""Wall geometry: the usable wall pieces of the footprints and which candidate spots on one wall are too close
to both hold a panel.

Walls
-----
Every ring of every footprint is walked: exterior rings and holes (courtyard walls).  Before walking, each
polygon is simplified with ``shapely.simplify(polygon, simplify_m, preserve_topology=True)`` (Douglas-Peucker,
default tolerance 0.2 m), which removes near-collinear vertices, so a "wall" is a straight segment of the
simplified ring.  Polygons are then oriented with ``shapely.orient_polygons(exterior_cw=False)``: exterior rings
run counter-clockwise and holes clockwise, so on every ring the building's material lies to the left of the
direction of travel and the outward normal is the right-hand normal ``(dy, -dx) / L``.  For a hole that normal
points into the courtyard, away from the material.

Party walls
-----------
The parts of a wall that lie within ``party_gap_m`` of another building row (``shapely.buffer`` of that
footprint, default 8 segments per quarter circle) are cut out.  Cuts are computed as intervals along the wall
(intersection with each neighbouring buffer, projected on the wall direction), merged and subtracted, all in
numpy; the remaining straight pieces are the *usable wall pieces*.  A piece shorter than ``min_wall_m`` carries
nothing.  Each usable piece gets a ``wall_id`` (its row position in :func:`wall_segments`, unique per district).

Spacing conflicts
-----------------
Spots are the ``sites`` table of :mod:`siting.tables` (x, y, z_m [m] and the ``wall_id`` of the wall piece they
sit on, from :func:`siting.candidates.facade_spots`); :func:`wall_conflicts` lists the pairs on one wall closer
than the minimum spacing.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import shapely
from scipy.spatial import cKDTree

from .candidate_inputs import _buildings, _param

__all__ = ["wall_conflicts", "wall_segments"]

SIMPLIFY_M = 0.2  # default Douglas-Peucker tolerance that removes near-collinear vertices [m]
_EPS = 1e-9  # relative slack for floor(L / spacing) when L is an exact multiple up to rounding


def _ring_segments(geoms: np.ndarray, simplify_m: float):
    """All straight segments of all (simplified, oriented) rings.

    Returns p0, p1 (n, 2), building index, is_hole (per segment).
    """
    polys, bidx = shapely.get_parts(geoms, return_index=True)
    if simplify_m > 0:
        polys = shapely.simplify(polys, simplify_m, preserve_topology=True)
    polys = shapely.orient_polygons(polys, exterior_cw=False)
    rings, pidx = shapely.get_rings(polys, return_index=True)  # exterior first, then holes, per polygon
    is_hole = np.ones(len(rings), bool)
    if len(rings):
        is_hole[np.r_[True, pidx[1:] != pidx[:-1]]] = False
    coords, ridx = shapely.get_coordinates(rings, return_index=True)
    same = ridx[1:] == ridx[:-1]
    p0, p1, r = coords[:-1][same], coords[1:][same], ridx[:-1][same]
    keep = np.hypot(*(p1 - p0).T) > 1e-9  # repeated vertices
    p0, p1, r = p0[keep], p1[keep], r[keep]
    return p0, p1, bidx[pidx[r]], is_hole[r]


def _party_cuts(p0, p1, seg_b, length, unit, geoms, party_gap_m):
    """Intervals [a, b] (metres along each segment) lying within party_gap_m of another building row."""
    seg_lines = shapely.linestrings(np.stack([p0, p1], axis=1))
    zone = shapely.buffer(geoms, party_gap_m) if party_gap_m > 0 else geoms
    tree = shapely.STRtree(zone)
    si, bj = tree.query(seg_lines)  # bounding boxes only; the own building (always a hit) is dropped first
    other = bj != seg_b[si]
    si, bj = si[other], bj[other]
    hit = shapely.intersects(seg_lines[si], zone[bj])
    si, bj = si[hit], bj[hit]
    if len(si) == 0:
        return np.zeros(0, np.int64), np.zeros(0), np.zeros(0)
    inter = shapely.intersection(seg_lines[si], zone[bj])
    parts, k = shapely.get_parts(inter, return_index=True)
    lin = shapely.get_type_id(parts) == 1  # LineString pieces; points (touching) cut nothing
    parts, k = parts[lin], k[lin]
    if len(parts) == 0:
        return np.zeros(0, np.int64), np.zeros(0), np.zeros(0)
    seg = si[k]
    xy, pi = shapely.get_coordinates(parts, return_index=True)
    t = np.einsum("ij,ij->i", xy - p0[seg[pi]], unit[seg[pi]])  # projection on the wall direction
    starts = np.r_[0, np.flatnonzero(pi[1:] != pi[:-1]) + 1]
    a = np.clip(np.minimum.reduceat(t, starts), 0.0, length[seg])
    b = np.clip(np.maximum.reduceat(t, starts), 0.0, length[seg])
    pos = b > a
    return seg[pos], a[pos], b[pos]


def _free_intervals(length, cut_seg, cut_a, cut_b):
    """Subtract the union of cut intervals from [0, length] of each segment; vectorised interval arithmetic.

    Returns (segment, start, end) of the free pieces, sorted by segment then start.
    """
    n = len(length)
    cut_any = np.zeros(n, bool)
    cut_any[cut_seg] = True
    whole = np.flatnonzero(~cut_any)
    segs, starts, ends = [whole], [np.zeros(len(whole))], [length[whole]]
    if len(cut_seg):
        o = np.lexsort((cut_a, cut_seg))
        s, a, b = cut_seg[o], cut_a[o], cut_b[o]
        run = pd.Series(b).groupby(s).cummax().to_numpy()  # furthest end so far within the segment
        first = np.r_[True, s[1:] != s[:-1]]
        prev_end = np.where(first, 0.0, np.r_[0.0, run[:-1]])
        gap = a > prev_end  # a free piece before this cut
        segs.append(s[gap])
        starts.append(prev_end[gap])
        ends.append(a[gap])
        last = np.r_[s[1:] != s[:-1], True]
        tail = last & (run < length[s])
        segs.append(s[tail])
        starts.append(run[tail])
        ends.append(length[s[tail]])
    seg = np.concatenate(segs)
    a0 = np.concatenate(starts)
    a1 = np.concatenate(ends)
    o = np.lexsort((a0, seg))
    return seg[o], a0[o], a1[o]


def _azimuth_deg(nx, ny):
    az = np.degrees(np.arctan2(nx, ny)) % 360.0
    return np.where(az >= 360.0, az - 360.0, az)  # -tiny % 360 rounds to 360.0


def _pieces(geoms, *, party_gap_m, min_wall_m, simplify_m) -> dict:
    """Usable wall pieces as arrays (see module docstring)."""
    p0, p1, seg_b, is_hole = _ring_segments(geoms, simplify_m)
    d = p1 - p0
    length = np.hypot(d[:, 0], d[:, 1])
    unit = d / length[:, None] if len(length) else d
    cut = _party_cuts(p0, p1, seg_b, length, unit, geoms, party_gap_m)
    seg, a, b = _free_intervals(length, *cut)
    plen = b - a
    keep = (plen >= min_wall_m) & (plen > 1e-9)
    seg, a, b, plen = seg[keep], a[keep], b[keep], plen[keep]
    u = unit[seg]
    q0 = p0[seg] + a[:, None] * u
    q1 = p0[seg] + b[:, None] * u
    normal = np.stack([u[:, 1], -u[:, 0]], axis=1)  # right-hand normal = outward (material on the left)
    return dict(seg=seg, b=seg_b[seg], is_hole=is_hole[seg], q0=q0, q1=q1, unit=u, normal=normal, length=plen,
                along=a)


def wall_segments(buildings, *, party_gap_m: float = 0.5, min_wall_m: float = 0.5,
                  simplify_m: float = SIMPLIFY_M) -> pd.DataFrame:
    """Usable straight wall pieces of every footprint (exterior rings and courtyard holes).

    Parameters
    ----------
    buildings : GeoDataFrame with the 'buildings' contract, projected CRS in metres.
    party_gap_m : wall parts within this distance [m] of another building row are cut out (party walls).
    min_wall_m : pieces shorter than this [m] are dropped (narrowest panel width).
    simplify_m : Douglas-Peucker tolerance [m] removing near-collinear vertices before walls are formed.

    Returns
    -------
    DataFrame, one row per usable piece: wall_id (row position), building_idx, building_id, is_hole,
    segment_idx (straight segment of the simplified ring the piece lies on), x0, y0, x1, y1 (piece ends,
    material on the left going 0 -> 1), along_m (distance of the piece start from its segment start),
    length_m, normal_az_deg (outward normal, clockwise from north).
    """
    where = "wall_segments"
    geoms, _, ids = _buildings(buildings, where)
    party_gap_m = _param("party_gap_m", party_gap_m, strict=False, job_key="candidates.party_gap_m")
    min_wall_m = _param("min_wall_m", min_wall_m, strict=False)
    simplify_m = _param("simplify_m", simplify_m, strict=False)
    w = _pieces(geoms, party_gap_m=party_gap_m, min_wall_m=min_wall_m, simplify_m=simplify_m)
    return _pieces_frame(w, ids)


def _pieces_frame(w: dict, ids: np.ndarray) -> pd.DataFrame:
    n = len(w["seg"])
    return pd.DataFrame({
        "wall_id": np.arange(n, dtype=np.int64),
        "building_idx": w["b"].astype(np.int64),
        "building_id": ids[w["b"]].astype(object),
        "is_hole": w["is_hole"],
        "segment_idx": w["seg"].astype(np.int64),
        "x0": w["q0"][:, 0], "y0": w["q0"][:, 1], "x1": w["q1"][:, 0], "y1": w["q1"][:, 1],
        "along_m": w["along"],
        "length_m": w["length"],
        "normal_az_deg": _azimuth_deg(w["normal"][:, 0], w["normal"][:, 1]),
    })


def _positions(length: np.ndarray, spacing_m: float):
    """Centred placement rule: piece index and distance from the piece start of every position."""
    n = np.maximum(1, np.floor(length / spacing_m * (1 + _EPS))).astype(np.int64)
    piece = np.repeat(np.arange(len(length)), n)
    first = np.cumsum(n) - n
    k = np.arange(len(piece)) - np.repeat(first, n)
    return piece, (k + 0.5) * length[piece] / n[piece]


def wall_conflicts(sites: pd.DataFrame, min_spacing_m: float) -> np.ndarray:
    """Pairs of site rows on the same wall closer than ``min_spacing_m`` (3-D), as an int array (k, 2)."""
    if min_spacing_m <= 0 or len(sites) < 2:
        return np.zeros((0, 2), np.int64)
    xyz = sites[["x", "y", "z_m"]].to_numpy(float)
    pairs = cKDTree(xyz).query_pairs(min_spacing_m - 1e-9, output_type="ndarray")
    wall = sites["wall_id"].to_numpy()
    return pairs[wall[pairs[:, 0]] == wall[pairs[:, 1]]].astype(np.int64)
