"""Replicate adequacy: the standard error of each statistic at each point, against a target.

Standard errors come from the sample moments by the delta method (Casella & Berger 2002,
Statistical Inference, section 5.5.4), with m2 = the sample variance s^2, m3, m4 the central
moments and n the finished replicates:

- mean:  sqrt(m2 / n)
- variance:  sqrt((m4 - (n - 3) / (n - 1) m2^2) / n)   (the exact variance of s^2 for iid samples)
- sd:  se(variance) / (2 sd)
- Fano factor F = m2 / mean:  sqrt(((m4 - m2^2) / mean^2 - 2 m2 m3 / mean^3 + m2^3 / mean^4) / n)
- coefficient of variation:  sqrt(((m4 - m2^2) / (4 m2 mean^2) - m3 / mean^3 + m2^2 / mean^4) / n)
- a fraction p (threshold met, never met):  sqrt(p (1 - p) / n)
- mean first-passage time:  sd / sqrt(replicates that passed)

A fraction of exactly 0 or 1 has a binomial se of 0: then n only says that fewer than about
3 / n of the replicates differ (the "rule of three"). For a Poisson count the Fano factor's se is sqrt(2 / n), as the index-of-dispersion test
((n - 1) s^2 / mean ~ chi^2 with n - 1 degrees of freedom) says. They are large-sample
approximations: treat them as rough below ~30 replicates.

A point *meets* the target when se <= precision x |value| (relative, the default) or
se <= precision (absolute). ``replicates_needed`` scales n by (se / target)^2, the number
of replicates that point would need, since se falls as 1 / sqrt(n).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from sweep.analysis.options import Output


def standard_errors(moments: xr.Dataset) -> xr.Dataset:
    """``se_mean``, ``se_var``, ``se_sd``, ``se_cv``, ``se_fano`` from ``stats.moments`` output (lazy if it is)."""
    n = moments["n"].where(moments["n"] > 1)
    mean, m2, m3, m4 = moments["mean"], moments["var"], moments["m3"], moments["m4"]
    mu = mean.where(mean > 0)
    se_var = np.sqrt(((m4 - (n - 3) / (n - 1) * m2 ** 2) / n).clip(min=0))
    fano = ((m4 - m2 ** 2) / mu ** 2 - 2 * m2 * m3 / mu ** 3 + m2 ** 3 / mu ** 4) / n
    cv = ((m4 - m2 ** 2) / (4 * m2.where(m2 > 0) * mu ** 2) - m3 / mu ** 3 + m2 ** 2 / mu ** 4) / n
    out = xr.Dataset({
        "se_mean": np.sqrt(m2 / n),
        "se_var": se_var,
        "se_sd": se_var / (2 * np.sqrt(m2.where(m2 > 0))),
        "se_cv": np.sqrt(cv.clip(min=0)),
        "se_fano": np.sqrt(fano.clip(min=0)),
    })
    for name in out.data_vars:
        out[name].attrs["long_name"] = f"standard error of the {name[3:]} (delta method)"
    return out


def select(results: xr.Dataset, output: Output) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(value, standard error, replicates) of ``output`` at every point, from an analysis Dataset."""
    s = output.statistic
    if output.threshold is None:
        at = results.sel(time=output.time, species=output.species)
        return at[s].values, at[f"se_{s}"].values, at["n"].values
    th = results.sel(threshold=output.threshold)
    if s == "fraction":
        p = th["fraction"].sel(time=output.time).values
        n = results["n"].sel(time=output.time, species=output.species).values
        return p, _binomial_se(p, n), n
    n = th["passage_n"].values
    if s == "never":
        p = th["never"].values
        return p, _binomial_se(p, n), n
    crossed = th["passage_crossed"].values.astype(np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        se = th["passage_sd"].values / np.sqrt(np.where(crossed > 0, crossed, np.nan))
    return th["passage_mean"].values, se, n


def _binomial_se(p: np.ndarray, n: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.sqrt(p * (1 - p) / np.where(n > 0, n, np.nan))


def table(results: xr.Dataset, output: Output, precision: float, relative: bool = True) -> pd.DataFrame:
    """One row per point: value, se, relative se, replicates, whether it meets the target, replicates needed.

    Example
    -------
    >>> ds = xr.Dataset({"n": ("point", [100, 400]), "mean": ("point", [10.0, 10.0]), "var": ("point", [10.0, 10.0]),
    ...                  "m3": ("point", [10.0, 10.0]), "m4": ("point", [310.0, 310.0])})
    >>> ds = ds.merge(standard_errors(ds)).expand_dims(time=[1.0], species=["A"]).transpose("point", ...)
    >>> table(ds, Output("mean", "A", 1.0), 0.05)[["se", "meets", "replicates_needed"]].values.tolist()
    [[0.31622776601683794, True, 40.0], [0.15811388300841897, True, 40.0]]
    """
    value, se, n = select(results, output)
    with np.errstate(divide="ignore", invalid="ignore"):
        rse = se / np.abs(value)
        target = precision * np.abs(value) if relative else np.full_like(se, precision)
        needed = np.ceil(n * (se / target) ** 2)
    return pd.DataFrame({
        "point": np.arange(len(value)), "value": value, "se": se, "relative_se": rse, "replicates": n,
        "target_se": target, "meets": se <= target, "replicates_needed": np.where(np.isfinite(needed), needed, np.nan),
    })
