"""Error hierarchy.  Every message says what was expected, what was found, where, and what to do.

The CLI turns each :class:`SitingError` into one line on stderr and the exit code of its class.
"""

from __future__ import annotations


class SitingError(Exception):
    """Base class of every error the tool reports to the user."""

    exit_code = 1


class JobError(SitingError):
    """The job file (or a ``--set`` override) is wrong.  May carry several problems at once."""

    exit_code = 2

    def __init__(self, problems: list[str] | str, source: str = "job"):
        self.problems = [problems] if isinstance(problems, str) else list(problems)
        self.source = source
        head = f"{len(self.problems)} problem(s) in {source}:" if len(self.problems) > 1 else f"problem in {source}:"
        super().__init__(head + "".join(f"\n  - {p}" for p in self.problems))


class InputDataError(SitingError):
    """An input layer is missing, unreadable or holds data that cannot be used."""

    exit_code = 2


class SolverError(SitingError):
    """The optimiser gave no usable plan."""

    exit_code = 3


class SitingWarning(UserWarning):
    """A model note: a default used, a repair made, a model outside its stated validity, an input left out.

    The runner captures these once per stage (repeats dropped), stores them with the stage in the cache and
    lists them in the report and ``run.json``, so a rerun from the cache reports the same notes.
    """
