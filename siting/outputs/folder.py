"""Which files an output set holds, and whether a folder is a safe place for one.

:func:`check_output_folder` is meant to run when the job is validated, before any heavy stage: it refuses an
output folder that would overwrite an input, a home folder or the file-system root, a path that is a file, a
folder the user cannot write, and a folder holding files of the same names that no siting run created (for
example the user's own ``report.html``).  :func:`write_outputs` repeats the last check just before it writes.
"""

from __future__ import annotations

import os
import re
from collections.abc import Iterable
from pathlib import Path

from ..errors import JobError
from . import atomic

#: Files every output set holds (GeoJSON layers only with the "geojson" format).
CORE_FILES = ("survey.csv", "survey.html", "report.html", "report.md", "run.json")
GEOJSON_LAYERS = ("surfaces", "surface_walls", "demand", "links")
FIGURES = ("district_map", "coverage_curve", "snr_cdf")
#: Files a run may add on request (written through ``write_outputs(extra_files=...)``).
OPTIONAL_FILES = ("candidates.geojson", "plan.gpkg", "los_graph.graphml")

_FIGURE_RE = re.compile(r"figures/[A-Za-z0-9_-]+\.png")


def planned_files(formats: Iterable[str] = ("geojson",), include_candidates: bool = False,
                  extra: Iterable[str] = ()) -> list[str]:
    """Relative paths of the files an output set with these options holds (figures included)."""
    formats = (formats,) if isinstance(formats, str) else tuple(formats)
    out = list(CORE_FILES) + [f"figures/{f}.png" for f in FIGURES]
    if "geojson" in formats:
        out += [f"{n}.geojson" for n in GEOJSON_LAYERS] + (["candidates.geojson"] if include_candidates else [])
    if "gpkg" in formats:
        out.append("plan.gpkg")
    out += [str(e) for e in extra]
    return sorted(dict.fromkeys(out))


def all_possible_files(extra: Iterable[str] = ()) -> list[str]:
    """Every file name an output set may hold, whatever its options."""
    return planned_files(("geojson", "gpkg"), True, [*OPTIONAL_FILES, *extra])


def siting_name(rel: str, extra: Iterable[str] = ()) -> bool:
    """True for a relative path that siting writes into an output folder (it alone may be replaced or
    removed by a later run)."""
    return rel in set(all_possible_files(extra)) or bool(_FIGURE_RE.fullmatch(rel))


def foreign_files(folder: str | os.PathLike, files: Iterable[str]) -> list[str]:
    """Of ``files`` (relative paths), those present in ``folder`` that no siting run created there (absent
    from the previous run's manifest), and those present as something other than a regular file."""
    folder = Path(folder)
    if not folder.is_dir():
        return []
    ours = set(atomic.read_manifest(folder))
    out = []
    for rel in files:
        p = folder / rel
        if p.is_symlink() or (p.exists() and not p.is_file()) or p.exists() and rel not in ours:
            out.append(rel)
    return sorted(out)


def _resolved(p) -> Path:
    return Path(os.path.expanduser(str(p))).resolve()


def output_folder_problems(folder, input_paths: Iterable = (), *, files: Iterable[str] | None = None,
                           overwrite: bool = False) -> list[str]:
    """Every reason ``folder`` cannot take an output set, as sentences naming the folder and the fix
    (empty list: the folder is fine).  See :func:`check_output_folder`."""
    raw = Path(os.path.expanduser(str(folder)))
    where = f"output.folder '{raw}'"
    try:
        target = _resolved(raw)
    except (OSError, RuntimeError) as exc:
        return [f"{where}: expected a usable folder path, got an error resolving it ({exc}); choose another "
                "output.folder"]
    probs: list[str] = []
    if target.parent == target:
        probs.append(f"{where} is the file-system root; an output set would be mixed into the whole disk: "
                     "set output.folder to a folder of its own, e.g. 'out'")
    try:
        home = _resolved(Path.home())
    except (OSError, RuntimeError, KeyError):
        home = None
    if home is not None and target == home:
        probs.append(f"{where} is your home folder; a run would replace files such as report.html there: "
                     "set output.folder to a folder of its own, e.g. '~/siting-out'")
    for inp in input_paths or ():
        if inp is None or str(inp) == "":
            continue
        try:
            ip = _resolved(inp)
        except (OSError, RuntimeError):
            continue
        if ip == target or target in ip.parents:
            kind = "is the input" if ip == target else (
                "is the folder of the input" if ip.parent == target else "contains the input")
            probs.append(f"{where} {kind} '{inp}'; a run could overwrite its inputs: set output.folder to a "
                         "folder of its own outside the inputs' folders, e.g. 'out'")
    if target.exists() and not target.is_dir():
        probs.append(f"{where} is an existing file, not a folder: remove or rename the file, or choose another "
                     "output.folder")
        return probs
    # the folder, or the nearest existing folder above it that the run would create it in, must be writable
    probe = target
    while not probe.exists() and probe.parent != probe:
        probe = probe.parent
    if not probe.is_dir():
        probs.append(f"{where} cannot be created: '{probe}' is a file, not a folder; choose another output.folder")
    elif not os.access(probe, os.W_OK | os.X_OK):
        what = "is not writable" if probe == target else f"cannot be created: '{probe}' is not writable"
        probs.append(f"{where} {what} by this user; fix its permissions or choose another output.folder")
    if target.is_dir() and not overwrite:
        clash = foreign_files(target, planned_files() if files is None else files)
        if clash:
            shown = ", ".join(clash[:8]) + (f" and {len(clash) - 8} more" if len(clash) > 8 else "")
            probs.append(f"{where} holds files that no siting run created there and that a run would replace: "
                         f"{shown}; move them away, choose another output.folder, or allow it with --overwrite")
    return probs


def check_output_folder(folder, input_paths: Iterable = (), *, files: Iterable[str] | None = None,
                        overwrite: bool = False) -> Path:
    """Refuse an unsafe output folder before any stage runs; return it resolved.

    Refused, each with a message naming the folder and the fix (one :class:`~siting.errors.JobError` listing
    every problem, exit code 2): a folder that is an input, is an input's folder or contains an input at any
    depth; the user's home folder; a file-system root; a path that is an existing file; a folder (or the
    nearest existing folder above a new one) the user cannot write; and, unless ``overwrite``, a folder
    holding any of ``files`` (relative paths; default :func:`planned_files` of the default options) that the
    previous siting run's manifest does not list, or that is not a regular file.

    Parameters
    ----------
    folder : the job's output folder (``~`` is expanded; relative paths are taken from the working folder).
    input_paths : every input file the job reads.
    files : the files this run will write (see :func:`planned_files`).
    overwrite : allow replacing files no siting run created (the CLI's ``--overwrite``).
    """
    probs = output_folder_problems(folder, input_paths, files=files, overwrite=overwrite)
    if probs:
        raise JobError(probs)
    return _resolved(folder)
