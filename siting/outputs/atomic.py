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
# 1. every destination is checked: no folder on its path inside the output folder may be a symbolic link or a
#    file, and no destination may be a folder (nothing is written through a link, nothing is replaced by force);
# 2. a journal (``.siting-commit.json``) is written atomically: the staging folder, the SHA-256 of each file of
#    the new set, and the files of the previous set to remove;
# 3. every file of the previous set that the new set replaces or drops is moved into ``.siting-previous/``
#    inside the staging folder (``run.json`` first, so from here until step 4 ends no file marks the folder
#    complete), then each new file is moved into place, ``run.json`` (with the ``manifest`` of the set) last;
# 4. the journal is removed (the commit point), then the staging folder with the previous set's files.
#
# A failure before step 2 leaves the previous set untouched.  A failure during step 3 (a folder that cannot be
# changed, another user's ``figures/``) moves every file back: the new ones into the staging folder, the
# previous ones into place, so the folder again holds exactly the previous set.  A kill during step 3 leaves the
# journal, and :func:`recover` (run first by every write into the folder) makes the same roll-back: it moves a
# file out of the folder only when its SHA-256 is the one the journal recorded for the file this commit staged,
# and moves a previous file back only where nothing is in its place, so a journal that siting did not write (one
# copied along with an old folder) can neither remove nor replace a file.  Only files listed in a previous
# manifest, and only names siting writes, are ever replaced or removed.

JOURNAL = ".siting-commit.json"
JOURNAL_FORMAT = "siting-commit"
STAGING_PREFIX = TMP_PREFIX + "set-"
#: Folder inside the staging folder holding the previous set's files during a commit.
PREVIOUS = ".siting-previous"
RECORD = "run.json"


class CommitError(SitingError):
    """Moving an output set into place failed.  ``restored`` says whether the folder holds the previous set
    again (True) or the journal was kept for :func:`recover` to finish restoring it (False)."""

    def __init__(self, message: str, restored: bool, cause: BaseException | None = None):
        super().__init__(message)
        self.restored = restored
        self.cause = cause


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


def file_sha256(path: str | os.PathLike) -> str:
    """SHA-256 of a file's bytes (hex)."""
    import hashlib

    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _same_file(path: Path, sha: object) -> bool:
    """True when ``path`` is a regular file (not a link) whose SHA-256 is ``sha``."""
    try:
        return isinstance(sha, str) and not path.is_symlink() and path.is_file() and file_sha256(path) == sha
    except OSError:
        return False


def path_problem(folder: str | os.PathLike, rel: str, *, want: str = "file") -> str | None:
    """Why ``folder/rel`` cannot be written as a ``want`` ("file" or "folder") without following a link or
    replacing something by force: a folder on its path (inside ``folder``) that is a symbolic link or a file, or
    the path itself a link or of the other kind.  None when it can be written."""
    folder = Path(folder)
    parts = rel.split("/")
    for i in range(1, len(parts)):
        sub = "/".join(parts[:i])
        p = folder / sub
        if p.is_symlink():
            return f"'{sub}' is a symbolic link (siting never writes through links)"
        if p.exists() and not p.is_dir():
            return f"'{sub}' is a file where the output set needs a folder"
        if not p.exists():
            break
    p = folder / rel
    if p.is_symlink():
        return f"'{rel}' is a symbolic link (siting never writes through links)"
    if want == "file" and p.is_dir():
        return f"'{rel}' is a folder where the output set writes a file"
    if want == "folder" and p.exists() and not p.is_dir():
        return f"'{rel}' is a file where siting needs a folder"
    return None


def _read_json(path: Path) -> object:
    """A JSON file's content, or None (missing, a link, unreadable, not JSON)."""
    try:
        if path.is_symlink() or not path.is_file():
            return None
        return _json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def _record_files(rec: object) -> list[str]:
    """The files a ``run.json`` record lists in its manifest (older records: the values of ``files``)."""
    if not (isinstance(rec, dict) and rec.get("format") == "siting-run"):
        return []
    man = rec.get("manifest")
    listed = man.get("files", []) if isinstance(man, dict) else list((rec.get("files") or {}).values())
    return [str(x) for x in listed if isinstance(x, str)] + [RECORD]


