"""Observables read as species: the one place a store's ``observables`` join its ``counts``.

A model's observables (``sweep.model.observables``) are stored in their own array, float64
with NaN for a replicate that did not finish; readers that take species names (statistics,
thresholds, passage times, histograms, plots, export, sensitivity) see them as more columns
of ``counts``, after the species, under their own names. A boolean coordinate
``is_observable`` along ``species`` says which columns are observables, so that masking the
unknown samples (-1) of counts never drops an observable's legitimately negative value.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from sweep.store.layout import OBSERVABLES

if TYPE_CHECKING:
    import xarray as xr

IS_OBSERVABLE = "is_observable"


def with_observables(ds: xr.Dataset) -> xr.Dataset:
    """``ds`` with its observables appended to ``counts`` along ``species`` (float64 then); unchanged
    when the store has none.

    Example
    -------
    >>> ds = with_observables(open_dataset("results/reporter.zarr"))  # doctest: +SKIP
    >>> ds["counts"].sel(species="total_protein")  # doctest: +SKIP
    """
    import xarray as xr

    if OBSERVABLES not in ds:
        return ds
    counts = ds["counts"]
    observed = ds[OBSERVABLES].rename(observable="species")
    # the store's chunks of both are one task's block: keep them aligned so a block reads both at once
    merged = xr.concat([counts.astype(np.float64), observed], dim="species", coords="minimal", compat="override")
    flags = np.r_[np.zeros(counts.sizes["species"], bool), np.ones(observed.sizes["species"], bool)]
    merged = merged.assign_coords({IS_OBSERVABLE: ("species", flags)})
    merged.attrs = dict(counts.attrs)
    return ds.drop_vars(["counts", OBSERVABLES, "species", "observable"]).assign(counts=merged)


__all__ = ["IS_OBSERVABLE", "with_observables"]
