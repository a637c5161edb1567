"""Run a sweep: prepare the store, stream tasks through Dask, keep the completion record.

The client keeps a bounded window of tasks in flight (a sweep of 100,000 tasks never
holds 100,000 futures), marks a task done only after its worker's write has returned,
and flushes the completion record in batches; a task whose flag was lost to a crash is
simply run again and rewrites the same bytes.

What happens at each fault:

- a worker process dies: distributed reschedules its task elsewhere (``allowed-failures``);
- a task raises: Dask retries it ``TASK_RETRIES`` times, then it is recorded as failed with
  its error text; the other tasks go on, and a rerun tries it again;
- a disk error (full, read-only, quota, I/O) on a write: the sweep stops at once, since every
  other task would fail the same way; what was written and recorded stays valid;
- Ctrl-C: tasks in flight are dropped (their chunks are not marked done), completions are
  recorded, and the summary says how to resume.
"""

from __future__ import annotations

import contextlib
import errno
import importlib
import time
import traceback
from dataclasses import dataclass, field
from itertools import islice
from pathlib import Path
from typing import Any, Callable, Iterator

import numpy as np

from sweep import claims, integrity, lock, store
from sweep.cluster import ClusterConfig
from sweep.errors import StoreError
from sweep.model import compile_network, initial_counts, rate_constants
from sweep.execute import BACKENDS
from sweep.spec import Spec
from sweep.tasks import Task, make_tasks, n_blocks
from sweep.worker import TaskInput, run_task, warm_up

FLUSH_SECONDS = 1.0
TASK_RETRIES = 2
DISK_ERRNOS = {errno.ENOSPC, errno.EROFS, errno.EDQUOT, errno.EIO, errno.EACCES, errno.EPERM}


@dataclass
class Progress:
    """Running totals passed to the progress callback after every finished task."""

    done: int
    total: int
    events: int = 0
    failed: int = 0
    elapsed: float = 0.0

    @property
    def events_per_second(self) -> float:
        return self.events / self.elapsed if self.elapsed > 0 else 0.0


@dataclass(frozen=True)
class FailedTask:
    point: int
    block: int
    error: str


@dataclass(frozen=True)
class Started:
    """Told to the caller once the cluster is up and before the first task runs."""

    dashboard: str | None
    workers: int
    pending: int
    total: int
    resumed: bool
    address: str | None = None  # the scheduler's (tls://... when its workers talk over TLS)
    repaired: tuple[str, ...] = ()  # what was mended in the store before the run (sweep.integrity)


@dataclass(frozen=True)
class RunSummary:
    """What a run did. ``stopped`` says why it ended early ("interrupted" or a disk error)."""

    store: Path
    points: int
    tasks_total: int
    tasks_run: int
    tasks_skipped: int
    events: int
    capped: int
    numerical: int
    seconds: float
    simulating_seconds: float = 0.0
    failed: tuple[FailedTask, ...] = field(default_factory=tuple)
    stopped: str | None = None
    adaptive: Any = None  # sweep.adaptive.Outcome of a spec with [run.adaptive]
    repaired: tuple[str, ...] = ()  # what was mended in the store before the run (sweep.integrity)

    @property
    def events_per_second(self) -> float:
        """Reaction events per wall-second while simulating (after start-up)."""
        return self.events / self.simulating_seconds if self.simulating_seconds > 0 else 0.0

    @property
    def complete(self) -> bool:
        return self.stopped is None and not self.failed and self.tasks_run + self.tasks_skipped == self.tasks_total


@dataclass
class _Tally:
    events: int = 0
    capped: int = 0
    numerical: int = 0
    ran: int = 0
    failed: list[FailedTask] = field(default_factory=list)
    stopped: str | None = None


@dataclass
class Record:
    """The completion record the client keeps: ``done`` and the checksums of each done task's chunks."""

    done: np.ndarray
    sums: np.ndarray

    def mark(self, point: int, block: int, sums: tuple[int, ...]) -> None:
        if sums:
            self.sums[point, block] = sums
        self.done[point, block] = True

    def flush(self, path: Path) -> None:
        """Checksums first: a task flagged done always has them on disk."""
        store.write_checksums(path, self.sums)
        store.write_done(path, self.done)


@dataclass(frozen=True)
class Prepared:
    points: np.ndarray
    tasks: list[Task]
    record: Record
    resumed: bool
    repaired: tuple[str, ...] = ()  # what `integrity.mend` rewrote before the run


