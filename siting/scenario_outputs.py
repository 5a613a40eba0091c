"""What scenarios share and write: a stage cache that also keeps its entries in memory, and the light output set.

A scenario's output set is ``light`` by default: ``run.json`` (every figure of the plan, as a full run writes it)
and ``survey.csv``; ``outputs = "full"`` in a ``[[scenarios]]`` table writes the whole set of
:func:`siting.outputs.write_outputs` (layers, maps, reports) for that scenario.  The light set is written as one
committed set with its manifest, like a full one, so either kind may replace the other in the folder.
"""

from __future__ import annotations

import copy
import json
from pathlib import Path

from . import __version__
from .cache import StageCache
from .errors import SitingError


class MemoryStageCache(StageCache):
    """A :class:`~siting.cache.StageCache` that also keeps every entry it reads or stores in memory.

    The scenarios of a job run in one process share one: the second scenario on takes candidates and gain tiles
    from memory (no file reads, no hash checks).  Tables are handed out as shallow copies.
    """

    def __init__(self, root, log=lambda msg: None, read: bool = True):
        super().__init__(root, log=log, read=read)
        self._memory: dict[tuple[str, str], tuple[dict, dict]] = {}

    def load(self, name: str, key: str, expect: tuple[str, ...] = ()):
        if self.read and (name, key) in self._memory:
            tables, extras = self._memory[(name, key)]
            if not set(expect) - set(tables):
                return {k: t.copy(deep=False) for k, t in tables.items()}, copy.deepcopy(extras)
        hit = super().load(name, key, expect)
        if hit is not None:
            self._memory[(name, key)] = hit
        return hit

    def store(self, name: str, key: str, tables: dict, extras: dict | None = None) -> None:
        super().store(name, key, tables, extras)
        self._memory[(name, key)] = (dict(tables), copy.deepcopy(extras or {}))


def _bundle(result):
    """The :class:`~siting.outputs.OutputBundle` of a run (as :func:`siting.runner.write_stage` builds it)."""
    from .outputs import OutputBundle
    from .plandiff import field_run_info

    job, gains, p = result.job, result.gains, result.params.radio
    run_info = {
        "siting_version": __version__, "input_hashes": result.district.input_hashes,
        "crs": result.district.crs.to_string(), "crs_rule": result.district.crs_rule, "timings_s": result.timings_s,
        "recomputed_stages": result.recomputed, "notes": result.notes, "outputs": "light",
        "counts": {"buildings": len(result.district.buildings), "base_stations": len(result.district.base_stations),
                   "sites": len(result.sites), "users": len(result.users), "options": len(gains.options),
                   "coverage_rows": len(gains.coverage)},
        **field_run_info(result),
    }
    return OutputBundle(
        crs=result.district.crs, buildings=result.district.buildings, base_stations=result.district.base_stations,
        sites=result.sites, sizes=result.sizes, users=result.users, options=gains.options, coverage=gains.coverage,
        direct=gains.direct, plan=result.plan, ranking=result.ranking, backups=result.backups, sweep=result.sweep,
        snr_target_db=p.snr_target_db, budget=job.budget.max_cost, max_panels=job.budget.max_panels,
        params=job.to_dict(), run_info=run_info, formats=tuple(job.output.formats),
        include_candidates=False, title=job.output.title, site_checks=result.site_checks,
        sensitivity=result.sensitivity)


def write_light(result) -> dict[str, Path]:
    """Write ``run.json`` and ``survey.csv`` of a run into its output folder as one committed set.

    Refuses (:class:`~siting.errors.SitingError`) a folder holding files of those names that no siting run made.
    """
    from .outputs import atomic, derive, folder, report, survey
    from .plandiff import field_survey_frame

    bundle = _bundle(result)
    fig = derive(bundle)
    out = Path(result.job.output.folder)
    out.mkdir(parents=True, exist_ok=True)
    names = ["survey.csv", "run.json"]
    with atomic.folder_lock(out):
        atomic.recover(out, folder.siting_name)
        clash = folder.foreign_files(out, names)
        if clash:
            raise SitingError(f"output folder '{out}' holds files that no siting run created there: "
                              f"{', '.join(clash)}; move them away or choose another output.folder")
        with atomic.OutputSet(out, folder.siting_name) as st:
            frame = field_survey_frame(survey.survey_frame(bundle, fig), bundle.run_info)
            survey.write_survey_csv(st.path("survey.csv"), frame)
            record = report.run_record(bundle, fig, {"survey_csv": "survey.csv", "run_json": "run.json"}, {})
            record["manifest"] = {"complete": True, "created_by": "siting", "files": sorted(names),
                                  "note": "the light output set of a scenario: run.json and survey.csv"}
            atomic.write_text(st.path("run.json"), json.dumps(record, indent=1, allow_nan=False,
                                                              ensure_ascii=False) + "\n")
            st.commit(names)
    return {"survey_csv": out / "survey.csv", "run_json": out / "run.json"}
