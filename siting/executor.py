"""The tile executor: tile tasks run in this process or on Dask, each tile cached where it was computed.

:class:`_Executor` hides where tasks run (in this process, a Dask LocalCluster, or an existing scheduler);
:func:`_submit_tiles` takes each tile of a stage from the cache or submits it, :func:`_collect` waits for them in
the order they finish.  :func:`_tiles` numbers the square tiles of points and :func:`_halo` picks the buildings a
tile's links can cross.
"""

from __future__ import annotations

import logging
import os
import re
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .cache import StageCache, digest
from .errors import SitingError, SitingWarning

log = logging.getLogger("siting")


def _tiles(x: np.ndarray, y: np.ndarray, tile_m: float) -> np.ndarray:
    """Tile number of each point on a grid of ``tile_m`` squares anchored at the origin of the CRS."""
    if tile_m <= 0 or len(x) == 0:
        return np.zeros(len(x), np.int64)
    ix = np.floor(x / tile_m).astype(np.int64)
    iy = np.floor(y / tile_m).astype(np.int64)
    cell = (ix - ix.min()) * (int(iy.max() - iy.min()) + 1) + (iy - iy.min())  # row-major, as (ix, iy) sorts
    _, tile = np.unique(cell, return_inverse=True)
    return tile.reshape(-1).astype(np.int64)


def _halo(bounds: np.ndarray, x: np.ndarray, y: np.ndarray, halo_m: float) -> np.ndarray:
    """Rows of the buildings whose bounds meet the bounding box of (x, y) grown by ``halo_m``.

    Every link a tile computes lies inside that box, so these are all the buildings it can cross.
    """
    minx, miny, maxx, maxy = x.min() - halo_m, y.min() - halo_m, x.max() + halo_m, y.max() + halo_m
    keep = (bounds[:, 0] <= maxx) & (bounds[:, 2] >= minx) & (bounds[:, 1] <= maxy) & (bounds[:, 3] >= miny)
    return np.flatnonzero(keep)



class _Executor:
    """Runs tile tasks in this process, or on Dask when workers / a scheduler address are given.

    ``submit`` returns a handle (a Dask future, or a deferred call here) that may be passed inside the arguments of
    later tasks: those wait for it, without a barrier between stages.  ``shares_disk`` says whether the tasks can
    write the stage cache themselves: in this process and on a LocalCluster (same machine) they do, so storing
    tiles runs in parallel too; on an external scheduler's workers the folder may not exist, so this process
    stores what they return.
    """

    def __init__(self, workers: int = 0, scheduler: str | None = None):
        self.client = None
        self.cluster = None
        self.shares_disk = not scheduler
        if workers or scheduler:
            try:
                import dask
                from dask.distributed import Client, LocalCluster
            except ImportError:
                raise SitingError("--workers/--scheduler need Dask: pip install 'siting[dask]'") from None
            if scheduler:
                self.client = Client(scheduler)
            else:
                # One task thread and one numba thread per worker process: the parallelism is over tiles (numba's
                # threads on a tile-sized kernel cost more than they gain). Dask's default aggressive memory
                # trimming (MALLOC_TRIM_THRESHOLD_=64 KiB) and its sampling profiler are switched off: they made
                # the same tiles up to 1.6x slower on a worker than in this process (benchmarks/bench_runner.py).
                # The variables are set before the worker processes start (numba reads its thread count on
                # import); Dask writes them into this process's environment too, so it is restored afterwards.
                saved_environ = dict(os.environ)
                try:
                    with dask.config.set({"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None,
                                          "distributed.nanny.pre-spawn-environ.NUMBA_NUM_THREADS": 1,
                                          "distributed.worker.profile.enabled": False}):
                        self.cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                                    dashboard_address=None)
                finally:
                    os.environ.clear()
                    os.environ.update(saved_environ)
                self.client = Client(self.cluster)

    def share(self, shared: dict) -> dict:
        """Send data every task needs to the workers once (unique keys); in-process it is passed as is."""
        if not self.client:
            return shared
        return {k: self.client.scatter(v, broadcast=True, hash=False) for k, v in shared.items()}

    def put(self, value):
        """A handle holding a value already known (a tile read from the cache)."""
        return self.client.scatter(value, hash=False) if self.client else _Deferred(lambda: value)

    def submit(self, fn, *args, **kwargs):
        if self.client:
            return self.client.submit(fn, *args, **kwargs, pure=False)
        return _Deferred(fn, *args, **kwargs)

    def as_completed(self, handles: dict):
        """Yield ``(key, result)`` for each ``key: handle``, as each one finishes."""
        if not self.client:
            for key, handle in handles.items():
                yield key, handle.result()
            return
        from dask.distributed import as_completed

        keys = {future: key for key, future in handles.items()}
        for future, result in as_completed(keys, with_results=True):
            yield keys[future], result

    def close(self) -> None:
        if self.client:
            self.client.close()
        if self.cluster:
            self.cluster.close()


class _Deferred:
    """A call run in this process when its result is first asked for; handles among its arguments (also inside
    tuples and lists) are replaced by their results first, as Dask does with futures."""

    def __init__(self, fn, *args, **kwargs):
        self.call: tuple[Any, tuple, dict] | None = (fn, args, kwargs)
        self.value: Any = None

    def result(self):
        if self.call is not None:
            fn, args, kwargs = self.call
            self.value, self.call = fn(*_resolve(args), **kwargs), None
        return self.value