def read_journal(folder: str | os.PathLike) -> tuple[str, dict | None]:
    """The commit journal in ``folder`` and whether siting can act on it: ``("none", None)``;
    ``("ours", journal)`` when it names an existing staging folder of siting's (a commit this package started
    and did not finish); ``("foreign", None)`` for anything else (unreadable, a link, or naming no staging
    folder: e.g. copied along with an old output folder)."""
    folder = Path(folder)
    path = folder / JOURNAL
    if not (path.exists() or path.is_symlink()):
        return "none", None
    jr = _read_json(path)
    if not isinstance(jr, dict):
        return "foreign", None
    staging = jr.get("staging")
    if not (isinstance(staging, str) and safe_relpath(staging) == staging and "/" not in staging
            and staging.startswith(STAGING_PREFIX)):
        return "foreign", None
    sp = folder / staging
    if sp.is_symlink() or not sp.is_dir():
        return "foreign", None
    files, remove = jr.get("files"), jr.get("remove", [])
    if not isinstance(remove, list):
        return "foreign", None
    if jr.get("format") == JOURNAL_FORMAT and isinstance(files, dict):
        return "ours", jr
    if "format" not in jr and isinstance(files, list):  # a commit of an earlier version (no roll-back data)
        return "ours", jr
    return "foreign", None


def read_manifest(folder: str | os.PathLike, allowed: Callable[[str], bool] | None = None) -> list[str]:
    """Files a previous siting run created in ``folder``: the ``manifest`` of its ``run.json`` (older records:
    the values of ``files``), plus, for an interrupted commit, the previous set's files (from its ``run.json``
    kept in the staging folder) and each new file whose bytes are the ones the journal recorded.  Entries that
    point outside the folder or that ``allowed`` rejects are dropped, so a tampered record cannot make a run touch
    other files."""
    folder = Path(folder)
    names: set[str] = set(_record_files(_read_json(folder / RECORD)))
    state, jr = read_journal(folder)
    if state == "ours" and jr is not None:
        staging = folder / jr["staging"]
        if isinstance(jr["files"], dict):
            names.update(_record_files(_read_json(staging / PREVIOUS / RECORD)))
            names.update(rel for rel, sha in jr["files"].items()
                         if safe_relpath(rel) and _same_file(folder / rel, sha))
        else:
            names.update(str(x) for x in jr["files"] + jr["remove"] if isinstance(x, str))
    return sorted(r for r in (safe_relpath(n, allowed) for n in names) if r is not None)


def _move(src: Path, dst: Path, made: list[Path]) -> None:
    """Rename ``src`` to ``dst``, creating ``dst``'s missing folders (recorded in ``made``)."""
    missing = []
    parent = dst.parent
    while not parent.exists() and not parent.is_symlink():
        missing.append(parent)
        parent = parent.parent
    for d in reversed(missing):
        d.mkdir()
        made.append(d)
    os.replace(src, dst)


def _roll_back(folder: Path, staging: Path, files: dict[str, str], moved_in: list[str] | None,
               moved_out: list[str] | None) -> bool:
    """Undo a commit: the new files back into ``staging``, the previous ones back into place.

    With the lists of a commit in this process (``moved_in``, ``moved_out``) exactly those moves are undone;
    without (:func:`recover`), a file leaves the folder only when its SHA-256 is the journal's for it, and a
    previous file returns only where nothing is in its place.  Returns True when every previous file is back."""
    previous = staging / PREVIOUS
    made: list[Path] = []
    ins = list(moved_in) if moved_in is not None else [
        rel for rel, sha in files.items() if not (staging / rel).exists() and _same_file(folder / rel, sha)]
    for rel in reversed(ins):
        os.replace(folder / rel, staging / rel)
    outs = list(moved_out) if moved_out is not None else sorted(
        p.relative_to(previous).as_posix() for p in previous.rglob("*") if p.is_file() or p.is_symlink()) \
        if previous.is_dir() else []
    complete = True
    for rel in reversed(outs):
        dst = folder / rel
        if dst.exists() or dst.is_symlink() or path_problem(folder, rel):
            complete = False  # something is in its place: keep the previous file in the staging folder
            continue
        _move(previous / rel, dst, made)
    _fsync(folder)
    return complete


def _remove_empty_parents(folder: Path, rels) -> None:
    for sub in sorted({(folder / r).parent for r in rels} - {folder}, key=lambda p: -len(p.parts)):
        with contextlib.suppress(OSError):
            if not sub.is_symlink():
                sub.rmdir()  # e.g. an emptied figures/ folder


def _finish(folder: Path, staging: Path, remove) -> None:
    """The commit point and the clean-up after it."""
    with contextlib.suppress(FileNotFoundError):
        (folder / JOURNAL).unlink()
    _fsync(folder)
    _shutil.rmtree(staging, ignore_errors=True)
    _remove_empty_parents(folder, remove)


