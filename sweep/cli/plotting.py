"""`sweep plot`: ensemble, distribution, convergence, sensitivity and heatmap figures (PNG or SVG)."""

from __future__ import annotations

from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

from sweep.cli.common import console, exits_on_errors
from sweep.errors import SpecError


class Kind(StrEnum):
    ensemble = "ensemble"
    distribution = "distribution"
    convergence = "convergence"
    sensitivity = "sensitivity"
    heatmap = "heatmap"


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
def plot(
    store: Annotated[Path, typer.Argument(metavar="STORE", help="A results store written by `sweep run`.")],
    kind: Annotated[Kind, typer.Argument(help="Figure: ensemble, distribution, convergence, sensitivity (after `sweep analyze`) or heatmap.")],
    output: Annotated[Path | None, typer.Option("--output", "-o", help="Image file, .png or .svg (default: <store>_analysis/<kind>.png).")] = None,
    species: Annotated[str | None, typer.Option(help="Species (default: the last one of the model).")] = None,
    point: Annotated[list[int] | None, typer.Option("--point", "-p", help="Point to draw (repeat; default: up to 4 spread over the design).")] = None,
    time: Annotated[float | None, typer.Option(help="Sample time (default: the last).")] = None,
    statistic: Annotated[Statistic | None, typer.Option("--statistic", "-s", help="Statistic (convergence, heatmap: default fano; sensitivity: the first analysed).")] = None,
    threshold: Annotated[str | None, typer.Option(help='Sensitivity of a threshold statistic, e.g. "protein>=500".')] = None,
    x: Annotated[str | None, typer.Option("--x", help="Heatmap: parameter across (default: the first varied).")] = None,
    y: Annotated[str | None, typer.Option("--y", help="Heatmap: parameter up (default: the second varied).")] = None,
    fixed: Annotated[list[str] | None, typer.Option("--fixed", help="Heatmap: hold another parameter, NAME=VALUE (repeat).")] = None,
    samples: Annotated[int, typer.Option(min=0, help="Ensemble: sample trajectories per point.")] = 3,
    time_unit: Annotated[str | None, typer.Option(help='Unit of time for the axis labels, e.g. "min".')] = None,
) -> None:
    """Draw one figure of STORE and save it (PNG at 150 dpi, or SVG by the file suffix)."""
    from sweep import plot as plots

    stat = str(statistic) if statistic else None
    if kind is Kind.ensemble:
        fig = plots.ensemble(store, species, point, samples=samples, time_unit=time_unit)
    elif kind is Kind.distribution:
        fig = plots.distribution(store, species, time, point, time_unit=time_unit)
    elif kind is Kind.convergence:
        fig = plots.convergence(store, stat or "fano", species, time, point, time_unit=time_unit)
    elif kind is Kind.sensitivity:
        fig = plots.sensitivity(store, stat, species, threshold, time)
    else:
        fig = plots.heatmap(store, stat or "fano", species, time, x, y, _fixed(fixed or ()))
    target = output or store.parent / f"{store.stem}_analysis" / f"{kind}.png"
    plots.save(fig, target)
    console.print(f"wrote {target}", highlight=False)


def _fixed(items) -> dict[str, float]:
    out = {}
    for item in items:
        name, sep, value = item.partition("=")
        try:
            out[name.strip()] = float(value)
        except ValueError:
            sep = ""
        if not sep:
            raise SpecError("sweep plot", "--fixed", "not NAME=VALUE", item, "e.g. --fixed k_on=0.1")
    return out