def prepare_store(spec: Spec, fresh: bool = False) -> Prepared:
    """Create the store, or reopen it to resume (the caller holds the lock).

    A store whose creation was interrupted is rebuilt; a resumed one is checked to be this
    sweep's, its symlinks refused, and what follows from the spec or the chunks mended.

    Raises
    ------
    StoreError
        If the path holds a store of another spec (listing what changed), or something
        that is not a store.
    """
    points = spec.points()
    tasks = make_tasks(points.shape[0], spec.store_replicates, spec.replicates_per_task)
    blocks = n_blocks(spec.store_replicates, spec.replicates_per_task)
    path = spec.store
    integrity.refuse_symlinks(path)
    if store.exists(path) and not fresh:
        check_same_sweep(spec, points)
        mended = integrity.mend(spec, points)
        store.remove_partials(path)
        sums = store.read_checksums(path)
        if sums is None:  # a store from before checksums were recorded: record them from now on
            sums = np.zeros((points.shape[0], blocks, len(store.DATA_ARRAYS)), dtype=np.uint32)
        return Prepared(points, tasks, Record(store.read_done(path), sums), True, tuple(mended.describe()))
    store.create(path, spec, points, blocks)
    return Prepared(points, tasks, Record(np.zeros((points.shape[0], blocks), dtype=bool),
                                          np.zeros((points.shape[0], blocks, len(store.DATA_ARRAYS)), dtype=np.uint32)),
                    False)


def check_same_sweep(spec: Spec, points: np.ndarray | None = None) -> None:
    """Refuse a store made by another sweep (``sweep.integrity.check_same_sweep``)."""
    integrity.check_same_sweep(spec, spec.points() if points is None else points)


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


def task_inputs(spec: Spec, points: np.ndarray, tasks: list[Task]) -> Iterator[TaskInput]:
    """Lazily build each task's input (rates and initial counts of its point)."""
    network = compile_network(spec.model)
    times = np.asarray(spec.times)
    path = str(spec.store.resolve())
    ident = store.store_id(store.attributes(spec.store))
    cached_point, rates, x0 = -1, None, None
    for t in tasks:
        if t.point != cached_point:
            values = spec.values_at(points[t.point])
            rates, x0 = rate_constants(spec.model, values), initial_counts(spec.model, values)
            cached_point = t.point
        yield TaskInput(path, spec.method, network, rates, x0, times, spec.seed, t.point, t.block,
                        t.start, t.stop, spec.max_events, spec.options, ident)


def run(spec: Spec, *, workers: int | None = None, scheduler: str | None = None,
        cluster: ClusterConfig | None = None, fresh: bool = False, break_lock: bool = False,
        on_start: Callable[[Started], None] | None = None,
        on_progress: Callable[[Progress], None] | None = None,
        schedule: Callable[[np.ndarray, set[tuple[int, int]]], list[Task]] | None = None) -> RunSummary:
    """Run (or resume) a sweep and return what happened.

    Parameters
    ----------
    spec : Spec
        The loaded spec; ``spec.store`` is where results go.
    workers : int, optional
        Local worker processes (default: one per core). Ignored with ``scheduler``.
    scheduler : str, optional
        Address of an existing Dask scheduler to use instead of a local cluster.
    cluster : ClusterConfig, optional
        Run the workers as Slurm jobs (``sweep.execute.slurm``), scaled between
        ``cluster.min_jobs`` and ``cluster.max_jobs``; see ``sweep.cluster.resolve``.
    fresh : bool
        Delete an existing store at ``spec.store`` and start over.
    break_lock : bool
        Take the store's lock even when it is held by a process on another host.
    on_start, on_progress : callable, optional
        Called once the cluster is up, and after every finished task.
    schedule : callable, optional
        ``schedule(done, failed) -> tasks`` picks the tasks to run from the completion record
        and the (point, block) pairs that failed in this run; it is asked again after each
        round of tasks until it returns none (``sweep.adaptive``). Default: every task not done.
        A spec with ``[run.adaptive]`` gets ``sweep.adaptive.run``'s.

    Returns
    -------
    RunSummary
        Also when stopped early by Ctrl-C or a disk error (see ``RunSummary.stopped``).

    Raises
    ------
    StoreError
        The store belongs to another spec, is locked, or cannot be written at all.

    Example
    -------
    >>> summary = run(load("configs/reporter.toml"), workers=2)
    """
    if spec.adaptive is not None and schedule is None:
        from sweep import adaptive  # rounds of replicate blocks until each point meets its target

        return adaptive.run(spec, workers=workers, scheduler=scheduler, cluster=cluster, fresh=fresh,
                            break_lock=break_lock,
                            on_start=on_start, on_progress=on_progress)
    began = time.perf_counter()
    holder = _claim(spec, break_lock)
    try:
        try:
            prepared = prepare_store(spec, fresh)
        except OSError as exc:
            raise StoreError(f"{spec.store}: cannot write the store: {exc}") from exc
        points, tasks, record, resumed = prepared.points, prepared.tasks, prepared.record, prepared.resumed
        done = record.done
        already = int(done.sum())
        pending = [t for t in tasks if not done[t.point, t.block]] if schedule is None else schedule(done, set())
        scheduled = len(pending)
        tally = _Tally()
        simulating = 0.0
        inputs = task_inputs(spec, points, pending)
        first = next(inputs, None)
        if first is not None:
            warm_up(first)
            kind = "slurm" if cluster is not None else "scheduler" if scheduler else "local"
            backend = importlib.import_module(BACKENDS[kind])
            with contextlib.ExitStack() as stack:
                # Ctrl-C works here too; the local backend keeps it from its worker processes
                client = stack.enter_context(backend.connect(address=scheduler, workers=workers, cluster=cluster,
                                                             store=spec.store))
                n_workers = len(client.scheduler_info(n_workers=-1)["workers"])
                # Slurm jobs start after this: size the window for the workers the cluster may grow to
                slots = max(n_workers, cluster.max_jobs * cluster.workers_per_job if cluster is not None else 0)
                # every worker imports and loads the cached kernel at once, before the clock starts
                client.run(warm_up, first)
                if on_start:
                    on_start(Started(client.dashboard_link, n_workers, len(pending), already + len(pending), resumed,
                                     client.scheduler.address, prepared.repaired))
                streaming = time.perf_counter()
                progress = Progress(already, already + len(pending))
                _stream(client, _chain(first, inputs), max(slots, 1), spec.store, record, progress, on_progress,
                        tally)
                while schedule is not None and tally.stopped is None and (
                        more := schedule(done, {(f.point, f.block) for f in tally.failed})):
                    scheduled += len(more)
                    progress.total += len(more)
                    _stream(client, task_inputs(spec, points, more), max(slots, 1), spec.store, record, progress,
                            on_progress, tally)
                simulating = time.perf_counter() - streaming
        elif prepared.repaired:
            record.flush(spec.store)
            store.finish_run(spec.store)
        return RunSummary(spec.store, points.shape[0], already + scheduled, tally.ran, already,
                          tally.events, tally.capped, tally.numerical, time.perf_counter() - began,
                          simulating, tuple(tally.failed), tally.stopped, repaired=prepared.repaired)
    finally:
        lock.release(spec.store, holder)


