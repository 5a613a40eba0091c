"""The Python API: :func:`plan` runs a job given as a file, a :class:`~siting.job.Job` or nested tables.

Everything here is also reachable as ``siting.<name>``.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from .job import Job
from .runner import RunResult, refuse_scenarios, run


def plan(job: str | os.PathLike[str] | Job | Mapping[str, Any], *, overrides: list[str] | None = None,
         write: bool = True, cache_dir: str | os.PathLike[str] | None = None, fresh: bool = False,
         workers: int = 0, scheduler: str | None = None, progress: bool = False, tile_m: float | None = None,
         overwrite: bool = False, **sections: Mapping[str, Any]) -> RunResult:
    """Run a job end to end: district, candidates, link gains, the optimised plan, field checks, outputs.

    Parameters
    ----------
    job : str, path, Job or mapping
        A job file (TOML; relative paths in it resolve against its folder), a :class:`~siting.job.Job`, or the
        job as nested tables (relative paths resolve against the current folder).
    overrides : list of str, optional
        ``section.key=value`` strings, as the command line's ``--set``.
    write : bool
        Write the GIS layers, survey list, report, ``run.json``, the log and the stage cache into
        ``output.folder``.  ``write=False`` writes nothing at all unless ``cache_dir`` is given.
    cache_dir : str or path, optional
        Stage cache folder (default: ``<output.folder>/.cache`` when writing, none otherwise).  A rerun with a
        changed budget takes the district, candidates and gains from it.
    fresh : bool
        Recompute every stage even when the cache holds it.
    workers, scheduler : int, str
        Run the tiles on a local Dask cluster of ``workers`` processes, or on the cluster at ``scheduler``.
    progress : bool
        Show progress bars.
    tile_m : float, optional
        Tile size [m] instead of ``run.tile_m``.
    overwrite : bool
        Write into an output folder that holds files no siting run created (the CLI's ``--overwrite``);
        siting still replaces only the files of its own output set.
    **sections : mapping
        Key changes per section, applied last and validated: ``budget={"max_cost": 20000}``.

    Returns
    -------
    RunResult
        Every stage's tables, the plan, the notes and the paths written.

    Raises
    ------
    siting.JobError
        A key is unknown, of the wrong type or out of range (every problem listed, with the fix); or the job file
        holds scenarios, which :func:`siting.run_scenarios` runs.
    siting.InputDataError
        An input layer cannot be used.
    """
    if isinstance(job, Job):
        the_job = job.replace(**sections)
        if overrides:
            raise TypeError("overrides (section.key=value strings) apply to job files; use job.replace() for a Job")
    elif isinstance(job, Mapping):
        the_job = Job.from_dict(job, base_dir=Path.cwd(), source="job").replace(**sections)
    else:
        refuse_scenarios(Path(job))
        the_job = Job.from_toml(Path(job), overrides, **sections)
    job_file = None if isinstance(job, (Job, Mapping)) else Path(job)  # the job file is an input too
    return run(the_job, fresh=fresh, workers=workers, scheduler=scheduler, progress=progress, tile_m=tile_m,
               write=write, cache_dir=None if cache_dir is None else Path(cache_dir), overwrite=overwrite,
               job_file=job_file)


__all__ = ["plan"]
