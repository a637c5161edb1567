"""Figures of per-point summaries: sensitivity indices, and a statistic over two grid parameters."""

from __future__ import annotations

from pathlib import Path
from typing import Mapping

import numpy as np

from sweep.analysis import source, stats
from sweep.analysis.options import SPECIES_STATISTICS, Output
from sweep.analysis.report import open_analysis
from sweep.errors import SpecError
from sweep.plot.style import figure, species_of, with_style

_LABELS = {"prcc": "PRCC (partial rank correlation)", "sobol": "Sobol index", "morris": "elementary effect"}
_COLORS = ("#1b6ca8", "#d1495b", "#2e933c", "#8e5ea2", "#e08e0b", "#5f6b73")


@with_style
def sensitivity(path: str | Path, statistic: str | None = None, species: str | None = None,
                threshold: str | None = None, time: float | None = None):
    """Bar chart of the sensitivity indices of one output, with confidence intervals as error bars.

    The output is the first one that ``sweep analyze`` wrote matching ``statistic``, ``species``,
    ``threshold`` and ``time``. PRCC bars are starred by p-value (* < 0.05, ** < 0.01, *** < 0.001);
    Sobol shows first-order (S1) and total (ST) indices; Morris shows mu* and sigma.

    Raises
    ------
    StoreError
        The store has not been analysed.
    SpecError
        No analysed output matches.
    """
    table = open_analysis(path, "sensitivity").to_dataframe()
    rows = _matching(table, statistic, species, threshold, time)
    rows = rows[rows["index"] != "S2"]
    first = rows.iloc[0]
    output = Output(str(first["statistic"]), str(first["species"]),
                    None if not np.isfinite(first["time"]) else float(first["time"]), str(first["threshold"]) or None)
    parameters = list(dict.fromkeys(rows["parameter"]))
    series = list(dict.fromkeys(zip(rows["index"], rows["condition"])))
    fig, ax = figure()
    width = 0.8 / len(series)
    for k, (index, condition) in enumerate(series):
        part = rows[(rows["index"] == index) & (rows["condition"] == condition)].set_index("parameter").reindex(parameters)
        at = np.arange(len(parameters)) - 0.4 + width * (k + 0.5)
        values = part["value"].to_numpy(dtype=float)
        errors = np.vstack([values - part["conf_low"].to_numpy(float), part["conf_high"].to_numpy(float) - values])
        label = index if not condition else f"{index}, {condition}"
        ax.bar(at, np.nan_to_num(values), width * 0.9, yerr=np.nan_to_num(np.abs(errors)), capsize=4,
               color=_COLORS[k % len(_COLORS)], label=label)
        if first["method"] == "prcc":
            _stars(ax, at, values, part["p_value"].to_numpy(float))
    ax.axhline(0, color="black", lw=0.8)
    if first["method"] == "prcc":
        ax.set_ylim(-1.15, 1.15)
    ax.set_xticks(np.arange(len(parameters)), parameters)
    ax.set_xlabel("parameter")
    ax.set_ylabel(_LABELS.get(str(first["method"]), "index"))
    ax.set_title(f"Sensitivity of the {output.description} ({first['method']}, {int(first['points'])} points)",
                 wrap=True)
    if len(series) > 1 or first["method"] != "prcc":
        ax.legend(loc="best", frameon=False)
    return fig


def _matching(table, statistic, species, threshold, time):
    rows = table
    for column, wanted in (("statistic", statistic), ("species", species), ("threshold", threshold)):
        if wanted is not None:
            rows = rows[rows[column].astype(str) == wanted]
    if time is not None and len(rows):
        times = rows["time"].to_numpy(float)
        nearest = times[np.nanargmin(np.abs(times - time))] if np.isfinite(times).any() else np.nan
        rows = rows[rows["time"] == nearest]
    if not len(rows):
        outputs = ", ".join(dict.fromkeys(table["output"].astype(str))) or "(none)"
        raise SpecError("sweep plot", "--statistic/--species", "no analysed output matches", fix=f"analysed: {outputs}")
    return rows[rows["output"] == rows["output"].iloc[0]]


def _stars(ax, at, values, p_values) -> None:
    for x, v, p in zip(at, values, p_values):
        if not np.isfinite(p):
            continue
        mark = "***" if p < 0.001 else "**" if p < 0.01 else "*" if p < 0.05 else ""
        if mark:
            ax.annotate(mark, (x, v), xytext=(0, 14 if v >= 0 else -22), textcoords="offset points", ha="center")


