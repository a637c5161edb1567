"""Distributions of chosen species' counts: at chosen times, and pooled over late times.

Counts are whole numbers, so bins are whole-number ranges ``bin_low <= count <= bin_high``
of equal width (1 when the counts span fewer values than ``bins``), from the smallest to the
largest count of that species; a histogram value is the fraction of finished replicates
whose count falls in the bin. A real-valued state (methods that store float counts) falls in
the bin of its integer part.

The *stationary* histogram pools every sample at times >= ``stationary_from`` (all
replicates, all those times): for an ergodic network sampled after it forgot its initial
state, that estimates the stationary distribution with more samples than a single time.
Successive samples of one replicate are correlated, so it is not more *independent* data.

Species get the same number of bins (the largest needed); unused bins of a species have NaN
edges and zero mass.
"""

from __future__ import annotations

import math
from typing import Mapping, Sequence

import numpy as np
import xarray as xr


def bin_edges(low: float, high: float, bins: int) -> tuple[int, int, int]:
    """(first value, width, number of bins) of whole-number bins covering ``low..high``.

    Example
    -------
    >>> bin_edges(0, 9, 5), bin_edges(0, 2, 50)
    ((0, 2, 5), (0, 1, 3))
    """
    if not (np.isfinite(low) and np.isfinite(high)):
        return 0, 1, 1
    low, high = int(math.floor(low)), int(math.ceil(high))
    span = high - low + 1
    width = max(1, math.ceil(span / bins))
    return low, width, math.ceil(span / width)


def histograms(x: xr.DataArray, ranges: Mapping[str, tuple[float, float]], times: Sequence[float],
               stationary_from: float | None, bins: int) -> xr.Dataset:
    """At-time and stationary histograms of each species in ``ranges`` (species -> min, max).

    ``x`` is ``source.valid_counts``; ``times`` are sample times of the store.
    """
    edges = {s: bin_edges(*ranges[s], bins) for s in ranges}
    size = max(n for _, _, n in edges.values())
    at, pooled = [], []
    for species, (low, width, n_bins) in edges.items():
        counts = _bin_counts(x.sel(species=species).drop_vars("species", errors="ignore"), low, width, size)
        if times:
            sel = counts.sel(time=list(times))
            at.append(sel / sel.sum("bin").where(lambda total: total > 0))
        if stationary_from is not None:
            late = counts.sel(time=slice(stationary_from, None)).sum("time")
            pooled.append(late / late.sum("bin").where(lambda total: total > 0))
    out = xr.Dataset(coords=_coords(edges, size))
    if at:
        hist = xr.concat(at, dim="hist_species").rename(time="hist_time")
        out["histogram"] = hist.transpose("point", "hist_time", "hist_species", "bin")
        out["histogram"].attrs["long_name"] = "fraction of finished replicates with a count in the bin"
    if pooled:
        out["stationary"] = xr.concat(pooled, dim="hist_species").transpose("point", "hist_species", "bin")
        out["stationary"].attrs.update(long_name="fraction of samples at times >= stationary_from in the bin",
                                       stationary_from=float(stationary_from))
    return out


def _coords(edges, size) -> dict:
    low = np.full((len(edges), size), np.nan)
    high = np.full((len(edges), size), np.nan)
    for i, (first, width, n_bins) in enumerate(edges.values()):
        starts = first + width * np.arange(n_bins)
        low[i, :n_bins] = starts
        high[i, :n_bins] = starts + width - 1
    return {"hist_species": np.array(list(edges), dtype=object),
            "bin_low": (("hist_species", "bin"), low, {"long_name": "smallest count in the bin"}),
            "bin_high": (("hist_species", "bin"), high, {"long_name": "largest count in the bin"})}


def _bin_counts(x: xr.DataArray, low: int, width: int, size: int) -> xr.DataArray:
    """Samples per bin at every (point, time), counting over ``replicate``; lazily."""
    return xr.apply_ufunc(
        _bincount, x, input_core_dims=[["replicate"]], output_core_dims=[["bin"]],
        dask="parallelized", output_dtypes=[np.int64],
        dask_gufunc_kwargs={"output_sizes": {"bin": size}}, kwargs={"low": low, "width": width, "size": size},
    )


def _bincount(values: np.ndarray, low: int, width: int, size: int) -> np.ndarray:
    """Histogram along the last axis for every leading index at once (one ``np.bincount``)."""
    lead = values.shape[:-1]
    rows = int(np.prod(lead))
    flat = values.reshape(rows, values.shape[-1])
    ok = np.isfinite(flat)
    index = np.clip((flat[ok] - low) // width, 0, size - 1).astype(np.int64)
    row = np.broadcast_to(np.arange(rows)[:, None], flat.shape)[ok]
    return np.bincount(row * size + index, minlength=rows * size).reshape(*lead, size)
