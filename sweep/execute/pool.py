"""The one small interface every backend gives the run loop: a pool that runs tasks.

A pool takes task inputs (``submit``), hands back each finished one with its result or its
exception (``next``), says how many are in flight, and drops what is in flight (``cancel``).
The loop (``sweep.execute.loop``) alone decides what to submit, retries, records and reports.

``DaskPool`` serves the three Dask backends (a local cluster, an existing scheduler, Dask
workers as Slurm jobs): each gives it a connected client. ``sweep.execute.inprocess`` runs tasks
in this process instead.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Protocol

if TYPE_CHECKING:
    from distributed import Client

    from sweep.execute.worker import TaskInput, TaskResult


# distributed keeps its last `low-level-log-length` (1,000) sent batches for debugging, in the
# client and the scheduler. A client's batch is a whole submission with every task's pickled
# input (the network, rates, schedules), so a 100,000-task sweep held ~150 MB in that log, and a
# large network's would hold gigabytes. A short log keeps the client's memory flat.
BOUNDED_LOGS = {"distributed.admin.low-level-log-length": 10}


@dataclass(frozen=True)
class PoolInfo:
    """What a pool tells the caller once it is up."""

    workers: int
    slots: int  # tasks it can run at once (for Slurm: the workers the cluster may grow to)
    dashboard: str | None = None
    address: str | None = None  # the scheduler's (tls://... when its workers talk over TLS)
    packs: bool = True  # whether small blocks are worth packing (a task costs a round trip to send)

    @property
    def window(self) -> int:
        """Tasks to keep in flight: enough to hide a round trip, bounded so 100,000 tasks are never held."""
        return max(4 * self.slots, 16) if self.slots > 1 else self.slots


class Pool(Protocol):
    info: PoolInfo

    def warm(self, task: TaskInput) -> None:
        """Compile (or load) the task's kernel wherever tasks run, before the clock starts."""

    def submit(self, tasks: list[TaskInput]) -> None: ...

    def next(self) -> tuple[TaskInput, TaskResult | BaseException]:
        """The next finished task (call only while ``in_flight()``)."""

    def in_flight(self) -> int: ...

    def cancel(self) -> None:
        """Drop the tasks in flight: their chunks may be half-way and are never marked done."""


class DaskPool:
    """Tasks as Dask futures, completed in any order; only small results come back."""

    def __init__(self, client: Client, slots: int):
        from distributed import as_completed

        self.client = client
        self._workers = tuple(sorted(client.scheduler_info(n_workers=-1)["workers"]))
        workers = len(self._workers)
        self.info = PoolInfo(workers, max(slots, workers, 1), client.dashboard_link, client.scheduler.address)
        self._completed = as_completed([], with_results=True, raise_errors=False)
        self._owner: dict[str, TaskInput] = {}

    def warm(self, task: TaskInput) -> None:
        """Every worker imports and loads the cached kernel at once (once per set of workers and
        kernel: a fit's batches run on one client, and a round trip to each worker costs ~0.1 s)."""
        from sweep.execute.worker import warm_up

        key = (self.client.scheduler.address, self._workers, _kernel_key(task))
        if key in _WARMED:
            return
        self.client.run(warm_up, task)
        _WARMED.add(key)

    def submit(self, tasks: list[TaskInput]) -> None:
        from sweep.execute.worker import run_task

        # retries are the loop's; a future is dropped as soon as its small result is in
        futures = self.client.map(run_task, tasks, pure=False)
        self._owner.update((f.key, t) for f, t in zip(futures, tasks))
        self._completed.update(futures)

    def next(self) -> tuple[TaskInput, TaskResult | BaseException]:
        future, result = next(self._completed)
        task = self._owner.pop(future.key)
        if future.status == "error":
            return task, result[1]  # as_completed gives (type, exception, traceback) for errors
        return task, result

    def in_flight(self) -> int:
        return len(self._owner)

    def cancel(self) -> None:
        futures = list(self._completed.futures)
        if futures:
            self.client.cancel(futures)
        self._completed.clear()
        self._owner.clear()


_WARMED: set[tuple] = set()  # (scheduler, its workers, kernel) already warmed by this process


def _kernel_key(task: TaskInput) -> str:
    """What decides which compiled kernel a task loads: its method, network and options."""
    import hashlib
    import pickle

    b = task.blocks[0]
    return hashlib.sha256(pickle.dumps((task.method, task.network, task.options, b.changes is None))).hexdigest()
