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

from .cache import StageCache


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


def write_light(result, overwrite: bool = False) -> dict[str, Path]:
    """Write ``run.json`` and ``survey.csv`` of a run into its output folder as one committed set.

    Refuses (:class:`~siting.errors.SitingError`) a folder holding files of those names that no siting run made
    (unless ``overwrite``), and one where a link or a file of another kind is in the way.
    """
    from .outputs import atomic, commit_set, derive, survey
    from .outputs import record as record_mod
    from .plandiff import field_survey_frame
    from .runner import output_bundle

    bundle = output_bundle(result, result.params.radio, outputs="light")
    fig = derive(bundle)
    out = Path(result.job.output.folder)
    out.mkdir(parents=True, exist_ok=True)
    names = ["survey.csv", "run.json"]

    def write(st) -> dict[str, str]:
        frame = field_survey_frame(survey.survey_frame(bundle, fig), bundle.run_info)
        survey.write_survey_csv(st.path("survey.csv"), frame)
        record = record_mod.run_record(bundle, fig, {"survey_csv": "survey.csv", "run_json": "run.json"}, {})
        record["manifest"] = {"complete": True, "created_by": "siting", "files": sorted(names),
                              "note": "the light output set of a scenario: run.json and survey.csv"}
        atomic.write_text(st.path("run.json"), json.dumps(record, indent=1, allow_nan=False, ensure_ascii=False) + "\n")
        return {"survey_csv": "survey.csv", "run_json": "run.json"}

    commit_set(out, names, write, overwrite=overwrite)
    return {"survey_csv": out / "survey.csv", "run_json": out / "run.json"}
