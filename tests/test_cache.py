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


def _corrupt(path, how: str) -> None:
    """Damage one file of a cache entry: change bytes (same size), cut it in half, or make it unreadable."""
    import os

    data = path.read_bytes()
    if how == "tampered":
        mid = len(data) // 2
        path.write_bytes(data[:mid] + bytes([data[mid] ^ 0xFF]) + data[mid + 1:])
    elif how == "truncated":
        path.write_bytes(data[: len(data) // 2])
    elif hasattr(os, "geteuid") and os.geteuid() == 0:  # root reads any file: a folder in its place instead
        path.unlink()
        path.mkdir()
    else:
        path.chmod(0)


def test_every_damaged_file_of_a_stage_is_recomputed(tmp_path, caplog, monkeypatch):
    """Each file of the cached candidates and optimise entries, tampered, truncated or unreadable in turn: the
    rerun logs the bad entry, recomputes it and gives the same plan (issue: a tampered cache entry crashed)."""
    from pathlib import Path

    import siting.runner
    from siting.job import Job
    from siting.runner import run

    monkeypatch.setattr(siting.runner, "plan_checks", lambda *a, **k: (None, None))  # field checks: not cached

    demo = Path(__file__).resolve().parents[1] / "demo_district" / "job.toml"
    job = Job.from_toml(demo, ["area.bbox=[1.9045, 46.8118, 1.9075, 46.8140]", "budget.sweep_budgets=[]"])
    cache = tmp_path / "cache"
    first = run(job, write=False, cache_dir=cache)
    assert len(first.plan.chosen) > 0
    for stage in ("candidates", "optimise"):
        (entry,) = cache.glob(f"{stage}-*")
        for name in sorted(p.name for p in entry.iterdir()):
            for how in ("tampered", "truncated", "unreadable"):
                _corrupt(entry / name, how)
                caplog.clear()
                again = run(job, write=False, cache_dir=cache)
                assert stage in again.recomputed, (stage, name, how)
                assert any(f"cache entry {entry.name} is not usable" in r.message and "recomputing" in r.message
                           for r in caplog.records), (name, how)
                assert list(again.plan.chosen) == list(first.plan.chosen), (name, how)
                assert again.plan.objective == first.plan.objective and again.notes == first.notes
                assert (entry / name).is_file()  # stored again, whole


def test_edited_manifest_extras_are_caught(tmp_path):
    """A manifest whose extras (a plan's figures, notes) were edited fails its own digest: not trusted."""
    events = []
    cache = StageCache(tmp_path, log=events.append)
    key = digest(["stage", 2])
    cache.store("stage", key, {"t": pd.DataFrame({"a": [1.0]})}, {"plan": {"objective": 10.0}})
    manifest = next(tmp_path.glob("stage-*")) / "manifest.json"
    manifest.write_text(manifest.read_text().replace("10.0", "99.0"))
    assert cache.load("stage", key) is None and "manifest.json" in events[-1]
    cache.store("stage", key, {"t": pd.DataFrame({"a": [1.0]})})
    manifest.write_text("[1, 2]")  # valid JSON, not a manifest
    assert cache.load("stage", key) is None and "not a table of files" in events[-1]


def test_unstorable_entry_is_logged_not_fatal(tmp_path):
    events = []
    (tmp_path / "cache").write_text("a file where the cache folder should be")
    StageCache(tmp_path / "cache", log=events.append).store("stage", digest(["x"]), {"t": pd.DataFrame({"a": [1]})})
    assert events and "could not be stored" in events[-1]
