"""Summarise a results store: tasks done, failed and pending, replicates stopped early,
the spec it holds, who is writing it; and verify the chunks of tasks marked done."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import zarr

from sweep import store

from sweep.store import claims, integrity, lock, records
from sweep.store.chunks import read_whole
@dataclass(frozen=True)
class FailedPoint:
    point: int
    block: int
    params: dict[str, float]
    error: str


@dataclass(frozen=True)
class LostReplicates:
    """A point whose replicates were stopped at the event cap (status 1) or failed numerically (2)."""

    point: int
    run: int           # replicates with any result
    finished: int
    capped: int
    numerical: int
    params: dict[str, float]


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
    damaged: tuple[str, ...] = ()  # arrays that could not be read (`sweep status --verify` says more)
    lost: tuple[LostReplicates, ...] = ()  # points that lost replicates, fewest finished first
    max_events: int | None = None  # the event cap per replicate (run.max_events)
    low_copy: dict | None = None  # an approximate method's low-copy report (sweep.analysis.validity), if made

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
    g = zarr.open_group(path, mode="r", use_consolidated=False)
    damaged: list[str] = []
    status_array = g["status"]
    blocks = -(-status_array.shape[1] // status_array.chunks[1])
    try:
        done = store.read_done(path)  # `done` merged with the records of shards not folded yet
    except store.DamagedDone as exc:
        damaged.append(str(exc))
        done = np.zeros((status_array.shape[0], blocks), dtype=bool)
    codes = _read(g, "status", damaged, np.full(status_array.shape, -1, dtype=np.int8), direct=path)
    names = tuple(str(v) for v in _read(g, "param", damaged, np.asarray([], dtype=object)))
    params = _read(g, "params", damaged, np.full((done.shape[0], len(names)), np.nan))
    species = tuple(str(v) for v in _read(g, "species", damaged, np.asarray([], dtype=object)))
    failed = tuple(FailedPoint(f["point"], f["block"], _params_of(names, params, f["point"]), f["error"])
                   for f in _failures(attrs, path) if not done[f["point"], f["block"]])
    writer = lock.read(path)
    return StoreStatus(
        path=path, points=done.shape[0], replicates=codes.shape[1], tasks_total=done.size,
        tasks_done=int(done.sum()), failed=failed, capped=int(np.count_nonzero(codes == 1)),
        numerical=int(np.count_nonzero(codes == 2)), method=attrs["method"], root_seed=attrs["root_seed"],
        spec_sha256=attrs["spec_sha256"], spec_path=attrs.get("spec_path", ""), created=attrs.get("created", ""),
        last_run=attrs.get("last_run"), param_names=names, species=species,
        writer=writer, writer_alive=None if writer is None else (not lock.is_stale(writer)
                                                                 if lock.is_stale(writer) is not None else None),
        shards=tuple(claims.list_claims(path)), adaptive=attrs.get("adaptive"), damaged=tuple(damaged),
        lost=_lost(codes, names, params), max_events=attrs.get("max_events"), low_copy=_low_copy(path, attrs))


def _lost(codes: np.ndarray, names: tuple[str, ...], params: np.ndarray) -> tuple[LostReplicates, ...]:
    capped, numerical = (codes == 1).sum(axis=1), (codes == 2).sum(axis=1)
    finished, run = (codes == 0).sum(axis=1), (codes >= 0).sum(axis=1)
    rows = [LostReplicates(int(p), int(run[p]), int(finished[p]), int(capped[p]), int(numerical[p]),
                           _params_of(names, params, int(p))) for p in np.flatnonzero(capped + numerical)]
    return tuple(sorted(rows, key=lambda r: (r.finished / max(r.run, 1), r.point)))


def _low_copy(path: Path, attrs: dict) -> dict | None:
    """The low-copy report: written by `sweep run` (root attribute), else by `sweep analyze`."""
    if isinstance(attrs.get("low_copy"), dict):
        return attrs["low_copy"]
    try:
        found = zarr.open_group(path, path="analysis", mode="r", use_consolidated=False).attrs.get("low_copy")
    except Exception:  # no analysis yet
        return None
    return found if isinstance(found, dict) else None


def _read(g: zarr.Group, name: str, damaged: list[str], fallback: np.ndarray,
          direct: Path | None = None) -> np.ndarray:
    """An array's values, or ``fallback`` with a note when it is missing or fails its checksum.

    With ``direct`` (the store's path) a per-task array is read file by file (``read_whole``:
    zarr's 0.5 ms a chunk made `sweep status` of a 100,000-task store take a minute).
    """
    try:
        if direct is not None:
            values = read_whole(direct, name)
            if values is not None:
                return values
        return g[name][:]
    except Exception as exc:
        damaged.append(f"{name}: unreadable ({store.brief(exc)})")
        return fallback


def _params_of(names: tuple[str, ...], params: np.ndarray, point: int) -> dict[str, float]:
    try:
        return dict(zip(names, map(float, params[point])))
    except (IndexError, ValueError):
        return {}


def _failures(attrs: dict, path: Path) -> list[dict]:
    """Failures in the attributes and in shards' records not folded yet (a shard's are newer)."""
    by_task = {(f["point"], f["block"]): f for f in attrs.get("failed_tasks", [])}
    by_task.update({(f["point"], f["block"]): f for f in records.read_failures(path)})
    return [by_task[k] for k in sorted(by_task)]


def verify(path: str | Path, repair: bool = True) -> integrity.Verification:
    """Re-read every chunk of every array; with ``repair``, unmark bad tasks so a rerun redoes them,
    rewrite damaged coordinates from the spec and rebuild a damaged completion record.

    Returns
    -------
    sweep.integrity.Verification

    Raises
    ------
    StoreError
        If ``path`` holds no results store, or (with ``repair``) another run holds its lock.
    """
    return integrity.verify(path, repair)
