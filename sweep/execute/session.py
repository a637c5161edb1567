"""A run's hold on its store: the lock or a shard's claim, the store made ready, the completion record.

Two kinds of session, one per way of writing a store:

- ``whole_run``: a whole ``sweep run`` holds the store's lock for as long as it runs; it
  writes ``done`` (and the chunks' recorded checksums) itself, about once a second.
- ``shard``: shard I of N holds the lock only for a moment (to create or check the store and
  take its claim), then its claim; it never writes ``done``, but appends each finished task
  to its own record, durably, and folds the records into ``done`` at its end (``sweep.store.claims``).

Either way the store is first made ready (``prepare``): created whole if missing or never
completed, else checked to be this spec's sweep, refused if it holds symlinks, and mended
where its coordinates or completion record were damaged (``sweep.store.integrity``).
"""

from __future__ import annotations

import contextlib
import time
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Iterator

import numpy as np

from sweep import store

from sweep.store import claims, integrity, lock, records
from sweep.errors import SpecError, StoreError
from sweep.execute.tasks import TaskList, make_tasks, n_blocks

if TYPE_CHECKING:
    from sweep.execute.loop import FailedTask
    from sweep.spec import Spec

FLUSH_SECONDS = 1.0


@dataclass(frozen=True)
class Prepared:
    """The store made ready: the design's points, every task of the sweep, and whether it resumed."""

    points: np.ndarray
    tasks: TaskList
    resumed: bool
    repaired: tuple[str, ...] = ()  # what `integrity.mend` rewrote before the run


def prepare(spec: Spec, fresh: bool = False) -> Prepared:
    """Create the store, or reopen it to resume; the caller holds the lock.

    A store whose creation was interrupted is rebuilt; a resumed one is checked to be this
    sweep's, its symlinks refused, and what follows from the spec or the chunks mended.

    Raises
    ------
    StoreError
        If the path holds a store of another spec (listing what changed), or something that is
        not a store, or it cannot be written.
    """
    points = spec.points()
    tasks = make_tasks(points.shape[0], spec.store_replicates, spec.replicates_per_task)
    path = spec.store
    integrity.refuse_symlinks(path)
    try:
        if store.exists(path) and not fresh:
            integrity.check_same_sweep(spec, points)
            mended = integrity.mend(spec, points)
            store.remove_partials(path)
            _follow_presentation(spec)
            return Prepared(points, tasks, True, tuple(mended.describe()))
        store.create(path, spec, points, n_blocks(spec.store_replicates, spec.replicates_per_task))
    except OSError as exc:
        raise StoreError(f"{path}: cannot write the store: {exc}") from exc
    return Prepared(points, tasks, False)


def _follow_presentation(spec: Spec) -> None:
    """Keep the store's figure defaults (``[plot]``) in step with the spec: they may change on resume."""
    if store.attributes(spec.store).get("default_species") != spec.plot_species:
        store.set_attributes(spec.store, default_species=spec.plot_species)


def check_same_sweep(spec: Spec) -> None:
    """Refuse a store made by another sweep (``sweep.store.integrity.check_same_sweep``)."""
    integrity.check_same_sweep(spec, spec.points())


class DoneRecord:
    """The whole run's completion record: ``done`` and the checksums, written by this process alone."""

    def __init__(self, path: Path, points: int, blocks: int):
        self.path = path
        self.done = store.read_done(path)
        sums = store.read_checksums(path)
        # a store from before checksums were recorded: record them from now on
        self.sums = sums if sums is not None else np.zeros((points, blocks, len(store.data_arrays(path))), np.uint32)
        self._dirty, self._flushed = False, time.perf_counter()

    def mark(self, point: int, block: int, checksums: tuple[int, ...]) -> None:
        if checksums:
            self.sums[point, block] = checksums
        self.done[point, block] = True
        self._dirty = True

    def tick(self) -> None:
        if self._dirty and time.perf_counter() - self._flushed >= FLUSH_SECONDS:
            self.flush()

    def flush(self) -> None:
        """Checksums first: a task flagged done always has them on disk. A flag lost to a crash
        only makes its task run again, which rewrites the same bytes."""
        store.write_checksums(self.path, self.sums)
        store.write_done(self.path, self.done)
        self._dirty, self._flushed = False, time.perf_counter()

    def close(self, failed: list[FailedTask]) -> str | None:
        """Flush the record and the failures; a disk error here only costs re-runs."""
        try:
            self.flush()
            store.record_failures(self.path, [_failure(f) for f in failed], self.done)
            store.finish_run(self.path)
        except OSError as exc:
            return f"could not record the last completions ({exc.strerror or exc}); those tasks will run again"
        return None


