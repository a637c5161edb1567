"""Figures of per-point summaries: sensitivity indices, and a statistic over two grid parameters."""

from __future__ import annotations

from pathlib import Path
from typing import Mapping

import numpy as np

from sweep.analysis import source, stats
from sweep.analysis.options import Output
from sweep.analysis.report import open_analysis
from sweep.errors import SpecError
from sweep.plot.style import figure, species_of, with_style

_LABELS = {"prcc": "PRCC (partial rank correlation)", "sobol": "Sobol index", "morris": "elementary effect"}


@with_style
def sensitivity(path: str | Path, statistic: str | None = None, species: str | None = None,
                threshold: str | None = None, time: float | None = None):
    """Bar chart of the sensitivity indices of one output, with confidence intervals as error bars.

    The output is the first one that ``sweep analyze`` wrote matching ``statistic``, ``species``,
    ``threshold`` and ``time``. PRCC bars are starred by p-value (* < 0.05, ** < 0.01, *** < 0.001),
    the stars set beyond the end of the error bar and explained in the figure; Sobol shows
    first-order (S1) and total (ST) indices; Morris shows mu*, mu and sigma. A design with
    conditions gets one panel per condition. An index that could not be computed (too few points
    with a value) is drawn as no bar and named in the figure.

    Raises
    ------
    StoreError
        The store has not been analysed.
    SpecError
        No analysed output matches.
    """
    from sweep.plot.style import PALETTE, panels

    table = open_analysis(path, "sensitivity").to_dataframe()
    rows = _matching(table, statistic, species, threshold, time)
    rows = rows[rows["index"] != "S2"]
    first = rows.iloc[0]
    unit = source.open_store(Path(path)).attrs.get("time_unit") or None
    output = Output(str(first["statistic"]), str(first["species"]),
                    None if not np.isfinite(first["time"]) else float(first["time"]), str(first["threshold"]) or None,
                    unit)
    parameters = list(dict.fromkeys(rows["parameter"]))
    indices = list(dict.fromkeys(rows["index"]))
    conditions = list(dict.fromkeys(rows["condition"].astype(str)))
    if len(conditions) > 1:
        fig, axes, _ = panels(len(conditions), sharey=True)
    else:
        fig, ax = figure()
        axes = [ax]
    method = str(first["method"])
    width = 0.8 / len(indices)
    missing = []
    for ax, condition in zip(axes, conditions):
        for k, index in enumerate(indices):
            part = rows[(rows["index"] == index) & (rows["condition"].astype(str) == condition)]
            part = part.set_index("parameter").reindex(parameters)
            at = np.arange(len(parameters)) - 0.4 + width * (k + 0.5)
            values = part["value"].to_numpy(dtype=float)
            low, high = part["conf_low"].to_numpy(float), part["conf_high"].to_numpy(float)
            errors = np.vstack([values - low, high - values])
            ax.bar(at, np.nan_to_num(values), width * 0.9, yerr=np.nan_to_num(np.abs(errors)), capsize=4,
                   color=PALETTE[k % len(PALETTE)], label=index if method != "prcc" else "PRCC, 95 % interval")
            missing += [f"{name} ({index})" for name, v in zip(parameters, values) if not np.isfinite(v)]
            if method == "prcc":
                _stars(ax, at, values, np.where(values >= 0, high, low), part["p_value"].to_numpy(float))
        ax.axhline(0, color="black", lw=0.8)
        if method == "prcc":
            ax.set_ylim(-1.3, 1.3)
        ax.set_xticks(np.arange(len(parameters)), parameters)
        if condition:
            ax.set_title(condition, fontsize=12)
    from sweep.plot.style import label_axes

    label_axes(fig, axes, len(axes) == 1, "parameter", _LABELS.get(method, "index"))
    points = f"{int(first['points'])} points"
    if "design_points" in first and np.isfinite(first["design_points"]) and first["design_points"] > first["points"]:
        points = f"{int(first['points'])} of {int(first['design_points'])} points"
    fig.suptitle(f"Sensitivity of the {output.description} ({method}, {points})", fontsize=14)
    notes = []
    if method == "prcc":
        notes.append("* p < 0.05, ** p < 0.01, *** p < 0.001 (t-test of the PRCC, Marino et al. 2008)")
    if missing:
        notes.append(f"not computed (too few points with a value): {', '.join(dict.fromkeys(missing))}")
    from matplotlib.lines import Line2D

    handles, labels = axes[0].get_legend_handles_labels()
    handles += [Line2D([], [], ls="none") for _ in notes]  # notes as legend lines: laid out, never overlapping
    fig.legend(handles, labels + notes, loc="outside lower center", ncols=1, frameon=False, handlelength=1.5)
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


