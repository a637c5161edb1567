"""Run one shard of a sweep in this process, serially, with no Dask cluster.

Shard ``I`` of ``N`` (1-based: ``1/4`` ... ``4/4``) owns the tasks whose place in the
sweep's fixed task order (``sweep.tasks.make_tasks``) is ``I - 1`` modulo ``N``. The
partition is over all tasks, so it never changes as tasks complete, and any contiguous run
of tasks (say, the half an earlier run did not reach) is spread evenly over the shards.
A shard runs only its tasks that are not done yet.

Each shard holds a claim (``sweep.claims``) for as long as it runs and records each
finished task in a file of its own (``sweep.records``), only after the task's chunks were
written and fsynced; the kernels, seeds and writes are the workers' own
(``sweep.worker.run_task``), so the bytes are those of a local Dask run.

Stops: before each task, the time left must cover the next one (``sweep.walltime``), or
the shard stops with ``stopped="walltime"``; SIGTERM (a job cancelled or timed out)
and Ctrl-C stop it after recording what finished.
"""

from __future__ import annotations

import signal
import time
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterator

from sweep import claims, integrity, records, store
from sweep.errors import SpecError, StoreError
from sweep.runner import TASK_RETRIES, FailedTask, Progress, _error_text, _is_disk_error, check_same_sweep, task_inputs
from sweep.spec import Spec
from sweep.tasks import Task, make_tasks, n_blocks
from sweep.walltime import Budget
from sweep.worker import run_task, warm_up


class Terminated(BaseException):
    """SIGTERM arrived (Slurm cancels a job or ends it at its time limit with SIGTERM first)."""


@dataclass(frozen=True)
class ShardSummary:
    """What one shard did. ``stopped``: None, "walltime", "terminated", "interrupted" or a disk error."""

    store: Path
    index: int
    count: int
    tasks_total: int  # in the whole sweep
    tasks_in_shard: int
    tasks_run: int
    tasks_skipped: int  # of this shard, already done before it started
    events: int
    capped: int
    numerical: int
    seconds: float
    failed: tuple[FailedTask, ...] = field(default_factory=tuple)
    stopped: str | None = None
    time_left: float | None = None  # seconds left when it stopped (None: no limit known)

    @property
    def tasks_left(self) -> int:
        return self.tasks_in_shard - self.tasks_skipped - self.tasks_run - len(self.failed)

    @property
    def complete(self) -> bool:
        return self.stopped is None and not self.failed and self.tasks_left == 0


def parse(text: str) -> tuple[int, int]:
    """``"3/8"`` -> (3, 8): shard 3 of 8, 1-based.

    Raises
    ------
    ValueError
        If ``text`` is not ``I/N`` with 1 <= I <= N.
    """
    left, sep, right = text.partition("/")
    if not sep or not left.strip().isdigit() or not right.strip().isdigit():
        raise ValueError(f"{text!r}: give the shard as I/N, e.g. 1/4 (shards are numbered 1 to N)")
    index, count = int(left), int(right)
    if not 1 <= index <= count:
        raise ValueError(f"{text!r}: shard I/N needs 1 <= I <= N (shards are numbered 1 to N)")
    return index, count


def select(tasks: list[Task], index: int, count: int) -> list[Task]:
    """The tasks of shard ``index`` of ``count`` (1-based): every ``count``-th, from place ``index - 1``."""
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


def task_index(task: Task, blocks: int) -> int:
    """A task's place in the sweep's task order, as recorded in the shards' records."""
    return task.point * blocks + task.block


