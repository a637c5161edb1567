"""First-passage times: when each replicate first meets a threshold, resolved to the sample grid.

The store holds each replicate only at the sample times t_0 < t_1 < ... < t_K, so the first
passage time T of a replicate is read as T_grid = the first sample time at which the
condition holds. Hence, for every replicate:

- T <= T_grid, and for a condition that stays met once met (extinction, an absorbing state)
  T_grid - T < the sample spacing; the mean is biased upwards by about half a spacing;
- an excursion that meets the condition and leaves it again between two samples is missed,
  so for a condition that can be left again T_grid (and ``never``) are upper bounds;
- a replicate that never meets the condition at a sample time counts in ``never``; the mean,
  sd and median are over the replicates that did (conditional on passage before t_K).

Sample finely enough for the question asked (``[time] samples`` in the spec).

Results per point and threshold: ``passage_pmf`` (fraction of finished replicates whose
first passage is at each sample time, the distribution on the grid), ``passage_cdf``,
``passage_n`` (finished replicates), ``passage_crossed``, ``never``, ``passage_mean``,
``passage_sd``, ``passage_median``.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import xarray as xr

from sweep.analysis.options import Threshold
from sweep.analysis.stats import COMPARE


def first_passage(x: xr.DataArray, thresholds: Sequence[Threshold]) -> xr.Dataset:
    """First-passage distributions and their summaries, one per threshold, lazily.

    ``x`` is ``source.valid_counts`` (NaN for excluded replicates).

    Example
    -------
    >>> x = xr.DataArray([[[[3.0], [1.0], [0.0]], [[3.0], [2.0], [1.0]]]], dims=("point", "replicate", "time", "species"),
    ...                  coords={"time": [0.0, 1.0, 2.0], "species": ["A"]})
    >>> out = first_passage(x, [Threshold("A", "<=", 0)])
    >>> float(out["passage_mean"][0, 0]), float(out["never"][0, 0])
    (2.0, 0.5)
    """
    parts = [_one(x, th) for th in thresholds]
    out = xr.concat(parts, dim="threshold")
    out = out.assign_coords(threshold=np.array([th.label for th in thresholds], dtype=object))
    for name in out.data_vars:
        out[name] = out[name].transpose("point", "threshold", ...)
        out[name].attrs["long_name"] = _DESCRIPTIONS[name]
        out[name].attrs["note"] = "resolved to the sample grid (see sweep.analysis.passage)"
    return out


def _one(x: xr.DataArray, th: Threshold) -> xr.Dataset:
    values = x.sel(species=th.species).drop_vars("species", errors="ignore")
    finished = values.notnull().all("time")
    met = COMPARE[th.op](values, th.value)
    # met by time t at least once: running maximum over the grid (a cumulative sum > 0)
    reached = (met.cumsum("time") > 0).where(finished)
    n = finished.sum("replicate")
    cdf = reached.mean("replicate")
    pmf = cdf.diff("time", label="upper")
    pmf = xr.concat([cdf.isel(time=[0]), pmf], dim="time")
    crossed = cdf.isel(time=-1, drop=True)
    t = x["time"]
    some = crossed.where(crossed > 0)
    mean = (pmf * t).sum("time") / some
    second = (pmf * t ** 2).sum("time") / some
    n_crossed = (crossed * n).round().fillna(0)
    variance = (second - mean ** 2) * n_crossed / (n_crossed - 1).where(n_crossed > 1)
    return xr.Dataset({
        "passage_pmf": pmf,
        "passage_cdf": cdf,
        "passage_n": n.astype(np.int32),
        "passage_crossed": n_crossed.astype(np.int32),
        "never": (n - n_crossed) / n.where(n > 0),
        "passage_mean": mean,
        "passage_sd": np.sqrt(variance.clip(min=0)),
        # the first sample time by which half of those that ever meet it have met it
        "passage_median": t.where(cdf >= some / 2).min("time"),
    })


_DESCRIPTIONS = {
    "passage_pmf": "fraction of finished replicates first meeting the threshold at this sample time",
    "passage_cdf": "fraction of finished replicates that have met the threshold by this sample time",
    "passage_n": "finished replicates",
    "passage_crossed": "finished replicates that met the threshold at some sample time",
    "never": "fraction of finished replicates never meeting the threshold at a sample time",
    "passage_mean": "mean first-passage time of the replicates that met the threshold",
    "passage_sd": "standard deviation of the first-passage time of those replicates",
    "passage_median": "median first-passage time of those replicates",
}