def _stars(ax, at, values, ends, p_values) -> None:
    """Stars beyond the far end of each error bar (``ends``), so no bar or interval hides them."""
    for x, v, end, p in zip(at, values, ends, p_values):
        if not np.isfinite(p):
            continue
        mark = "***" if p < 0.001 else "**" if p < 0.01 else "*" if p < 0.05 else ""
        if mark:
            tip = end if np.isfinite(end) else v
            ax.annotate(mark, (x, tip), xytext=(0, 3 if v >= 0 else -3), textcoords="offset points", ha="center",
                        va="bottom" if v >= 0 else "top", fontsize=13)


@with_style
def heatmap(path: str | Path, statistic: str = "fano", species: str | None = None, time: float | None = None,
            x: str | None = None, y: str | None = None, fixed: Mapping[str, float] | None = None,
            threshold: str | None = None):
    """``statistic`` of ``species`` at ``time`` over two parameters of a grid, one cell per point.

    Every statistic of ``sweep analyze`` can be drawn: ``mean``, ``var``, ``sd``, ``cv`` and
    ``fano`` of a species' count, and, with ``threshold`` (e.g. ``"protein>=500"``), the
    ``fraction`` meeting it at ``time``, the mean first-passage time ``passage_mean`` and the
    fraction that ``never`` meets it. Parameters other than ``x`` and ``y`` must be held at one
    value: give it in ``fixed`` (the nearest level is used) unless the design has only one.
    """
    from sweep.analysis import passage
    from sweep.analysis.options import STATISTICS, THRESHOLD_STATISTICS, parse_threshold

    if statistic not in STATISTICS:
        raise SpecError("sweep plot", "--statistic", "not a statistic", statistic, f"choose from: {', '.join(STATISTICS)}")
    th = None
    if statistic in THRESHOLD_STATISTICS:
        if threshold is None:
            raise SpecError("sweep plot", "--statistic", f"{statistic} needs a threshold", statistic,
                            'add e.g. --threshold "protein>=500"')
        th = parse_threshold(threshold, "sweep plot")
        species = th.species
    ds = source.open_store(Path(path))
    unit = ds.attrs.get("time_unit") or None
    species = species_of(ds, species)
    t = source.time_index(ds, time, "sweep plot")
    names = [str(p) for p in ds["param"].values]
    x, y = _axes(names, x, y)
    params = ds["params"].values
    rows = _held(params, names, {x, y}, dict(fixed or {}))
    ti = int(np.flatnonzero(ds["time"].values == t)[0])
    if th is None:
        counts = source.valid_counts(ds.isel(point=rows, time=[ti]), species)
        values = stats.moments(counts)[statistic].isel(time=0).values
    elif statistic == "fraction":
        counts = source.valid_counts(ds.isel(point=rows, time=[ti]), [species])
        values = stats.fractions(counts, [th]).isel(time=0, threshold=0).values
    else:
        counts = source.valid_counts(ds.isel(point=rows), [species])
        values = passage.first_passage(counts, [th])[statistic].isel(threshold=0).values
    xs, ys = np.unique(params[rows, names.index(x)]), np.unique(params[rows, names.index(y)])
    if xs.size * ys.size > 2 * rows.size:
        raise SpecError("sweep plot", "heatmap", f"{x} and {y} do not form a grid in this design",
                        fix="a heatmap needs a grid design; use `sweep plot STORE sensitivity` for sampled designs")
    grid = np.full((ys.size, xs.size), np.nan)
    for value, row in zip(values, rows):
        grid[np.searchsorted(ys, params[row, names.index(y)]), np.searchsorted(xs, params[row, names.index(x)])] = value
    output = Output(statistic, species, t if statistic not in ("passage_mean", "never") else None,
                    th.label if th else None, unit)
    fig, ax = figure()
    image = ax.imshow(grid, origin="lower", aspect="auto", cmap="viridis")
    _annotate(ax, grid)
    ax.set_xticks(np.arange(xs.size), [f"{v:g}" for v in xs])
    ax.set_yticks(np.arange(ys.size), [f"{v:g}" for v in ys])
    ax.set_xlabel(x)
    ax.set_ylabel(y)
    held = ", ".join(f"{n}={params[rows[0], names.index(n)]:g}" for n in names if n not in (x, y))
    ax.set_title(output.description[0].upper() + output.description[1:] + (f" ({held})" if held else ""), wrap=True)
    label = output.description + (f" ({unit})" if statistic == "passage_mean" and unit else "")
    fig.colorbar(image, ax=ax, label=label)
    if np.isnan(grid).any():
        ax.text(0.0, -0.16, "blank cells: undefined (no finished replicate, or a zero mean)", transform=ax.transAxes,
                fontsize=12, ha="left", va="top")
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
