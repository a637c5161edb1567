"""Tasks: (point, replicate block) pairs, each with its own seeds.

Replicate r of point p draws only from ``SeedSequence(root, spawn_key=(p, r))``, so the
numbers do not depend on block size, worker count, order of execution or resumes.
"""

from __future__ import annotations

from dataclasses import dataclass

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


def make_tasks(n_points: int, replicates: int, per_task: int) -> list[Task]:
    """All tasks of a sweep, point-major, in a fixed order."""
    blocks = n_blocks(replicates, per_task)
    return [Task(p, b, b * per_task, min((b + 1) * per_task, replicates))
            for p in range(n_points) for b in range(blocks)]


def replicate_seeds(root: int, point: int, start: int, stop: int) -> list[np.random.SeedSequence]:
    """One independent seed per replicate of ``point`` in ``start:stop``."""
    return [np.random.SeedSequence(root, spawn_key=(point, r)) for r in range(start, stop)]
