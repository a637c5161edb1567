"""`sweep plot`: ensemble, distribution, convergence, sensitivity and heatmap figures (PNG, SVG or PDF)."""

from __future__ import annotations

from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

from sweep.analysis.options import STATISTICS
from sweep.cli.common import POINT_FORMS, console, exits_on_errors, parse_points, shown, store_path
from sweep.errors import SpecError


class Kind(StrEnum):
    ensemble = "ensemble"
    distribution = "distribution"
    convergence = "convergence"
    sensitivity = "sensitivity"
    heatmap = "heatmap"


Statistic = StrEnum("Statistic", {name: name for name in STATISTICS})  # the one table (sweep.analysis.statistics)


@exits_on_errors
def plot(
    store: Annotated[Path, typer.Argument(metavar="STORE", help="A results store written by `sweep run` (or its spec).")],
    kind: Annotated[Kind, typer.Argument(metavar="KIND", help="Figure: ensemble, distribution, convergence, sensitivity (after `sweep analyze`) or heatmap.")],
    output: Annotated[Path | None, typer.Option("--output", "-o", help="Image file, .png, .svg or .pdf (default: KIND.png in the tables folder beside the store: results/reporter.zarr gives results/reporter_analysis/KIND.png).")] = None,
    species: Annotated[list[str] | None, typer.Option(help="Species, once (default: the first species of the model).")] = None,
    point: Annotated[list[str] | None, typer.Option("--point", "-p", help=f"Points to draw: {POINT_FORMS} (default: up to 4 spread over the design; more than 4 are drawn as small multiples, at most 16).")] = None,
    time: Annotated[float | None, typer.Option("--time", "-t", help="Sample time (the nearest is taken; default: the last).")] = None,
    statistic: Annotated[Statistic | None, typer.Option("--statistic", "-s", help="Statistic (heatmap: any, the threshold ones with --threshold, default fano; convergence: mean, var, sd, cv or fano, default fano; sensitivity: the first analysed).")] = None,
    threshold: Annotated[str | None, typer.Option(help='Heatmap and sensitivity: the threshold of fraction, passage_mean or never, e.g. "protein>=500".')] = None,
    x: Annotated[str | None, typer.Option("--x", help="Heatmap: parameter across (default: the first varied).")] = None,
    y: Annotated[str | None, typer.Option("--y", help="Heatmap: parameter up (default: the second varied).")] = None,
    fixed: Annotated[list[str] | None, typer.Option("--fixed", help="Heatmap: hold another parameter, NAME=VALUE (repeat).")] = None,
    samples: Annotated[int, typer.Option(min=0, help="Ensemble: sample trajectories per point.")] = 3,
    time_unit: Annotated[str | None, typer.Option(hidden=True, help="Unit of time, for a store that names none.")] = None,
) -> None:
    """Draw one figure of STORE and save it (PNG at 150 dpi, or SVG or PDF by the file suffix).

    Axes show the store's time unit. Bimodal distributions are marked and their modes drawn.
    """
    from sweep import plot as plots
    from sweep.analysis.report import default_tables

    store = store_path(store)
    if species and len(species) > 1:
        raise SpecError("sweep plot", "--species", "a figure draws one species", ", ".join(species),
                        "give --species once; draw each species in a figure of its own")
    one = species[0] if species else None
    points = parse_points(point, "--point", "sweep plot") or None
    stat = str(statistic) if statistic else None
    if kind is Kind.ensemble:
        fig = plots.ensemble(store, one, points, samples=samples, time_unit=time_unit)
    elif kind is Kind.distribution:
        fig = plots.distribution(store, one, time, points, time_unit=time_unit)
    elif kind is Kind.convergence:
        fig = plots.convergence(store, stat or "fano", one, time, points, time_unit=time_unit)
    elif kind is Kind.sensitivity:
        fig = plots.sensitivity(store, stat, one, threshold, time)
    else:
        fig = plots.heatmap(store, stat or "fano", one, time, x, y, _fixed(fixed or ()), threshold=threshold)
    target = output or default_tables(store) / f"{kind}.png"
    plots.save(fig, target)
    console.print(f"wrote {shown(target)}", highlight=False, soft_wrap=True)


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
