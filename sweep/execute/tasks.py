"""Tasks: (point, replicate block) pairs, each with its own seeds.

Replicate r of point p draws only from ``SeedSequence(root, spawn_key=(p, r))``, so the
numbers do not depend on block size, worker count, order of execution or resumes.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Iterator

import numpy as np


@dataclass(frozen=True)
class Task:
    """Replicates ``start:stop`` of point ``point``; ``block`` indexes the ``done`` record."""

    point: int
    block: int
    start: int
    stop: int


def n_blocks(replicates: int, per_task: int) -> int:
    return -(-replicates // per_task)


class TaskList(Sequence[Task]):
    """Tasks of a sweep by their places in its fixed point-major order, each made when asked for.

    A list of ``Task`` objects cost 214 bytes a task in the client (21 MB for 100,000 tasks) and
    a second copy for the blocks not done; this holds a ``range`` of places, or an array of
    them (8 bytes a task) once filtered by the completion record. Place ``i`` is block
    ``i % blocks`` of point ``i // blocks``.
    """

    def __init__(self, n_points: int, replicates: int, per_task: int, places: range | np.ndarray | None = None):
        self.n_points, self.replicates, self.per_task = n_points, replicates, per_task
        self.blocks = n_blocks(replicates, per_task)
        self.places = range(n_points * self.blocks) if places is None else places

    def __len__(self) -> int:
        return len(self.places)

    def __getitem__(self, i):
        if isinstance(i, slice):
            return TaskList(self.n_points, self.replicates, self.per_task, self.places[i])
        point, block = divmod(int(self.places[i]), self.blocks)
        start = block * self.per_task
        return Task(point, block, start, min(start + self.per_task, self.replicates))

    def __iter__(self) -> Iterator[Task]:
        for i in range(len(self.places)):
            yield self[i]

    def not_done(self, done: np.ndarray) -> "TaskList":
        """These tasks less those ``done`` (points x blocks) marks."""
        places = np.asarray(self.places, dtype=np.int64)
        return TaskList(self.n_points, self.replicates, self.per_task, places[~done.reshape(-1)[places]])

    def count_done(self, done: np.ndarray) -> int:
        return int(done.reshape(-1)[np.asarray(self.places, dtype=np.int64)].sum())


def make_tasks(n_points: int, replicates: int, per_task: int) -> TaskList:
    """All tasks of a sweep, point-major, in a fixed order."""
    return TaskList(n_points, replicates, per_task)


def replicate_seeds(root: int, point: int, start: int, stop: int) -> list[np.random.SeedSequence]:
    """One independent seed per replicate of ``point`` in ``start:stop``."""
    return [np.random.SeedSequence(root, spawn_key=(point, r)) for r in range(start, stop)]


class Packer:
    """How many blocks go into one task: enough that a task is worth ``target`` seconds of a worker's time.

    Starts at one block a task, learns the seconds per block from finished tasks (kernel and
    writes: a block of tiny replicates costs its chunk writes, not its kernel time), and
    packs accordingly, never more than ``most`` blocks (a bound on a task's memory). A block's
    bytes do not depend on its task, so packing changes how fast a sweep runs, never what it
    writes. ``fixed`` packs a set number instead (tests compare packings with it).
    """

    def __init__(self, target: float, most: int, fixed: int | None = None):
        self.target, self.most, self.fixed = target, max(1, most), fixed
        self._seconds = 0.0
        self._blocks = 0

    def size(self) -> int:
        if self.fixed is not None:
            return max(1, self.fixed)
        if not self._blocks or self._seconds <= 0.0:
            return 1
        per_block = self._seconds / self._blocks
        wanted = math.ceil(round(self.target / per_block, 9))  # round: 0.2 / 0.002 must give 100, not 101
        return int(min(self.most, max(1, wanted)))

    def learn(self, seconds: float, blocks: int) -> None:
        self._seconds += seconds
        self._blocks += blocks


def chunk_bytes(replicates_per_task: int, samples: int, species: int, itemsize: int = 8) -> int:
    """Bytes one block's samples take in memory (the bound ``Packer.most`` is computed from)."""
    return replicates_per_task * samples * species * itemsize
