"""Which files an output set holds, and whether a folder is a safe place for one.

:func:`check_output_folder` is meant to run when the job is validated, before any heavy stage: it refuses an
output folder that would overwrite an input, a home folder or the file-system root, a path that is a file, a
folder the user cannot write, a folder where a file of the set (or ``siting.log``, ``.cache``) would be written
through a symbolic link or over a folder or file of the other kind, a non-empty folder holding no record of a
siting run (:func:`siting_folder`: a ``siting.log`` or ``.cache`` alone is no proof), and a folder holding files
of the same names that no siting run created (for example the user's own ``report.html``).
:func:`write_outputs` repeats the last checks just before it writes.  :func:`input_problems` refuses the other
inputs a job reads (field verdicts, previous plan, scenario file) inside the output folder.
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
    from the previous run's manifest), and those present as something other than a regular file; plus a commit
    journal that siting did not write (:func:`siting.outputs.atomic.read_journal`)."""
    folder = Path(folder)
    if not folder.is_dir():
        return []
    ours = set(atomic.read_manifest(folder))
    out = []
    for rel in files:
        p = folder / rel
        if p.is_symlink() or (p.exists() and not p.is_file()) or p.exists() and rel not in ours:
            out.append(rel)
    if atomic.read_journal(folder)[0] == "foreign":
        out.append(atomic.JOURNAL)
    return sorted(out)


#: What siting writes into an output folder besides the files of the set: (relative path, "file" or "folder").
RUN_PATHS = (("siting.log", "file"), (".cache", "folder"))


def unsafe_paths(folder: str | os.PathLike, files: Iterable[str] = ()) -> list[str]:
    """Sentences for paths a run would have to write through a symbolic link or over something of another kind:
    any of ``files``, ``siting.log`` or ``.cache`` that is a link, sits below a link or a file inside ``folder``, or
    is a folder where a file goes (and the reverse).  ``--overwrite`` never lifts these."""
    folder = Path(folder)
    if not folder.is_dir():
        return []
    todo = [(rel, "file") for rel in files] + list(RUN_PATHS)
    return list(dict.fromkeys(p for p in (atomic.path_problem(folder, rel, want=w) for rel, w in todo) if p))


def siting_folder(folder: str | os.PathLike) -> bool:
    """True when ``folder`` holds a record siting writes: a ``run.json`` of an output set, a ``scenarios.json``
    of a scenario comparison, a commit journal with its staging folder, or a stage-cache entry whose manifest
    verifies (a run killed before its first commit).  A ``siting.log`` or a ``.cache`` folder alone is no proof:
    other tools use those names too."""
    from ..cache import _manifest_digest

    folder = Path(folder)
    if atomic.read_manifest(folder):
        return True
    rec = atomic._read_json(folder / "scenarios.json")
    if isinstance(rec, dict) and rec.get("format") == "siting-scenarios":
        return True
    cache = folder / ".cache"
    if cache.is_symlink() or not cache.is_dir():
        return False
    try:
        entries = list(cache.iterdir())
    except OSError:
        return False
    return any(_cache_entry(entry, _manifest_digest) for entry in entries)


_HEX64 = re.compile(r"[0-9a-f]{64}")


def _cache_entry(entry: Path, manifest_digest) -> bool:
    """True for a stage-cache entry siting wrote: a folder ``<stage>-<first 24 hex digits of its key>`` whose
    ``manifest.json`` holds that 64-digit key and the SHA-256 of each table (its own digest, when it has one,
    must verify)."""
    if entry.is_symlink() or not entry.is_dir():
        return False
    man = atomic._read_json(entry / "manifest.json")
    if not isinstance(man, dict):
        return False
    key, files = man.get("key"), man.get("files")
    if not (isinstance(key, str) and _HEX64.fullmatch(key) and entry.name.endswith("-" + key[:24])
            and isinstance(files, dict) and all(isinstance(v, str) and _HEX64.fullmatch(v) for v in files.values())):
        return False
    return "manifest_sha256" not in man or man["manifest_sha256"] == manifest_digest(man)


#: Names a file manager or an OS leaves in any folder; they do not make a folder "someone else's".
SYSTEM_FILES = frozenset({".DS_Store", "Thumbs.db", "desktop.ini"})


