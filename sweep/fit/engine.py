"""Simulate a batch of candidates as a sweep: a table design of (candidate, condition) points.

Batch b of round t is an ordinary sweep spec (``spec.toml``, the fit spec's model, method, time
grid and replicates) over a table design (``points.csv``): point ``k * C + c`` is the k-th
candidate inside the prior under condition c, with its fitted values and the condition's fixed
values. Its root seed is ``sweep.fit.smc.batch_seed(root, t, b)``, so replicate r of that point
draws from SeedSequence(seed(root, t, b), spawn_key=(k * C + c, r)), a function of the root seed
and the round, candidate and replicate indices only. It runs through ``sweep.run`` like any
sweep, on the fit's ``Execution``: the store's completion record makes a rerun resume the batch
task by task, and every backend (a local Dask cluster, a scheduler, Slurm) serves a fit.

Load balance: the run loop streams a batch's (point, replicate block) tasks to the workers as
slots free up, packing small ones to about 0.2 s of kernel time, so a batch waits only on its
last few tasks, not on whole particles; batches are sized to hold many tasks per worker.
"""

from __future__ import annotations

import dataclasses
import os
from pathlib import Path
from typing import Callable

import numpy as np

from sweep.errors import SweepError
from sweep.fit.distances import distances
from sweep.fit.loop import Batch, Evaluated
from sweep.fit.records import Folder
from sweep.fit.smc import batch_seed
from sweep.fit.spec import FitSpec, observable_names


class Incomplete(SweepError):
    """A batch's sweep stopped before all its tasks were done (Ctrl-C, SIGTERM, failures)."""

    def __init__(self, summary, message: str):
        super().__init__(message)
        self.summary = summary


class SweepEvaluator:
    """``Evaluator`` (``sweep.fit.loop``) running each batch as a sweep on ``execution``."""

    def __init__(self, fit: FitSpec, folder: Folder, execution, on_batch: Callable | None = None):
        self.fit, self.folder, self.execution, self.on_batch = fit, folder, execution, on_batch
        spec = fit.sweep
        self.per_candidate = spec.replicates * len(fit.conditions)
        self.species = spec.model.species
        self.simulations = 0
        self.seconds = 0.0

    def simulate(self, theta: np.ndarray, folder: Path, seed: int) -> tuple[np.ndarray, np.ndarray]:
        """Run (or resume) the sweep of ``theta`` x conditions in ``folder``.

        Returns counts (particle, condition, replicate, component) at each observed component's
        time and species, and status (particle, condition, replicate).
        """
        import sweep

        folder.mkdir(parents=True, exist_ok=True)
        _replace(folder / "points.csv", self.table(theta))
        _replace(folder / "spec.toml", self.fit.batch_text(seed, (folder / "sims.zarr").resolve(), "points.csv"))
        spec = sweep.load(folder / "spec.toml")
        summary = sweep.run(spec, self.execution, on_progress=self.on_batch)
        if not summary.complete:
            raise Incomplete(summary, f"{folder} stopped: {summary.stopped or f'{len(summary.failed)} tasks failed'}")
        self.seconds += summary.seconds
        # trajectories this process simulated (a resumed sweep: only its blocks not done before)
        self.simulations += theta.shape[0] * self.per_candidate * summary.tasks_run // max(summary.tasks_total, 1)
        counts, status = _read(spec.store, self.fit, self.fit.observed.components, self.species)
        k = len(self.fit.conditions)
        return counts.reshape(theta.shape[0], k, *counts.shape[1:]), status.reshape(theta.shape[0], k, -1)

    def table(self, theta: np.ndarray) -> str:
        fixed = dict(self.fit.sweep.fixed)
        extra = self.fit.condition_parameters
        lines = [",".join(self.fit.prior.names + extra)]
        for row in theta:
            for _, values in self.fit.conditions:
                given = dict(values)
                cells = [repr(float(v)) for v in row] + [repr(given.get(n, fixed[n])) for n in extra]
                lines.append(",".join(cells))
        return "\n".join(lines) + "\n"

    def evaluate(self, batch: Batch) -> Evaluated:
        m = batch.theta.shape[0]
        observed = self.fit.observed.components
        distance = np.full(m, np.inf)
        components = np.full((m, len(observed)), np.inf)
        unfinished = np.zeros(m, dtype=np.int64)
        inside = np.flatnonzero(batch.inside)
        if inside.size == 0:
            return Evaluated(distance, components, unfinished)
        seed = batch_seed(self.fit.settings.seed, batch.round, batch.index)
        counts, status = self.simulate(batch.theta[inside], self.folder.batch_dir(batch.round, batch.index), seed)
        names = self.fit.condition_names
        sims, finished = [], []
        for comp_index, comp in enumerate(observed):
            c = names.index(comp.condition)
            sims.append(counts[:, c, :, comp_index])
            finished.append(status[:, c, :] == 0)
        d, parts = distances(self.fit.distance, self.fit.unfinished, sims, finished, observed)
        distance[inside], components[inside] = d, parts
        unfinished[inside] = (status != 0).sum(axis=(1, 2))
        return Evaluated(distance, components, unfinished)


def _read(store: Path, fit: FitSpec, observed, species) -> tuple[np.ndarray, np.ndarray]:
    """Values (points, replicates, component) at each component's time and species (or observable:
    read from the store's ``observables`` array, NaN where a replicate did not finish), and status.

    Read file by file (``sweep.store.chunks.read_whole``), not through xarray or zarr: through
    xarray's dask arrays, reading a batch's chunks back took a quarter of a demo fit's wall time
    (13 of 46 s); zarr spends 0.5 ms a chunk, 0.22 s of each demo batch.
    """
    import zarr

    from sweep.store.chunks import read_whole

    group = zarr.open_group(str(store), mode="r")

    def whole(name: str) -> np.ndarray:
        values = read_whole(store, name)
        return group[name][...] if values is None else values

    times = list(fit.sweep.times)
    t_index = [times.index(c.time) for c in observed]
    status = whole("status")
    picked = np.empty(status.shape + (len(observed),), dtype=np.float64)
    for array, names in (("counts", species), ("observables", observable_names(fit.sweep.model))):
        wanted = [k for k, c in enumerate(observed) if c.species in names]
        if wanted:
            values = whole(array)  # (point, replicate, time, species or observable)
            picked[:, :, wanted] = values[:, :, [t_index[k] for k in wanted],
                                          [names.index(observed[k].species) for k in wanted]]
    return picked, status


def _replace(path: Path, text: str) -> None:
    if path.is_file() and path.read_text(encoding="utf-8") == text:
        return
    tmp = path.with_name(f".tmp-{path.name}-{os.getpid()}")
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, path)


def with_client(execution, client, slots: int | None = None):
    """The fit's execution, on a client kept open across its batches."""
    return dataclasses.replace(execution, backend="scheduler", client=client, slots=slots)
