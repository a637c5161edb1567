"""The store as an analysis sees it: lazily masked counts, the design, and who may write.

Only finished replicates (status 0) count: a replicate stopped at the event cap (status 1),
one that failed numerically (2) or one not run yet (-1) is left out of every statistic as a
whole, and any sample of -1 ("unknown") is left out too. Leaving capped replicates out can
bias results towards quiet replicates; ``n`` in every result says how many were used.
"""

from __future__ import annotations

import tomllib
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from sweep import store

from sweep.store import claims, lock
from sweep.store.observed import IS_OBSERVABLE
from sweep.errors import SpecError, StoreError

GROUP = "analysis"
#: target size of one in-memory block of masked counts (float64; the reductions need a few times that)
CHUNK_BYTES = 8 * 2**20


def open_store(path: Path) -> xr.Dataset:
    """The store's root Dataset, opened lazily (dask-backed), with the model's observables as more
    species (``sweep.store.with_observables``): where every analysis resolves a species name.

    Raises
    ------
    StoreError
        No results store at ``path``.
    """
    return store.with_observables(store.open_dataset(path))


def valid_counts(ds: xr.DataArray | xr.Dataset, species: str | list[str] | None = None) -> xr.DataArray:
    """Counts as float64 with NaN for excluded replicates and unknown samples, lazily.

    Rechunked so that each block holds every replicate of its points, so per-point reductions,
    quantiles included, never cross blocks; a block holds as many points (else times, else
    species) as fit in ``CHUNK_BYTES``, however large the store.
    """
    counts = ds["counts"]
    if species is not None:
        counts = counts.sel(species=species)
    chunks = _chunks(counts.sizes)
    counts = counts.chunk({d: chunks[d] for d in counts.dims})
    finished = (ds["status"] == 0).chunk({"point": chunks["point"], "replicate": -1})
    known = counts >= 0  # -1 marks an unknown count; an observable is NaN there already and may be negative
    if IS_OBSERVABLE not in counts.coords:
        return counts.where(finished & known)
    known = known | (counts[IS_OBSERVABLE] & counts.notnull())
    # the flag has done its work: results written from these values keep the store's plain coordinates
    return counts.where(finished & known).drop_vars(IS_OBSERVABLE)


def _chunks(sizes) -> dict[str, int]:
    column = 8 * sizes["replicate"]  # one (point, time, species) across replicates, as float64
    n_t, n_s = sizes["time"], sizes.get("species", 1)
    s = n_s if column * n_t * n_s <= CHUNK_BYTES else 1
    t = n_t if column * n_t * s <= CHUNK_BYTES else max(1, CHUNK_BYTES // (column * s))
    p = max(1, CHUNK_BYTES // (column * t * s))
    return {"point": int(p), "replicate": -1, "time": int(t), "species": int(s)}


def time_index(ds: xr.Dataset, t: float | None, source: str = "sweep analyze", field: str = "--time") -> float:
    """The sample time nearest ``t`` (the last one for None).

    Raises
    ------
    SpecError
        ``t`` outside the sampled interval.
    """
    times = ds["time"].values
    if t is None:
        return float(times[-1])
    spacing = float(np.min(np.diff(times))) if times.size > 1 else 0.0
    if t < times[0] - spacing / 2 or t > times[-1] + spacing / 2:
        raise SpecError(source, field, f"outside the sampled times {times[0]:g}..{times[-1]:g}", t)
    return float(times[int(np.argmin(np.abs(times - t)))])


def sample_times(ds: xr.Dataset, wanted, source: str = "sweep analyze", field: str = "--time") -> list[float]:
    """Sample times for ``wanted``: times (the nearest sample each) and inclusive ``(start, end)``
    ranges (every sample in them), in the order given, without repeats; the last sample if empty.

    Raises
    ------
    SpecError
        A time outside the sampled interval, or a range holding no sample.
    """
    grid = ds["time"].values
    if not wanted:
        return [float(grid[-1])]
    out: list[float] = []
    for item in wanted:
        if isinstance(item, tuple):
            hit = grid[(grid >= item[0]) & (grid <= item[1])]
            if not hit.size:
                raise SpecError(source, field, f"no sample time in this range (samples {grid[0]:g}..{grid[-1]:g})",
                                f"{item[0]:g}:{item[1]:g}")
            out.extend(float(t) for t in hit)
        else:
            out.append(time_index(ds, float(item), source, field))
    return list(dict.fromkeys(out))


def check_species(ds: xr.Dataset, names, source: str = "sweep analyze", field: str = "--species") -> None:
    """Raise SpecError naming the store's species (and observables) if any of ``names`` is not one of them."""
    known = [str(s) for s in ds["species"].values]
    for name in names:
        if name not in known:
            raise SpecError(source, field, "not a species of this store", name, f"choose from: {', '.join(known)}")


def design_facts(path: Path, attrs: dict[str, Any], names: list[str]) -> dict[str, Any]:
    """The store's design facts: ``attrs["design"]`` if recorded, else rebuilt from the spec text.

    Rebuilding can fail (a table design whose CSV file moved, a design kind this version does
    not know); the facts then shrink to the kind from the spec text and the varied ``names``,
    which is all that PRCC needs.
    """
    if isinstance(attrs.get("design"), dict):
        return dict(attrs["design"])
    from sweep.design import describe
    from sweep.spec import from_text

    try:
        spec = from_text(attrs["spec"], attrs.get("spec_path", "spec.toml"), attrs.get("model", ""), store=path)
        return describe(spec.design)
    except (SpecError, KeyError):
        pass
    try:
        table = tomllib.loads(attrs.get("spec", "")).get("design", {})
    except tomllib.TOMLDecodeError:
        table = {}
    facts = {"kind": table.get("kind", "grid"), "names": list(names)}
    if isinstance(table.get("num_levels", table.get("levels")), int):
        facts["num_levels"] = table.get("num_levels", table.get("levels"))
    return facts


def check_writable(path: Path) -> None:
    """Refuse to write into a store a live ``sweep run`` is writing (its lock is never touched).

    Raises
    ------
    StoreError
        A lock whose holder is alive, or on another host where it cannot be checked; or a
        symlink inside the store (the analysis would be written where it leads).
    """
    from sweep.store import integrity
    integrity.refuse_symlinks(path)
    running = [c for c in claims.list_claims(path) if c.live is not False]
    if running:
        raise StoreError(f"{path}: shards (`sweep run --shard`) are writing this store ({running[0].describe()}); "
                         "analyze it when they have finished")
    holder = lock.read(path)
    if holder is None:
        return
    stale = lock.is_stale(holder)
    if stale is False:
        raise StoreError(f"{path}: a `sweep run` is writing this store ({holder.describe()}); "
                         "analyze it when that run has finished")
    if stale is None:
        raise StoreError(f"{path}: locked by {holder.describe()}, which cannot be checked from here; "
                         "analyze it when that run has finished (or after `sweep run --break-lock` took over)")
