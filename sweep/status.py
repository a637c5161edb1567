"""Summarise a results store: tasks done, failed and pending, replicates stopped early,
the spec it holds, who is writing it; and verify the chunks of tasks marked done."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import zarr

from sweep import claims, lock, records, store


@dataclass(frozen=True)
class FailedPoint:
    point: int
    block: int
    params: dict[str, float]
    error: str


@dataclass(frozen=True)
class StoreStatus:
    path: Path
    points: int
    replicates: int
    tasks_total: int
    tasks_done: int
    failed: tuple[FailedPoint, ...]
    capped: int
    numerical: int
    method: str
    root_seed: int
    spec_sha256: str
    spec_path: str
    created: str
    last_run: str | None
    param_names: tuple[str, ...]
    species: tuple[str, ...]
    writer: lock.Holder | None
    writer_alive: bool | None
    shards: tuple[claims.Claim, ...] = ()  # claims of `sweep run --shard` processes, live or stale
    adaptive: dict | None = None  # a [run.adaptive] sweep's rounds so far (sweep.adaptive.Outcome.summary)

    @property
    def tasks_not_needed(self) -> int:
        """Tasks an adaptive sweep has not asked for (so far): their points met the target earlier."""
        return int(self.adaptive.get("tasks_not_needed", 0)) if self.adaptive else 0

    @property
    def tasks_pending(self) -> int:
        """Tasks not done, failed ones included (an adaptive sweep's: of those it asked for)."""
        return max(self.tasks_total - self.tasks_done - self.tasks_not_needed, 0)


def status(path: str | Path) -> StoreStatus:
    """Read a store's completion record and attributes (no trajectories are read).

    Raises
    ------
    StoreError
        If ``path`` holds no results store.
    """
    path = Path(path)
    attrs = store.attributes(path)
    g = zarr.open_group(path, mode="r")
    done = store.read_done(path)  # `done` merged with the records of shards not folded yet
    codes = g["status"][:]
    names = tuple(str(v) for v in g["param"][:])
    params = g["params"][:]
    failed = tuple(FailedPoint(f["point"], f["block"], dict(zip(names, map(float, params[f["point"]]))), f["error"])
                   for f in _failures(attrs, path) if not done[f["point"], f["block"]])
    writer = lock.read(path)
    return StoreStatus(
        path=path, points=done.shape[0], replicates=codes.shape[1], tasks_total=done.size,
        tasks_done=int(done.sum()), failed=failed, capped=int(np.count_nonzero(codes == 1)),
        numerical=int(np.count_nonzero(codes == 2)), method=attrs["method"], root_seed=attrs["root_seed"],
        spec_sha256=attrs["spec_sha256"], spec_path=attrs.get("spec_path", ""), created=attrs.get("created", ""),
        last_run=attrs.get("last_run"), param_names=names, species=tuple(str(v) for v in g["species"][:]),
        writer=writer, writer_alive=None if writer is None else (not lock.is_stale(writer)
                                                                 if lock.is_stale(writer) is not None else None),
        shards=tuple(claims.list_claims(path)), adaptive=attrs.get("adaptive"))


def _failures(attrs: dict, path: Path) -> list[dict]:
    """Failures in the attributes and in shards' records not folded yet (a shard's are newer)."""
    by_task = {(f["point"], f["block"]): f for f in attrs.get("failed_tasks", [])}
    by_task.update({(f["point"], f["block"]): f for f in records.read_failures(path)})
    return [by_task[k] for k in sorted(by_task)]


def verify(path: str | Path, repair: bool = True) -> list[tuple[int, int, str]]:
    """Re-read every chunk of every task marked done; unmark the bad ones so a rerun repairs them.

    Returns
    -------
    list of (point, block, problem)

    Raises
    ------
    StoreError
        If ``path`` holds no results store, or (with ``repair``) another run holds its lock.
    """
    path = Path(path)
    attrs = store.attributes(path)
    done = store.read_done(path)
    problems = store.verify(path, done, int(attrs["replicates_per_task"]))
    if problems and repair:
        me = lock.acquire(path)
        try:
            claims.settle(path)  # refuses while shards run; afterwards `done` alone is the record
            done = store.read_done(path)
            for point, block, _ in problems:
                done[point, block] = False
            store.write_done(path, done)
            store.consolidate(path)
        finally:
            lock.release(path, me)
    return problems
