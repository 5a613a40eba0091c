"""Job-level checks run by ``siting validate`` and at the start of ``siting plan``, before any heavy stage.

Visibility and link gains take hours on a city, so every problem that can be seen from the job, the input files
and the loaded district is reported before them, all at once, in one :class:`~siting.errors.JobError` (exit
code 2) whose lines name the key, the file or the feature and the fix:

* :func:`check_job` (before any layer is read): the job sets no budget limit; the job has no demand source or
  no facade spot source; an input file (a layer, the area polygon, the survey results, the previous plan, the
  scenarios file) is missing, a folder, unreadable, empty or a link loop; the survey results lack their
  ``site_id`` / ``status`` columns or the previous plan is not a siting ``run.json``; the users layer lacks the
  column ``inputs.user_weight_column`` names; the output folder is unsafe (it is or contains an
  input or the job file, is the file-system root or a home folder, is a file, is not writable, or is a
  non-empty folder siting did not create and ``overwrite`` is off; see
  :func:`siting.outputs.folder.output_folder_problems`).
* :func:`check_district` (after the layers are read): no demand point can come out of the loaded layers; it
  also notes base stations farther than ``radio.bs_range_m`` from every building.
* :func:`check_demand` (after the demand points are made, before the gains): no demand point, or no weight.
"""

from __future__ import annotations

import difflib
import os
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import shapely

from .errors import JobError, SitingWarning
from .inputs.files import file_problem
from .job import SCHEMA, Job

#: The words of a note whose data leaves nothing to plan (printed on the console by :func:`console_warnings`).
PLAN_WILL_BE_EMPTY = "the plan will be empty"
#: What misplaced data usually is.
MISPLACED_HINT = ("swapped coordinates (GeoJSON is longitude first, then latitude) or a wrong CRS (inputs.crs, or "
                  "the CRS the layer file declares)")


def input_files(job: Job) -> list[tuple[str, Path]]:
    """``(what, path)`` of every input file the job reads: the layers and the area polygon."""
    pairs = [("buildings file", job.inputs.buildings), ("base_stations file", job.inputs.base_stations),
             ("sites file", job.inputs.sites), ("users file", job.inputs.users),
             ("area polygon file", job.area.polygon)]
    return [(what, Path(p)) for what, p in pairs if p]


def output_files(job: Job) -> list[str]:
    """The files (relative paths) the job's output set will hold."""
    from .outputs.folder import planned_files

    extra = ["los_graph.graphml"] if job.output.los_graph else []
    return planned_files(job.output.formats, job.output.candidates_layer, extra)


def job_problems(job: Job) -> list[str]:
    """Problems that only the combination of keys shows (each key alone is valid)."""
    problems = []
    b = job.budget
    if b.max_cost is None and b.max_panels is None and b.target_share is None:
        problems.append("budget: no limit is set, so every candidate panel would be chosen; set budget.max_cost "
                        "(spending limit), budget.max_panels (panel count) or budget.target_share (cheapest plan "
                        "covering this share of the reachable weight)")
    d = job.demand
    if not d.street_grid and not d.homes and job.inputs.users is None:
        problems.append("demand: no demand source: demand.street_grid and demand.homes are false and inputs.users "
                        "is not given; set demand.street_grid = true (outdoor points), demand.homes = true (homes "
                        "at windows) or give a users layer in inputs.users")
    if not job.candidates.generate and job.inputs.sites is None:
        problems.append("candidates: no facade spot source: candidates.generate is false and inputs.sites is not "
                        "given; set candidates.generate = true (spots along every free wall) or give a point layer "
                        "of facade spots in inputs.sites")
    return problems


def field_file_problems(job: Job) -> list[str]:
    """Problems of the files read after the candidates stage (``inputs.survey_results``, ``inputs.previous_plan``,
    ``inputs.scenarios``), found before any layer is read: missing, a folder, unreadable, empty, or not what the
    key expects (a survey list without its ``site_id`` / ``status`` columns, a previous plan that is not the
    ``run.json`` of a siting run)."""
    from .verdicts import survey_file_problem

    problems = []
    survey = job.inputs.survey_results
    if survey:
        problem = _file_problem(Path(survey), "inputs.survey_results file")
        problems.append(problem or survey_file_problem(survey))
    if job.inputs.previous_plan:
        problems.append(previous_plan_problem(Path(job.inputs.previous_plan)))
    if job.inputs.scenarios:
        problems.append(_file_problem(Path(job.inputs.scenarios), "inputs.scenarios file"))
    return [p for p in problems if p]


