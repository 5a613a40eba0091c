"""Survey verdicts from the field, and re-planning around them without changing the optimiser.

The field teams get the survey list (``survey.csv``) and fill in, per visited site, the verdict columns it goes
out with (:data:`VERDICT_COLUMNS`); the filled-in file is the job's ``inputs.survey_results``.  One row per site
(keep one results file for the whole campaign and update a site's row when it is visited again):

==========================  ====================================================================================
``site_id``                 the site id of the survey list (a backup spot's id may be used too)
``status``                  ``accepted``, ``rejected``, ``moved`` or ``pending`` (blank = pending)
``reason``                  free text (owner, heritage, no access, no fixing point, ...)
``measured_lon/lat``        WGS84 degrees of the spot actually found (required for ``moved``)
``measured_mount_height_m`` panel centre height found [m] (moved: default the planned height)
``measured_facing_deg``     wall facing found, clockwise from north [deg] (checked against the snapped wall)
``largest_panel``           the largest catalogue ``size_id`` that fits there (blank = any)
``rejects_wall``            ``true``: the whole wall is refused, every spot on it goes (blank = false)
``job_fingerprint``         written by the tool into the survey list: the candidate set the ids belong to
==========================  ====================================================================================

Re-planning (:func:`solve_with_verdicts`, on the optimiser's arrays):

- rejected sites lose every option; with ``rejects_wall`` every spot on that wall does;
- options of a panel larger (wider or taller) than ``largest_panel`` go;
- a moved site loses its options; a given spot at the measured position, snapped to the nearest usable wall like
  the job's given spots (:func:`siting.candidates.snap_given_spots`), takes its place and is fixed like an accepted
  site (the team moves a site only to a spot it found workable; set the row to rejected to drop it instead); other
  spots on that wall closer than the panel width (or ``budget.min_spacing_m``) go;
- accepted sites are fixed with their planned size (or the largest that fits): the residual problem is solved
  exactly: their options and the other options at their sites go, their cost comes off the budget and one each
  off the panel count, the users they cover count as covered (weight 0), spots in spacing conflict with them go;
  the residual optimum plus the accepted options is the optimum among plans that contain them (maximum coverage
  and minimum cost).  With a per-surface load cap the accepted surfaces may not serve every user they cover, so
  the re-plan is then approximate (a note says so).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import scipy.sparse as sp

from . import optimize as opt
from .cache import digest
from .errors import InputDataError

STATUSES = ("accepted", "rejected", "moved", "pending")
VERDICT_COLUMNS = ("status", "reason", "measured_lon", "measured_lat", "measured_mount_height_m",
                   "measured_facing_deg", "largest_panel", "rejects_wall")
FINGERPRINT_COLUMN = "job_fingerprint"
_NUMERIC = ("measured_lon", "measured_lat", "measured_mount_height_m", "measured_facing_deg")
_TRUE, _FALSE = ("true", "yes", "1"), ("false", "no", "0", "")


def job_fingerprint(sites: pd.DataFrame) -> str:
    """A short fingerprint of a candidate set: site ids mean the same spots only under the same fingerprint.

    Hashes each generated or given spot's position (cm), height and facing in id order (moved spots added by a
    re-plan are left out, so a re-plan keeps the fingerprint of the plan it came from).
    """
    base = sites[sites["source"].astype(str) != "moved"] if "source" in sites else sites
    cols = base[["x", "y", "z_m", "normal_az_deg"]].to_numpy(float).round(2)
    return digest([base["site_id"].to_numpy(np.int64).tolist(), cols.tolist()])[:12]


@dataclass(frozen=True)
class Verdicts:
    """The validated verdicts of one results file, one row per site.

    Attributes
    ----------
    table : pandas.DataFrame
        site_id (int), line (the file's line number), status, reason, measured_lon, measured_lat [deg],
        measured_mount_height_m [m], measured_facing_deg [deg] (NaN when not given), largest_panel (size_id or
        ''), rejects_wall (bool), planned_size_id (the survey list's size_id, or '').
    source : str
        The file read.
    notes : tuple of str
        What was noticed but not refused (e.g. no fingerprint column).
    """

    table: pd.DataFrame
    source: str
    notes: tuple[str, ...] = ()

    def key(self) -> str:
        """A digest of the verdicts (for the stage cache)."""
        return digest(self.table.drop(columns=["line"]).to_json(orient="records", double_precision=10))

    def of(self, status: str) -> pd.DataFrame:
        return self.table[self.table["status"] == status]


def _text(v) -> str:
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    s = str(v).strip()
    return s[1:] if s.startswith("'") else s  # the survey writer's guard against spreadsheet formulas


def _row_problems(r: dict, line: int, known: set[int], sizes: set[str], fp: str | None) -> list[str]:
    """Problems of one row: id, status, fingerprint, numbers, panel, flag, contradictions within the row."""
    out = []
    where = f"line {line}"
    sid = _text(r.get("site_id"))
    try:
        site = int(float(sid))
        if site != float(sid):
            raise ValueError
    except ValueError:
        return [f"{where}: site_id {sid!r} is not an integer site id; copy the id from the survey list"]
    if site not in known:
        out.append(f"{where}: site {site} is not a candidate spot of this job (ids 0..{max(known, default=-1)}); "
                   "check the id against the survey list")
    status = _text(r.get("status")).lower() or "pending"
    if status not in STATUSES:
        out.append(f"{where}: status {r.get('status')!r} of site {site} is not one of {', '.join(STATUSES)}")
    given_fp = _text(r.get(FINGERPRINT_COLUMN))
    if fp is not None and given_fp and given_fp != fp:
        out.append(f"{where}: site {site} belongs to another job or candidate set (fingerprint {given_fp}, this "
                   f"job's is {fp}); use the survey list of this job, or remove the row")
    for c in _NUMERIC:
        t = _text(r.get(c))
        if t:
            try:
                float(t)
            except ValueError:
                out.append(f"{where}: {c} = {t!r} of site {site} is not a number")
    panel = _text(r.get("largest_panel"))
    if panel and panel not in sizes:
        out.append(f"{where}: largest_panel {panel!r} of site {site} is not a catalogue size_id "
                   f"({', '.join(sorted(sizes))})")
    flag = _text(r.get("rejects_wall")).lower()
    if flag not in _TRUE + _FALSE:
        out.append(f"{where}: rejects_wall = {flag!r} of site {site}: write true or false")
    elif flag in _TRUE and status != "rejected":
        out.append(f"{where}: site {site} is {status} but rejects_wall is true; a refused wall needs status "
                   "rejected (or set rejects_wall false)")
    if status == "moved" and not (_text(r.get("measured_lon")) and _text(r.get("measured_lat"))):
        out.append(f"{where}: site {site} is moved but measured_lon / measured_lat are empty; give the WGS84 "
                   "position of the spot found")
    return out


def _read_csv(path: Path) -> tuple[pd.DataFrame, str | None]:
    """The results file as text cells, or a sentence saying why it is no survey list (not CSV, no site_id or
    status column)."""
    try:
        raw = pd.read_csv(path, dtype=str, keep_default_na=False)
    except (OSError, pd.errors.ParserError, UnicodeDecodeError, pd.errors.EmptyDataError) as exc:
        return pd.DataFrame(), (f"inputs.survey_results '{path}': cannot read it as CSV ({exc}); give the survey "
                                "list with the verdict columns filled in")
    missing = [c for c in ("site_id", "status") if c not in raw.columns]
    if missing:
        return raw, (f"inputs.survey_results '{path}': missing column(s) {', '.join(missing)}; start from the "
                     "survey list (survey.csv) the plan wrote and fill in its status column")
    return raw, None


def survey_file_problem(path: str | Path) -> str | None:
    """Why ``path`` is no survey results file (not CSV, no ``site_id`` / ``status`` column), or None; the rows are
    checked by :func:`read_verdicts` once the candidate spots are known.  Used by the job checks before any
    layer is read (:func:`siting.preflight.check_job`)."""
    return _read_csv(Path(path))[1]


def read_verdicts(path: str | Path, sites: pd.DataFrame, sizes: pd.DataFrame, *,
                  fingerprint: str | None = None) -> Verdicts:
    """Read and check a survey results CSV (see the module docstring for its columns).

    Parameters
    ----------
    path : str or Path
        The filled-in survey list (``inputs.survey_results``).
    sites : pandas.DataFrame
        This job's candidate spots (the ids the rows must name).
    sizes : pandas.DataFrame
        The panel catalogue (``largest_panel`` must name one of its ``size_id``).
    fingerprint : str, optional
        This job's :func:`job_fingerprint`; rows carrying another one are refused.

    Raises
    ------
    InputDataError
        (exit code 2) naming every bad row by line number and the fix: an unknown or non-integer site id, a site
        of another job, a bad status, a duplicate or contradictory row, a moved site without a position.
    """
    path = Path(path)
    raw, problem = _read_csv(path)
    if problem:
        raise InputDataError(problem)
    notes = [] if FINGERPRINT_COLUMN in raw.columns else [
        f"inputs.survey_results '{path.name}' has no {FINGERPRINT_COLUMN} column: rows could not be checked "
        "against this job's candidate set"]
    known = set(sites["site_id"].astype(int).tolist())
    size_ids = set(sizes["size_id"].astype(str))
    problems: list[str] = []
    rows = []
    for i, r in enumerate(raw.to_dict("records")):
        if not any(_text(v) for v in r.values()):
            continue  # blank line
        line = i + 2  # the header is line 1
        bad = _row_problems(r, line, known, size_ids, fingerprint)
        problems += bad
        if bad:
            continue
        rows.append({"site_id": int(float(_text(r["site_id"]))), "line": line,
                     "status": _text(r.get("status")).lower() or "pending", "reason": _text(r.get("reason")),
                     **{c: float(_text(r.get(c))) if _text(r.get(c)) else np.nan for c in _NUMERIC},
                     "largest_panel": _text(r.get("largest_panel")),
                     "rejects_wall": _text(r.get("rejects_wall")).lower() in _TRUE,
                     "planned_size_id": _text(r.get("size_id"))})
    table = pd.DataFrame(rows, columns=["site_id", "line", *VERDICT_COLUMNS, "planned_size_id"])
    problems += _duplicates(table)
    problems += _wall_contradictions(table, sites)
    if problems:
        raise InputDataError(f"inputs.survey_results '{path}': {len(problems)} bad row(s):\n  - "
                             + "\n  - ".join(problems)
                             + "\nfix these rows (one row per site; update a site's row when it is visited again)")
    return Verdicts(table.reset_index(drop=True), str(path), tuple(notes))


def _duplicates(table: pd.DataFrame) -> list[str]:
    out = []
    for site, grp in table.groupby("site_id", sort=True):
        if len(grp) < 2:
            continue
        lines = ", ".join(str(x) for x in grp["line"])
        same = grp.drop(columns=["line"]).astype(str).drop_duplicates()
        if len(same) == 1:
            out.append(f"lines {lines}: site {site} is listed {len(grp)} times with the same verdict (duplicate); "
                       "keep one row")
        else:
            out.append(f"lines {lines}: site {site} has contradictory verdicts "
                       f"({' / '.join(grp['status'])}); keep the one row that holds")
    return out


def _wall_contradictions(table: pd.DataFrame, sites: pd.DataFrame) -> list[str]:
    """An accepted site on a wall another row refuses as a whole."""
    if not len(table) or "wall_id" not in sites:
        return []
    wall = sites.set_index("site_id")["wall_id"]
    refused = table[table["rejects_wall"]]
    out = []
    for _, acc in table[table["status"] == "accepted"].iterrows():
        hit = refused[wall.reindex(refused["site_id"]).to_numpy() == wall.get(acc["site_id"], -1)]
        for _, rej in hit.iterrows():
            out.append(f"lines {rej['line']} and {acc['line']}: site {acc['site_id']} is accepted but site "
                       f"{rej['site_id']} refuses their whole wall; correct one of the two rows")
    return out


# ------------------------------------------------------------------------------------------------ moved spots
def moved_spots(verdicts: Verdicts, district, sites: pd.DataFrame, sizes: pd.DataFrame, c) -> pd.DataFrame:
    """Given spots at the measured positions of moved sites, snapped to the nearest usable wall.

    ``c`` is the job's ``candidates`` section (snap tolerance, offset, party gap).  The spots get the next site
    ids in the order of the results file, ``source = 'moved'`` and ``site_ref`` = the id of the site they replace.
    Raises :class:`InputDataError` naming the rows whose position is farther than the snap tolerance from a wall.
    """
    import pyproj

    from .candidates import snap_given_spots

    moved = verdicts.of("moved").sort_values("line", kind="stable")
    if not len(moved):
        return sites.iloc[:0].copy()
    to_xy = pyproj.Transformer.from_crs("EPSG:4326", district.crs, always_xy=True)
    x, y = to_xy.transform(moved["measured_lon"].to_numpy(float), moved["measured_lat"].to_numpy(float))
    planned_z = sites.set_index("site_id")["z_m"].reindex(moved["site_id"]).to_numpy(float)
    z = np.where(np.isfinite(moved["measured_mount_height_m"].to_numpy(float)),
                 moved["measured_mount_height_m"].to_numpy(float), planned_z)
    given = pd.DataFrame({"site_ref": moved["site_id"].astype(str).to_numpy(), "x": x, "y": y, "z_m": z})
    spots, dropped = snap_given_spots(district.buildings, given, snap_tolerance_m=c.snap_tolerance_m,
                                      default_z_m=float(c.mount_heights_m[0]), offset_m=c.offset_m,
                                      party_gap_m=c.party_gap_m, min_wall_m=float(sizes["width_m"].min()),
                                      start_id=int(sites["site_id"].max()) + 1 if len(sites) else 0)
    if dropped:
        lines = moved.set_index(moved["site_id"].astype(str))["line"]
        raise InputDataError(
            f"inputs.survey_results '{verdicts.source}': " + "; ".join(
                f"line {lines[r]}: the measured position of moved site {r} is farther than "
                f"candidates.snap_tolerance_m = {c.snap_tolerance_m:g} m from any usable wall" for r in dropped)
            + "; check measured_lon / measured_lat (WGS84 degrees) or raise candidates.snap_tolerance_m")
    spots["source"] = "moved"
    return spots


def facing_notes(verdicts: Verdicts, spots: pd.DataFrame, tolerance_deg: float = 45.0) -> list[str]:
    """Moved spots whose snapped wall faces more than ``tolerance_deg`` away from the measured facing."""
    moved = verdicts.of("moved").set_index(verdicts.of("moved")["site_id"].astype(str))
    out = []
    for _, s in spots.iterrows():
        facing = moved.loc[str(s["site_ref"]), "measured_facing_deg"]
        if np.isfinite(facing):
            diff = abs((float(s["normal_az_deg"]) - facing + 180.0) % 360.0 - 180.0)
            if diff > tolerance_deg:
                out.append(f"moved site {s['site_ref']}: the nearest wall faces {s['normal_az_deg']:.0f} deg, the "
                           f"team measured {facing:.0f} deg; check the position (spot {s['site_id']})")
    return out


# -------------------------------------------------------------------------------------------- option masks
@dataclass(frozen=True)
class Restriction:
    """What the verdicts do to the options (arrays over the options table, in its order).

    Attributes
    ----------
    keep : numpy.ndarray of bool
        Options still allowed (accepted ones included).
    why : numpy.ndarray of str
        Why an option went ('' when kept): rejected, wall rejected, moved, panel too large.
    fixed : numpy.ndarray of int
        Option ids of the accepted sites (one per site).
    """

    keep: np.ndarray
    why: np.ndarray
    fixed: np.ndarray


def restrict_options(verdicts: Verdicts, sites: pd.DataFrame, options: pd.DataFrame,
                     sizes: pd.DataFrame, moved_to: dict[int, int] | None = None) -> Restriction:
    """Allowed options and the fixed options (accepted sites, spots of moved sites) under the verdicts.

    A fixed site takes the size it was planned with (the survey list's ``size_id``) when that size is allowed
    there, else its largest allowed size (by area, then cost).  ``moved_to`` maps a moved site to the spot that
    replaces it (:func:`moved_spots`); that row's ``largest_panel`` applies to the spot.
    Raises :class:`InputDataError` when a fixed site has no allowed option.
    """
    t = verdicts.table
    site_of = options["site_id"].to_numpy(np.int64)
    why = np.full(len(options), "", dtype=object)
    wall = sites.set_index("site_id")["wall_id"]
    walls = set(wall.reindex(t.loc[t["rejects_wall"], "site_id"]).tolist())
    opt_wall = wall.reindex(site_of).to_numpy()
    why[np.isin(opt_wall, list(walls))] = "wall rejected"
    why[np.isin(site_of, t.loc[t["status"] == "rejected", "site_id"])] = "rejected"
    why[np.isin(site_of, t.loc[t["status"] == "moved", "site_id"])] = "moved"
    dims = sizes.set_index(sizes["size_id"].astype(str))[["width_m", "height_m"]]
    ow = sizes["width_m"].to_numpy(float)[options["size_idx"].to_numpy(np.int64)]
    oh = sizes["height_m"].to_numpy(float)[options["size_idx"].to_numpy(np.int64)]
    moved_to = moved_to or {}
    target = np.array([moved_to.get(int(s), int(s)) if st == "moved" else int(s)
                       for s, st in zip(t["site_id"], t["status"])], np.int64)
    for i in np.flatnonzero((t["largest_panel"] != "").to_numpy()):
        w, h = dims.loc[t["largest_panel"].iloc[i]]
        big = (site_of == target[i]) & ((ow > w + 1e-9) | (oh > h + 1e-9)) & (why == "")
        why[big] = "panel too large"
    keep = why == ""
    fixed = []
    area = ow * oh
    cost = options["cost"].to_numpy(float)
    for i in np.flatnonzero(t["status"].isin(["accepted", "moved"]).to_numpy()):
        r = t.iloc[i]
        at = np.flatnonzero((site_of == target[i]) & keep)
        if not len(at):
            raise InputDataError(f"inputs.survey_results '{verdicts.source}': line {r['line']}: {r['status']} site "
                                 f"{r['site_id']} has no panel size that fits there (largest_panel "
                                 f"{r['largest_panel'] or '-'}); correct largest_panel or the status")
        same = at[options["size_id"].astype(str).to_numpy()[at] == r["planned_size_id"]]
        fixed.append(int(same[0]) if len(same) else int(at[np.lexsort((cost[at], -area[at]))[0]]))
    return Restriction(keep, why.astype(str), np.asarray(fixed, np.int64))


# ------------------------------------------------------------------------------------------ residual solve
def _conflict_partners(conflicts: np.ndarray, sites_fixed: np.ndarray) -> np.ndarray:
    conf = np.asarray(conflicts, np.int64).reshape(-1, 2)
    a = conf[np.isin(conf[:, 0], sites_fixed), 1]
    b = conf[np.isin(conf[:, 1], sites_fixed), 0]
    return np.unique(np.concatenate([a, b]))


def solve_with_verdicts(cover, weight, cost, option_site, keep, fixed, *, budget=None, max_count=None,
                        conflicts=None, load_cap=None, target_weight=None, **solver_kw) -> tuple[opt.Plan, dict]:
    """The best plan among plans that use only ``keep`` options and contain every ``fixed`` option.

    Parameters
    ----------
    cover, weight, cost, option_site : arrays
        As :func:`siting.optimize.solve_coverage` (cost [currency], weight [weight units]).
    keep : (n_options,) bool
        Options allowed by the verdicts (the fixed ones among them).
    fixed : (k,) int
        Accepted options, at most one per site.
    budget, max_count, conflicts, load_cap : as :func:`siting.optimize.solve_coverage` (the whole plan's limits).
    target_weight : float, optional
        Minimum cost mode: the weight [weight units] the whole plan must cover.
    **solver_kw
        Solver keywords (solver, time_limit_s, mip_rel_gap, threads).

    Returns
    -------
    (Plan, info)
        The plan in the caller's option numbering (fixed options first, ``objective``/``bound``/``cost`` of the
        whole plan); ``info`` holds the residual option ids (``free``), the weights the residual solve saw
        (``residual_weight``), ``fixed_weight``, ``fixed_cost``, ``exact`` and ``notes``.
    """
    C = sp.csr_array(cover)
    w = np.asarray(weight, float)
    c = np.asarray(cost, float)
    site = np.asarray(option_site, np.int64)
    fixed = np.asarray(fixed, np.int64)
    conf = np.zeros((0, 2), np.int64) if conflicts is None else np.asarray(conflicts, np.int64).reshape(-1, 2)
    notes: list[str] = []
    fixed_sites = site[fixed]
    hit = np.zeros(C.shape[1], bool)
    if len(fixed):
        hit[C[fixed].indices] = True
    gone = np.isin(site, fixed_sites) | np.isin(site, _conflict_partners(conf, fixed_sites))
    free = np.flatnonzero(np.asarray(keep, bool) & ~gone)
    w_res = np.where(hit, 0.0, w)
    fixed_cost, fixed_weight = float(c[fixed].sum()), float(w[hit].sum())
    b_res = None if budget is None else float(budget) - fixed_cost
    k_res = None if max_count is None else int(max_count) - len(fixed)
    if (b_res is not None and b_res < -1e-9) or (k_res is not None and k_res < 0):
        notes.append(f"the accepted sites alone exceed the limits (cost {fixed_cost:g}, {len(fixed)} panels); "
                     "the plan holds them and nothing else")
        b_res = None if b_res is None else 0.0
        k_res = None if k_res is None else 0
        free = free[:0]
    exact = load_cap is None
    if not exact and len(fixed):
        notes.append("with a load cap the re-plan around accepted sites is approximate: their users are taken as "
                     "served although a capped surface may not serve them all")
    cap = load_cap if load_cap is None or np.isscalar(load_cap) else np.asarray(load_cap, float)[free]
    sub_conf = conf[np.isin(conf, site[free]).all(axis=1)] if len(conf) else conf
    args = (C[free], w_res, c[free], site[free])
    if target_weight is None:
        plan = opt.solve_coverage(*args, budget=b_res, max_count=k_res, conflicts=sub_conf, load_cap=cap, **solver_kw)
    else:
        need = max(float(target_weight) - fixed_weight, 0.0)
        plan = opt.min_cost_cover(*args, need, budget=b_res, max_count=k_res, conflicts=sub_conf, load_cap=cap,
                                  **solver_kw)
    chosen = np.concatenate([fixed, free[np.asarray(plan.chosen, np.int64)]]).astype(np.int64)
    covered = np.asarray(plan.covered, bool) | hit
    objective = plan.objective + fixed_weight
    whole_cost = plan.cost + fixed_cost
    if plan.mode == "min_cost":
        bound = min(plan.bound + fixed_cost, whole_cost)
        gap = (whole_cost - bound) / whole_cost if whole_cost > 0 else 0.0
    else:
        bound = max(plan.bound + fixed_weight, objective)
        gap = (bound - objective) / bound if bound > 0 else 0.0
    message = plan.message
    if len(fixed):
        message = (f"{len(fixed)} accepted site(s) fixed (cost {fixed_cost:g}, weight {fixed_weight:g}); the rest "
                   f"re-planned: {plan.message}")
    whole = dataclasses.replace(plan, chosen=chosen, covered=covered, objective=objective, bound=bound, gap=gap,
                                cost=whole_cost, message=message)
    info = {"free": free, "residual_weight": w_res, "fixed_weight": fixed_weight, "fixed_cost": fixed_cost,
            "exact": exact, "notes": notes, "residual_plan": plan}
    return whole, info
