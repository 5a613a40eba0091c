"""First-run compile of the numba kernels in background processes, in parallel with each other and the job.

On a fresh install numba's on-disk cache (``cache=True``) is empty and every kernel is compiled on first use,
one after the other in the job's process.  :func:`start` (called by the runner when a job starts) checks which
kernel groups the job needs and which of them are not cached yet, and compiles each missing group in its own
child process (``python -c`` with zero-length or one-element dummy data, so the compiled signature is the one
the job uses); the kernels' Python wrappers call :func:`wait` before their first use and then load the
compiled code from the cache.  A warm run starts no process.  ``SITING_NO_WARMUP=1`` turns this off (the
kernels then compile lazily in the job's process, as before).

Groups: ``rays`` (edge grid, pair search, pair table), ``clearance`` (first-Fresnel-zone walk, only for
jobs with ``radio.fresnel_clearance`` > 0), ``surface`` (near-field tile sum).

:func:`prepare` (the ``siting prepare`` command, run once after installing) compiles every group that is not
cached the same way and waits for them, so that even the first job starts with the compiled kernels.
"""

from __future__ import annotations

import importlib
import logging
import os
import subprocess
import sys
import threading
import time
from pathlib import Path

log = logging.getLogger("siting")

# group -> (module, its compile function's argument)
_GROUPS = {
    "rays": ("siting._kernels_visibility", False),
    "clearance": ("siting._kernels_visibility", True),
    "surface": ("siting.radio._surface_kernel", None),
}
_pending: list[tuple[str, subprocess.Popen, float]] = []
_lock = threading.Lock()


def _kernels(group: str):
    module, arg = _GROUPS[group]
    kernels = importlib.import_module(module).KERNELS
    return kernels if arg is None else kernels[arg]


def cached(group: str) -> bool:
    """True when numba's cache holds an index for every kernel of the group (numba re-checks the source)."""
    try:
        return all(Path(k._cache._cache_file._index_path).exists() for k in _kernels(group))
    except Exception:  # noqa: BLE001 - private numba layout changed: assume cached, compile lazily
        return True


def needed(clearance: bool) -> list[str]:
    """The kernel groups a job uses (``clearance``: with the first-Fresnel-zone rule) that are not cached yet."""
    return [g for g in ("rays", "clearance", "surface") if (clearance or g != "clearance") and not cached(g)]


def start(clearance: bool) -> list[str]:
    """Compile, in background processes, the kernel groups a job needs that are not cached; returns them.

    Parameters
    ----------
    clearance : bool
        The job uses the first-Fresnel-zone clearance rule (``radio.fresnel_clearance`` > 0).
    """
    if os.environ.get("SITING_NO_WARMUP", "") not in ("", "0"):
        return []
    groups = needed(clearance)
    if not groups:
        return []
    log.info("first run: compiling the line-of-sight and surface kernels (%s) once, in the background; later "
             "runs load them from numba's cache", ", ".join(groups))  # fmt: skip
    with _lock:
        for g in groups:
            _pending.append((g, _spawn(g, subprocess.DEVNULL), time.perf_counter()))
    return groups


def _spawn(group: str, stderr) -> subprocess.Popen:
    """A child process compiling one kernel group into numba's cache."""
    return subprocess.Popen([sys.executable, "-c", _CHILD, str(Path(__file__).resolve().parent), group],
                            stdout=subprocess.DEVNULL, stderr=stderr)  # fmt: skip


def prepare() -> list[str]:
    """Compile every kernel group that is not cached yet, one child process per group, and wait; returns the
    groups compiled (empty when all were cached).

    Raises
    ------
    SitingError
        A group is still not cached afterwards (the child's error output is quoted): numba's cache folder is
        not writable, or the compile failed.
    """
    from .errors import SitingError

    groups = needed(clearance=True)
    procs = [(g, _spawn(g, subprocess.PIPE)) for g in groups]
    errors = {g: proc.communicate()[1].decode(errors="replace").strip() for g, proc in procs}
    missing = needed(clearance=True)
    if missing:
        detail = "; ".join(f"{g}: {errors.get(g, '')[-400:] or 'no error output'}" for g in missing)
        raise SitingError(f"the kernels {', '.join(missing)} could not be compiled into numba's cache ({detail}); "
                          "check that the package folder's __pycache__ or NUMBA_CACHE_DIR is writable")  # fmt: skip
    return groups


# The child imports the kernel modules without running ``siting/__init__.py`` (which imports the whole
# pipeline: geopandas, pandas, the optimiser): empty package modules with the right ``__path__`` stand in for
# ``siting`` and ``siting.radio``, so a child costs numba's import and the compile, nothing else.  The kernels'
# module and file names are the real ones, so numba's cache entries are the ones the job looks up.
_CHILD = """
import sys, types
root, group = sys.argv[1], sys.argv[2]
for name, path in (("siting", root), ("siting.radio", root + "/radio")):
    mod = types.ModuleType(name)
    mod.__path__ = [path]
    sys.modules[name] = mod
import siting._warmup as w
w.compile_group(group)
"""


def compile_group(group: str) -> None:
    """Compile (or load from the cache) one kernel group with dummy data (runs in the child process)."""
    module, arg = _GROUPS[group]
    fn = importlib.import_module(module).compile_kernels
    fn() if arg is None else fn(arg)


def wait(group: str | None = None) -> None:
    """Wait for the background compile of ``group`` (all groups when None) started by :func:`start`; no-op
    when none is running.  Waiting per group lets the job use the kernels compiled first while the others
    are still compiling."""
    if not _pending:
        return
    with _lock:
        for item in [p for p in _pending if group is None or p[0] == group]:
            g, proc, t0 = item
            rc = proc.wait()
            _pending.remove(item)
            log.debug("kernel group %s compiled in the background in %.1f s (exit %s)", g, time.perf_counter() - t0,
                      rc)  # fmt: skip