def previous_plan_problem(path: Path) -> str | None:
    """Why ``inputs.previous_plan`` (a run.json, or a folder holding one) cannot be compared with; None if it can."""
    from .plandiff import read_previous_plan

    what = "inputs.previous_plan"
    if path.is_dir() and not (path / "run.json").exists():
        return (f"{what} '{path}' is a folder without a run.json; name the run.json of the plan to compare with, or "
                "the output folder that holds it")
    target = path / "run.json" if path.is_dir() else path
    problem = _file_problem(target, f"{what} file")
    if problem:
        return problem
    if read_previous_plan(target) is None:
        return (f"{what} '{target}' is not the run.json of a siting plan (expected JSON with \"format\": "
                "\"siting-run\" and the plan's sites); name the run.json a previous `siting plan` wrote, or remove "
                "the key")
    return None


def _file_problem(path: Path, what: str) -> str | None:
    """:func:`~siting.inputs.files.file_problem`, with a link loop named as such (not as a missing file)."""
    from .job import link_loop_problem

    return link_loop_problem(path, what) or file_problem(path, what)


def layer_columns(path: str | os.PathLike, role: str) -> list[str] | None:
    """The attribute columns of the layer :func:`siting.inputs.vector.read_layer` would read from ``path`` (its
    schema only, no features), or None when that cannot be told here (the load reports an unreadable file)."""
    p = Path(path)
    try:
        if p.suffix.lower() in (".parquet", ".geoparquet"):
            import pyarrow.parquet as pq

            return [str(n) for n in pq.read_schema(p).names]
        import pyogrio

        names = [str(n) for n in pyogrio.list_layers(p)[:, 0]]
        if len(names) > 1 and role not in names:
            return None  # read_layer refuses the file and names its layers
        layer = role if len(names) > 1 else None
        return [str(n) for n in pyogrio.read_info(p, layer=layer)["fields"]]
    except Exception:  # noqa: BLE001 - the load names an unreadable layer with its own message
        return None


def weight_column_problem(job: Job) -> str | None:
    """A users layer without the column ``inputs.user_weight_column`` names: refused when the job names a column
    of its own (a typo would silently weigh every user 1), or when the layer has the default 'weight' column only
    in another case ('Weight'); a layer without any weight column keeps weight 1 per user (documented)."""
    users, column = job.inputs.users, job.inputs.user_weight_column
    if users is None:
        return None
    columns = layer_columns(users, "users")
    if columns is None or column in columns:
        return None
    default = SCHEMA["inputs"]["user_weight_column"].default
    same_case = [c for c in columns if c.lower() == column.lower()]
    if column == default and not same_case:
        return None
    near = same_case or difflib.get_close_matches(column, columns, n=1, cutoff=0.6)
    hint = f" (did you mean '{near[0]}'?)" if near else ""
    shown = ", ".join(f"'{c}'" for c in columns[:20]) + (f" and {len(columns) - 20} more" if len(columns) > 20 else "")
    return (f"inputs.user_weight_column: the users file '{users}' has no column '{column}' (its columns: "
            f"{shown or 'none'}){hint}; set inputs.user_weight_column to the column that holds the demand weight, "
            "or remove the key to weigh every user 1")


def check_job(job: Job, *, job_file: str | os.PathLike | None = None, write: bool = True,
              overwrite: bool = False) -> None:
    """Refuse a job that cannot run, before any layer is read: one JobError listing every problem.

    Parameters
    ----------
    job : the validated job.
    job_file : the job file, when the job came from one (the output folder must not hold it either).
    write : the run writes an output set (False: the output folder is not checked).
    overwrite : allow an output folder that holds files no siting run created (the CLI's ``--overwrite``).
    """
    from .outputs.folder import input_problems, output_folder_problems

    problems = job_problems(job)
    inputs = input_files(job)
    file_problems = {what: _file_problem(path, what) for what, path in inputs}
    problems += [p for p in file_problems.values() if p]
    problems += field_file_problems(job)
    if not file_problems.get("users file"):
        problems += [p for p in [weight_column_problem(job)] if p]
    if write and not str(job.output.folder).strip():
        problems.append("output.folder: empty, which would write the output set into the current folder; give a "
                        "folder of its own, e.g. output.folder = \"out\" (relative to the job file)")
    elif write:
        paths = [path for _, path in inputs] + ([Path(job_file)] if job_file is not None else [])
        folder = Path(job.output.folder)
        problems += output_folder_problems(folder, paths, files=output_files(job), overwrite=overwrite)
        problems += input_problems(folder, field_input_paths(job))
    if problems:
        raise JobError(problems, str(job_file) if job_file is not None else "job")


