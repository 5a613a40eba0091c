"""Solver settings: one frozen value instead of five keyword arguments."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import SitingError
from .problem import _is_scalar

SOLVER_NAMES = ("highs", "cbc")


@dataclass(frozen=True)
class SolverSettings:
    """How the integer program is solved.

    Attributes
    ----------
    name : 'highs' (default, model passed to highspy as arrays) or 'cbc' (through PuLP, hard timer); picks
        the back end when none is passed in.
    time_limit_s : solver wall-clock limit [s] (per budget in :func:`~siting.optimize.budget_sweep`).
    mip_gap : relative gap at which the solver stops and reports optimal.
    threads : solver threads, a positive integer (None: solver default).
    seed : the solver's random seed; the same seed gives the same plan (solve times can differ a lot
        between seeds, see docs/MODELS.md).
    """

    name: str = "highs"
    time_limit_s: float = 60.0
    mip_gap: float = 1e-4
    threads: int | None = None
    seed: int = 0

    def __post_init__(self):
        if self.name not in SOLVER_NAMES:
            raise SitingError(f"optimiser argument 'solver': expected 'highs' or 'cbc', got {self.name!r}")
        t = self.time_limit_s
        if not (_is_scalar(t) and np.isfinite(t) and t > 0):
            raise SitingError(f"optimiser argument 'time_limit_s': expected a positive number, got {t!r}")
        if not (_is_scalar(self.mip_gap) and np.isfinite(self.mip_gap) and self.mip_gap >= 0):
            raise SitingError(f"optimiser argument 'mip_rel_gap': expected a finite number >= 0, got {self.mip_gap!r}")
        n = self.threads
        if n is not None and (isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1):
            raise SitingError(f"optimiser argument 'threads': expected a positive integer or None (solver default), "
                              f"got {n!r}; pass a whole number of threads such as 4, or None")
        s = self.seed
        if isinstance(s, bool) or not isinstance(s, (int, np.integer)) or not 0 <= s < 2**31:
            raise SitingError(f"optimiser argument 'solver_seed': expected an integer from 0 to 2**31 - 1, got {s!r}")


_DEFAULT = SolverSettings()


def settings_from(settings, solver="highs", time_limit_s=60.0, mip_rel_gap=1e-4, threads=None,
                  solver_seed=0) -> SolverSettings:
    """The settings of a call: ``settings`` when given, else the older keyword arguments.

    Giving both (``settings`` and a keyword away from its default) is an error, so no value is silently
    ignored.
    """
    if settings is None:
        return SolverSettings(solver, time_limit_s, mip_rel_gap, threads, solver_seed)
    if not isinstance(settings, SolverSettings):
        raise SitingError(f"optimiser argument 'settings': expected a SolverSettings, got {type(settings).__name__}")
    given = dict(solver=solver, time_limit_s=time_limit_s, mip_rel_gap=mip_rel_gap, threads=threads,
                 solver_seed=solver_seed)
    default = dict(solver=_DEFAULT.name, time_limit_s=_DEFAULT.time_limit_s, mip_rel_gap=_DEFAULT.mip_gap,
                   threads=_DEFAULT.threads, solver_seed=_DEFAULT.seed)
    clash = [k for k in given if given[k] != default[k]]
    if clash:
        raise SitingError(f"optimiser arguments: give the solver settings either as settings=SolverSettings(...) "
                          f"or as keywords, not both (also given: {', '.join(clash)})")
    return settings
