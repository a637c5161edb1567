"""What runs on a Dask worker: simulate one task and write its chunk into the store.

Only a small ``TaskResult`` travels back to the client; the trajectories never do.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

import kernels
from kernels.network import STATUS_EVENT_CAP, STATUS_NUMERICAL, Network
from kernels.rng import Streams
from sweep import store


@dataclass(frozen=True)
class TaskInput:
    """Everything one task needs; small enough to pickle per task."""

    store: str
    method: str
    network: Network
    rates: np.ndarray
    x0: np.ndarray
    times: np.ndarray
    root_seed: int
    point: int
    block: int
    start: int
    stop: int
    max_events: int
    options: tuple[tuple[str, object], ...] = ()  # method keyword options from [run.options]
    store_id: str = ""  # the store's attrs["store_id"]: the worker keeps its handles open while it matches


@dataclass(frozen=True)
class TaskResult:
    point: int
    block: int
    events: int
    capped: int
    failed: int
    seconds: float
    checksums: tuple[int, ...] = ()  # CRC-32C of the task's counts, status and events chunks


def run_task(task: TaskInput) -> TaskResult:
    """Simulate replicates ``start:stop`` of one point and write them. Idempotent."""
    began = time.perf_counter()
    kernel = kernels.get(task.method)
    # SeedSequence(root, spawn_key=(point, r)) for each replicate, computed compiled (kernels.seeding)
    seeds = Streams(task.root_seed, task.point, task.start, task.stop)
    result = kernel.simulate(task.network, task.rates, task.x0, task.times, seeds, task.max_events,
                             **dict(task.options))
    sums = store.write_block(task.store, task.point, task.start, task.stop, result, task.store_id)
    return TaskResult(task.point, task.block, int(result.events.sum()),
                      int(np.count_nonzero(result.status == STATUS_EVENT_CAP)),
                      int(np.count_nonzero(result.status == STATUS_NUMERICAL)),
                      time.perf_counter() - began, sums)


def warm_up(task: TaskInput) -> None:
    """Compile (or load from numba's cache) the kernel once in this process.

    Doing it in the client before workers start means every worker gets a cache hit
    instead of several processes compiling the same signature at once.
    """
    kernels.get(task.method).simulate(task.network, task.rates, task.x0, task.times,
                                      [np.random.SeedSequence(0)], 1, **dict(task.options))
