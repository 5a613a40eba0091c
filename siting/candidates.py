"""Candidate facade spots for surfaces and demand points (DESIGN.md sections 3 and 4).

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

Placement rule
--------------
A usable piece of length ``L`` carries ``n = max(1, floor(L / spacing_m))`` positions, at ``(k + 1/2) L / n``
from its start for ``k = 0..n-1``: evenly spaced, each in the middle of an equal share of the piece, so the
set is centred on the piece.  Spots sit ``offset_m`` outward from the wall at every mounting height that is at
most ``height_m - roof_margin_m`` of the carrying building.  A spot is dropped when the segment from its wall
point to ``front_clear_m`` in front of it touches another building, when its own building lies within
``front_clear_m`` in front of it (a notch or courtyard narrower than that), or when simplification put it inside
its own footprint.

Demand points
-------------
:func:`given_users` (kind 'given' / 'indoor'), :func:`street_grid` (kind 'street'), :func:`facade_homes`
(kind 'home'); :func:`combine_users` stacks them and renumbers ``user_id``.

All functions are pure: tables and parameters in, tables out.  Nothing here reads the job file or writes files.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import shapely

from . import tables
from .errors import InputDataError, JobError, SitingWarning

__all__ = [
    "wall_segments",
    "facade_spots",
    "snap_given_spots",
    "street_grid",
    "facade_homes",
    "given_users",
    "combine_users",
]

SIMPLIFY_M = 0.2  # default Douglas-Peucker tolerance that removes near-collinear vertices [m]
_EPS = 1e-9  # relative slack for floor(L / spacing) when L is an exact multiple up to rounding

_POLYGON, _MULTIPOLYGON = 3, 6  # shapely.get_type_id codes


# --------------------------------------------------------------------------------------------- validation
def _param(name: str, value, *, low: float = 0.0, strict: bool = True, job_key: str = "") -> float:
    """Validate one numeric parameter; raise :class:`JobError` naming the key and the fix."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        v = float("nan")
    ok = math.isfinite(v) and (v > low if strict else v >= low)
    if not ok:
        rel = ">" if strict else ">="
        key = job_key or name
        raise JobError(f"{key}: expected a finite number {rel} {low:g} [m], got {value!r}; set it in the job "
                       f"file or pass a valid {name}", source="candidate parameters")
    return v


def _buildings(buildings, where: str):
    """Check the buildings table and return (geometries as a shapely array, height_m array, building_id array)."""
    if buildings is None or len(buildings) == 0:
        raise InputDataError(f"{where}: the buildings table is empty; expected at least one footprint. Check the "
                             "buildings layer and the area of interest (bbox / polygon) of the job")
    if not hasattr(buildings, "geometry"):
        raise InputDataError(f"{where}: expected a GeoDataFrame with a geometry column, got "
                             f"{type(buildings).__name__}; load footprints with siting.district")
    tables.check(buildings, "buildings", where)
    crs = getattr(buildings, "crs", None)
    if crs is not None and getattr(crs, "is_geographic", False):
        raise InputDataError(f"{where}: buildings are in geographic CRS {crs.to_string()} (degrees); expected a "
                             "projected CRS in metres. Project them first (district loader, job key inputs.crs)")
    geoms = np.asarray(buildings.geometry.array, dtype=object)
    ids = buildings["building_id"].astype(str).to_numpy()
    type_id = shapely.get_type_id(geoms)
    bad = ~np.isin(type_id, (_POLYGON, _MULTIPOLYGON)) | shapely.is_empty(geoms)
    if bad.any():
        some = ", ".join(ids[bad][:5])
        raise InputDataError(f"{where}: expected Polygon footprints, got {int(bad.sum())} empty or non-polygon "
                             f"geometries (building_id {some}); drop or repair these features")
    height = buildings["height_m"].to_numpy(float)
    badh = ~np.isfinite(height) | (height < 0)
    if badh.any():
        some = ", ".join(ids[badh][:5])
        raise InputDataError(f"{where}: expected finite height_m >= 0, got {int(badh.sum())} bad heights "
                             f"(building_id {some}); fix the height column or set inputs.default_height_m")
    return geoms, height, ids


