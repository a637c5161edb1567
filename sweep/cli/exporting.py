"""`sweep export`: tidy tables (CSV, Parquet) or the whole Dataset (NetCDF), streamed."""

from __future__ import annotations

from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

from sweep.cli.common import (POINT_FORMS, TIME_FORMS, console, duration, exits_on_errors, parse_points, parse_times,
                              shown, si, store_path)
from sweep.errors import SpecError


class Format(StrEnum):
    csv = "csv"
    parquet = "parquet"
    netcdf = "netcdf"


@exits_on_errors
def export(
    store: Annotated[Path, typer.Argument(metavar="STORE", help="A results store written by `sweep run` (or its spec).")],
    old_output: Annotated[Path | None, typer.Argument(metavar="OUTPUT", hidden=True, help="Old place of --output.")] = None,
    output: Annotated[Path | None, typer.Option("--output", "-o", help="File to write: .csv, .parquet or .nc.")] = None,
    format: Annotated[Format | None, typer.Option("--format", "-f", help="Format (default: from the --output suffix).")] = None,
    point: Annotated[list[str] | None, typer.Option("--point", "-p", help=f"Points: {POINT_FORMS} (default: all).")] = None,
    species: Annotated[list[str] | None, typer.Option("--species", help="Species (repeat; default: all).")] = None,
    time: Annotated[list[str] | None, typer.Option("--time", "-t", help=f"Sample times: {TIME_FORMS} (default: all).")] = None,
) -> None:
    """Export trajectories as a tidy CSV or Parquet table, or the whole Dataset as NetCDF.

    Table columns: point, the varied parameters, replicate, status, time, species, count.
    Written chunk by chunk, so a store larger than memory exports.
    """
    from sweep.store.export import export as run_export

    if output is not None and old_output is not None and output != old_output:
        raise SpecError("sweep export", "--output", "given twice, as --output and as a second argument",
                        f"{old_output}", "give the file once, as -o/--output FILE")
    target = output or old_output
    if target is None:
        raise SpecError("sweep export", "--output", "missing", fix="name the file to write: -o/--output FILE.csv, "
                        ".parquet or .nc")
    store = store_path(store)
    summary = run_export(store, target, format=str(format) if format else None,
                         points=parse_points(point, "--point", "sweep export"), species=species,
                         times=parse_times(time, "--time", "sweep export"))
    what = "rows" if summary.format != "netcdf" else "samples"
    console.print(f"wrote {shown(summary.path)} ({summary.format}, {si(summary.rows)} {what}, {summary.engine}) "
                  f"in {duration(summary.seconds)}", highlight=False, soft_wrap=True)
