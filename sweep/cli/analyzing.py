"""`sweep analyze`: statistics, distributions, first passage, sensitivity and replicate adequacy."""

from __future__ import annotations

from enum import StrEnum
from pathlib import Path
from typing import Annotated

import numpy as np
import typer
from rich.table import Table

from sweep.analysis.options import STATISTICS, AnalysisOptions, parse_threshold
from sweep.cli.common import TIME_FORMS, console, duration, exits_on_errors, parse_times, shown, store_path

#: the most rows a list of points prints (the CSV tables hold them all)
SHOW_ROWS = 12


Statistic = StrEnum("Statistic", {name: name for name in STATISTICS})  # the one table (sweep.analysis.statistics)


@exits_on_errors
def analyze(
    store: Annotated[Path, typer.Argument(metavar="STORE", help="A results store written by `sweep run` (or its spec).")],
    quantile: Annotated[list[float] | None, typer.Option("--quantile", "-q", help="Quantile level to compute (repeat; default 0.05 0.25 0.5 0.75 0.95).")] = None,
    threshold: Annotated[list[str] | None, typer.Option("--threshold", help='Condition for fractions and first-passage times, e.g. "protein>=500" or "A<=0" (repeat).')] = None,
    histogram: Annotated[list[str] | None, typer.Option("--histogram", help="Species whose distribution to tabulate at each --time (repeat).")] = None,
    time: Annotated[list[str] | None, typer.Option("--time", "-t", help=f"Sample time of the statistics, histograms and bimodality check: {TIME_FORMS} (default: the last).")] = None,
    at_time: Annotated[list[str] | None, typer.Option("--at-time", hidden=True, help="Old spelling of --time.")] = None,
    stationary_from: Annotated[float | None, typer.Option(help="Also pool all samples from this time on into a stationary histogram.")] = None,
    bins: Annotated[int, typer.Option(min=1, help="At most this many bins per histogram.")] = 50,
    statistic: Annotated[list[Statistic] | None, typer.Option("--statistic", "-s", help="Statistic whose sensitivity and standard error to report (repeat; default mean and fano).")] = None,
    species: Annotated[list[str] | None, typer.Option("--species", help="Species of those statistics (repeat; default: all).")] = None,
    precision: Annotated[float, typer.Option(help="Target standard error, relative to the value (0.05 = 5 %) unless --absolute.")] = 0.05,
    absolute: Annotated[bool, typer.Option("--absolute", help="--precision is in the statistic's own units.")] = False,
    output: Annotated[Path | None, typer.Option("--output", "-o", help="Folder for the CSV tables (default: beside the store, named after it: results/reporter.zarr gives results/reporter_analysis).")] = None,
    tables: Annotated[Path | None, typer.Option("--tables", hidden=True, help="Old spelling of --output.")] = None,
    seed: Annotated[int, typer.Option(help="Seed of the bootstrap confidence intervals (Sobol, Morris).")] = 0,
) -> None:
    """Statistics, distributions, first passage, sensitivity and standard errors of a store.

    Results go into STORE (group `analysis`, read with xarray.open_zarr(STORE, group="analysis"))
    and into CSV tables.
    """
    from sweep.analysis.report import analyze as run_analysis

    store = store_path(store)
    folder = output or tables
    options = AnalysisOptions(
        quantiles=tuple(quantile) if quantile else AnalysisOptions.quantiles,
        thresholds=tuple(parse_threshold(t) for t in threshold or ()),
        histogram_species=tuple(histogram or ()),
        stationary_from=stationary_from, bins=bins,
        statistics=tuple(str(s) for s in statistic) if statistic else AnalysisOptions.statistics,
        species=tuple(species or ()), times=tuple(parse_times([*(time or ()), *(at_time or ())], "--time",
                                                              "sweep analyze")),
        precision=precision, relative=not absolute, tables=str(folder) if folder else None, seed=seed,
    )
    with console.status("analysing..."):
        result = run_analysis(store, options)
    _lost(result)
    _low_copy(result)
    _sensitivity(result)
    _adequacy(result, options)
    _modes(result)
    capacity = result.points * result.replicates
    size = (f"{result.points:,} points x {result.replicates:,} replicates" if result.replicates_run in (-1, capacity)
            else f"{result.points:,} points, {result.replicates_run:,} replicates run (up to {result.replicates:,} "
                 "per point)")
    console.print(f"{size}, design {shown(result.design)}, analysed in {duration(result.seconds)}")
    console.print(f"results: xarray.open_zarr({shown(repr(str(result.store)))}, group='analysis') "
                  "(and group='analysis/sensitivity', 'analysis/adequacy', 'analysis/modes')", highlight=False,
                  soft_wrap=True)
    console.print(f"tables:  {shown(result.tables[0].parent)}/ ({', '.join(shown(p.name) for p in result.tables)})",
                  highlight=False, soft_wrap=True)


def _table(title: str, columns: dict[str, str]) -> Table:
    """A table whose text columns fold rather than cut a long name at the terminal's width."""
    out = Table(title=title, title_justify="left")
    for col, justify in columns.items():
        out.add_column(shown(col), justify=justify, overflow="fold")
    return out