def run_shard(spec: Spec, index: int, count: int, *, time_left: float | None = None, break_lock: bool = False,
              clock: Callable[[], float] = time.monotonic,
              on_progress: Callable[[Progress], None] | None = None) -> ShardSummary:
    """Run shard ``index`` of ``count`` of a sweep into ``spec.store``, in this process.

    Parameters
    ----------
    spec : Spec
        The loaded spec. The first shard to arrive creates the store.
    index, count : int
        Shard ``index`` (1-based) of ``count``; every shard of one store uses the same ``count``.
    time_left : float, optional
        Seconds this process may run (default: none, or the Slurm job's limit via
        ``sweep.walltime.time_left``, which the CLI passes in).
    break_lock : bool
        Take over a claim or lock held by a process on another host known to be dead.
    clock, on_progress : callable, optional
        Monotonic clock for the walltime budget (tests); called after every finished task.

    Returns
    -------
    ShardSummary

    Raises
    ------
    StoreError
        The store belongs to another spec, a whole run holds it, or this shard is already running.

    Example
    -------
    >>> run_shard(load("configs/reporter.toml"), 1, 4).complete
    True
    """
    refuse_adaptive(spec)  # each adaptive round needs the whole previous round's data (sweep.adaptive)
    began = time.perf_counter()
    budget = Budget.starting_now(time_left, clock)
    path = spec.store
    _make_folder(path)
    points = spec.points()
    tasks = make_tasks(points.shape[0], spec.store_replicates, spec.replicates_per_task)
    blocks = n_blocks(spec.store_replicates, spec.replicates_per_task)
    with claims.holding_lock(path, break_lock):
        store.check_claimable(path)  # checked under the lock: another shard may be creating the store
        integrity.refuse_symlinks(path)
        try:
            if store.exists(path):
                check_same_sweep(spec, points)
                if not claims.list_claims(path):  # nobody else writes: mend what follows from spec and chunks
                    integrity.mend(spec, points)
            else:
                store.create(path, spec, points, blocks)
        except OSError as exc:
            raise StoreError(f"{path}: cannot write the store: {exc}") from exc
        holder = claims.take(path, index, count, break_lock)
    try:
        done = store.read_done(path)
        mine = select(tasks, index, count)
        pending = [t for t in mine if not done[t.point, t.block]]
        tally = _ShardTally()
        progress = Progress(len(mine) - len(pending), len(mine))
        with _stop_on_sigterm():
            try:
                _loop(spec, points, pending, blocks, index, count, budget, tally, progress, on_progress)
            except KeyboardInterrupt:
                tally.stopped = "interrupted"
            except Terminated:
                tally.stopped = "terminated"
            finally:
                records.write_failures(path, index, count,
                                       [{"point": f.point, "block": f.block, "error": f.error} for f in tally.failed])
    finally:
        claims.release(path, index, count, holder)
    _tidy(path, break_lock)
    return ShardSummary(path, index, count, len(tasks), len(mine), tally.ran, len(mine) - len(pending), tally.events,
                        tally.capped, tally.numerical, time.perf_counter() - began, tuple(tally.failed),
                        tally.stopped, budget.left())


@dataclass
class _ShardTally:
    events: int = 0
    capped: int = 0
    numerical: int = 0
    ran: int = 0
    failed: list[FailedTask] = field(default_factory=list)
    stopped: str | None = None


def _loop(spec, points, pending, blocks, index, count, budget: Budget, tally: _ShardTally, progress: Progress,
          on_progress) -> None:
    """Run the pending tasks one by one, recording each; stop when the next one will not fit."""
    path = spec.store
    inputs = task_inputs(spec, points, pending)
    began = time.perf_counter()
    warmed = False
    for task in inputs:
        if not budget.next_fits():
            tally.stopped = "walltime"
            return
        if not warmed:  # compile or load the kernel before timing the first task
            warm_up(task)
            warmed = True
        started = time.perf_counter()
        try:
            result = _attempt(task)
        except Exception as exc:
            if _is_disk_error(exc):
                tally.stopped = f"cannot write to the store: {exc}"
                return
            tally.failed.append(FailedTask(task.point, task.block, _error_text(exc)))
            progress.failed += 1
        else:
            records.append_done(path, index, count, [task_index(task, blocks)], [result.checksums])
            tally.ran += 1
            tally.events += result.events
            tally.capped += result.capped
            tally.numerical += result.failed
            progress.done += 1
            progress.events += result.events
        budget.record(time.perf_counter() - started)
        progress.elapsed = time.perf_counter() - began
        if on_progress:
            on_progress(progress)


def _attempt(task):
    """Run a task, retrying other errors as often as a Dask run does (disk errors are not retried)."""
    for attempt in range(TASK_RETRIES + 1):
        try:
            return run_task(task)
        except Exception as exc:
            if _is_disk_error(exc) or attempt == TASK_RETRIES:
                raise
    raise AssertionError("unreachable")


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
    except (StoreError, OSError):
        pass


@contextmanager
def _stop_on_sigterm() -> Iterator[None]:
    """Turn SIGTERM into ``Terminated`` so the shard records what finished before it exits."""

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
