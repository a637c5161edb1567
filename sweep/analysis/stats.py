"""Per point and time statistics of each species' count over the replicates, lazily.

Input is ``source.valid_counts``: float counts with NaN for excluded replicates, one block per
point holding all its replicates. Every statistic is a dask-backed reduction over the
``replicate`` dimension, so nothing is read until the results are written.

=============  ===========================================================================
``n``          finished replicates used
``mean``       sample mean
``var``        sample variance (divisor n - 1)
``sd``         sample standard deviation
``cv``         coefficient of variation sd / mean (NaN where the mean is 0)
``fano``       Fano factor var / mean (NaN where the mean is 0); 1 for a Poisson count
``min/max``    smallest and largest count
``m3, m4``     third and fourth central sample moments (divisor n), for standard errors
``quantiles``  quantiles (linear interpolation between order statistics, Hyndman & Fan type 7)
``fraction``   fraction of replicates meeting each threshold (dim ``threshold``)
=============  ===========================================================================
"""

from __future__ import annotations

import operator
from typing import Sequence

import numpy as np
import xarray as xr

from sweep.analysis import statistics
from sweep.analysis.options import Threshold

COMPARE = {">=": operator.ge, ">": operator.gt, "<=": operator.le, "<": operator.lt}


def moments(x: xr.DataArray, quantiles: Sequence[float] = ()) -> xr.Dataset:
    """Mean, variance, sd, cv, Fano factor, min, max, m3, m4 and quantiles over ``replicate``.

    The moments come from one pass over each block (``_block_moments``) rather than one
    dask reduction each, which would read and mask the counts once per statistic.

    Example
    -------
    >>> x = xr.DataArray([[1.0, 2.0, 3.0, np.nan]], dims=("point", "replicate"))
    >>> float(moments(x)["fano"][0])
    0.5
    """
    packed = xr.apply_ufunc(
        _block_moments, x, input_core_dims=[["replicate"]], output_core_dims=[["moment"]],
        dask="parallelized", output_dtypes=[np.float64], dask_gufunc_kwargs={"output_sizes": {"moment": len(_MOMENTS)}},
    )
    parts = {name: packed.isel(moment=i, drop=True) for i, name in enumerate(_MOMENTS)}
    n, mean, var = parts["n"], parts["mean"], parts["var"]
    sd = np.sqrt(var)
    positive = mean.where(mean > 0)  # NaN, not a 0/0 warning, where the mean is 0
    out = xr.Dataset({
        "n": n.astype(np.int32), "mean": mean, "var": var, "sd": sd, "cv": sd / positive, "fano": var / positive,
        "min": parts["min"], "max": parts["max"], "m3": parts["m3"], "m4": parts["m4"],
    })
    if len(quantiles):
        q = x.quantile(list(quantiles), dim="replicate", skipna=True)
        out["quantiles"] = q.transpose(*x.dims[:1], "quantile", ...)
    return _describe(out)


_MOMENTS = ("n", "mean", "var", "min", "max", "m3", "m4")


def _block_moments(values: np.ndarray) -> np.ndarray:
    """Count, mean, variance (ddof 1), min, max, m3, m4 along the last axis, NaN-aware, in one pass."""
    ok = np.isfinite(values)
    n = ok.sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        filled = np.where(ok, values, 0.0)
        mean = filled.sum(axis=-1) / n
        d = np.where(ok, values - mean[..., None], 0.0)
        d2 = d * d
        var = d2.sum(axis=-1) / np.where(n > 1, n - 1, np.nan)
        m3 = (d2 * d).sum(axis=-1) / n
        m4 = (d2 * d2).sum(axis=-1) / n
        low = np.where(ok, values, np.inf).min(axis=-1)
        high = np.where(ok, values, -np.inf).max(axis=-1)
    empty = n == 0
    low[empty] = high[empty] = np.nan
    return np.stack([n.astype(np.float64), mean, var, low, high, m3, m4], axis=-1)


def fractions(x: xr.DataArray, thresholds: Sequence[Threshold]) -> xr.DataArray:
    """Fraction of the finished replicates meeting each threshold, dims (point, time, threshold)."""
    parts = []
    for th in thresholds:
        values = x.sel(species=th.species)
        met = COMPARE[th.op](values, th.value).where(values.notnull())
        parts.append(met.mean("replicate").drop_vars("species", errors="ignore"))
    out = xr.concat(parts, dim="threshold").transpose("point", "time", "threshold")
    out.attrs["long_name"] = statistics.BY_NAME["fraction"].description
    return out.assign_coords(threshold=np.array([th.label for th in thresholds], dtype=object))


_DESCRIPTIONS = {
    **{s.name: s.description for s in statistics.TABLE if s.kind != "threshold"},
    "m3": "third central moment (divisor n)", "m4": "fourth central moment (divisor n)",
    "quantiles": "quantiles of the count (linear interpolation, Hyndman & Fan type 7)",
}


def _describe(ds: xr.Dataset) -> xr.Dataset:
    for name, text in _DESCRIPTIONS.items():
        if name in ds:
            ds[name].attrs["long_name"] = text
    return ds