def _points_table(df, ref_col: str, where: str, required=("x", "y")) -> pd.DataFrame:
    if df is None:
        raise InputDataError(f"{where}: expected a point table with columns {ref_col}, x, y, got None")
    df = pd.DataFrame(df).reset_index(drop=True)
    missing = [c for c in (ref_col, *required) if c not in df.columns]
    if missing:
        raise InputDataError(f"{where}: expected columns {[ref_col, *required]}, missing {missing} (found "
                             f"{list(df.columns)}); rename the columns of the point layer")
    for c in required:
        v = pd.to_numeric(df[c], errors="coerce").to_numpy(float)
        bad = ~np.isfinite(v)
        if bad.any():
            refs = ", ".join(df[ref_col].astype(str).to_numpy()[bad][:5])
            raise InputDataError(f"{where}: column '{c}' must be a finite number, got {int(bad.sum())} bad "
                                 f"values ({ref_col} {refs}); fix or remove these points")
    return df


# --------------------------------------------------------------------------------------------- walls
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


def facade_spots(buildings, *, spacing_m: float = 5.0, mount_heights_m=(4.0, 8.0), roof_margin_m: float = 1.0,
                 offset_m: float = 0.05, party_gap_m: float = 0.5, front_clear_m: float = 1.0,
                 min_wall_m: float = 0.5, simplify_m: float = SIMPLIFY_M) -> pd.DataFrame:
    """Candidate facade spots along every usable wall piece (module docstring: walls, party walls, placement).

    Parameters
    ----------
    buildings : GeoDataFrame with the 'buildings' contract, projected CRS in metres.
    spacing_m : spot spacing along a wall [m].
    mount_heights_m : panel-centre heights above ground [m]; a height is used on a building only when it is at
        most ``height_m - roof_margin_m``.
    roof_margin_m : least distance between a spot and the roof [m].
    offset_m : outward offset of a spot from its wall [m].
    party_gap_m : wall parts within this distance of another building get no spot [m].
    front_clear_m : the first ``front_clear_m`` in front of a spot must not touch any building [m].
    min_wall_m : usable pieces shorter than this (the narrowest panel) get no spot [m].
    simplify_m : tolerance [m] removing near-collinear vertices (``shapely.simplify``).

    Returns
    -------
    DataFrame with the 'sites' contract (site_id = row position, source 'generated') plus site_ref ('').
    ``wall_id`` is the row of :func:`wall_segments` called with the same party_gap_m, min_wall_m, simplify_m.

    Raises
    ------
    InputDataError if the table is empty, has no wall piece at least ``min_wall_m`` long, or no building is
    tall enough for any mounting height.
    """
    where = "facade_spots"
    geoms, height, ids = _buildings(buildings, where)
    spacing_m = _param("spacing_m", spacing_m, job_key="candidates.spacing_m")
    roof_margin_m = _param("roof_margin_m", roof_margin_m, strict=False, job_key="candidates.roof_margin_m")
    offset_m = _param("offset_m", offset_m, strict=False, job_key="candidates.offset_m")
    party_gap_m = _param("party_gap_m", party_gap_m, strict=False, job_key="candidates.party_gap_m")
    front_clear_m = _param("front_clear_m", front_clear_m, strict=False, job_key="candidates.front_clear_m")
    min_wall_m = _param("min_wall_m", min_wall_m, strict=False)
    simplify_m = _param("simplify_m", simplify_m, strict=False)
    hts = np.atleast_1d(np.asarray(mount_heights_m, dtype=float))
    if hts.size == 0 or not np.all(np.isfinite(hts)) or np.any(hts <= 0):
        raise JobError(f"candidates.mount_heights_m: expected one or more heights > 0 [m], got "
                       f"{list(np.atleast_1d(mount_heights_m))}; e.g. [4.0, 8.0]", source="candidate parameters")

    w = _pieces(geoms, party_gap_m=party_gap_m, min_wall_m=min_wall_m, simplify_m=simplify_m)
    if len(w["seg"]) == 0:
        raise InputDataError(f"{where}: no free wall piece is at least min_wall_m = {min_wall_m:g} m long in "
                             f"{len(geoms)} footprint(s) (after removing party walls within {party_gap_m:g} m); "
                             "check that coordinates are in metres, or lower min_wall_m / candidates.party_gap_m")

    piece, t = _positions(w["length"], spacing_m)
    fits = hts[None, :] <= (height[w["b"][piece]] - roof_margin_m)[:, None] + 1e-9
    if not fits.any():
        raise InputDataError(f"{where}: no building is tall enough for a spot: the lowest mounting height "
                             f"{hts.min():g} m plus roof_margin_m {roof_margin_m:g} m exceeds every height_m "
                             f"(max {height.max():g} m); lower candidates.mount_heights_m or roof_margin_m")
    keep = fits.any(axis=1)  # positions (all heights) on buildings tall enough for at least one height
    piece, t, fits = piece[keep], t[keep], fits[keep]
    b = w["b"][piece]
    nrm = w["normal"][piece]
    wall_pt = w["q0"][piece] + t[:, None] * w["unit"][piece]
    spot = wall_pt + offset_m * nrm

    keep = np.ones(len(piece), bool)
    if front_clear_m > 0 or offset_m > 0:
        end = spot + front_clear_m * nrm
        front = shapely.linestrings(np.stack([wall_pt, end], axis=1))
        si, bj = shapely.STRtree(geoms).query(front)  # bounding boxes; the own building is handled below
        other = bj != b[si]
        si, bj = si[other], bj[other]
        keep[si[shapely.intersects(front[si], geoms[bj])]] = False
        # the own building can only lie in front of its own wall where it is not convex (notch, courtyard)
        area = shapely.area(geoms)
        concave = shapely.area(shapely.convex_hull(geoms)) - area > 1e-9 * np.maximum(area, 1.0)
        own = np.flatnonzero(keep & concave[b])
        if len(own):
            ahead = shapely.linestrings(np.stack([spot[own], end[own]], axis=1))
            keep[own[shapely.intersects(ahead, geoms[b[own]])]] = False
    # simplification can move a wall inward by up to simplify_m: never leave a spot inside its own footprint
    keep &= ~shapely.intersects_xy(geoms[b], spot[:, 0], spot[:, 1])

    # every kept position at every mounting height that fits below the roof of its building
    pos_i, h_i = np.nonzero(fits & keep[:, None])
    piece, b, nrm, spot, z = piece[pos_i], b[pos_i], nrm[pos_i], spot[pos_i], hts[h_i]
    out = _sites_table(0, b, ids, piece, spot, z, nrm, w["length"][piece], "generated", np.full(len(piece), ""))
    return tables.check(out, "sites", where)