class ShardRecord:
    """A shard's completion record: each finished task appended, durably, to its own file."""

    def __init__(self, path: Path, index: int, count: int):
        self.path, self.index, self.count = path, index, count
        self.done = store.read_done(path)
        self.blocks = self.done.shape[1]

    def mark(self, point: int, block: int, checksums: tuple[int, ...]) -> None:
        records.append_done(self.path, self.index, self.count, [point * self.blocks + block],
                            [checksums] if checksums else None)
        self.done[point, block] = True

    def tick(self) -> None:
        pass  # every completion is on disk already

    def close(self, failed: list[FailedTask]) -> str | None:
        try:
            records.write_failures(self.path, self.index, self.count, [_failure(f) for f in failed])
        except OSError as exc:
            return f"could not record the failures ({exc.strerror or exc})"
        return None


def _failure(f: FailedTask) -> dict:
    return {"point": f.point, "block": f.block, "error": f.error}


@contextlib.contextmanager
def whole_run(spec: Spec, fresh: bool = False, break_lock: bool = False) -> Iterator[tuple[Prepared, DoneRecord]]:
    """Hold the store's lock for a whole run; yield the store made ready and its record.

    Raises
    ------
    StoreError
        The store is another spec's, locked by a live run or by shards, or cannot be written.
    """
    holder = _claim(spec, break_lock)
    try:
        prepared = prepare(spec, fresh)
        blocks = n_blocks(spec.store_replicates, spec.replicates_per_task)
        yield prepared, DoneRecord(spec.store, prepared.points.shape[0], blocks)
    finally:
        lock.release(spec.store, holder)


def _claim(spec: Spec, break_lock: bool) -> lock.Holder:
    """Make sure the store path can hold a store, then take its lock."""
    path = spec.store
    store.check_claimable(path)
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise StoreError(f"{path}: cannot create the store folder: {exc.strerror}") from exc
    holder = lock.acquire(path, break_lock)
    try:  # shards (`--shard`) may have written here: refuse while they run, fold their records
        store.check_claimable(path)  # again under the lock: another process may have created something
        claims.settle(path, break_lock)
    except BaseException:
        lock.release(path, holder)
        raise
    return holder


def select(tasks: TaskList, index: int, count: int) -> TaskList:
    """The tasks of shard ``index`` of ``count`` (1-based): every ``count``-th, from place ``index - 1``.

    The partition is over all tasks, so it never changes as tasks complete, and any contiguous
    stretch of tasks (say, the half an earlier run did not reach) is spread evenly.
    """
    return tasks[index - 1::count]


def refuse_adaptive(spec: Spec) -> None:
    """Shards run a fixed task list; an adaptive sweep decides its next tasks from finished ones.

    Raises
    ------
    SpecError
        If the spec has ``[run.adaptive]``.
    """
    if spec.adaptive is not None:
        raise SpecError(str(spec.path), "run.adaptive", "an adaptive sweep cannot run in shards (--shard, "
                        "--template array): each round depends on all points' results so far",
                        fix="run it with `sweep run` (local cluster, --scheduler, "
                            "or `sweep submit --template allocation`)")


@contextlib.contextmanager
def shard(spec: Spec, index: int, count: int, break_lock: bool = False) -> Iterator[tuple[Prepared, ShardRecord]]:
    """Hold shard ``index/count``'s claim; yield the store made ready and the shard's record.

    The first shard to arrive creates the store. At the end the claim is released and the
    records of shards no longer running are folded into ``done``.

    Raises
    ------
    StoreError
        The store is another spec's, a whole run holds it, or this shard is already running.
    """
    refuse_adaptive(spec)  # each adaptive round needs the whole previous round's data (sweep.adaptive)
    path = spec.store
    _make_folder(path)
    with claims.holding_lock(path, break_lock):
        store.check_claimable(path)  # checked under the lock: another shard may be creating the store
        integrity.refuse_symlinks(path)
        if store.exists(path):
            integrity.check_same_sweep(spec, spec.points())
            if not claims.list_claims(path):  # nobody else writes: mend what follows from spec and chunks
                integrity.mend(spec, spec.points())
            prepared = Prepared(spec.points(), make_tasks(spec.points().shape[0], spec.store_replicates,
                                                          spec.replicates_per_task), True)
        else:
            prepared = prepare(spec)
        holder = claims.take(path, index, count, break_lock)
    try:
        yield prepared, ShardRecord(path, index, count)
    finally:
        claims.release(path, index, count, holder)
        _tidy(path, break_lock)


def _make_folder(path: Path) -> None:
    if path.exists() and not path.is_dir():
        raise StoreError(f"{path}: exists and is not a results store; choose another --store")
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise StoreError(f"{path}: cannot create the store folder: {exc.strerror}") from exc


def _tidy(path: Path, break_lock: bool) -> None:
    """Fold the records of finished shards into ``done``; skipped if it cannot be done now.

    Records are valid where they are: folding only keeps their number small and lets the
    last shard out tidy up, so a failure here costs nothing.
    """
    try:
        with claims.holding_lock(path, break_lock, wait=30.0):
            claims.fold(path, break_lock)
            if not claims.list_claims(path) and store.read_done(path).all():
                from sweep.analysis import validity  # the last shard out checks the copy numbers
                validity.record_low_copy(path)
    except (StoreError, OSError):
        pass
