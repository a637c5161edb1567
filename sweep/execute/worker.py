"""What runs where the tasks run (a Dask worker, or this process): simulate and write chunks.

A task is one or more blocks (point, replicate block), packed so that a task is worth a
fraction of a second of kernel time even when points are small (``sweep.execute.tasks.Packer``).
Each block is simulated from its own seeds and written into the chunks it alone owns, so
the bytes do not depend on how blocks were packed. Only a small ``TaskResult`` travels back
to the client; the trajectories never do.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, replace

import numpy as np

import kernels
from kernels.interventions import Schedule
from kernels.network import STATUS_EVENT_CAP, STATUS_NUMERICAL, Network
from kernels.rng import Streams
from sweep.model.observables import Readout
from sweep.store.chunks import group_commit, thread_lock_for_blosc
from sweep import store


@dataclass(frozen=True)
class BlockInput:
    """Replicates ``start:stop`` of ``point``; ``block`` indexes the ``done`` record."""

    point: int
    block: int
    start: int
    stop: int
    rates: np.ndarray
    x0: np.ndarray
    readout_values: tuple[float, ...] = ()  # the point's values of the parameters the observables read
    # the point's interventions (kernels.changes.Schedule, built by sweep.model.schedule); None
    # without any, and then the kernels are called exactly as before (the same bytes)
    changes: Schedule | None = None


@dataclass(frozen=True)
class TaskInput:
    """Everything one task needs; small enough to pickle per task."""

    store: str
    method: str
    network: Network
    times: np.ndarray
    root_seed: int
    max_events: int
    blocks: tuple[BlockInput, ...]
    options: tuple[tuple[str, object], ...] = ()  # method keyword options from [run.options]
    store_id: str = ""  # the store's attrs["store_id"]: the worker keeps its handles open while it matches
    readout: Readout | None = None  # the model's observables, computed from each block's counts

    def split(self) -> list[TaskInput]:
        """One task per block (a packed task that failed is retried block by block)."""
        return [replace(self, blocks=(b,)) for b in self.blocks]


@dataclass(frozen=True)
class BlockResult:
    point: int
    block: int
    events: int
    capped: int
    failed: int
    checksums: tuple[int, ...] = ()  # CRC-32C of the block's counts, status and events chunks


@dataclass(frozen=True)
class TaskResult:
    blocks: tuple[BlockResult, ...]
    seconds: float
    kernel_seconds: float


def run_task(task: TaskInput) -> TaskResult:
    """Simulate and write every block of one task. Idempotent: a rerun writes the same bytes."""
    began = time.perf_counter()
    thread_lock_for_blosc()  # before the first chunk is encoded: a killed worker then leaves no semaphore
    kernel = kernels.get(task.method)
    options = dict(task.options)
    done, in_kernel = [], 0.0
    with group_commit(task.store, task.store_id):  # durable before the task returns and is marked done
        in_kernel = _run_blocks(task, kernel, options, done)
    return TaskResult(tuple(done), time.perf_counter() - began, in_kernel)


def _run_blocks(task: TaskInput, kernel, options: dict, done: list) -> float:
    in_kernel = 0.0
    for b in task.blocks:
        started = time.perf_counter()
        # SeedSequence(root, spawn_key=(point, r)) for each replicate, computed compiled (kernels.seeding)
        result = kernel.simulate(task.network, b.rates, b.x0, task.times, Streams(task.root_seed, b.point, b.start,
                                                                                  b.stop), task.max_events,
                                 **with_changes(options, b.changes))
        in_kernel += time.perf_counter() - started
        observed = None if task.readout is None else task.readout.evaluate(result.counts, result.status,
                                                                            b.readout_values)
        sums = store.write_block(task.store, b.point, b.start, b.stop, result, task.store_id, observed)
        done.append(BlockResult(b.point, b.block, int(result.events.sum()),
                                int(np.count_nonzero(result.status == STATUS_EVENT_CAP)),
                                int(np.count_nonzero(result.status == STATUS_NUMERICAL)), sums))
    return in_kernel


def warm_up(task: TaskInput) -> None:
    """Compile (or load from numba's cache) the kernel once in this process.

    Doing it in the client before workers start means every worker gets a cache hit
    instead of several processes compiling the same signature at once.
    """
    b = task.blocks[0]
    kernels.get(task.method).simulate(task.network, b.rates, b.x0, task.times, [np.random.SeedSequence(0)], 1,
                                      **with_changes(dict(task.options), b.changes))


def with_changes(options: dict, changes: Schedule | None) -> dict:
    """The kernel's keyword arguments: ``changes`` only when there are interventions, so a sweep
    without them calls every kernel exactly as before."""
    return options if changes is None else {**options, "changes": changes}