def _sites_table(start_id, b, ids, piece, spot, z, nrm, free_m, source, refs) -> pd.DataFrame:
    """The 'sites' table of spots at ``spot`` (n, 2) on wall pieces ``piece`` of buildings ``b``."""
    n = len(piece)
    return pd.DataFrame({
        "site_id": np.arange(start_id, start_id + n, dtype=np.int64),
        "building_idx": b.astype(np.int64),
        "building_id": ids[b].astype(object),
        "wall_id": piece.astype(np.int64),
        "x": spot[:, 0],
        "y": spot[:, 1],
        "z_m": z,
        "normal_az_deg": _azimuth_deg(nrm[:, 0], nrm[:, 1]),
        "wall_free_m": free_m,
        "source": np.full(n, source, dtype=object),
        "site_ref": np.asarray(refs).astype(object),
    })


def snap_given_spots(buildings, given, *, snap_tolerance_m: float = 2.0, default_z_m: float = 4.0,
                     offset_m: float = 0.05, start_id: int = 0, party_gap_m: float = 0.5, min_wall_m: float = 0.5,
                     simplify_m: float = SIMPLIFY_M) -> tuple[pd.DataFrame, list[str]]:
    """Snap given spots (site_ref, x, y, optional z_m) to the nearest usable wall piece.

    Each spot is moved to the closest point of the nearest usable wall piece (same pieces and ``wall_id`` as
    :func:`wall_segments` with the same party_gap_m / min_wall_m / simplify_m), then ``offset_m`` outward; it
    takes that wall's outward normal, building and free length.  ``z_m`` comes from the table, or
    ``default_z_m`` where missing/NaN.  Spots farther than ``snap_tolerance_m`` from every usable piece are
    dropped with a warning naming their refs.

    Returns
    -------
    (sites, dropped_refs): sites with the 'sites' contract, source 'given', site_id = start_id + row, site_ref
    kept; dropped_refs the refs of spots too far from any usable wall.
    """
    where = "snap_given_spots"
    geoms, height, ids = _buildings(buildings, where)
    given = _points_table(given, "site_ref", where)
    snap_tolerance_m = _param("snap_tolerance_m", snap_tolerance_m, strict=False,
                              job_key="candidates.snap_tolerance_m")
    default_z_m = _param("default_z_m", default_z_m, job_key="candidates.mount_heights_m")
    offset_m = _param("offset_m", offset_m, strict=False, job_key="candidates.offset_m")
    w = _pieces(geoms, party_gap_m=party_gap_m, min_wall_m=min_wall_m, simplify_m=simplify_m)
    refs = given["site_ref"].astype(str).to_numpy()
    x = given["x"].to_numpy(float)
    y = given["y"].to_numpy(float)
    z = pd.to_numeric(given["z_m"], errors="coerce").to_numpy(float) if "z_m" in given else np.full(len(x), np.nan)
    z = np.where(np.isfinite(z), z, default_z_m)

    piece = np.full(len(x), -1, np.int64)
    if len(w["seg"]) and len(x):
        lines = shapely.linestrings(np.stack([w["q0"], w["q1"]], axis=1))
        pi, wi = shapely.STRtree(lines).query_nearest(shapely.points(x, y), max_distance=snap_tolerance_m,
                                                      all_matches=False)
        piece[pi] = wi
    ok = piece >= 0
    dropped = refs[~ok].tolist()
    if dropped:
        warnings.warn(f"{where}: {len(dropped)} given spot(s) farther than snap_tolerance_m = "
                      f"{snap_tolerance_m:g} m from any usable wall were dropped: {', '.join(dropped[:20])}"
                      f"{' ...' if len(dropped) > 20 else ''}; move them onto a facade or raise "
                      "candidates.snap_tolerance_m", SitingWarning, stacklevel=2)
    p = piece[ok]
    q0, u, nrm, L = w["q0"][p], w["unit"][p], w["normal"][p], w["length"][p]
    t = np.clip(np.einsum("ij,ij->i", np.stack([x[ok], y[ok]], axis=1) - q0, u), 0.0, L)
    spot = q0 + t[:, None] * u + offset_m * nrm
    b = w["b"][p]
    zz = z[ok]
    high = zz > height[b]
    if high.any():
        warnings.warn(f"{where}: given spot(s) {', '.join(refs[ok][high][:10])} are mounted above the roof of "
                      "their building; check z_m", SitingWarning, stacklevel=2)
    out = _sites_table(start_id, b, ids, p, spot, zz, nrm, L, "given", refs[ok])
    return tables.check(out, "sites", where), dropped


