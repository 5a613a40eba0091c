"""The stage cache never trusts an entry it cannot verify (issue: corrupted or foreign cache files)."""

import pandas as pd

from siting.cache import StageCache, digest


def test_round_trip_and_every_kind_of_bad_entry(tmp_path):
    events = []
    cache = StageCache(tmp_path, log=events.append)
    table = pd.DataFrame({"a": [1, 2, 3], "x": [0.5, 1.5, 2.5], "ok": [True, False, True]})
    named = pd.DataFrame({"name": ["north", "south"], "n": [1, 2]})
    key = digest(["stage", 1])
    cache.store("stage", key, {"t": table, "named": named}, {"note": "hello"})
    tables, extras = cache.load("stage", key, expect=("t", "named"))
    pd.testing.assert_frame_equal(tables["t"], table)
    pd.testing.assert_frame_equal(tables["named"], named)
    assert sorted(p.name for p in next(tmp_path.glob("stage-*")).iterdir()) == ["manifest.json", "named.parquet",
                                                                                "t.npz"]
    assert extras == {"note": "hello"}

    assert cache.load("stage", digest(["other"])) is None  # absent: silently a miss
    assert cache.load("stage", key, expect=("t", "u")) is None  # written by another version
    assert "missing" in events[-1]

    for file in ("t.npz", "named.parquet"):  # numeric tables are npz, the others Parquet
        cache.store("stage", key, {"t": table, "named": named})
        folder = next(tmp_path.glob("stage-*"))
        data = (folder / file).read_bytes()
        (folder / file).write_bytes(data[:-8] + bytes(8))  # same size, other bytes
        assert cache.load("stage", key) is None and "hash mismatch" in events[-1]
        assert not folder.exists()  # the bad entry is removed, to be recomputed

    cache.store("stage", key, {"t": table})
    manifest = next(tmp_path.glob("stage-*")) / "manifest.json"
    manifest.write_text(manifest.read_text().replace(key, "f" * 64))
    assert cache.load("stage", key) is None and "key mismatch" in events[-1]

    fresh = StageCache(tmp_path, read=False)
    fresh.store("stage", key, {"t": table})
    assert fresh.load("stage", key) is None  # --fresh reads nothing ...
    assert StageCache(tmp_path).load("stage", key) is not None  # ... but leaves a good entry behind


def test_no_root_is_no_cache(tmp_path, monkeypatch):
    """``StageCache(None)`` (``siting.plan(write=False)`` without a cache folder) reads and writes nothing."""
    monkeypatch.chdir(tmp_path)
    cache = StageCache(None)
    key = digest(["stage", 1])
    cache.store("stage", key, {"t": pd.DataFrame({"a": [1]})}, {"notes": ["n"]})
    assert cache.load("stage", key) is None
    assert list(tmp_path.iterdir()) == []
