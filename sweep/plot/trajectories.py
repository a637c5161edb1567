"""Figures read straight from the trajectories: ensemble, distribution at a time, convergence.

Only finished replicates (status 0) are drawn, as in ``sweep.analysis``. Each figure reads
only the chosen points and species, so it works without ``sweep analyze``.

Up to ``MAX_OVERLAY`` (4) points share one axes, each in its own colour; more become small
multiples, one panel per point. Legends sit under the axes, outside the data. Where a point's
distribution is clearly bimodal (``sweep.analysis.modes``), the figure says so and draws the
two modes: the ensemble the mean of each mode over the times it is bimodal, the distribution
the split between the modes and the share of the replicates on each side.
"""

from __future__ import annotations

from pathlib import Path
from typing import Sequence

import numpy as np
import xarray as xr

from sweep.analysis import adequacy, distributions, modes, stats
from sweep.analysis.options import NAMES, SPECIES_STATISTICS
from sweep.analysis.source import open_store, time_index
from sweep.errors import SpecError
from sweep.plot.style import (MAX_OVERLAY, at_time, choose_points, colours, count_label, figure, finished,
                              label_axes, legend_outside, panels, point_label, species_of, time_label, with_style)


def _axes_for(chosen: list[int], sharey: bool = True):
    """One axes for all points (few), or one panel per point (many): (fig, axes per point, overlaid)."""
    if len(chosen) <= MAX_OVERLAY:
        fig, ax = figure()
        return fig, [ax] * len(chosen), True
    fig, axes, _ = panels(len(chosen), sharey=sharey)
    return fig, axes, False


def _bimodal_over_time(x: np.ndarray) -> tuple[np.ndarray, np.ndarray, list]:
    """Per sample time: the low and high mode's mean (NaN where not bimodal) and the Modes found."""
    found = [modes.bimodal(x[:, i]) for i in range(x.shape[1])]
    low = np.array([m.low_mean if m else np.nan for m in found])
    high = np.array([m.high_mean if m else np.nan for m in found])
    return low, high, found


@with_style
def ensemble(path: str | Path, species: str | None = None, points: Sequence | None = None,
             quantiles: tuple[float, float] = (0.05, 0.95), samples: int = 3, time_unit: str | None = None):
    """Mean (line) and a quantile band (shaded) of ``species`` over time, and ``samples`` trajectories.

    ``time_unit`` labels the axis when the store names no unit (``attrs["time_unit"]``).

    Example
    -------
    >>> fig = ensemble("results/reporter.zarr", "protein", points=[0, 15])  # doctest: +SKIP
    """
    from sweep.plot import style

    ds = open_store(Path(path))
    species = species_of(ds, species)
    unit = style.time_unit(ds, time_unit)
    low, high = sorted(quantiles)
    chosen = choose_points(ds, points)
    fig, axes, overlaid = _axes_for(chosen)
    palette = colours(len(chosen)) if overlaid else [style.PALETTE[0]] * len(chosen)
    t = ds["time"].values
    bimodal_points = []
    for ax, color, p in zip(axes, palette, chosen):
        x = finished(ds, p, species)
        label = f"{point_label(ds, p)} ({x.shape[0]:,} replicates)"
        if not overlaid:
            ax.set_title(point_label(ds, p), fontsize=12)
        if not x.shape[0]:
            ax.text(0.5, 0.5, "no finished replicates", transform=ax.transAxes, ha="center", fontsize=12)
            continue
        ax.fill_between(t, np.quantile(x, low, axis=0), np.quantile(x, high, axis=0), color=color, alpha=0.18, lw=0)
        for row in x[:samples]:
            ax.plot(t, row, color=color, lw=0.8, alpha=0.55, drawstyle="steps-post")
        ax.plot(t, x.mean(axis=0), color=color, lw=2.5, label=label if overlaid else None)
        m_low, m_high, found = _bimodal_over_time(x)
        if np.isfinite(m_low).any():
            first = float(t[np.flatnonzero(np.isfinite(m_low))[0]])
            bimodal_points.append((p, first))
            ax.plot(t, m_low, color=color, lw=2, ls="--", label=f"point {p}: the two modes' means (bimodal)")
            ax.plot(t, m_high, color=color, lw=2, ls="--")
    label_axes(fig, axes, overlaid, time_label(unit), count_label(species))
    title = (f"{species}: mean, {low:.0%}-{high:.0%} band, {samples} sample trajectories" if overlaid else
             f"{species}: mean (thick), {low:.0%}-{high:.0%} band (shaded), {samples} sample trajectories (thin)")
    note = ""
    if bimodal_points:
        where = ", ".join(f"point {p} from {at_time(first, unit)}" for p, first in bimodal_points[:4])
        note = f"Bimodal ({where}): dashed, each mode's mean; the mean and band describe neither mode"
    style.title(fig, title, note)
    if overlaid:
        legend_outside(fig, axes[0], columns=2 if len(chosen) > 2 else 1)
    # small multiples: the title is the key (thick line the mean, shaded the band, thin lines samples);
    # a figure legend there would collide with the shared axis labels
    return fig