def _lost(result) -> None:
    """Points whose replicates were stopped at the event cap or failed numerically, and the fix."""
    lost = result.lost
    if lost is None or not len(lost):
        return
    capped = int(lost["capped"].sum())
    out = _table(f"Replicates lost: {len(lost):,} of {result.points:,} points (left out of every statistic)",
                 {"point": "right", "finished": "right", "at the event cap": "right", "numerical failure": "right"})
    order = lost.sort_values(["finished", "point"])
    for _, row in order.head(SHOW_ROWS).iterrows():
        out.add_row(str(row["point"]), f"{row['finished']:,} of {row['run']:,}", f"{row['capped']:,}",
                    f"{row['numerical']:,}")
    console.print(out)
    if len(lost) > SHOW_ROWS:
        console.print(f"... and {len(lost) - SHOW_ROWS:,} more points (fewest finished first; `sweep status` lists "
                      "them all)")
    if capped:
        cap = f" (now {result.max_events:,})" if result.max_events else ""
        console.print(f"[yellow]fix:[/] raise run.max_events{cap} in the spec and run it again into a new store "
                      "(--store PATH) or with --fresh --yes; statistics of these points leave out their busiest "
                      "replicates, so they lean towards quiet ones", highlight=False, soft_wrap=True)


def _low_copy(result) -> None:
    from sweep.analysis.validity import describe_low_copy

    lines = describe_low_copy(result.low_copy or {}, SHOW_ROWS)
    for i, line in enumerate(lines):
        console.print(("[yellow]warning:[/] " if i == 0 else "  ") + shown(line), highlight=False, soft_wrap=True)


def _sensitivity(result) -> None:
    table = result.sensitivity
    if result.method is None:
        console.print(f"no sensitivity method for a {shown(result.design)} design")
        return
    if table.empty:
        return
    rows = table[table["index"] != "S2"]  # second-order Sobol pairs: see sensitivity.csv
    conditions = bool(rows["condition"].astype(str).str.len().any())
    partial = bool((rows["points"] < rows["design_points"]).any())
    columns = ["output", *(["condition"] if conditions else []), "parameter", "index", "value", "95% CI", "p",
               *(["points"] if partial else [])]
    out = _table(f"Sensitivity ({shown(result.method)})",
                 {c: "right" if c in ("value", "p", "points") else "left" for c in columns})
    for _, row in rows.iterrows():
        interval = f"{row['conf_low']:.2f}..{row['conf_high']:.2f}" if row["conf_low"] == row["conf_low"] else ""
        p = f"{row['p_value']:.2g}" if row["p_value"] == row["p_value"] else ""
        value = f"{row['value']:.3f}" if row["value"] == row["value"] else f"n/a: {row['note']}"
        cells = [row["output"], *([row["condition"]] if conditions else []), row["parameter"], row["index"]]
        used = [f"{int(row['points'])} of {int(row['design_points'])}"] if partial else []
        out.add_row(*map(shown, cells), shown(value), interval, p, *used)
    console.print(out)


def worst_point(ratio: np.ndarray) -> int | None:
    """Index of the largest se / target among the points where it is defined (None if nowhere).

    Example
    -------
    >>> worst_point(np.array([np.nan, 0.5, 2.0, 1.0]))
    2
    """
    ratio = np.asarray(ratio, dtype=np.float64)
    if not np.isfinite(ratio).any():
        return None
    return int(np.nanargmax(np.where(np.isfinite(ratio), ratio, np.nan)))


def _adequacy(result, options: AnalysisOptions) -> None:
    target = f"{options.precision:.0%} of the value" if options.relative else f"{options.precision:g}"
    groups = list(result.adequacy.groupby("output", sort=False))
    with np.errstate(divide="ignore", invalid="ignore"):
        ratios = [(rows["se"] / rows["target_se"]).to_numpy(dtype=np.float64) for _, rows in groups]
    undefined = any((~np.isfinite(r)).any() for r in ratios)
    columns = {"output": "left", "points meeting it": "right", **({"undefined at": "right"} if undefined else {}),
               "worst point": "right", "its se": "right", "replicates it needs": "right"}
    out = _table(f"Replicate adequacy (target standard error: {target})", columns)
    for (label, rows), ratio in zip(groups, ratios):
        nowhere = [f"{int((~np.isfinite(ratio)).sum()):,} points"] if undefined else []
        worst = worst_point(ratio)
        if worst is None:
            out.add_row(shown(label), f"0 of {len(rows)}", *nowhere, "-", "-", "-")
            continue
        row = rows.iloc[worst]
        se = f"{row['relative_se']:.1%}" if options.relative else f"{row['se']:.3g}"
        needed = f"{row['replicates_needed']:,.0f}" if row["replicates_needed"] == row["replicates_needed"] else "-"
        out.add_row(shown(label), f"{int(rows['meets'].sum())} of {len(rows)}", *nowhere, str(int(row["point"])), se,
                    needed)
    console.print(out)


def _modes(result) -> None:
    """Clearly bimodal distributions, with the share of the replicates in each mode."""
    found = result.modes
    if found is None or not len(found):
        return
    unit = f" {result.time_unit}" if result.time_unit else ""
    out = _table(f"Bimodal distributions: {found['point'].nunique():,} point(s) (two-normal mixture, Ashman's D > 2; "
                 "mean and sd describe neither mode)",
                 {"point": "right", "species": "left", "time": "right", "low mode": "right", "high mode": "right"})
    for _, row in found.head(SHOW_ROWS).iterrows():
        out.add_row(str(row["point"]), shown(row["species"]), f"{row['time']:g}{shown(unit)}",
                    f"{row['low_share']:.0%} near {row['low_peak']:.4g}",
                    f"{row['high_share']:.0%} near {row['high_peak']:.4g}")
    console.print(out)
    if len(found) > SHOW_ROWS:
        console.print(f"... and {len(found) - SHOW_ROWS:,} more (modes.csv)")