def _resolve(arg):
    if isinstance(arg, _Deferred):
        return arg.result()
    if isinstance(arg, (tuple, list)):
        return type(arg)(_resolve(a) for a in arg)
    return arg


#: Key of a tile result holding the model notes (:class:`~siting.errors.SitingWarning`) its computation raised.
NOTES = "notes"


def _tile_job(fn, args, store_at, **shared):
    """One tile: ``fn(*args, **shared)``, stored in the cache at ``store_at = (root, entry, key)`` when given.

    The model notes the tile raises (:class:`~siting.errors.SitingWarning`, repeats dropped) are caught here, on
    whichever worker runs it, stored with the tile and returned under :data:`NOTES`: a tile read from the cache
    or computed on Dask gives the same notes as one computed in this process.  Storing here, where the tile was
    computed, is the checkpoint a killed job resumes from.
    """
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", SitingWarning)
        tables = fn(*args, **shared)
    notes = list(dict.fromkeys(str(w.message) for w in caught if issubclass(w.category, SitingWarning)))
    for w in caught:  # anything else (library warnings) goes on to the usual filters
        if not issubclass(w.category, SitingWarning):
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    if store_at is not None:
        StageCache(store_at[0]).store(store_at[1], store_at[2], tables, {NOTES: notes})
    return {**tables, NOTES: notes}


_NUMBER = re.compile(r"\d+(?:\.\d+)?")


def merge_tile_notes(notes: list[str]) -> list[str]:
    """The notes of a stage's tiles, each once: a note every tile repeats with its own count becomes one note.

    Notes equal but for one whole number (``"3 value(s) of d2d_m outside ..."`` from one tile, ``"6 value(s) ..."``
    from another) become one note with the sum (``"9 value(s) ... (summed over 2 tiles)"``); identical notes
    are kept once; any other note is kept as it is, in first-seen order.
    """
    groups: dict[str, list[str]] = {}
    for note in dict.fromkeys(notes):
        groups.setdefault(_NUMBER.sub("#", note), []).append(note)
    out = []
    for members in groups.values():
        numbers = [_NUMBER.findall(m) for m in members]
        differ = [i for i in range(len(numbers[0])) if len({n[i] for n in numbers}) > 1]
        if len(members) == 1 or len(differ) != 1 or not all(n[differ[0]].isdigit() for n in numbers):
            out += members
            continue
        total = sum(int(n[differ[0]]) for n in numbers)
        spans = list(_NUMBER.finditer(members[0]))
        start, end = spans[differ[0]].span()
        out.append(f"{members[0][:start]}{total}{members[0][end:]} (summed over {len(members)} tiles)")
    return out


def _tables(result: dict) -> dict:
    """A tile result without its notes: the tables to store."""
    return {k: v for k, v in result.items() if k != NOTES}


@dataclass
class _TileSet:
    """The tiles of one stage: those read from the cache (``done``) and those submitted (``handles``)."""

    name: str
    keys: dict
    done: dict
    handles: dict
    held: dict = field(default_factory=dict)  # handles on tiles of ``done``, made when a later task needs one

    def handle(self, t, executor):
        """A handle on tile ``t`` to pass to a later task."""
        if t in self.handles:
            return self.handles[t]
        if t not in self.held:
            self.held[t] = executor.put(self.done[t])
        return self.held[t]


def _submit_tiles(name, cache, key, tasks: dict, fn, shared, executor, expect: tuple[str, ...]) -> _TileSet:
    """Take each tile from the cache, or submit it (``tasks`` maps tile number -> task arguments).

    ``expect`` names the tables a tile holds.  Tile keys hash the stage key, the tile number and the tile count.
    """
    n_tiles = len(tasks)
    tiles = _TileSet(name, {t: digest([key, t, n_tiles]) for t in tasks}, {}, {})
    for t in tasks:
        hit = cache.load(f"{name}-tile{t}", tiles.keys[t], expect=expect)
        if hit is not None:
            tiles.done[t] = {**hit[0], NOTES: list(hit[1].get(NOTES, []))}
    if tiles.done:
        log.info("%s: %d of %d tiles taken from the cache", name, len(tiles.done), n_tiles)
    root = str(cache.root.resolve()) if cache.root is not None else None
    for t, args in tasks.items():
        if t not in tiles.done:
            store_at = (root, f"{name}-tile{t}", tiles.keys[t]) if executor.shares_disk and root else None
            tiles.handles[t] = executor.submit(_tile_job, fn, args, store_at, **shared)
    return tiles


def _collect(tiles: _TileSet, cache, executor, progress, computed: list) -> list[dict]:
    """Every tile's tables in tile order, waiting for the submitted ones; their names are added to ``computed``."""
    results = dict(tiles.done)
    bar = _bar(progress, total=len(tiles.handles), desc=f"{tiles.name} tiles")
    for t, tables in executor.as_completed(tiles.handles):
        if not executor.shares_disk:
            cache.store(f"{tiles.name}-tile{t}", tiles.keys[t], _tables(tables), {NOTES: tables[NOTES]})
        computed.append(f"{tiles.name}-tile{t}")
        results[t] = tables
        bar.update(1)
    bar.close()
    return [results[t] for t in sorted(results)]


def _bar(progress: bool, total: int, desc: str):
    from tqdm.auto import tqdm

    return tqdm(total=total, desc=desc, disable=not progress or total == 0, leave=False)


def _advance(bar, next_stage: str) -> None:
    bar.update(1)
    bar.set_description(next_stage)