# --------------------------------------------------------------------------------------------- demand
_USER_COLS = ["user_id", "x", "y", "z_m", "weight", "kind", "building_idx", "normal_az_deg", "user_ref"]


def _users(x, y, z, weight, kind, building_idx=None, normal=None, ref=None, where="") -> pd.DataFrame:
    n = len(x)
    out = pd.DataFrame({
        "user_id": np.arange(n, dtype=np.int64),
        "x": np.asarray(x, float),
        "y": np.asarray(y, float),
        "z_m": np.broadcast_to(np.asarray(z, float), (n,)).copy(),
        "weight": np.broadcast_to(np.asarray(weight, float), (n,)).copy(),
        "kind": np.broadcast_to(np.asarray(kind, dtype=object), (n,)).copy(),
        "building_idx": (np.full(n, -1, np.int64) if building_idx is None
                         else np.asarray(building_idx, np.int64)),
        "normal_az_deg": np.full(n, np.nan) if normal is None else np.asarray(normal, float),
        "user_ref": np.full(n, "", dtype=object) if ref is None else np.asarray(ref, dtype=object),
    })
    return tables.check(out, "users", where)


def street_grid(buildings, area=None, *, grid_m: float = 5.0, height_m: float = 1.5, clearance_m: float = 0.5,
                weight_per_point: float = 1.0, margin_m: float = 20.0) -> pd.DataFrame:
    """Outdoor demand on a regular grid over the streets (kind 'street').

    Grid points are the integer multiples of ``grid_m`` in the CRS (anchored, so the same point set comes out
    whatever the area or tiling) that lie inside ``area`` (a shapely polygon in the same CRS; default: the
    buildings' bounding box grown by ``margin_m``) and farther than ``clearance_m`` from every footprint
    (exactly the complement of the footprints buffered by ``clearance_m``, via STRtree 'dwithin').  Each point
    carries ``weight_per_point`` (a point stands for one grid cell of ``grid_m**2``; to weight by area use
    ``weight_per_point = grid_m**2 / reference_area_m2``).

    Returns
    -------
    DataFrame with the 'users' contract, kind 'street', building_idx -1, normal_az_deg NaN, z_m = height_m.
    """
    where = "street_grid"
    geoms, _, _ = _buildings(buildings, where)
    grid_m = _param("grid_m", grid_m, job_key="demand.grid_m")
    height_m = _param("height_m", height_m, strict=False, job_key="demand.street_height_m")
    clearance_m = _param("clearance_m", clearance_m, strict=False)
    weight_per_point = _param("weight_per_point", weight_per_point, strict=False, job_key="demand.street_weight")
    margin_m = _param("margin_m", margin_m, strict=False)
    if area is None:
        x0, y0, x1, y1 = shapely.total_bounds(geoms)
        area = shapely.box(x0 - margin_m, y0 - margin_m, x1 + margin_m, y1 + margin_m)
    elif not isinstance(area, shapely.Geometry) or shapely.get_type_id(area) not in (_POLYGON, _MULTIPOLYGON) \
            or area.is_empty:
        raise InputDataError(f"{where}: expected the area of interest as a shapely Polygon or MultiPolygon in the "
                             f"buildings' CRS, got {type(area).__name__}; check the area.polygon layer")
    x0, y0, x1, y1 = area.bounds
    ix = np.arange(math.ceil(x0 / grid_m), math.floor(x1 / grid_m) + 1, dtype=np.int64)
    iy = np.arange(math.ceil(y0 / grid_m), math.floor(y1 / grid_m) + 1, dtype=np.int64)
    if len(ix) * len(iy) > 50_000_000:
        raise InputDataError(f"{where}: the area of interest holds {len(ix) * len(iy):,} grid points at grid_m = "
                             f"{grid_m:g} m; expected at most 50,000,000. Tile the city or raise demand.grid_m")
    gx, gy = np.meshgrid(ix * grid_m, iy * grid_m)
    shapely.prepare(area)
    inside = shapely.contains_xy(area, gx, gy)
    # grid cells under some building's bounding box grown by the clearance (2-D difference array, no loop):
    # only those points need an exact distance test, the rest are free
    if len(ix) and len(iy):
        c = clearance_m
        bx0, by0, bx1, by1 = shapely.bounds(geoms).T
        jx0 = np.clip(np.ceil((bx0 - c) / grid_m) - ix[0], 0, len(ix)).astype(np.int64)
        jx1 = np.clip(np.floor((bx1 + c) / grid_m) - ix[0] + 1, 0, len(ix)).astype(np.int64)
        jy0 = np.clip(np.ceil((by0 - c) / grid_m) - iy[0], 0, len(iy)).astype(np.int64)
        jy1 = np.clip(np.floor((by1 + c) / grid_m) - iy[0] + 1, 0, len(iy)).astype(np.int64)
        ok = (jx1 > jx0) & (jy1 > jy0)
        diff = np.zeros((len(iy) + 1, len(ix) + 1), np.int32)
        for r, cc, v in ((jy0, jx0, 1), (jy0, jx1, -1), (jy1, jx0, -1), (jy1, jx1, 1)):
            np.add.at(diff, (r[ok], cc[ok]), v)
        near = diff.cumsum(0).cumsum(1)[:-1, :-1] > 0
    else:
        near = np.zeros(gx.shape, bool)
    free = inside & ~near
    cand_i = np.flatnonzero(inside & near)
    pts = shapely.points(gx.ravel()[cand_i], gy.ravel()[cand_i])
    tree = shapely.STRtree(geoms)
    if clearance_m > 0:
        pi, _ = tree.query(pts, predicate="dwithin", distance=clearance_m)
    else:
        pi, _ = tree.query(pts, predicate="intersects")
    ok_c = np.ones(len(cand_i), bool)
    ok_c[pi] = False
    free.ravel()[cand_i[ok_c]] = True
    sel = np.flatnonzero(free.ravel())  # row-major: sorted by y, then x, as before
    return _users(gx.ravel()[sel], gy.ravel()[sel], height_m, weight_per_point, "street", where=where)


