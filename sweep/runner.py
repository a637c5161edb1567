"""Run a sweep: prepare the store, stream tasks through Dask, keep the completion record.

The client keeps a bounded window of tasks in flight (a sweep of 100,000 tasks never
holds 100,000 futures), marks a task done only after its worker's write has returned,
and flushes the completion record in batches; a task whose flag was lost to a crash is
simply run again and rewrites the same bytes.
"""

from __future__ import annotations

import importlib
import time
import traceback
from dataclasses import dataclass, field
from itertools import islice
from pathlib import Path
from typing import Callable, Iterator

import numpy as np

from sweep import store
from sweep.errors import StoreError
from sweep.model import compile_network, initial_counts, rate_constants
from sweep.spec import Spec
from sweep.tasks import Task, make_tasks, n_blocks
from sweep.worker import TaskInput, TaskResult, run_task, warm_up

FLUSH_SECONDS = 1.0
TASK_RETRIES = 2


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


@dataclass(frozen=True)
class RunSummary:
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

    @property
    def events_per_second(self) -> float:
        """Reaction events per wall-second while simulating (after start-up)."""
        return self.events / self.simulating_seconds if self.simulating_seconds > 0 else 0.0


def prepare_store(spec: Spec, fresh: bool = False) -> tuple[np.ndarray, list[Task], np.ndarray, bool]:
    """Create the store, or reopen it to resume. Returns points, all tasks, done, resumed.

    Raises
    ------
    StoreError
        If the path holds a store of another spec, or something that is not a store.
    """
    points = spec.points()
    tasks = make_tasks(points.shape[0], spec.replicates, spec.replicates_per_task)
    blocks = n_blocks(spec.replicates, spec.replicates_per_task)
    path = spec.store
    if store.exists(path) and not fresh:
        held = store.attributes(path).get("spec_sha256")
        if held != spec.sha256:
            raise StoreError(f"{path}: this store holds another sweep (spec SHA-256 {str(held)[:12]}..., "
                             f"yours {spec.sha256[:12]}...): use another --store, or --fresh to start over")
        return points, tasks, store.read_done(path), True
    if path.exists() and not store.exists(path) and (not path.is_dir() or any(path.iterdir())):
        raise StoreError(f"{path}: exists and is not a results store; choose another --store")
    store.create(path, spec, points, blocks)
    return points, tasks, np.zeros((points.shape[0], blocks), dtype=bool), False


def task_inputs(spec: Spec, points: np.ndarray, tasks: list[Task]) -> Iterator[TaskInput]:
    """Lazily build each task's input (rates and initial counts of its point)."""
    network = compile_network(spec.model)
    times = np.asarray(spec.times)
    path = str(spec.store.resolve())
    cached_point, rates, x0 = -1, None, None
    for t in tasks:
        if t.point != cached_point:
            values = spec.values_at(points[t.point])
            rates, x0 = rate_constants(spec.model, values), initial_counts(spec.model, values)
            cached_point = t.point
        yield TaskInput(path, spec.method, network, rates, x0, times, spec.seed, t.point, t.block,
                        t.start, t.stop, spec.max_events)


def run(spec: Spec, *, workers: int | None = None, scheduler: str | None = None, fresh: bool = False,
        on_start: Callable[[Started], None] | None = None,
        on_progress: Callable[[Progress], None] | None = None) -> RunSummary:
    """Run (or resume) a sweep and return what happened.

    Parameters
    ----------
    spec : Spec
        The loaded spec; ``spec.store`` is where results go.
    workers : int, optional
        Local worker processes (default: one per core). Ignored with ``scheduler``.
    scheduler : str, optional
        Address of an existing Dask scheduler to use instead of a local cluster.
    fresh : bool
        Delete an existing store at ``spec.store`` and start over.
    on_start, on_progress : callable, optional
        Called once the cluster is up, and after every finished task.

    Example
    -------
    >>> summary = run(load("configs/reporter.toml"), workers=2)
    """
    began = time.perf_counter()
    points, tasks, done, resumed = prepare_store(spec, fresh)
    pending = [t for t in tasks if not done[t.point, t.block]]
    inputs = task_inputs(spec, points, pending)
    first = next(inputs, None)
    if first is None:
        return RunSummary(spec.store, points.shape[0], len(tasks), 0, len(tasks), 0, 0, 0,
                          time.perf_counter() - began)
    warm_up(spec.method, first.network, first.rates, first.x0, first.times)
    backend = importlib.import_module(f"sweep.execute.{'scheduler' if scheduler else 'local'}")
    with backend.connect(address=scheduler, workers=workers) as client:
        n_workers = len(client.scheduler_info(n_workers=-1)["workers"])
        # every worker imports and loads the cached kernel at once, before the clock starts
        client.run(warm_up, first.method, first.network, first.rates, first.x0, first.times)
        if on_start:
            on_start(Started(client.dashboard_link, n_workers, len(pending), len(tasks), resumed))
        streaming = time.perf_counter()
        totals = _stream(client, _chain(first, inputs), max(n_workers, 1), spec.store, done,
                         Progress(len(tasks) - len(pending), len(tasks)), on_progress)
        simulating = time.perf_counter() - streaming
    events, capped, numerical, failed = totals
    return RunSummary(spec.store, points.shape[0], len(tasks), len(pending) - len(failed),
                      len(tasks) - len(pending), events, capped, numerical,
                      time.perf_counter() - began, simulating, tuple(failed))


def _chain(first, rest):
    yield first
    yield from rest


def _stream(client, inputs: Iterator[TaskInput], n_workers: int, path: Path, done: np.ndarray,
            progress: Progress, on_progress) -> tuple[int, int, int, list[FailedTask]]:
    """Keep a bounded window of tasks in flight and record each completion."""
    from distributed import as_completed

    window = max(4 * n_workers, 16)
    refill = window // 2
    began, last_flush, dirty = time.perf_counter(), time.perf_counter(), False
    capped = numerical = 0
    failed: list[FailedTask] = []
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
                failed.append(FailedTask(point, block, _error_text(result)))
                progress.failed += 1
            else:
                done[result.point, result.block] = dirty = True
                progress.done += 1
                progress.events += result.events
                capped += result.capped
                numerical += result.failed
            if flights.count() <= window - refill and (batch := list(islice(inputs, refill))):
                flights.update(submit(batch))
            if dirty and time.perf_counter() - last_flush >= FLUSH_SECONDS:
                store.write_done(path, done)
                last_flush, dirty = time.perf_counter(), False
            progress.elapsed = time.perf_counter() - began
            if on_progress:
                on_progress(progress)
    finally:
        store.write_done(path, done)
        store.finish_run(path)
    return progress.events, capped, numerical, failed


def _error_text(exc: BaseException) -> str:
    return "".join(traceback.format_exception_only(type(exc), exc)).strip()
