"""The run loop: the one place that submits tasks, retries them, records completions and reports.

Every route runs through ``drive``: a local Dask cluster, an existing scheduler, Dask
workers as Slurm jobs, and in-process shards. What differs is given to it: the pool that runs
tasks (``sweep.execute.pool``), the completion record it marks (the whole run's ``done``, or a
shard's own records; ``sweep.execute.session``), the schedule of blocks (every block not done, or the
adaptive rounds), and for shards a walltime budget.

What happens at each fault:

- a task raises: a packed task is split and its blocks run alone; a block is retried
  ``TASK_RETRIES`` times, then recorded as failed with its error text; the others go on, and a
  rerun tries it again (a worker process that dies is Dask's to reschedule);
- a disk error (full, read-only, quota, I/O, permissions) on a write: the run stops at once,
  since every other task would fail the same way; what was written and recorded stays valid;
- Ctrl-C or SIGTERM: tasks in flight are dropped (their chunks are never marked done),
  completions are recorded, and the caller says how to resume;
- the walltime budget does not cover the next task (shards): the run stops before it.
"""

from __future__ import annotations

import errno
import time
import traceback
from collections import deque
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Callable, Protocol

import numpy as np

if TYPE_CHECKING:
    from sweep.execute.pool import Pool
    from sweep.execute.tasks import Packer, Task
    from sweep.batch.walltime import Budget
    from sweep.execute.worker import TaskInput, TaskResult

TASK_RETRIES = 2
DISK_ERRNOS = {errno.ENOSPC, errno.EROFS, errno.EDQUOT, errno.EIO, errno.EACCES, errno.EPERM}


class Terminated(BaseException):
    """SIGTERM arrived (Slurm cancels a job, or ends it at its time limit, with SIGTERM first)."""


@dataclass
class Progress:
    """Running totals passed to the progress callback after every finished task (counted in blocks)."""

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


@dataclass
class Tally:
    """What the loop did, in blocks."""

    events: int = 0
    capped: int = 0
    numerical: int = 0
    ran: int = 0
    scheduled: int = 0
    failed: list[FailedTask] = field(default_factory=list)
    stopped: str | None = None


class Record(Protocol):
    """The completion record the loop marks: ``done`` (points x blocks) and what keeps it."""

    done: np.ndarray

    def mark(self, point: int, block: int, checksums: tuple[int, ...]) -> None: ...

    def tick(self) -> None:
        """After each completion: write what is due (the whole run flushes about once a second)."""

    def close(self, failed: list[FailedTask]) -> str | None:
        """Write what is left and the failures; return a note if that could not be done."""


Schedule = Callable[[np.ndarray, set[tuple[int, int]]], list["Task"]]


def drive(pool: Pool, schedule: Schedule, make_input: Callable[[list[Task]], TaskInput], packer: Packer,
          record: Record, progress: Progress, on_progress: Callable[[Progress], None] | None = None,
          budget: Budget | None = None) -> Tally:
    """Run every block the schedule asks for, round after round, until it asks for none.

    ``schedule(done, failed)`` gives the blocks to run from the completion record and the
    (point, block) pairs that failed in this run; it is asked first, then again whenever
    nothing is in flight, until it returns none (``sweep.execute.adaptive``'s rounds).
    """
    tally = Tally()
    attempts: dict[tuple[int, int], int] = {}
    failed_now: set[tuple[int, int]] = set()
    began = time.perf_counter() - progress.elapsed
    pending = _Queue()
    pending.extend(schedule(record.done, failed_now))
    tally.scheduled = len(pending)
    try:
        while True:
            batch = []
            while pool.in_flight() + len(batch) < pool.info.window and pending:
                if budget is not None and not budget.next_fits():
                    tally.stopped = "walltime"
                    pending.clear()
                    break
                batch.append(make_input([pending.popleft() for _ in range(min(packer.size(), len(pending)))]))
            if batch:
                pool.submit(batch)
            if not pool.in_flight():
                more = [] if tally.stopped else schedule(record.done, failed_now)
                if not more:
                    break
                tally.scheduled += len(more)
                progress.total += len(more)
                pending.extend(more)
                continue
            task, outcome = pool.next()
            if isinstance(outcome, BaseException):
                retry = _failed(task, outcome, attempts, tally, failed_now, progress)
                if retry:
                    pool.submit(retry)
            else:
                _finished(outcome, record, packer, tally, progress, budget)
            try:
                record.tick()
            except OSError as exc:  # the record itself could not be written: every write would fail too
                tally.stopped = f"cannot write to the store: {exc}"
            progress.elapsed = time.perf_counter() - began
            if on_progress:
                on_progress(progress)
            if tally.stopped:  # a disk error: drop the rest
                pending.clear()
                break
    except KeyboardInterrupt:
        tally.stopped = "interrupted"
    except Terminated:
        tally.stopped = "terminated"
    finally:
        pool.cancel()  # what is in flight may be half-way; it is never marked done
        note = record.close(tally.failed)
        if note:
            tally.stopped = f"{tally.stopped}; {note}" if tally.stopped else note
    return tally


class _Queue:
    """The tasks still to submit, in order, taken from the schedule's sequences one at a time.

    A sequence stays as given: a whole sweep's ``TaskList`` is never expanded into task objects.
    """

    def __init__(self) -> None:
        self._parts: deque = deque()
        self._at = 0  # place in the first part
        self._left = 0

    def __len__(self) -> int:
        return self._left

    def extend(self, tasks) -> None:
        if len(tasks):
            self._parts.append(tasks)
            self._left += len(tasks)

    def popleft(self) -> Task:
        part = self._parts[0]
        task = part[self._at]
        self._at += 1
        self._left -= 1
        if self._at == len(part):
            self._parts.popleft()
            self._at = 0
        return task

    def clear(self) -> None:
        self._parts.clear()
        self._at = self._left = 0


def _finished(result: TaskResult, record: Record, packer: Packer, tally: Tally, progress: Progress,
              budget: Budget | None) -> None:
    for b in result.blocks:
        record.mark(b.point, b.block, b.checksums)
        tally.ran += 1
        tally.events += b.events
        tally.capped += b.capped
        tally.numerical += b.failed
        progress.done += 1
        progress.events += b.events
    packer.learn(result.seconds, len(result.blocks))  # the worker's whole time: writes count too
    if budget is not None:
        budget.record(result.seconds)


def _failed(task: TaskInput, exc: BaseException, attempts: dict, tally: Tally, failed_now: set,
            progress: Progress) -> list[TaskInput]:
    """Decide what a failure means; return the tasks to submit again."""
    if is_disk_error(exc):
        tally.stopped = f"cannot write to the store: {exc}"
        return []
    if len(task.blocks) > 1:
        return task.split()  # each block on its own: one bad point must not fail its pack-mates
    b = task.blocks[0]
    key = (b.point, b.block)
    attempts[key] = attempts.get(key, 0) + 1
    if attempts[key] <= TASK_RETRIES and not _worker_lost(exc):
        return [task]
    tally.failed.append(FailedTask(b.point, b.block, error_text(exc)))
    failed_now.add(key)
    progress.failed += 1
    return []


def _worker_lost(exc: BaseException) -> bool:
    """A task that killed its workers again and again (Dask's KilledWorker): another try kills more."""
    return type(exc).__name__ == "KilledWorker"


def is_disk_error(exc: BaseException) -> bool:
    return isinstance(exc, OSError) and exc.errno in DISK_ERRNOS


def error_text(exc: BaseException) -> str:
    return "".join(traceback.format_exception_only(type(exc), exc)).strip()
