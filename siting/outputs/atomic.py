"""Atomic file writes: a temporary file in the destination folder, then :func:`os.replace`.

A reader (a GIS client, a survey team's sync job, the next run) sees either the previous complete file or
the new complete file, never a truncated one: the temporary file lives in the same folder (so the rename
stays on one file system, where POSIX ``rename`` is atomic), is flushed and fsynced before the rename, and is
removed if anything fails while it is being written.
"""

from __future__ import annotations

import contextlib
import json as _json
import os
import secrets
import shutil as _shutil
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

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
        _fsync(tmp_path)
        os.replace(tmp_path, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp_path.unlink()
        raise


def _fsync(path: Path) -> None:
    """Flush a file or a folder entry to disk (best effort: some filesystems refuse)."""
    with contextlib.suppress(OSError):
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def write_with(path: str | os.PathLike, writer: Callable[[Any], None], mode: str = "w") -> Path:
    """Open a temporary file beside ``path`` in ``mode``, call ``writer(file)``, then rename it to ``path``.

    Text modes use UTF-8 and ``\\n`` line ends on every platform.
    """
    path = Path(path)
    with atomic_path(path) as tmp:
        text = "b" not in mode
        with open(tmp, mode, encoding="utf-8" if text else None, newline="\n" if text else None) as fh:
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


# ---------------------------------------------------------------------------------------------- output sets
#
# A run writes its whole set into a fresh staging folder inside the output folder (same file system, so every
# move below is a rename), then commits it:
#
# 1. a journal (``.siting-commit.json``) is written atomically: staging folder, files of the new set, files of
#    the previous set to remove;
# 2. the previous ``run.json`` is removed, so from here until step 4 no file marks the folder complete;
# 3. each new file is renamed into place, then the previous run's files that the new set lacks are removed;
# 4. the new ``run.json`` is renamed into place (it carries the manifest: the files this run created);
# 5. the journal and the staging folder are removed.
#
# A failure before step 1 removes the staging folder and leaves the previous set untouched.  A kill during
# steps 2-5 leaves the journal, and :func:`recover` (run first by every write into the folder) completes the
# commit from the staging folder, which already holds the complete new set.  Only files listed in a previous
# manifest, and only names siting writes, are ever replaced or removed.

JOURNAL = ".siting-commit.json"
STAGING_PREFIX = TMP_PREFIX + "set-"
RECORD = "run.json"


def safe_relpath(rel, allowed: Callable[[str], bool] | None = None) -> str | None:
    """``rel`` as a normalised relative POSIX path inside the folder, or None when it points elsewhere
    (absolute, ``..``, empty) or ``allowed`` rejects it."""
    if not isinstance(rel, str) or not rel or "\\" in rel or "\x00" in rel:
        return None
    parts = rel.split("/")
    if rel.startswith("/") or any(p in ("", ".", "..") for p in parts):
        return None
    if allowed is not None and not allowed(rel):
        return None
    return rel


def read_manifest(folder: str | os.PathLike, allowed: Callable[[str], bool] | None = None) -> list[str]:
    """Files a previous siting run created in ``folder``: the ``manifest`` of its ``run.json`` (older records:
    the values of ``files``), plus the files of an interrupted commit.  Entries that point outside the folder
    or that ``allowed`` rejects are dropped, so a tampered record cannot make a run touch other files."""
    folder = Path(folder)
    names: set[str] = set()
    with contextlib.suppress(OSError, ValueError, TypeError, AttributeError):
        rec = _json.loads((folder / RECORD).read_text(encoding="utf-8"))
        if isinstance(rec, dict) and rec.get("format") == "siting-run":
            man = rec.get("manifest")
            listed = man.get("files", []) if isinstance(man, dict) else list((rec.get("files") or {}).values())
            names.update(str(x) for x in listed if isinstance(x, str))
            names.add(RECORD)
    with contextlib.suppress(OSError, ValueError, TypeError, AttributeError):
        jr = _json.loads((folder / JOURNAL).read_text(encoding="utf-8"))
        names.update(str(x) for x in jr.get("files", []) + jr.get("remove", []) if isinstance(x, str))
    return sorted(r for r in (safe_relpath(n, allowed) for n in names) if r is not None)


def _apply_commit(folder: Path, journal: dict, allowed: Callable[[str], bool] | None) -> None:
    """Steps 2-5 of a commit; idempotent, so :func:`recover` can run it again after a kill."""
    staging = folder / journal["staging"]
    files = [f for f in (safe_relpath(x, allowed) for x in journal.get("files", [])) if f is not None]
    remove = [f for f in (safe_relpath(x, allowed) for x in journal.get("remove", [])) if f is not None]
    if (staging / RECORD).exists():
        with contextlib.suppress(FileNotFoundError):
            (folder / RECORD).unlink()
        _fsync(folder)
    for rel in files:
        if rel == RECORD:
            continue
        src = staging / rel
        if src.exists():
            (folder / rel).parent.mkdir(parents=True, exist_ok=True)
            os.replace(src, folder / rel)
    for rel in remove:
        if rel not in files:
            with contextlib.suppress(FileNotFoundError, IsADirectoryError, NotADirectoryError):
                (folder / rel).unlink()
    _fsync(folder)
    if (staging / RECORD).exists():
        os.replace(staging / RECORD, folder / RECORD)
        _fsync(folder)
    with contextlib.suppress(FileNotFoundError):
        (folder / JOURNAL).unlink()
    _shutil.rmtree(staging, ignore_errors=True)
    for sub in {(folder / r).parent for r in remove} - {folder}:  # e.g. an emptied figures/ folder
        with contextlib.suppress(OSError):
            sub.rmdir()


def recover(folder: str | os.PathLike, allowed: Callable[[str], bool] | None = None) -> bool:
    """Complete a commit a killed run left half done, and remove staging folders and temporary files of runs
    killed before their commit.  Returns True when a commit was completed."""
    folder = Path(folder)
    done = False
    journal = None
    with contextlib.suppress(FileNotFoundError):
        try:
            journal = _json.loads((folder / JOURNAL).read_text(encoding="utf-8"))
        except ValueError:  # a journal is written atomically; an unreadable one is not ours to act on
            journal = None
    if isinstance(journal, dict) and isinstance(journal.get("staging"), str) \
            and safe_relpath(journal["staging"]) == journal["staging"] and journal["staging"].startswith(STAGING_PREFIX):
        _apply_commit(folder, journal, allowed)
        done = True
    if folder.is_dir():
        for p in folder.glob(TMP_PREFIX + "*"):
            if p.is_symlink() or p.is_file():
                with contextlib.suppress(FileNotFoundError):
                    p.unlink()  # a temporary file of a killed write (e.g. of the journal)
            elif p.is_dir() and p.name.startswith(STAGING_PREFIX):
                _shutil.rmtree(p, ignore_errors=True)
    return done


@contextlib.contextmanager
def folder_lock(folder: str | os.PathLike) -> Iterator[None]:
    """Hold an exclusive lock on ``folder`` (``flock`` on the folder itself, so no lock file is left behind;
    the system releases it when the process ends, even by SIGKILL).  A second run writing into the same
    folder at the same time gets a clear error instead of removing the first run's staging folder."""
    try:
        import fcntl
    except ImportError:  # pragma: no cover - no flock (Windows): runs into one folder must not overlap
        yield
        return
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError as exc:
        raise SitingError(f"output folder: expected a readable folder at '{folder}', got {exc.strerror}; "
                          "fix its permissions or choose another output.folder") from exc
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError as exc:
            raise SitingError(f"output folder '{folder}' is being written by another siting run; wait for it to "
                              "finish or choose another output.folder") from exc
        yield
    finally:
        os.close(fd)  # closing the descriptor releases the lock


class OutputSet:
    """A staging folder for one run's complete output set; :meth:`commit` moves it into place.

    Used as a context manager: leaving the block without a commit (an exception, a full disk) removes the
    staging folder and leaves the folder's previous set as it was.
    """

    def __init__(self, folder: str | os.PathLike, allowed: Callable[[str], bool] | None = None):
        self.folder = Path(folder)
        self.allowed = allowed
        self.staging = self.folder / f"{STAGING_PREFIX}{secrets.token_hex(6)}"
        self.committed = False

    def __enter__(self) -> OutputSet:
        self.staging.mkdir()
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if not self.committed:
            _shutil.rmtree(self.staging, ignore_errors=True)

    def path(self, rel: str) -> Path:
        """Where to write ``rel`` in the staging folder (its parent folder is created)."""
        p = self.staging / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        return p

    def commit(self, files: list[str]) -> None:
        """Move the staged ``files`` (relative paths, ``run.json`` among them) into place and remove the files
        of the previous set that this one lacks."""
        previous = read_manifest(self.folder, self.allowed)
        journal = {"staging": self.staging.name, "files": list(files),
                   "remove": [r for r in previous if r not in set(files)]}
        _fsync(self.staging)
        write_text(self.folder / JOURNAL, _json.dumps(journal, indent=1) + "\n")
        self.committed = True  # from here on the journal lets the next run finish the commit
        _apply_commit(self.folder, journal, self.allowed)