def _chain(first, rest):
    yield first
    yield from rest


def _stream(client, inputs: Iterator[TaskInput], n_workers: int, path: Path, record: Record,
            progress: Progress, on_progress, tally: _Tally) -> None:
    """Keep a bounded window of tasks in flight and record each completion."""
    from distributed import as_completed

    window = max(4 * n_workers, 16)
    refill = window // 2
    # progress.elapsed carries over from earlier rounds (sweep.adaptive), so the rate stays per sweep
    began, last_flush, dirty = time.perf_counter() - progress.elapsed, time.perf_counter(), False
    owner: dict[str, tuple[int, int]] = {}  # future key -> (point, block), to name failures

    def submit(batch):
        futures = client.map(run_task, batch, pure=False, retries=TASK_RETRIES)
        owner.update((f.key, (t.point, t.block)) for f, t in zip(futures, batch))
        return futures

    flights = as_completed(submit(list(islice(inputs, window))), with_results=True, raise_errors=False)
    try:
        for future, result in flights:
            point, block = owner.pop(future.key)
            if future.status == "error":
                exc = result[1]  # as_completed gives (type, exception, traceback) for errors
                if _is_disk_error(exc):
                    tally.stopped = f"cannot write to the store: {exc}"
                    break
                tally.failed.append(FailedTask(point, block, _error_text(exc)))
                progress.failed += 1
            else:
                record.mark(point, block, result.checksums)
                dirty = True
                progress.done += 1
                progress.events += result.events
                tally.events += result.events
                tally.capped += result.capped
                tally.numerical += result.failed
                tally.ran += 1
            if flights.count() <= window - refill and (batch := list(islice(inputs, refill))):
                flights.update(submit(batch))
            if dirty and time.perf_counter() - last_flush >= FLUSH_SECONDS:
                record.flush(path)
                last_flush, dirty = time.perf_counter(), False
            progress.elapsed = time.perf_counter() - began
            if on_progress:
                on_progress(progress)
    except KeyboardInterrupt:
        tally.stopped = "interrupted"
    finally:
        in_flight = list(flights.futures)
        if in_flight:
            client.cancel(in_flight)  # their chunks may be half-way; they are not marked done
        _record(path, record, tally)


def _record(path: Path, record: Record, tally: _Tally) -> None:
    """Flush the completion record and the failures; a disk error here only costs re-runs."""
    try:
        record.flush(path)
        store.record_failures(path, [{"point": f.point, "block": f.block, "error": f.error} for f in tally.failed],
                              record.done)
        store.finish_run(path)
    except OSError as exc:
        note = f"could not record the last completions ({exc.strerror or exc}); those tasks will run again"
        tally.stopped = f"{tally.stopped}; {note}" if tally.stopped else note


def _is_disk_error(exc: BaseException) -> bool:
    return isinstance(exc, OSError) and exc.errno in DISK_ERRNOS


def _error_text(exc: BaseException) -> str:
    return "".join(traceback.format_exception_only(type(exc), exc)).strip()
