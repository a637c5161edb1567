"""This process as the pool: tasks run one at a time, here, with no Dask (``sweep run --shard``).

A shard of a job array runs this way: nothing listens on the network, and the walltime check
before each task (``sweep.batch.walltime.Budget``) sees one task at a time. The kernels, seeds and
writes are a Dask worker's own (``sweep.execute.worker.run_task``), so the bytes are those of any run.
"""

from __future__ import annotations

from collections import deque
from contextlib import contextmanager
from typing import TYPE_CHECKING, Iterator

from sweep.execute.pool import PoolInfo

if TYPE_CHECKING:
    from pathlib import Path

    from sweep.execute.execution import Execution
    from sweep.execute.worker import TaskInput, TaskResult


class SerialPool:
    """Runs each submitted task when the loop asks for the next result."""

    # a task costs nothing to send here, so blocks are not packed unless asked: the walltime
    # check before each task then sees one block at a time
    info = PoolInfo(workers=1, slots=1, packs=False)

    def __init__(self) -> None:
        self._queue: deque[TaskInput] = deque()

    def warm(self, task: TaskInput) -> None:
        from sweep.execute.worker import warm_up

        warm_up(task)

    def submit(self, tasks: list[TaskInput]) -> None:
        self._queue.extend(tasks)

    def next(self) -> tuple[TaskInput, TaskResult | BaseException]:
        from sweep.execute.worker import run_task

        task = self._queue.popleft()
        try:
            return task, run_task(task)
        except Exception as exc:  # the loop decides: retry, record as failed, or stop on a disk error
            return task, exc

    def in_flight(self) -> int:
        return len(self._queue)

    def cancel(self) -> None:
        self._queue.clear()


@contextmanager
def pool(execution: Execution, store: Path) -> Iterator[SerialPool]:
    yield SerialPool()
