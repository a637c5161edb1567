"""Run (or resume) a sweep on any backend: hold the store, schedule blocks, drive the loop.

``run`` is the whole path for every route: a session on the store (the lock of a whole run,
or a shard's claim; ``sweep.execute.session``), the schedule (every block not done, a shard's share
of them, or the adaptive rounds of ``sweep.execute.adaptive``), the backend's pool
(``sweep.execute.BACKENDS``) and the loop (``sweep.execute.loop.drive``).
"""

from __future__ import annotations

import contextlib
import importlib
import signal
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable, Iterator

import numpy as np

from sweep import store

from sweep.execute import session
from sweep.execute import BACKENDS
from sweep.execute.execution import Execution
from sweep.execute.loop import FailedTask, Progress, Tally, Terminated, drive
from sweep.model import compile_network, initial_counts, rate_constants
from sweep.model.observables import Readout
from sweep.execute.tasks import Packer, Task, chunk_bytes, n_blocks
from sweep.batch.walltime import Budget
from sweep.execute.worker import BlockInput, TaskInput, warm_up

if TYPE_CHECKING:
    from sweep.spec import Spec

PACK_BYTES = 64 * 2**20  # a task's samples in memory at most (packing stops there)


@dataclass(frozen=True)
class Started:
    """Told to the caller once the pool is up and before the first task runs."""

    dashboard: str | None
    workers: int
    pending: int
    total: int
    resumed: bool
    address: str | None = None  # the scheduler's (tls://... when its workers talk over TLS)
    repaired: tuple[str, ...] = ()  # what was mended in the store before the run (sweep.integrity)


@dataclass(frozen=True)
class RunSummary:
    """What a run did, counted in tasks of one replicate block each.

    ``stopped`` says why it ended early: "interrupted" (Ctrl-C), "terminated" (SIGTERM),
    "walltime" (a shard's time was up), or a disk error. A shard's summary has ``shard`` set
    and counts its own share of the tasks in ``tasks_in_scope``.
    """

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
    shard: tuple[int, int] | None = None
    tasks_in_scope: int = 0  # the tasks this run was given: all (pending or done), or a shard's
    low_copy: dict | None = None  # an approximate method's copy-number report (sweep.analysis.validity)
    time_left: float | None = None  # a shard's seconds left when it stopped (None: no limit known)

    @property
    def events_per_second(self) -> float:
        """Reaction events per wall-second while simulating (after start-up)."""
        return self.events / self.simulating_seconds if self.simulating_seconds > 0 else 0.0

    @property
    def tasks_left(self) -> int:
        return max(self.tasks_in_scope - self.tasks_skipped - self.tasks_run - len(self.failed), 0)

    @property
    def complete(self) -> bool:
        return self.stopped is None and not self.failed and self.tasks_left == 0

    # a shard's summary, in the words `sweep run --shard` reports
    @property
    def index(self) -> int:
        return self.shard[0] if self.shard else 1

    @property
    def count(self) -> int:
        return self.shard[1] if self.shard else 1

    @property
    def tasks_in_shard(self) -> int:
        return self.tasks_in_scope


def run(spec: Spec, execution: Execution | None = None, *, on_start: Callable[[Started], None] | None = None,
        on_progress: Callable[[Progress], None] | None = None, clock: Callable[[], float] = time.monotonic,
        **settings: Any) -> RunSummary:
    """Run (or resume) a sweep and return what happened.

    Parameters
    ----------
    spec : Spec
        The loaded spec; ``spec.store`` is where results go.
    execution : Execution, optional
        Backend and settings (``sweep.execute.execution``); or give its settings as keywords
        (``workers=2``, ``scheduler="tcp://..."``, ``cluster=ClusterConfig``, ``fresh=True``, ...).
    on_start, on_progress : callable, optional
        Called once the pool is up, and after every finished task.
    clock : callable
        Monotonic clock of a shard's walltime budget (tests).

    Returns
    -------
    RunSummary
        Also when stopped early by Ctrl-C, SIGTERM, a shard's walltime or a disk error.

    Raises
    ------
    StoreError
        The store belongs to another spec, is locked, or cannot be written at all.

    Example
    -------
    >>> summary = run(load("configs/reporter.toml"), Execution("local", workers=2))
    """
    execution = execution if execution is not None else Execution.choose(**settings)
    began = time.perf_counter()
    with _terminated_on_sigterm():
        if execution.shard is not None:
            index, count = execution.shard
            opened = session.shard(spec, index, count, execution.break_lock)
        else:
            opened = session.whole_run(spec, execution.fresh, execution.break_lock)
        with opened as (prepared, record):
            budget = Budget.starting_now(execution.time_left, clock) if execution.shard is not None else None
            schedule, scope, planner = _schedule(spec, prepared, record, execution)
            already = int(record.done.sum()) if execution.shard is None else scope.count_done(record.done)
            tally, simulating = _drive(spec, execution, prepared, record, schedule, budget, already, on_start,
                                       on_progress)
            low_copy = _check_copy_numbers(spec, record) if tally.ran and execution.shard is None else None
    outcome = planner.finish(spec.store) if planner is not None else None
    asked = already + tally.scheduled
    return RunSummary(
        store=spec.store, points=prepared.points.shape[0],
        tasks_total=asked if planner is not None else len(prepared.tasks),
        tasks_run=tally.ran, tasks_skipped=already, events=tally.events, capped=tally.capped,
        numerical=tally.numerical, seconds=time.perf_counter() - began, simulating_seconds=simulating,
        failed=tuple(tally.failed), stopped=tally.stopped, adaptive=outcome, repaired=prepared.repaired,
        shard=execution.shard, tasks_in_scope=asked if planner is not None else len(scope),
        time_left=budget.left() if budget is not None else None, low_copy=low_copy or opened_low_copy(spec))


