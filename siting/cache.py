"""Content-addressed stage cache: npz / Parquet tables plus a JSON manifest, verified by SHA-256, never pickled.

An entry is a folder ``<root>/<name>-<key>/`` holding one file per table and ``manifest.json`` with the key, the
SHA-256 of every file and any small JSON-able extras.  A table whose columns are all plain numbers or booleans
(the link tiles) is an uncompressed ``.npz`` of its columns, read with ``allow_pickle=False`` (about 4x faster to
write than Parquet, which matters for hundreds of tiles); any other table is Parquet.  An entry is written into a
temporary folder and renamed into place, so a killed process leaves either a whole entry or none.  The manifest
carries the SHA-256 of its own body (``manifest_sha256``), so an edited extra (a plan's figures, a stage's notes)
is caught like an edited table.  On read, a missing, foreign, tampered, truncated or unreadable entry (key or hash
mismatch, a file that cannot be opened or parsed, a table without the expected columns) is logged and treated as
absent: it is removed and recomputed, never trusted and never fatal.  A failure to store an entry (a full disk)
is logged too; the run goes on without that checkpoint.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import shutil
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd


def digest(obj) -> str:
    """A stable SHA-256 hex digest of a JSON-able object (keys sorted)."""
    text = json.dumps(obj, sort_keys=True, default=str, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()


def file_sha256(path: str | Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


class StageCache:
    """Read and write cache entries under ``root``; ``log`` receives one line per event.

    ``read=False`` (the CLI's ``--fresh``) ignores what is stored but still stores new results, so the next run
    can resume from them.  ``root=None`` is no cache: nothing is read or written (``siting.plan(write=False)``).
    """

    def __init__(self, root: str | Path | None, log: Callable[[str], Any] = lambda msg: None, read: bool = True):
        self.root = Path(root) if root is not None else None
        self.log = log
        self.read = read and root is not None

    def _dir(self, name: str, key: str) -> Path:
        assert self.root is not None
        return self.root / f"{name}-{key[:24]}"

    def load(self, name: str, key: str, expect: tuple[str, ...] = ()) -> tuple[dict[str, pd.DataFrame], dict] | None:
        """Tables and extras of a verified entry, or None (absent, not read, or failed verification).

        An entry lacking one of the ``expect`` tables (written by an older version) fails verification too.
        Any failure to verify or read an entry is logged, the entry removed, and None returned.
        """
        if not self.read:
            return None
        folder = self._dir(name, key)
        manifest_path = folder / "manifest.json"
        if not (manifest_path.exists() or manifest_path.is_symlink()):
            return None
        try:
            return self._verified(folder, manifest_path, key, expect)
        except Exception as exc:  # noqa: BLE001 - a bad entry is recomputed, whatever is wrong with it
            self.log(f"cache entry {folder.name} is not usable ({type(exc).__name__}: {exc}); recomputing")
            shutil.rmtree(folder, ignore_errors=True)
            return None

    @staticmethod
    def _verified(folder: Path, manifest_path: Path, key: str,
                  expect: tuple[str, ...]) -> tuple[dict[str, pd.DataFrame], dict]:
        manifest = json.loads(manifest_path.read_bytes())
        if not isinstance(manifest, dict) or not isinstance(manifest.get("files"), dict):
            raise ValueError("manifest is not a table of files")
        if manifest.get("key") != key:
            raise ValueError("key mismatch (foreign entry)")
        if manifest.get("manifest_sha256") != _manifest_digest(manifest):
            raise ValueError("hash mismatch in manifest.json (edited or written by another version)")
        missing = set(expect) - set(manifest["files"])
        if missing:
            raise ValueError(f"tables {sorted(missing)} missing (written by another version)")
        tables = {}
        for table, sha in manifest["files"].items():
            path = folder / f"{table}.npz"
            if not path.is_file():
                path = folder / f"{table}.parquet"
            if file_sha256(path) != sha:
                raise ValueError(f"hash mismatch in {path.name}")
            tables[table] = _read_table(path)
        extras = manifest.get("extras", {})
        if not isinstance(extras, dict):
            raise ValueError("manifest extras are not a table")
        return tables, extras

    def store(self, name: str, key: str, tables: dict[str, pd.DataFrame], extras: dict | None = None) -> None:
        """Write an entry atomically (temporary folder, then rename); nothing without a root."""
        if self.root is None:
            return
        final = self._dir(name, key)
        tmp = None
        try:
            self.root.mkdir(parents=True, exist_ok=True)
            tmp = Path(tempfile.mkdtemp(prefix=f".{final.name}.", dir=self.root))
            files = {}
            for table, df in tables.items():
                suffix, data = _table_bytes(df)  # hashed in memory, not re-read
                (tmp / f"{table}{suffix}").write_bytes(data)
                files[table] = hashlib.sha256(data).hexdigest()
            manifest = json.loads(json.dumps({"key": key, "files": files, "extras": extras or {}},
                                             default=json_default))
            manifest["manifest_sha256"] = _manifest_digest(manifest)
            (tmp / "manifest.json").write_text(json.dumps(manifest, sort_keys=True))
            if final.exists() or final.is_symlink():
                _remove(final)
            os.replace(tmp, final)
        except OSError as exc:
            self.log(f"cache entry {final.name} could not be stored ({exc.strerror or exc}); the run goes on "
                     "without this checkpoint")
        finally:
            if tmp is not None and tmp.exists():
                shutil.rmtree(tmp, ignore_errors=True)


def _manifest_digest(manifest: dict) -> str:
    """SHA-256 of a manifest's body (every field but the digest itself)."""
    return digest({k: v for k, v in manifest.items() if k != "manifest_sha256"})


def _remove(path: Path) -> None:
    """Remove a file, a link or a folder tree."""
    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path)
    else:
        path.unlink()


def _table_bytes(df: pd.DataFrame) -> tuple[str, bytes]:
    """``(suffix, file bytes)`` of a table: npz when every column is a plain numpy number/bool, else Parquet."""
    numeric = all(isinstance(c, str) for c in df.columns) and all(
        isinstance(t, np.dtype) and t.kind in "biuf" for t in df.dtypes)
    if numeric:
        buf = io.BytesIO()
        np.savez(buf, **{c: df[c].to_numpy() for c in df.columns})
        return ".npz", buf.getvalue()
    return ".parquet", df.reset_index(drop=True).to_parquet(index=False)


def _read_table(path: Path) -> pd.DataFrame:
    if path.suffix == ".npz":
        with np.load(path, allow_pickle=False) as z:
            return pd.DataFrame({c: z[c] for c in z.files})
    return pd.read_parquet(path)


def json_default(obj):
    """JSON fallback: numpy scalars as Python numbers, anything else as its string."""
    return obj.item() if hasattr(obj, "item") else str(obj)
