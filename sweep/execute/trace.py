"""Recompute one replicate of a store from its seed, with its full event log.

The spec is rebuilt from the texts kept in the store's attributes (not from the files,
which may have changed since), and the replicate's seed is SeedSequence(root,
spawn_key=(point, replicate)), exactly as in the run; so the sampled counts must equal
the stored ones bit for bit.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import zarr

import kernels
from sweep import store
from sweep.errors import KernelError, SpecError
from sweep.model import compile_network, initial_counts, rate_constants
from sweep.spec import from_text
from sweep.execute.tasks import replicate_seeds


@dataclass(frozen=True)
class ReplicateTrace:
    """One replicate recomputed: its event log, its samples, and whether they match the store."""

    point: int
    replicate: int
    params: dict[str, float]
    species: tuple[str, ...]
    reactions: tuple[str, ...]
    times: np.ndarray          # event times
    fired: np.ndarray          # reaction index of each event
    states: np.ndarray         # state after each event (events, species)
    sample_times: np.ndarray
    counts: np.ndarray         # recomputed samples (time, species)
    status: int
    events: int
    stored_counts: np.ndarray | None  # None when that replicate's task is not done yet

    @property
    def matches_store(self) -> bool | None:
        if self.stored_counts is None:
            return None
        return bool(np.array_equal(self.counts, self.stored_counts))


def trace(path: str | Path, point: int, replicate: int) -> ReplicateTrace:
    """Recompute replicate ``replicate`` of point ``point`` of the sweep in ``path``.

    Raises
    ------
    StoreError
        No store at ``path``.
    SpecError
        ``point`` or ``replicate`` out of range.
    KernelError
        The store's method cannot produce an event log.
    """
    path = Path(path)
    attrs = store.attributes(path)
    spec = from_text(attrs["spec"], attrs.get("spec_path", "spec.toml"), attrs.get("model", ""), store=path)
    g = zarr.open_group(path, mode="r")
    n_points, n_reps = g["status"].shape
    if not 0 <= point < n_points:
        raise SpecError(str(path), "--point", f"must be in 0..{n_points - 1}", point)
    if not 0 <= replicate < n_reps:
        raise SpecError(str(path), "--replicate", f"must be in 0..{n_reps - 1}", replicate)
    kernel = kernels.get(spec.method)
    if not hasattr(kernel, "trace"):
        raise KernelError(f"method {spec.method!r} keeps no event log; tracing needs an exact method")
    values = spec.values_at(g["params"][point])
    seed = replicate_seeds(spec.seed, point, replicate, replicate + 1)[0]
    times = np.asarray(spec.times)
    extra = {}
    if spec.interventions:  # else the kernel is called as before, so older stores trace the same
        from sweep.model import schedule

        extra["changes"] = schedule.build(spec.model, spec.interventions, spec.derived, values, spec.times[-1])
    log = kernel.trace(compile_network(spec.model), rate_constants(spec.model, values),
                       initial_counts(spec.model, values), times, seed, spec.max_events, **extra)
    block = replicate // int(attrs["replicates_per_task"])
    stored = g["counts"][point, replicate] if g["done"][point, block] else None
    return ReplicateTrace(point, replicate, {n: values[n] for n in spec.param_names}, spec.model.species,
                          tuple(r.name for r in spec.model.reactions), log.times, log.reactions, log.states,
                          times, log.result.counts[0], int(log.result.status[0]), int(log.result.events[0]), stored)