def facade_homes(buildings, *, storey_height_m: float = 3.0, window_height_m: float = 1.5,
                 home_spacing_m: float = 10.0, area_per_household_m2: float = 80.0, offset_m: float = 0.05,
                 party_gap_m: float = 0.5, min_wall_m: float = 1.0, simplify_m: float = SIMPLIFY_M) -> pd.DataFrame:
    """Fixed-wireless terminals at windows on every floor of every facade (kind 'home').

    ``levels = max(1, floor(height_m / storey_height_m))``; floor ``k`` (0-based) has its windows at
    ``k * storey_height_m + window_height_m``.  Along each usable wall piece (same walls as the spots, party walls
    cut out, pieces shorter than ``min_wall_m`` skipped) windows follow the centred placement rule with spacing
    ``home_spacing_m``, offset ``offset_m`` outward and facing the outward normal.  A building holds
    ``levels * footprint_area / area_per_household_m2`` households (footprint area without courtyards), spread
    evenly over all its window points; a building with no usable facade loses its households (warning).

    Returns
    -------
    DataFrame with the 'users' contract, kind 'home', building_idx the host row, normal_az_deg set.
    """
    where = "facade_homes"
    geoms, height, _ = _buildings(buildings, where)
    storey_height_m = _param("storey_height_m", storey_height_m, job_key="inputs.storey_height_m")
    window_height_m = _param("window_height_m", window_height_m, strict=False)
    home_spacing_m = _param("home_spacing_m", home_spacing_m, job_key="demand.home_spacing_m")
    area_per_household_m2 = _param("area_per_household_m2", area_per_household_m2,
                                   job_key="demand.area_per_household_m2")
    offset_m = _param("offset_m", offset_m, strict=False, job_key="candidates.offset_m")
    w = _pieces(geoms, party_gap_m=party_gap_m, min_wall_m=min_wall_m, simplify_m=simplify_m)
    levels = np.maximum(1, np.floor(height / storey_height_m * (1 + _EPS))).astype(np.int64)
    households = levels * shapely.area(geoms) / area_per_household_m2

    piece, t = _positions(w["length"], home_spacing_m)
    b = w["b"][piece]
    floors = levels[b]
    rep = np.repeat(np.arange(len(piece)), floors)
    k = np.arange(len(rep)) - np.repeat(np.cumsum(floors) - floors, floors)
    piece, t, b = piece[rep], t[rep], b[rep]
    nrm = w["normal"][piece]
    xy = w["q0"][piece] + t[:, None] * w["unit"][piece] + offset_m * nrm
    z = k * storey_height_m + window_height_m
    per_building = np.bincount(b, minlength=len(geoms))
    lost = (per_building == 0) & (households > 0)
    if lost.any():
        warnings.warn(f"{where}: {int(lost.sum())} building(s) have no usable facade for home terminals (party "
                      f"walls or walls shorter than {min_wall_m:g} m); their {households[lost].sum():.1f} estimated "
                      "households are not in the demand", SitingWarning, stacklevel=2)
    weight = households[b] / per_building[b] if len(b) else np.zeros(0)
    return _users(xy[:, 0], xy[:, 1], z, weight, "home", building_idx=b,
                  normal=_azimuth_deg(nrm[:, 0], nrm[:, 1]), where=where)


