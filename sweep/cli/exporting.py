"""`sweep export`: tidy tables (CSV, Parquet) or the whole Dataset (NetCDF), streamed."""

from __future__ import annotations

from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

from sweep.cli.common import console, duration, exits_on_errors, si
from sweep.errors import SpecError


class Format(StrEnum):
    csv = "csv"
    parquet = "parquet"
    netcdf = "netcdf"


@exits_on_errors
def export(
    store: Annotated[Path, typer.Argument(metavar="STORE", help="A results store written by `sweep run`.")],
    output: Annotated[Path, typer.Argument(metavar="OUTPUT", help="File to write: .csv, .parquet or .nc.")],
    format: Annotated[Format | None, typer.Option("--format", "-f", help="Format (default: from OUTPUT's suffix).")] = None,
    point: Annotated[list[str] | None, typer.Option("--point", "-p", help="Point index or inclusive range FIRST:LAST (repeat; default: all).")] = None,
    species: Annotated[list[str] | None, typer.Option("--species", help="Species (repeat; default: all).")] = None,
    time: Annotated[list[str] | None, typer.Option("--time", "-t", help="Sample time (nearest) or inclusive range START:END (repeat; default: all).")] = None,
) -> None:
    """Export trajectories as a tidy CSV or Parquet table, or the whole Dataset as NetCDF.

    Table columns: point, the varied parameters, replicate, status, time, species, count.
    Written chunk by chunk, so a store larger than memory exports.
    """
    from sweep.export import export as run_export

    summary = run_export(store, output, format=str(format) if format else None,
                         points=[_item(p, "--point", int) for p in point or ()], species=species,
                         times=[_item(t, "--time", float) for t in time or ()])
    what = "rows" if summary.format != "netcdf" else "samples"
    console.print(f"wrote {summary.path} ({summary.format}, {si(summary.rows)} {what}, {summary.engine}) "
                  f"in {duration(summary.seconds)}", highlight=False)


def _item(text: str, field: str, kind):
    """'3' -> 3, '0:5' -> (0, 5): a value or an inclusive range."""
    try:
        if ":" in text:
            first, last = text.split(":", 1)
            low, high = kind(first), kind(last)
            if high < low:
                raise SpecError("sweep export", field, "range end is before its start", text)
            return (low, high)
        return kind(text)
    except ValueError as exc:
        raise SpecError("sweep export", field, "not a number or a FIRST:LAST range", text) from exc
