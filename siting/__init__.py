"""siting: choose building facades for passive reflecting surfaces.

The pipeline (see README.md, "Architecture"): job file -> district -> candidate spots and demand ->
line-of-sight visibility -> link gains -> integer program -> GIS layers, survey list and report.

The Python API (README.md, "Python API")::

    import siting
    result = siting.plan("job.toml", budget={"max_cost": 20000}, write=False)
    result.plan.objective, result.plan.cost, result.ranking

:func:`plan` runs a job end to end; :class:`Job` is the validated, frozen job; the stage functions
(:func:`load_stage`, :func:`candidates_stage`, :func:`gains_stage`, :func:`optimise_stage`,
:func:`plan_checks`) run one stage each on tables and parameter objects.  Names are imported on first use, so
``import siting`` (and ``import siting.radio``) stays light.
"""

from __future__ import annotations

import importlib
import logging
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

logging.getLogger("siting").addHandler(logging.NullHandler())  # a library logs; the application decides where

#: public name -> module that defines it
_EXPORTS = {
    "plan": "siting.api",
    "Job": "siting.job",
    "load_job": "siting.job",
    "RunResult": "siting.runner",
    "run": "siting.runner",
    "run_file": "siting.runner",
    "run_scenarios": "siting.scenarios",
    "capture_notes": "siting.runner",
    "Plan": "siting.optimize",
    "StageParams": "siting.stages",
    "OptimiseParams": "siting.stages",
    "SWEEP_BUDGET_FACTORS": "siting.stages",
    "load_stage": "siting.stages",
    "sizes_table": "siting.stages",
    "candidates_stage": "siting.stages",
    "gains_stage": "siting.stages",
    "optimise_stage": "siting.stages",
    "plan_checks": "siting.stages",
    "District": "siting.district",
    "GainResult": "siting.gains",
    "RadioParams": "siting.gains",
    "SitingError": "siting.errors",
    "JobError": "siting.errors",
    "InputDataError": "siting.errors",
    "SolverError": "siting.errors",
    "SitingWarning": "siting.errors",
}

__all__ = [
    "__version__",
    "District",
    "GainResult",
    "InputDataError",
    "Job",
    "JobError",
    "OptimiseParams",
    "Plan",
    "RadioParams",
    "RunResult",
    "SWEEP_BUDGET_FACTORS",
    "SitingError",
    "SitingWarning",
    "SolverError",
    "StageParams",
    "candidates_stage",
    "capture_notes",
    "gains_stage",
    "load_job",
    "load_stage",
    "optimise_stage",
    "plan",
    "plan_checks",
    "run",
    "run_file",
    "run_scenarios",
    "sizes_table",
]


def __getattr__(name: str) -> Any:
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'siting' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(__all__)


if TYPE_CHECKING:  # for type checkers and IDEs: the same names, imported eagerly
    from .api import plan
    from .district import District
    from .errors import InputDataError, JobError, SitingError, SitingWarning, SolverError
    from .gains import GainResult, RadioParams
    from .job import Job, load_job
    from .optimize import Plan
    from .runner import RunResult, capture_notes, run, run_file
    from .scenarios import run_scenarios
    from .stages import (
        SWEEP_BUDGET_FACTORS,
        OptimiseParams,
        StageParams,
        candidates_stage,
        gains_stage,
        load_stage,
        optimise_stage,
        plan_checks,
        sizes_table,
    )