def given_users(buildings, given, *, allow_indoor: bool = False, default_z_m: float = 1.5) -> tuple[pd.DataFrame, int]:
    """Given demand points (user_ref, x, y, optional z_m, optional weight) as kind 'given'.

    Points inside or on a footprint are kept as kind 'indoor' with building_idx set to the lowest such building
    row when ``allow_indoor`` is true; otherwise they are dropped (warning) and counted.  Missing z_m -> default_z_m;
    missing weight column -> 1.0 per point; weights must be finite and >= 0.

    Returns
    -------
    (users, n_dropped_indoor)
    """
    where = "given_users"
    geoms, _, _ = _buildings(buildings, where)
    given = _points_table(given, "user_ref", where)
    default_z_m = _param("default_z_m", default_z_m, strict=False)
    refs = given["user_ref"].astype(str).to_numpy()
    x = given["x"].to_numpy(float)
    y = given["y"].to_numpy(float)
    z = pd.to_numeric(given["z_m"], errors="coerce").to_numpy(float) if "z_m" in given else np.full(len(x), np.nan)
    z = np.where(np.isfinite(z), z, default_z_m)
    if "weight" in given:
        wgt = pd.to_numeric(given["weight"], errors="coerce").to_numpy(float)
        bad = ~np.isfinite(wgt) | (wgt < 0)
        if bad.any():
            raise InputDataError(f"{where}: expected weight >= 0, got {int(bad.sum())} missing or negative weights "
                                 f"(user_ref {', '.join(refs[bad][:5])}); fix the weight column "
                                 "(inputs.user_weight_column)")
    else:
        wgt = np.ones(len(x))
    host = np.full(len(x), -1, np.int64)
    if len(x):
        pi, bj = shapely.STRtree(geoms).query(shapely.points(x, y), predicate="intersects")
        o = np.lexsort((-bj, pi))  # per point, the lowest building row is written last
        host[pi[o]] = bj[o]
    indoor = host >= 0
    n_indoor = int(indoor.sum())
    kind = np.where(indoor, "indoor", "given").astype(object)
    if not allow_indoor:
        keep = ~indoor
        if n_indoor:
            warnings.warn(f"{where}: {n_indoor} given user(s) inside buildings were dropped ("
                          f"{', '.join(refs[indoor][:10])}{' ...' if n_indoor > 10 else ''}); set "
                          "demand.allow_indoor = true to keep them as indoor users", SitingWarning, stacklevel=2)
        x, y, z, wgt, kind, host, refs = x[keep], y[keep], z[keep], wgt[keep], kind[keep], host[keep], refs[keep]
        dropped = n_indoor
    else:
        dropped = 0
    return _users(x, y, z, wgt, kind, building_idx=host, ref=refs, where=where), dropped


def combine_users(*tables_) -> pd.DataFrame:
    """Stack users tables (any of the demand sources) and renumber ``user_id`` as 0..n-1.

    Extra columns are kept; a missing ``user_ref`` becomes ''.
    """
    frames = [t for t in tables_ if t is not None]
    for i, t in enumerate(frames):
        tables.check(t, "users", f"combine_users argument {i}")
    if not frames:
        return _users(np.zeros(0), np.zeros(0), 0.0, 0.0, "given", where="combine_users")
    out = pd.concat([f for f in frames if len(f)] or frames[:1], ignore_index=True)
    out["user_id"] = np.arange(len(out), dtype=np.int64)
    out["building_idx"] = out["building_idx"].astype(np.int64)
    out["user_ref"] = out["user_ref"].fillna("").astype(object) if "user_ref" in out else ""
    for c in ("x", "y", "z_m", "weight", "normal_az_deg"):
        out[c] = out[c].astype(float)
    out["kind"] = out["kind"].astype(object)
    return tables.check(out, "users", "combine_users")