def _check_copy_numbers(spec: Spec, record) -> dict | None:
    """An approximate method's low-copy report, made while this run holds the lock (shards: the
    last one out makes it, ``sweep.execute.session``)."""
    from sweep.analysis import validity

    if spec.method not in validity.APPROXIMATE:
        return None
    record.flush()
    return validity.record_low_copy(spec.store)


def opened_low_copy(spec: Spec) -> dict | None:
    """The low-copy report a store keeps (made by this run, or by the shard that completed it)."""
    from sweep.analysis import validity

    if spec.method not in validity.APPROXIMATE or not store.exists(spec.store):
        return None
    return store.attributes(spec.store).get("low_copy")


def _schedule(spec: Spec, prepared, record, execution: Execution):
    """The blocks to run: every one not done (a shard: its share), or the adaptive rounds."""
    if spec.adaptive is not None:
        from sweep.execute import adaptive
        planner = adaptive.Planner(spec)
        return planner, [], planner
    scope = prepared.tasks if execution.shard is None else session.select(prepared.tasks, *execution.shard)
    asked = []

    def pending(done: np.ndarray, failed: set) -> list[Task]:
        if asked:
            return []  # one round: every block not done
        asked.append(True)
        return scope.not_done(done)

    return pending, scope, None


def _drive(spec: Spec, execution: Execution, prepared, record, schedule, budget, already: int, on_start,
           on_progress) -> tuple[Tally, float]:
    first = schedule(record.done, set())
    if not first:
        if prepared.repaired and hasattr(record, "flush"):
            record.flush()
            store.finish_run(spec.store)
        return Tally(), 0.0
    make_input = input_builder(spec, prepared.points)
    warm_up(make_input(first[:1]))  # compile or load the kernel here, so workers get cache hits
    backend = importlib.import_module(BACKENDS[execution.backend])
    per_block = chunk_bytes(spec.replicates_per_task, len(spec.times), len(spec.model.species))
    given = iter([first])

    def rounds(done: np.ndarray, failed: set) -> list[Task]:
        return next(given, None) or schedule(done, failed)

    with backend.pool(execution, spec.store) as pool:
        fixed = execution.pack if execution.pack is not None or pool.info.packs else 1
        packer = Packer(execution.pack_seconds, max(1, PACK_BYTES // max(per_block, 1)), fixed)
        pool.warm(make_input(first[:1]))
        if on_start:
            on_start(Started(pool.info.dashboard, pool.info.workers, len(first), already + len(first),
                             prepared.resumed, pool.info.address, prepared.repaired))
        streaming = time.perf_counter()
        tally = drive(pool, rounds, make_input, packer, record, Progress(already, already + len(first)), on_progress,
                      budget)
        return tally, time.perf_counter() - streaming


def input_builder(spec: Spec, points: np.ndarray) -> Callable[[list[Task]], TaskInput]:
    """Build a task's input from its blocks (each with its point's rates and initial counts)."""
    network = compile_network(spec.model)
    times = np.asarray(spec.times)
    path = str(spec.store.resolve())
    ident = store.store_id(store.attributes(spec.store))
    readout = Readout.of(spec.model)
    cache: dict[int, tuple] = {}

    def point_inputs(p: int) -> tuple:
        if p not in cache:
            if len(cache) > 4096:
                cache.clear()
            values = spec.values_at(points[p])
            cache[p] = (rate_constants(spec.model, values), initial_counts(spec.model, values),
                        readout.values_of(values) if readout is not None else (), point_schedule(spec, values))
        return cache[p]

    def make(tasks: list[Task]) -> TaskInput:
        blocks = tuple(BlockInput(t.point, t.block, t.start, t.stop, *point_inputs(t.point)) for t in tasks)
        return TaskInput(path, spec.method, network, times, spec.seed, spec.max_events, blocks, spec.options, ident,
                         readout)

    return make


def point_schedule(spec: Spec, values: dict[str, float]):
    """The point's interventions as a ``kernels.changes.Schedule``, or None without any."""
    if not spec.interventions:
        return None
    from sweep.model import schedule

    return schedule.build(spec.model, spec.interventions, spec.derived, values, spec.times[-1])


def task_inputs(spec: Spec, points: np.ndarray, tasks: list[Task]) -> Iterator[TaskInput]:
    """One task input per block, in order (for calibration and tests; runs pack blocks)."""
    make = input_builder(spec, points)
    return (make([t]) for t in tasks)


@contextlib.contextmanager
def _terminated_on_sigterm() -> Iterator[None]:
    """Turn SIGTERM into ``Terminated``, so a run records what finished before it exits."""

    def handler(signum, frame):
        raise Terminated()

    try:
        previous = signal.signal(signal.SIGTERM, handler)
    except ValueError:  # not the main thread
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


ShardSummary = RunSummary  # a shard's run is summarised the same way, with ``shard`` set


def run_shard(spec: Spec, index: int, count: int, *, time_left: float | None = None, break_lock: bool = False,
              clock: Callable[[], float] = time.monotonic,
              on_progress: Callable[[Progress], None] | None = None) -> RunSummary:
    """Run shard ``index`` of ``count`` (1-based) of a sweep in this process, with no Dask.

    Shard I owns the tasks at places I-1, I-1+N, ... of the sweep's fixed task order and
    runs those not done yet, stopping before a task the time left (``time_left`` seconds, or
    none) would not cover. Several shards may run at once on one store.

    Example
    -------
    >>> run_shard(load("configs/reporter.toml"), 1, 4).complete
    True
    """
    return run(spec, Execution("shard", shard=(index, count), time_left=time_left, break_lock=break_lock),
               on_progress=on_progress, clock=clock)