def field_input_paths(job: Job) -> dict[str, str]:
    """``{"inputs.<key>": path}`` of the inputs read besides the layers (:data:`siting.replan.FIELD_INPUTS`: the
    survey verdicts, the previous plan, the scenario file) that the job names."""
    from .replan import FIELD_INPUTS

    return {f"inputs.{k}": getattr(job.inputs, k) for k in FIELD_INPUTS if getattr(job.inputs, k)}


def check_district(job: Job, district) -> None:
    """After the layers are read: note far base stations and far given users; refuse a job whose layers can give
    no demand (none in the area, or every given user indoors with ``demand.allow_indoor`` off) or no facade spot
    (``candidates.generate`` off and no given spot near a usable wall)."""
    station_reach_notes(district, job.radio.bs_range_m)
    d, users = job.demand, district.given_users
    only_users = not d.street_grid and not d.homes
    user_reach_notes(district, job.radio.bs_range_m + job.radio.surface_range_m, only_source=only_users)
    if only_users and (users is None or not len(users)):
        where = " inside the area of interest (area.bbox / area.polygon)" if district.area is not None else ""
        raise JobError(f"demand: the users layer '{job.inputs.users}' gives no demand point{where}, and "
                       "demand.street_grid and demand.homes are false; widen the area, fix the users layer, or set "
                       "demand.street_grid = true or demand.homes = true", "job")
    if only_users and not d.allow_indoor and _inside_buildings(district, users).all():
        raise JobError(f"demand: all {len(users)} given user(s) of the users layer '{job.inputs.users}' lie inside "
                       "building footprints, and indoor users are dropped (demand.allow_indoor = false), so the job "
                       "gives no demand point; set demand.allow_indoor = true to keep them as indoor demand, move "
                       "them outdoors, or set demand.street_grid = true or demand.homes = true", "job")
    if not job.candidates.generate:
        problem = given_spots_problem(job, district)
        if problem:
            raise JobError(problem, "job")


def _inside_buildings(district, points: pd.DataFrame) -> np.ndarray:
    """True for the points (x, y) inside or on a building footprint."""
    inside = np.zeros(len(points), bool)
    if len(points) and len(district.buildings):
        pts = shapely.points(points["x"].to_numpy(float), points["y"].to_numpy(float))
        hit, _ = shapely.STRtree(district.buildings.geometry.values).query(pts, predicate="intersects")
        inside[hit] = True
    return inside


def given_spots_problem(job: Job, district) -> str | None:
    """With ``candidates.generate`` off the given spots are the only candidates: a sentence when none of them can
    be snapped to a usable wall (the same rule as :func:`siting.candidates.snap_given_spots`), else None."""
    from .candidates import snap_given_spots

    c, given, layer = job.candidates, district.given_sites, job.inputs.sites
    head = "candidates: candidates.generate is false, so the given spots are the only candidates, but "
    fix = ("; move the spots onto facades (longitude first, then latitude), raise candidates.snap_tolerance_m, "
           "or set candidates.generate = true")
    if given is None or not len(given):
        where = " inside the area of interest (area.bbox / area.polygon)" if district.area is not None else ""
        return head + f"the sites layer '{layer}' holds no spot{where}" + fix
    with warnings.catch_warnings():  # the candidates stage notes the dropped spots; here only the count matters
        warnings.simplefilter("ignore", SitingWarning)
        spots, dropped = snap_given_spots(
            district.buildings, given, snap_tolerance_m=c.snap_tolerance_m, default_z_m=float(c.mount_heights_m[0]),
            offset_m=c.offset_m, party_gap_m=c.party_gap_m, min_wall_m=min(p.width_m for p in job.surfaces.panels))
    if len(spots):
        return None
    walls = shapely.boundary(np.asarray(district.buildings.geometry.values, dtype=object))
    pts = shapely.points(given["x"].to_numpy(float), given["y"].to_numpy(float))
    _, dist = shapely.STRtree(walls).query_nearest(pts, return_distance=True, all_matches=False)
    nearest = float(np.min(dist)) if len(dist) else float("inf")
    shown = ", ".join(map(str, dropped[:10])) + (" ..." if len(dropped) > 10 else "")
    return (head + f"none of the {len(given)} spot(s) of the sites layer '{layer}' ({shown}) lies within "
            f"candidates.snap_tolerance_m = {c.snap_tolerance_m:g} m of a usable wall (the nearest is "
            f"{nearest:,.0f} m from a wall; walls shared with a neighbour and walls narrower than the smallest "
            "panel do not count)" + fix)


