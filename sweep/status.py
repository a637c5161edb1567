"""Summarise a results store: tasks done, replicates stopped early, the spec it holds."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import zarr

from sweep import store


@dataclass(frozen=True)
class StoreStatus:
    path: Path
    points: int
    replicates: int
    tasks_total: int
    tasks_done: int
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

    @property
    def tasks_pending(self) -> int:
        return self.tasks_total - self.tasks_done


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
    done = g["done"][:]
    status_codes = g["status"][:]
    return StoreStatus(
        path=path, points=done.shape[0], replicates=status_codes.shape[1], tasks_total=done.size,
        tasks_done=int(done.sum()), capped=int(np.count_nonzero(status_codes == 1)),
        numerical=int(np.count_nonzero(status_codes == 2)), method=attrs["method"],
        root_seed=attrs["root_seed"], spec_sha256=attrs["spec_sha256"], spec_path=attrs.get("spec_path", ""),
        created=attrs.get("created", ""), last_run=attrs.get("last_run"),
        param_names=tuple(str(v) for v in g["param"][:]), species=tuple(str(v) for v in g["species"][:]))
