"""Job-level checks run by ``siting validate`` and at the start of ``siting plan``, before any heavy stage.

Visibility and link gains take hours on a city, so every problem that can be seen from the job, the input files
and the loaded district is reported before them, all at once, in one :class:`~siting.errors.JobError` (exit
code 2) whose lines name the key, the file or the feature and the fix:

* :func:`check_job` (before any layer is read): the job sets no budget limit; the job has no demand source;
  an input file is missing, a folder, unreadable or empty; the output folder is unsafe (it is or contains an
  input or the job file, is the file-system root or a home folder, is a file, is not writable, or is a
  non-empty folder siting did not create and ``overwrite`` is off; see
  :func:`siting.outputs.folder.output_folder_problems`).
* :func:`check_district` (after the layers are read): no demand point can come out of the loaded layers; it
  also notes base stations farther than ``radio.bs_range_m`` from every building.
* :func:`check_demand` (after the demand points are made, before the gains): no demand point, or no weight.
"""

from __future__ import annotations

import os
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import shapely

from .errors import JobError, SitingWarning
from .inputs.files import file_problem
from .job import Job

#: Names a file manager or an OS leaves in any folder; they do not make a folder "someone else's".
_SYSTEM_FILES = frozenset({".DS_Store", "Thumbs.db", "desktop.ini"})


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
    return problems


def _foreign_folder(folder: Path) -> str | None:
    """A sentence when ``folder`` exists, is not empty and holds no sign of a siting run (its ``run.json``,
    stage cache, log or an interrupted commit); None otherwise."""
    from .outputs import atomic

    if not folder.is_dir() or not os.access(folder, os.R_OK | os.X_OK):
        return None
    names = sorted(n for n in os.listdir(folder) if n not in _SYSTEM_FILES)
    if not names:
        return None
    ours = {".cache", "siting.log", atomic.JOURNAL, atomic.RECORD}
    if ours & set(names) or any(n.startswith(atomic.TMP_PREFIX) for n in names):
        return None
    shown = ", ".join(names[:5]) + (f" and {len(names) - 5} more" if len(names) > 5 else "")
    return (f"output.folder '{folder}' is not empty and no siting run created it (it holds {shown}); choose a new "
            "or empty folder, e.g. 'out', or allow writing there with --overwrite (siting replaces only the "
            "files of its output set)")


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
    from .outputs.folder import output_folder_problems

    problems = job_problems(job)
    inputs = input_files(job)
    problems += [p for p in (file_problem(path, what) for what, path in inputs) if p]
    if write:
        paths = [path for _, path in inputs] + ([Path(job_file)] if job_file is not None else [])
        folder = Path(job.output.folder)
        problems += output_folder_problems(folder, paths, files=output_files(job), overwrite=overwrite)
        foreign = None if overwrite else _foreign_folder(folder)
        if foreign and not any("holds files that no siting run created" in p for p in problems):
            problems.append(foreign)
    if problems:
        raise JobError(problems, str(job_file) if job_file is not None else "job")


def check_district(job: Job, district) -> None:
    """After the layers are read: note far base stations; refuse a job whose layers can give no demand."""
    station_reach_notes(district, job.radio.bs_range_m)
    d, users = job.demand, district.given_users
    if not d.street_grid and not d.homes and (users is None or not len(users)):
        where = " inside the area of interest (area.bbox / area.polygon)" if district.area is not None else ""
        raise JobError(f"demand: the users layer '{job.inputs.users}' gives no demand point{where}, and "
                       "demand.street_grid and demand.homes are false; widen the area, fix the users layer, or set "
                       "demand.street_grid = true or demand.homes = true", "job")


def check_demand(job: Job, users: pd.DataFrame) -> None:
    """After the demand points are made (before the gains): refuse no point, or a total weight of zero."""
    total = float(users["weight"].sum()) if len(users) else 0.0
    if len(users) and total > 0:
        return
    what = "no demand point" if not len(users) else f"{len(users)} demand point(s) of total weight 0"
    raise JobError(f"demand: the job gives {what} (demand.street_grid = {str(job.demand.street_grid).lower()}, "
                   f"demand.homes = {str(job.demand.homes).lower()}, inputs.users = "
                   f"'{job.inputs.users or ''}'); widen the area (area.bbox / area.polygon), set demand.street_grid "
                   "or demand.homes to true, give a users layer with positive weights, or raise "
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
        notes.append("no base station is within radio.bs_range_m of any building: the plan will be empty")
    for n in notes:
        warnings.warn(n, SitingWarning, stacklevel=2)
    return notes