def _apply_commit(folder: Path, journal: dict) -> None:
    """Steps 3-4 of a commit; on a failure, every move is undone (:class:`CommitError`)."""
    staging = folder / journal["staging"]
    files: dict[str, str] = journal["files"]
    remove: list[str] = journal["remove"]
    previous = staging / PREVIOUS
    moved_out: list[str] = []
    moved_in: list[str] = []
    made: list[Path] = []
    try:
        olds = list(dict.fromkeys([*files, *remove]))
        olds = ([RECORD] if RECORD in olds else []) + [r for r in olds if r != RECORD]
        for rel in olds:
            dst = folder / rel
            if dst.is_symlink() or dst.is_file():
                _move(dst, previous / rel, [])
                moved_out.append(rel)
        _fsync(folder)
        for rel in [r for r in files if r != RECORD] + ([RECORD] if RECORD in files else []):
            _move(staging / rel, folder / rel, made)
            moved_in.append(rel)
        _fsync(folder)
    except (Exception, KeyboardInterrupt) as exc:
        try:
            restored = _roll_back(folder, staging, files, moved_in, moved_out)
        except OSError:
            restored = False
        if restored:
            for d in reversed(made):
                with contextlib.suppress(OSError):
                    d.rmdir()
            _finish(folder, staging, [])
            raise CommitError("moving the new set into place failed; every file was moved back, so the folder "
                              "holds the previous set as it was", True, exc) from exc
        raise CommitError(f"moving the new set into place failed and the previous set could not be moved back "
                          f"completely; its files are kept in '{staging}', and the next run into this folder "
                          "restores them", False, exc) from exc
    _finish(folder, staging, remove)


def recover(folder: str | os.PathLike, allowed: Callable[[str], bool] | None = None) -> bool:
    """Undo a commit a killed run left half done (the folder holds the previous set again; a commit of an
    earlier version, which kept no previous files, is completed instead), and remove staging folders and
    temporary files of runs killed before their commit.  A journal siting cannot prove it wrote (see
    :func:`read_journal`) is left alone.  Returns True when an interrupted commit was undone or completed."""
    folder = Path(folder)
    done = False
    state, journal = read_journal(folder)
    keep = None
    if state == "ours" and journal is not None:
        staging = folder / journal["staging"]
        if isinstance(journal["files"], dict):
            files = {r: s for r, s in journal["files"].items() if safe_relpath(r, allowed)}
            if not _roll_back(folder, staging, files, None, None):
                keep = staging.name  # some previous file found its place taken: keep it, never lose it
            with contextlib.suppress(FileNotFoundError):
                (folder / JOURNAL).unlink()
        else:
            for rel in (r for r in (safe_relpath(x, allowed) for x in journal["files"]) if r is not None):
                if (staging / rel).is_file() and not path_problem(folder, rel):
                    _move(staging / rel, folder / rel, [])
            with contextlib.suppress(FileNotFoundError):
                (folder / JOURNAL).unlink()
        _fsync(folder)
        done = True
    if folder.is_dir():
        for p in folder.glob(TMP_PREFIX + "*"):
            if p.is_symlink() or p.is_file():
                with contextlib.suppress(FileNotFoundError):
                    p.unlink()  # a temporary file of a killed write (e.g. of the journal)
            elif p.is_dir() and p.name.startswith(STAGING_PREFIX) and p.name != keep:
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

    def commit(self, files: list[str], previous: list[str] | None = None) -> None:
        """Move the staged ``files`` (relative paths, ``run.json`` among them for an output set) into place and
        remove the files of the previous set (``previous``; default: the previous ``run.json``'s manifest) that
        this one lacks.  Raises :class:`CommitError` (the previous set restored, or kept for :func:`recover`)."""
        previous = read_manifest(self.folder, self.allowed) if previous is None else list(previous)
        problems = [p for p in (path_problem(self.folder, r) for r in files) if p]
        if problems:
            raise CommitError(f"{'; '.join(dict.fromkeys(problems))}; nothing was replaced, the folder holds the "
                              "previous set as it was", True)
        # a previous file that is now a link, a folder, or behind a link is not siting's any more: left alone
        remove = [r for r in previous if r not in set(files) and path_problem(self.folder, r) is None
                  and not (self.folder / r).is_dir()]
        _fsync(self.staging)
        journal = {"format": JOURNAL_FORMAT, "staging": self.staging.name,
                   "files": {rel: file_sha256(self.staging / rel) for rel in files}, "remove": remove}
        write_text(self.folder / JOURNAL, _json.dumps(journal, indent=1) + "\n")
        self.committed = True  # from here on the staging folder belongs to the commit (and the journal)
        _apply_commit(self.folder, journal)
