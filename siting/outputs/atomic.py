"""Atomic file writes: a temporary file in the destination folder, then :func:`os.replace`.

A reader (a GIS client, a survey team's sync job, the next run) sees either the previous complete file or
the new complete file, never a truncated one: the temporary file lives in the same folder (so the rename
stays on one file system, where POSIX ``rename`` is atomic), is flushed and fsynced before the rename, and is
removed if anything fails while it is being written.
"""

from __future__ import annotations

import contextlib
import os
import secrets
from collections.abc import Callable, Iterator
from pathlib import Path

from ..errors import SitingError

TMP_PREFIX = ".siting-tmp-"


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike, suffix: str | None = None) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on normal exit move it over ``path``.

    The caller writes the whole file to the yielded path (by any library: open(), pyogrio, matplotlib).
    If the body raises, the temporary file is deleted and ``path`` is left as it was.

    Parameters
    ----------
    path : the final file path; its folder must exist.
    suffix : extension for the temporary file (some writers pick their format from it); default: the
        final path's own suffix.
    """
    path = Path(path)
    folder = path.parent
    if not folder.is_dir():
        raise SitingError(
            f"expected an existing output folder for '{path.name}', found none at '{folder}'; "
            "create the folder first (write_outputs does this for its own output folder)"
        )
    # like mkstemp (exclusive create, unguessable name) but with the usual 0o666 & ~umask permissions,
    # so the renamed file is as readable as any file the user creates
    for _ in range(100):
        tmp_path = folder / f"{TMP_PREFIX}{path.name}.{secrets.token_hex(6)}{suffix or path.suffix}"
        try:
            fd = os.open(tmp_path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
            break
        except FileExistsError:
            continue
    else:  # pragma: no cover - 100 collisions of 48 random bits
        raise SitingError(f"could not create a temporary file beside '{path}'")
    os.close(fd)
    try:
        yield tmp_path
        _fsync_file(tmp_path)
        os.replace(tmp_path, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp_path.unlink()
        raise


def _fsync_file(path: Path) -> None:
    with contextlib.suppress(OSError):
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def write_with(path: str | os.PathLike, writer: Callable[[object], None], mode: str = "w") -> Path:
    """Open a temporary file beside ``path`` in ``mode``, call ``writer(file)``, then rename it to ``path``.

    Text modes use UTF-8 and ``\\n`` line ends on every platform.
    """
    path = Path(path)
    with atomic_path(path) as tmp:
        kwargs = {} if "b" in mode else {"encoding": "utf-8", "newline": "\n"}
        with open(tmp, mode, **kwargs) as fh:
            writer(fh)
            fh.flush()
    return path


def write_text(path: str | os.PathLike, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``path`` atomically."""
    return write_with(path, lambda fh: fh.write(text), "w")


def write_bytes(path: str | os.PathLike, data: bytes) -> Path:
    """Write ``data`` to ``path`` atomically."""
    return write_with(path, lambda fh: fh.write(data), "wb")


def leftover_temp_files(folder: str | os.PathLike) -> list[Path]:
    """Temporary files an interrupted write left in ``folder`` (a killed process cannot clean up)."""
    return sorted(Path(folder).rglob(TMP_PREFIX + "*"))
