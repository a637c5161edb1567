"""Figures read straight from the trajectories: ensemble, distribution at a time, convergence.

Only finished replicates (status 0) are drawn, as in ``sweep.analysis``. Each figure reads
only the chosen points and species, so it works without ``sweep analyze``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Sequence

import numpy as np
import xarray as xr

from sweep.analysis import adequacy, distributions, stats
from sweep.analysis.options import NAMES, SPECIES_STATISTICS
from sweep.analysis.source import open_store, time_index
from sweep.errors import SpecError
from sweep.plot.style import (choose_points, count_label, figure, finished, point_label, species_of, time_label,
                              with_style)

_COLORS = ("#1b6ca8", "#d1495b", "#2e933c", "#8e5ea2", "#e08e0b", "#5f6b73")


@with_style
def ensemble(path: str | Path, species: str | None = None, points: Sequence[int] | None = None,
             quantiles: tuple[float, float] = (0.05, 0.95), samples: int = 3, time_unit: str | None = None):
    """Mean (line) and a quantile band (shaded) of ``species`` over time, and ``samples`` trajectories.

    Example
    -------
    >>> fig = ensemble("results/reporter.zarr", "protein", points=[0, 15], time_unit="min")  # doctest: +SKIP
    """
    ds = open_store(Path(path))
    species = species_of(ds, species)
    low, high = sorted(quantiles)
    fig, ax = figure()
    t = ds["time"].values
    for i, p in enumerate(choose_points(ds, points)):
        color = _COLORS[i % len(_COLORS)]
        x = finished(ds, p, species)
        if not x.shape[0]:
            continue
        ax.fill_between(t, np.quantile(x, low, axis=0), np.quantile(x, high, axis=0), color=color, alpha=0.18, lw=0)
        for row in x[:samples]:
            ax.plot(t, row, color=color, lw=0.8, alpha=0.55, drawstyle="steps-post")
        ax.plot(t, x.mean(axis=0), color=color, lw=2.5, label=f"{point_label(ds, p)} ({x.shape[0]:,} replicates)")
    ax.set_xlabel(time_label(time_unit))
    ax.set_ylabel(count_label(species))
    ax.set_title(f"{species}: mean, {low:.0%}-{high:.0%} band, {samples} sample trajectories")
    ax.legend(loc="best", frameon=False)
    return fig


@with_style
def distribution(path: str | Path, species: str | None = None, time: float | None = None,
                 points: Sequence[int] | None = None, bins: int = 40, time_unit: str | None = None):
    """Histogram of ``species`` at ``time`` (default: the last sample) per point, the mean marked."""
    ds = open_store(Path(path))
    species = species_of(ds, species)
    t = time_index(ds, time, "sweep plot")
    ti = int(np.flatnonzero(ds["time"].values == t)[0])
    chosen = choose_points(ds, points)
    values = {p: finished(ds, p, species, ti) for p in chosen}
    pooled = np.concatenate([v for v in values.values()]) if values else np.zeros(0)
    first, width, n_bins = distributions.bin_edges(pooled.min(initial=0), pooled.max(initial=0), bins)
    edges = first - 0.5 + width * np.arange(n_bins + 1)
    fig, ax = figure()
    for i, (p, x) in enumerate(values.items()):
        if not x.size:
            continue
        color = _COLORS[i % len(_COLORS)]
        ax.hist(x, bins=edges, weights=np.full(x.size, 1.0 / x.size), histtype="stepfilled", alpha=0.25, color=color)
        ax.hist(x, bins=edges, weights=np.full(x.size, 1.0 / x.size), histtype="step", lw=1.8, color=color,
                label=f"{point_label(ds, p)}")
        ax.axvline(x.mean(), color=color, ls="--", lw=2, label=f"mean {x.mean():.4g}")
    unit = f" {time_unit}" if time_unit else ""
    ax.set_xlabel(f"{count_label(species)} at t = {t:g}{unit}")
    ax.set_ylabel("fraction of replicates")
    ax.set_title(f"Distribution of {species} at t = {t:g}{unit}")
    ax.legend(loc="best", frameon=False)
    return fig


@with_style
def convergence(path: str | Path, statistic: str = "fano", species: str | None = None, time: float | None = None,
                points: Sequence[int] | None = None, time_unit: str | None = None):
    """``statistic`` computed from the first n finished replicates against n, with a 95 % band (+-1.96 se).

    The band uses the same delta-method standard error as the adequacy report
    (``sweep.analysis.adequacy``); a flat line well inside its final band means enough replicates.
    """
    if statistic not in SPECIES_STATISTICS:
        raise SpecError("sweep plot", "--statistic", "not a statistic of a species' count", statistic,
                        f"choose from: {', '.join(SPECIES_STATISTICS)}")
    ds = open_store(Path(path))
    species = species_of(ds, species)
    t = time_index(ds, time, "sweep plot")
    ti = int(np.flatnonzero(ds["time"].values == t)[0])
    fig, ax = figure()
    for i, p in enumerate(choose_points(ds, points)):
        x = finished(ds, p, species, ti)
        if x.size < 3:
            continue
        n, value, se = _running(x, statistic)
        color = _COLORS[i % len(_COLORS)]
        ax.fill_between(n, value - 1.96 * se, value + 1.96 * se, color=color, alpha=0.18, lw=0)
        ax.plot(n, value, color=color, lw=2, marker="o", ms=4, label=point_label(ds, p))
        ax.axhline(value[-1], color=color, ls=":", lw=1.2)
    unit = f" {time_unit}" if time_unit else ""
    ax.set_xscale("log")
    ax.set_xlabel("finished replicates used")
    ax.set_ylabel(f"{NAMES[statistic]} of {species}, t = {t:g}{unit}")
    ax.set_title("Convergence with replicates (band: 95 %, delta-method se)")
    ax.legend(loc="best", frameon=False)
    return fig


def _running(x: np.ndarray, statistic: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The statistic and its standard error on the first n values, n on a geometric grid."""
    sizes = np.unique(np.geomspace(min(10, x.size), x.size, 24).astype(int))
    prefixes = np.full((sizes.size, x.size), np.nan)
    for i, n in enumerate(sizes):
        prefixes[i, :n] = x[:n]
    moments = stats.moments(xr.DataArray(prefixes, dims=("n", "replicate")))
    errors = adequacy.standard_errors(moments)
    return sizes, moments[statistic].values, errors[f"se_{statistic}"].values
