"""Content-addressed stage cache: Parquet tables plus a JSON manifest, verified by SHA-256, never pickled.

An entry is a folder ``<root>/<name>-<key>/`` holding one Parquet file per table and ``manifest.json`` with the
key, the SHA-256 of every file and any small JSON-able extras.  It is written into a temporary folder and renamed
into place, so a killed process leaves either a whole entry or none.  On read, a missing, foreign or corrupted
entry (key or hash mismatch, unreadable file) is reported and treated as absent: it is recomputed, never trusted.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
from pathlib import Path

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
    can resume from them.
    """

    def __init__(self, root: str | Path, log=lambda msg: None, read: bool = True):
        self.root = Path(root)
        self.log = log
        self.read = read

    def _dir(self, name: str, key: str) -> Path:
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
                path = folder / f"{table}.parquet"
                if file_sha256(path) != sha:
                    raise ValueError(f"hash mismatch in {path.name}")
                tables[table] = pd.read_parquet(path)
            return tables, manifest.get("extras", {})
        except (OSError, ValueError, KeyError, json.JSONDecodeError) as exc:
            self.log(f"cache entry {folder.name} is not usable ({exc}); recomputing")
            shutil.rmtree(folder, ignore_errors=True)
            return None

    def store(self, name: str, key: str, tables: dict[str, pd.DataFrame], extras: dict | None = None) -> None:
        """Write an entry atomically (temporary folder, then rename)."""
        self.root.mkdir(parents=True, exist_ok=True)
        final = self._dir(name, key)
        tmp = Path(tempfile.mkdtemp(prefix=f".{final.name}.", dir=self.root))
        try:
            files = {}
            for table, df in tables.items():
                path = tmp / f"{table}.parquet"
                df.reset_index(drop=True).to_parquet(path, index=False)
                files[table] = file_sha256(path)
            manifest = {"key": key, "files": files, "extras": extras or {}}
            (tmp / "manifest.json").write_text(json.dumps(manifest, sort_keys=True, default=json_default))
            if final.exists():
                shutil.rmtree(final)
            os.replace(tmp, final)
        finally:
            if tmp.exists():
                shutil.rmtree(tmp, ignore_errors=True)


def json_default(obj):
    """JSON fallback: numpy scalars as Python numbers, anything else as its string."""
    return obj.item() if hasattr(obj, "item") else str(obj)
