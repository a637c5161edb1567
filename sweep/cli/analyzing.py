"""`sweep analyze`: statistics, distributions, first passage, sensitivity and replicate adequacy."""

from __future__ import annotations

from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table

from sweep.analysis.options import AnalysisOptions, parse_threshold
from sweep.cli.common import console, duration, exits_on_errors


class Statistic(StrEnum):
    mean = "mean"
    var = "var"
    sd = "sd"
    cv = "cv"
    fano = "fano"
    fraction = "fraction"
    passage_mean = "passage_mean"
    never = "never"


@exits_on_errors
def analyze(
    store: Annotated[Path, typer.Argument(metavar="STORE", help="A results store written by `sweep run`.")],
    quantile: Annotated[list[float] | None, typer.Option("--quantile", "-q", help="Quantile level to compute (repeat; default 0.05 0.25 0.5 0.75 0.95).")] = None,
    threshold: Annotated[list[str] | None, typer.Option("--threshold", help='Condition for fractions and first-passage times, e.g. "protein>=500" or "A<=0" (repeat).')] = None,
    histogram: Annotated[list[str] | None, typer.Option("--histogram", help="Species whose distribution to tabulate (repeat).")] = None,
    at_time: Annotated[list[float] | None, typer.Option("--at-time", help="Sample time of a histogram (repeat; default: the last).")] = None,
    stationary_from: Annotated[float | None, typer.Option(help="Also pool all samples from this time on into a stationary histogram.")] = None,
    bins: Annotated[int, typer.Option(min=1, help="At most this many bins per histogram.")] = 50,
    statistic: Annotated[list[Statistic] | None, typer.Option("--statistic", "-s", help="Statistic whose sensitivity and standard error to report (repeat; default mean and fano).")] = None,
    species: Annotated[list[str] | None, typer.Option("--species", help="Species of those statistics (repeat; default: all).")] = None,
    time: Annotated[float | None, typer.Option(help="Sample time of those statistics (default: the last).")] = None,
    precision: Annotated[float, typer.Option(help="Target standard error, relative to the value (0.05 = 5 %) unless --absolute.")] = 0.05,
    absolute: Annotated[bool, typer.Option("--absolute", help="--precision is in the statistic's own units.")] = False,
    tables: Annotated[Path | None, typer.Option(help="Folder for the CSV tables (default: <store>_analysis beside the store).")] = None,
    seed: Annotated[int, typer.Option(help="Seed of the bootstrap confidence intervals (Sobol, Morris).")] = 0,
) -> None:
    """Statistics, distributions, first passage, sensitivity and standard errors of a store.

    Results go into STORE (group `analysis`, read with xarray.open_zarr(STORE, group="analysis"))
    and into CSV tables.
    """
    from sweep.analysis.report import analyze as run_analysis

    options = AnalysisOptions(
        quantiles=tuple(quantile) if quantile else AnalysisOptions.quantiles,
        thresholds=tuple(parse_threshold(t) for t in threshold or ()),
        histogram_species=tuple(histogram or ()), histogram_times=tuple(at_time or ()),
        stationary_from=stationary_from, bins=bins,
        statistics=tuple(str(s) for s in statistic) if statistic else AnalysisOptions.statistics,
        species=tuple(species or ()), time=time, precision=precision, relative=not absolute,
        tables=str(tables) if tables else None, seed=seed,
    )
    with console.status("analysing..."):
        result = run_analysis(store, options)
    _sensitivity(result)
    _adequacy(result, options)
    capacity = result.points * result.replicates
    size = (f"{result.points:,} points x {result.replicates:,} replicates" if result.replicates_run in (-1, capacity)
            else f"{result.points:,} points, {result.replicates_run:,} replicates run (up to {result.replicates:,} "
                 "per point)")
    console.print(f"{size}, design {result.design}, analysed in {duration(result.seconds)}")
    console.print(f"results: xarray.open_zarr('{result.store}', group='analysis') "
                  "(and group='analysis/sensitivity', 'analysis/adequacy')", highlight=False, soft_wrap=True)
    console.print(f"tables:  {result.tables[0].parent}/ ({', '.join(p.name for p in result.tables)})",
                  highlight=False, soft_wrap=True)


def _sensitivity(result) -> None:
    table = result.sensitivity
    if result.method is None:
        console.print(f"no sensitivity method for a {result.design} design")
        return
    if table.empty:
        return
    shown = table[table["index"] != "S2"]  # second-order Sobol pairs: see sensitivity.csv
    conditions = bool(shown["condition"].astype(str).str.len().any())
    columns = ["output", *(["condition"] if conditions else []), "parameter", "index", "value", "95% CI", "p"]
    out = Table(title=f"Sensitivity ({result.method})", title_justify="left")
    for col in columns:
        out.add_column(col, justify="right" if col in ("value", "p") else "left", no_wrap=col == "95% CI")
    for _, row in shown.iterrows():
        interval = f"{row['conf_low']:.2f}..{row['conf_high']:.2f}" if row["conf_low"] == row["conf_low"] else ""
        p = f"{row['p_value']:.2g}" if row["p_value"] == row["p_value"] else ""
        value = f"{row['value']:.3f}" if row["value"] == row["value"] else f"n/a: {row['note']}"
        cells = [row["output"], *([row["condition"]] if conditions else []), row["parameter"], row["index"]]
        out.add_row(*cells, value, interval, p)
    console.print(out)


def _adequacy(result, options: AnalysisOptions) -> None:
    target = f"{options.precision:.0%} of the value" if options.relative else f"{options.precision:g}"
    out = Table(title=f"Replicate adequacy (target standard error: {target})", title_justify="left")
    for col in ("output", "points meeting it", "worst point", "its se", "replicates it needs"):
        out.add_column(col, justify="left" if col == "output" else "right")
    for label, rows in result.adequacy.groupby("output", sort=False):
        ratio = (rows["se"] / rows["target_se"]).to_numpy()
        if not (ratio == ratio).any():
            out.add_row(label, f"0 of {len(rows)}", "-", "-", "-")
            continue
        worst = rows.iloc[int(ratio.argmax() if (ratio == ratio).all() else (ratio == ratio).argmax())]
        se = f"{worst['relative_se']:.1%}" if options.relative else f"{worst['se']:.3g}"
        out.add_row(label, f"{int(rows['meets'].sum())} of {len(rows)}", str(int(worst["point"])), se,
                    f"{worst['replicates_needed']:,.0f}" if worst["replicates_needed"] == worst["replicates_needed"] else "-")
    console.print(out)