@with_style
def distribution(path: str | Path, species: str | None = None, time: float | None = None,
                 points: Sequence | None = None, bins: int = 40, time_unit: str | None = None):
    """Histogram of ``species`` at ``time`` (default: the last sample) per point, the mean marked.

    Overlaid points are drawn as outlines (no filled areas hiding each other); more than
    ``MAX_OVERLAY`` points become small multiples.
    """
    from sweep.plot import style

    ds = open_store(Path(path))
    species = species_of(ds, species)
    unit = style.time_unit(ds, time_unit)
    t = time_index(ds, time, "sweep plot")
    ti = int(np.flatnonzero(ds["time"].values == t)[0])
    chosen = choose_points(ds, points)
    values = {p: finished(ds, p, species, ti) for p in chosen}
    pooled = np.concatenate([v for v in values.values()]) if values else np.zeros(0)
    first, width, n_bins = distributions.bin_edges(pooled.min(initial=0), pooled.max(initial=0), bins)
    edges = first - 0.5 + width * np.arange(n_bins + 1)
    fig, axes, overlaid = _axes_for(chosen)
    palette = colours(len(chosen)) if overlaid else [style.PALETTE[0]] * len(chosen)
    notes = []
    for ax, color, (p, x) in zip(axes, palette, values.items()):
        if not overlaid:
            ax.set_title(point_label(ds, p), fontsize=12)
        if not x.size:
            continue
        weights = np.full(x.size, 1.0 / x.size)
        if not overlaid or len(chosen) == 1:
            ax.hist(x, bins=edges, weights=weights, histtype="stepfilled", alpha=0.25, color=color)
        ax.hist(x, bins=edges, weights=weights, histtype="step", lw=2, color=color,
                label=point_label(ds, p) if overlaid else None)
        ax.axvline(x.mean(), color=color, ls="--", lw=2, label=f"point {p}: mean {x.mean():.4g}")
        found = modes.bimodal(x)
        if found is not None:
            notes.append(p)
            ax.axvline(found.split + 0.5, color=color, ls=":", lw=2,
                       label=f"point {p}: bimodal, {found.low_share:.0%} below | {found.high_share:.0%} above")
            if not overlaid or len(chosen) == 1:  # overlaid, the legend says it: labels would collide
                top = ax.get_ylim()[1]
                for where, share in ((found.low_peak, found.low_share), (found.high_peak, found.high_share)):
                    ax.annotate(f"{share:.0%}", (where, top), xytext=(0, -4), textcoords="offset points",
                                ha="center", va="top", color=color, fontsize=12, fontweight="bold")
    xlabel = f"{count_label(species)} at {at_time(t, unit)}"
    label_axes(fig, axes, overlaid, xlabel, "fraction of replicates")
    note = ""
    if notes:
        note = (f"Bimodal at point{'s' if len(notes) > 1 else ''} {', '.join(map(str, notes[:6]))}: dotted, the "
                "split between the modes; the mean describes neither mode")
    style.title(fig, f"Distribution of {species} at {at_time(t, unit)}", note)
    if overlaid:
        legend_outside(fig, axes[0], columns=2)
    else:
        for ax in axes:
            if ax.get_legend_handles_labels()[0]:
                ax.legend(*ax.get_legend_handles_labels(), loc="upper right", frameon=False, fontsize=12)
    return fig


@with_style
def convergence(path: str | Path, statistic: str = "fano", species: str | None = None, time: float | None = None,
                points: Sequence | None = None, time_unit: str | None = None):
    """``statistic`` computed from the first n finished replicates against n, with a 95 % band (+-1.96 se).

    The band uses the same delta-method standard error as the adequacy report
    (``sweep.analysis.adequacy``); a flat line well inside its final band means enough replicates.
    """
    from sweep.plot import style

    if statistic not in SPECIES_STATISTICS:
        raise SpecError("sweep plot", "--statistic", "convergence draws a statistic of a species' count", statistic,
                        f"choose from: {', '.join(SPECIES_STATISTICS)}")
    ds = open_store(Path(path))
    species = species_of(ds, species)
    unit = style.time_unit(ds, time_unit)
    t = time_index(ds, time, "sweep plot")
    ti = int(np.flatnonzero(ds["time"].values == t)[0])
    chosen = choose_points(ds, points)
    fig, axes, overlaid = _axes_for(chosen, sharey=False)
    palette = colours(len(chosen)) if overlaid else [style.PALETTE[0]] * len(chosen)
    for ax, color, p in zip(axes, palette, chosen):
        if not overlaid:
            ax.set_title(point_label(ds, p), fontsize=12)
        x = finished(ds, p, species, ti)
        if x.size < 3:
            continue
        n, value, se = _running(x, statistic)
        ax.fill_between(n, value - 1.96 * se, value + 1.96 * se, color=color, alpha=0.18, lw=0)
        ax.plot(n, value, color=color, lw=2, marker="o", ms=4, label=point_label(ds, p) if overlaid else None)
        ax.axhline(value[-1], color=color, ls=":", lw=1.2)
    for ax in set(axes):
        ax.set_xscale("log")
    label_axes(fig, axes, overlaid, "finished replicates used", f"{NAMES[statistic]} of {species}, {at_time(t, unit)}")
    style.title(fig, "Convergence with replicates (band: 95 %, delta-method se)")
    if overlaid:
        legend_outside(fig, axes[0], columns=1)
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