def check_demand(job: Job, users: pd.DataFrame) -> None:
    """After the demand points are made (before the gains): refuse no point, or a total weight of zero."""
    total = float(users["weight"].sum()) if len(users) else 0.0
    if len(users) and total > 0:
        return
    what = "no demand point" if not len(users) else f"{len(users)} demand point(s) of total weight 0"
    indoor = (" (given users inside buildings are dropped: set demand.allow_indoor = true to keep them as indoor "
              "demand)" if job.inputs.users is not None and not job.demand.allow_indoor and not len(users) else "")
    raise JobError(f"demand: the job gives {what} (demand.street_grid = {str(job.demand.street_grid).lower()}, "
                   f"demand.homes = {str(job.demand.homes).lower()}, inputs.users = "
                   f"'{job.inputs.users or ''}'){indoor}; widen the area (area.bbox / area.polygon), set "
                   "demand.street_grid or demand.homes to true, give a users layer with positive weights, or raise "
                   "demand.street_weight above 0", "job")


def station_distances_m(district) -> np.ndarray:
    """Distance [m] from each base station to the nearest building footprint (0 inside one)."""
    bs = district.base_stations
    if not len(bs) or not len(district.buildings):
        return np.full(len(bs), np.inf)
    pts = shapely.points(bs["x"].to_numpy(float), bs["y"].to_numpy(float))
    idx, dist = shapely.STRtree(district.buildings.geometry.values).query_nearest(
        pts, return_distance=True, all_matches=False)
    out = np.full(len(bs), np.inf)
    out[idx[0]] = dist
    return out


def station_reach_notes(district, bs_range_m: float) -> list[str]:
    """Warn (:class:`~siting.errors.SitingWarning`) about base stations farther than ``bs_range_m`` from every
    building: they feed no facade spot and serve no demand point among the buildings.  Returns the notes."""
    dist = station_distances_m(district)
    far = np.flatnonzero(dist > bs_range_m)
    notes = []
    for i in far:
        notes.append(f"base station '{district.base_stations['bs_id'].iat[i]}' is {dist[i]:,.0f} m from the nearest "
                     f"building, beyond radio.bs_range_m ({bs_range_m:g} m): no facade spot or demand point among "
                     "the buildings can link to it; check its coordinates (longitude first, then latitude) or "
                     "raise radio.bs_range_m")
    if len(far) and len(far) == len(dist):
        notes.append(f"no base station is within radio.bs_range_m ({bs_range_m:g} m) of any building (the nearest "
                     f"is {float(np.min(dist)):,.0f} m away): {PLAN_WILL_BE_EMPTY}; check the coordinates of the "
                     f"base stations and the buildings for {MISPLACED_HINT}")
    for n in notes:
        warnings.warn(n, SitingWarning, stacklevel=2)
    return notes


def user_reach_notes(district, reach_m: float, only_source: bool) -> list[str]:
    """Warn (:class:`~siting.errors.SitingWarning`) when every given user is farther than ``reach_m``
    (``radio.bs_range_m + radio.surface_range_m``) from every base station: no direct link and no surface can
    reach them.  ``only_source``: the given users are the only demand (no street grid, no homes), so the plan will
    be empty.  Returns the notes."""
    users, bs = district.given_users, district.base_stations
    if users is None or not len(users) or not len(bs):
        return []
    tree = shapely.STRtree(shapely.points(bs["x"].to_numpy(float), bs["y"].to_numpy(float)))
    _, dist = tree.query_nearest(shapely.points(users["x"].to_numpy(float), users["y"].to_numpy(float)),
                                 return_distance=True, all_matches=False)
    if not len(dist) or float(np.min(dist)) <= reach_m:
        return []
    outcome = PLAN_WILL_BE_EMPTY if only_source else "none of them can be covered"
    note = (f"no given user is within reach of a base station: all {len(users)} user(s) of the users layer lie "
            f"farther than radio.bs_range_m + radio.surface_range_m ({reach_m:,.0f} m) from every base station (the "
            f"nearest is {float(np.min(dist)):,.0f} m away): {outcome}; check the coordinates of the users and the "
            f"base stations for {MISPLACED_HINT}")
    warnings.warn(note, SitingWarning, stacklevel=2)
    return [note]


def console_warnings(notes: list[str]) -> list[str]:
    """The notes that say the plan will be empty because of misplaced data (far base stations, far users): the
    command line prints these on the console besides the report and the log."""
    return [n for n in notes if PLAN_WILL_BE_EMPTY in n]
