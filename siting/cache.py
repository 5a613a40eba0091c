"""Content-addressed stage cache: npz / Parquet tables plus a JSON manifest, verified by SHA-256, never pickled.

An entry is a folder ``<root>/<name>-<key>/`` holding one file per table and ``manifest.json`` with the key, the
SHA-256 of every file and any small JSON-able extras.  A table whose columns are all plain numbers or booleans
(the link tiles) is an uncompressed ``.npz`` of its columns, read with ``allow_pickle=False`` (about 4x faster to
write than Parquet, which matters for hundreds of tiles); any other table is Parquet.  An entry is written into a
temporary folder and renamed into place, so a killed process leaves either a whole entry or none.  On read, a
missing, foreign or corrupted entry (key or hash mismatch, unreadable file) is reported and treated as absent: it
is recomputed, never trusted.
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
        """
        if not self.read:
            return None
        folder = self._dir(name, key)
        manifest_path = folder / "manifest.json"
        if not manifest_path.is_file():
            return None
        try:
            manifest = json.loads(manifest_path.read_text())
            if manifest.get("key") != key:
                raise ValueError("key mismatch (foreign entry)")
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
            return tables, manifest.get("extras", {})
        except (OSError, ValueError, KeyError, json.JSONDecodeError) as exc:
            self.log(f"cache entry {folder.name} is not usable ({exc}); recomputing")
            shutil.rmtree(folder, ignore_errors=True)
            return None

    def store(self, name: str, key: str, tables: dict[str, pd.DataFrame], extras: dict | None = None) -> None:
        """Write an entry atomically (temporary folder, then rename); nothing without a root."""
        if self.root is None:
            return
        self.root.mkdir(parents=True, exist_ok=True)
        final = self._dir(name, key)
        tmp = Path(tempfile.mkdtemp(prefix=f".{final.name}.", dir=self.root))
        try:
            files = {}
            for table, df in tables.items():
                suffix, data = _table_bytes(df)  # hashed in memory, not re-read
                (tmp / f"{table}{suffix}").write_bytes(data)
                files[table] = hashlib.sha256(data).hexdigest()
            manifest = {"key": key, "files": files, "extras": extras or {}}
            (tmp / "manifest.json").write_text(json.dumps(manifest, sort_keys=True, default=json_default))
            if final.exists():
                shutil.rmtree(final)
            os.replace(tmp, final)
        finally:
            if tmp.exists():
                shutil.rmtree(tmp, ignore_errors=True)


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
