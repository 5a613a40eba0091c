"""File-system checks of input files, before any parser sees them: present, a file, readable, not empty, UTF-8.

Each check gives one sentence naming the file and the fix, so ``siting validate`` and the start of ``siting plan``
can list every file problem of a job at once.  Text files (the job's TOML, GeoJSON layers) must be UTF-8; a
leading UTF-8 byte-order mark is accepted and skipped (common practice: some editors on Windows write one).
"""

from __future__ import annotations

import codecs
import errno
import os
from pathlib import Path

from ..errors import InputDataError

#: The UTF-8 byte-order mark (U+FEFF encoded), skipped at the start of a text file.
UTF8_BOM = codecs.BOM_UTF8
#: Folders that GDAL reads as one data set (a file geodatabase is a folder).
FOLDER_FORMATS = (".gdb",)
_CHUNK = 1 << 20


def file_problem(path: str | os.PathLike, what: str) -> str | None:
    """Why ``path`` cannot be read as an input file, as one sentence with the fix; None when it can.

    Parameters
    ----------
    path : the file.
    what : how to name it in the message, e.g. ``"buildings file"`` or ``"job file"``.
    """
    p = Path(path)
    if p.is_symlink() and _link_loop(p):
        return (f"{what} '{p}' is a symbolic link that leads back to itself (a link loop); point the link at the "
                "real file (ls -l shows where it points) or give the file's own path")
    if not p.exists():
        hint = "; the path is a broken link" if p.is_symlink() else ""
        return (f"{what} '{p}' not found{hint}; check the path (relative paths in a job file resolve against the "
                "job file's folder)")
    if p.is_dir():
        if p.suffix.lower() in FOLDER_FORMATS:
            return None if os.access(p, os.R_OK | os.X_OK) else (
                f"{what} '{p}' cannot be read by this user (permission denied); fix its permissions "
                "(e.g. chmod -R u+rX) or copy it somewhere readable")
        inside = sorted(q.name for q in p.iterdir() if q.is_file())[:5] if os.access(p, os.R_OK | os.X_OK) else []
        shown = f" (it holds {', '.join(inside)})" if inside else ""
        return (f"{what} '{p}' is a folder, but a file is expected{shown}; give the path of the layer file inside "
                "it, e.g. 'folder/buildings.geojson'")
    if not p.is_file():
        return f"{what} '{p}' is not a regular file (a device or a pipe); give the path of a file"
    if not os.access(p, os.R_OK):
        return (f"{what} '{p}' cannot be read by this user (permission denied); fix its permissions "
                "(e.g. chmod u+r) or copy it somewhere readable")
    if p.stat().st_size == 0:
        return (f"{what} '{p}' is empty (0 bytes); the export or copy did not finish: write the file again")
    return None


def _link_loop(p: Path) -> bool:
    """True when following the links of ``p`` never ends (ELOOP)."""
    try:
        p.resolve(strict=True)
    except RuntimeError:  # Python < 3.13: "Symlink loop from ..."
        return True
    except OSError as exc:
        return exc.errno == errno.ELOOP
    return False


def check_file(path: str | os.PathLike, what: str) -> None:
    """Raise :class:`~siting.errors.InputDataError` with :func:`file_problem`'s sentence, if any."""
    problem = file_problem(path, what)
    if problem:
        raise InputDataError(problem)


def utf8_problem(path: str | os.PathLike, what: str) -> str | None:
    """None when ``path`` is UTF-8 text (with or without a byte-order mark), else one sentence naming the first
    offending byte, its offset and the fix.  Reads the file in 1 MiB chunks (constant memory)."""
    decoder = codecs.getincrementaldecoder("utf-8")(errors="strict")
    offset = 0
    try:
        with open(path, "rb") as fh:
            while True:
                chunk = fh.read(_CHUNK)
                final = not chunk
                try:
                    decoder.decode(chunk, final=final)
                except UnicodeDecodeError as exc:
                    # exc.object is the tail the decoder held back from the previous chunk, then this chunk
                    start = offset - (len(exc.object) - len(chunk)) + exc.start
                    bad = exc.object[exc.start]
                    return (f"{what} '{path}' is not UTF-8 text (byte 0x{bad:02X} at offset {start}); save it as "
                            "UTF-8 (in most editors: Save As, encoding UTF-8) and run again")
                if final:
                    return None
                offset += len(chunk)
    except OSError as exc:
        return f"{what} '{path}' could not be read ({exc.strerror or exc}); check the file and its permissions"


def read_text(path: str | os.PathLike, what: str) -> str:
    """The file as text: checked by :func:`file_problem` and :func:`utf8_problem`, a leading BOM removed."""
    check_file(path, what)
    problem = utf8_problem(path, what)
    if problem:
        raise InputDataError(problem)
    data = Path(path).read_bytes()
    return data[len(UTF8_BOM):].decode("utf-8") if data.startswith(UTF8_BOM) else data.decode("utf-8")
