"""Candidate facade spots for surfaces and demand points (the ``sites`` and ``users`` tables of :mod:`siting.tables`).

The wall pieces come from :func:`siting.walls.wall_segments` (simplified, oriented rings with party walls cut
out), the demand points from :mod:`siting.demand`; both are re-exported here.

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

import warnings

import numpy as np
import pandas as pd
import shapely

from . import tables
from .candidate_inputs import _buildings, _param, _points_table
from .demand import combine_users, facade_homes, given_users, street_grid
from .errors import InputDataError, JobError, SitingWarning
from .walls import SIMPLIFY_M, _azimuth_deg, _pieces, _positions, wall_segments

__all__ = [
    "wall_segments",
    "facade_spots",
    "snap_given_spots",
    "street_grid",
    "facade_homes",
    "given_users",
    "combine_users",
    "SIMPLIFY_M",
]


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