def foreign_folder_problem(folder: str | os.PathLike) -> str | None:
    """A sentence when ``folder`` exists, is not empty and holds no record of a siting run
    (:func:`siting_folder`); None otherwise."""
    folder = Path(folder)
    if not folder.is_dir() or not os.access(folder, os.R_OK | os.X_OK):
        return None
    names = sorted(n for n in os.listdir(folder) if n not in SYSTEM_FILES)
    if not names or siting_folder(folder):
        return None
    shown = ", ".join(names[:5]) + (f" and {len(names) - 5} more" if len(names) > 5 else "")
    return (f"output.folder '{folder}' is not empty and no siting run created it (it holds files that no siting run "
            f"created there: {shown}; a siting output folder holds its run.json, scenarios.json or stage cache); "
            "choose a new or empty folder, e.g. 'out', or allow writing there with --overwrite (siting replaces "
            "only the files of its output set)")


def input_problems(folder, named_inputs: dict) -> list[str]:
    """Sentences for inputs (``{"inputs.survey_results": path, ...}``) that are ``folder`` or lie inside it: a run
    writes and replaces files there, so it could overwrite what the job reads (e.g. a survey list filled in by
    the field teams, which the next survey list would replace)."""
    try:
        target = _resolved(folder)
    except (OSError, RuntimeError):
        return []
    probs = []
    for key, path in named_inputs.items():
        ip = _within(path, target)
        if ip is not None:
            where = "is output.folder" if ip == target else f"lies inside output.folder '{target}'"
            probs.append(f"{key} '{path}' {where}, whose files a run writes and replaces, so this run could "
                         f"overwrite what it reads: copy the file out of the output folder (e.g. beside the job "
                         f"file) and point {key} at the copy, or choose another output.folder")
    return probs


def _resolved(p) -> Path:
    return Path(os.path.expanduser(str(p))).resolve()


def _within(path, target: Path) -> Path | None:
    """``path`` resolved when it is ``target`` or lies inside it; None otherwise (also for no path, or one that
    cannot be resolved)."""
    if path is None or str(path) == "":
        return None
    try:
        ip = _resolved(path)
    except (OSError, RuntimeError):
        return None
    return ip if ip == target or target in ip.parents else None


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
        ip = _within(inp, target)
        if ip is not None:
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
    return probs + _content_problems(target, where, planned_files() if files is None else list(files), overwrite)


def _content_problems(target: Path, where: str, names: list[str], overwrite: bool) -> list[str]:
    """What the folder holds that a run must not write through or replace (see :func:`output_folder_problems`)."""
    probs = [f"{where}: {p}; move it away or choose another output.folder (--overwrite does not lift this)"
             for p in unsafe_paths(target, names)]
    if target.is_dir() and not overwrite:
        clash = foreign_files(target, names)
        if clash:
            shown = ", ".join(clash[:8]) + (f" and {len(clash) - 8} more" if len(clash) > 8 else "")
            probs.append(f"{where} holds files that no siting run created there and that a run would replace: "
                         f"{shown}; move them away, choose another output.folder, or allow it with --overwrite")
        else:
            foreign = foreign_folder_problem(target)
            if foreign:
                probs.append(foreign.replace(f"output.folder '{target}'", where, 1))
    return probs


def check_output_folder(folder, input_paths: Iterable = (), *, files: Iterable[str] | None = None,
                        overwrite: bool = False) -> Path:
    """Refuse an unsafe output folder before any stage runs; return it resolved.

    Refused, each with a message naming the folder and the fix (one :class:`~siting.errors.JobError` listing
    every problem, exit code 2): a folder that is an input, is an input's folder or contains an input at any
    depth; the user's home folder; a file-system root; a path that is an existing file; a folder (or the
    nearest existing folder above a new one) the user cannot write; a symbolic link or an item of the wrong
    kind on the way to any of ``files``, ``siting.log`` or ``.cache`` (:func:`unsafe_paths`, even with
    ``overwrite``); and, unless ``overwrite``, a folder holding any of ``files`` (relative paths; default
    :func:`planned_files` of the default options) that the previous siting run's manifest does not list, or that
    is not a regular file, or a non-empty folder with no record of a siting run (:func:`foreign_folder_problem`).

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