@with_style
def heatmap(path: str | Path, statistic: str = "fano", species: str | None = None, time: float | None = None,
            x: str | None = None, y: str | None = None, fixed: Mapping[str, float] | None = None):
    """``statistic`` of ``species`` at ``time`` over two parameters of a grid, one cell per point.

    Parameters other than ``x`` and ``y`` must be held at one value: give it in ``fixed``
    (the nearest level is used) unless the design has only one.
    """
    if statistic not in SPECIES_STATISTICS:
        raise SpecError("sweep plot", "--statistic", "not a statistic of a species' count", statistic,
                        f"choose from: {', '.join(SPECIES_STATISTICS)}")
    ds = source.open_store(Path(path))
    species = species_of(ds, species)
    t = source.time_index(ds, time, "sweep plot")
    names = [str(p) for p in ds["param"].values]
    x, y = _axes(names, x, y)
    params = ds["params"].values
    rows = _held(params, names, {x, y}, dict(fixed or {}))
    ti = int(np.flatnonzero(ds["time"].values == t)[0])
    counts = source.valid_counts(ds.isel(point=rows, time=[ti]), species)
    values = stats.moments(counts)[statistic].isel(time=0).values
    xs, ys = np.unique(params[rows, names.index(x)]), np.unique(params[rows, names.index(y)])
    if xs.size * ys.size > 2 * rows.size:
        raise SpecError("sweep plot", "heatmap", f"{x} and {y} do not form a grid in this design",
                        fix="a heatmap needs a grid design; use `sweep plot STORE sensitivity` for sampled designs")
    grid = np.full((ys.size, xs.size), np.nan)
    for value, row in zip(values, rows):
        grid[np.searchsorted(ys, params[row, names.index(y)]), np.searchsorted(xs, params[row, names.index(x)])] = value
    output = Output(statistic, species, t)
    fig, ax = figure()
    image = ax.imshow(grid, origin="lower", aspect="auto", cmap="viridis")
    _annotate(ax, grid)
    ax.set_xticks(np.arange(xs.size), [f"{v:g}" for v in xs])
    ax.set_yticks(np.arange(ys.size), [f"{v:g}" for v in ys])
    ax.set_xlabel(x)
    ax.set_ylabel(y)
    held = ", ".join(f"{n}={params[rows[0], names.index(n)]:g}" for n in names if n not in (x, y))
    ax.set_title(output.description[0].upper() + output.description[1:] + (f" ({held})" if held else ""), wrap=True)
    fig.colorbar(image, ax=ax, label=output.description)
    return fig


def _axes(names, x, y) -> tuple[str, str]:
    if len(names) < 2:
        raise SpecError("sweep plot", "heatmap", f"needs two varied parameters; this sweep varies {len(names)}")
    x, y = x or names[0], y or ([n for n in names if n != (x or names[0])][0])
    for field, name in (("--x", x), ("--y", y)):
        if name not in names:
            raise SpecError("sweep plot", field, "not a varied parameter", name, f"choose from: {', '.join(names)}")
    if x == y:
        raise SpecError("sweep plot", "--y", "must differ from --x", y)
    return x, y


def _held(params, names, shown, fixed) -> np.ndarray:
    """Rows of the points where every other parameter sits at its held level."""
    keep = np.ones(params.shape[0], dtype=bool)
    for q, name in enumerate(names):
        if name in shown:
            continue
        levels = np.unique(params[:, q])
        if name in fixed:
            level = levels[np.argmin(np.abs(levels - fixed[name]))]
        elif levels.size == 1:
            level = levels[0]
        else:
            raise SpecError("sweep plot", "--fixed", f"{name} also varies", fix=f"hold it: --fixed {name}=VALUE "
                            f"(levels: {', '.join(f'{v:g}' for v in levels[:10])})")
        keep &= params[:, q] == level
    return np.flatnonzero(keep)


def _annotate(ax, grid) -> None:
    if grid.size > 144:
        return
    finite = grid[np.isfinite(grid)]
    middle = (finite.min() + finite.max()) / 2 if finite.size else 0
    for (i, j), value in np.ndenumerate(grid):
        if np.isfinite(value):
            ax.text(j, i, f"{value:.3g}", ha="center", va="center", fontsize=12,
                    color="white" if value < middle else "black")
