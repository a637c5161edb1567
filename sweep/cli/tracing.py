"""`sweep trace`: recompute one replicate exactly, with its event log."""

from __future__ import annotations

import csv
from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table

from sweep.cli.common import (EXIT_FAILED_TASKS, POINT_FORMS, console, errors, exits_on_errors, expand_points,
                              parse_points, shown, store_path)
from sweep.errors import SpecError

_STATUS = {0: "finished", 1: "stopped at the event cap", 2: "numerical failure"}


@exits_on_errors
def trace(
    store: Annotated[Path, typer.Argument(metavar="STORE", help="A results store written by `sweep run` (or its spec).")],
    point: Annotated[str, typer.Option("--point", "-p", help=f"Parameter point (0-based), written as everywhere ({POINT_FORMS}); a trace takes one.")],
    replicate: Annotated[int, typer.Option("--replicate", "-r", help="Replicate index within the point (0-based).")],
    output: Annotated[Path | None, typer.Option("--output", "-o", help="Write the whole event log to this CSV file.")] = None,
    show: Annotated[int, typer.Option(min=0, help="Events to print.")] = 20,
) -> None:
    """Recompute one replicate from its seed, show its event log, and check it against the store."""
    import sweep

    store = store_path(store)
    chosen = expand_points(parse_points([point], "--point", "sweep trace"), sweep.status(store).points, "--point",
                           str(store))
    if len(chosen) != 1:
        raise SpecError("sweep trace", "--point", f"names {len(chosen)} points; a trace recomputes one replicate "
                        "of one point", point, "give one point, e.g. --point 3")
    from sweep.execute.trace import trace as trace_replicate  # zarr: only when a store is read

    tr = trace_replicate(store, chosen[0], replicate)
    params = ", ".join(f"{k}={v:g}" for k, v in tr.params.items()) or "(no varied parameters)"
    console.print(f"point {tr.point} ({shown(params)}), replicate {tr.replicate}: {tr.events:,} events, "
                  f"{_STATUS.get(tr.status, tr.status)}", highlight=False)
    table = Table(title=f"First {min(show, tr.events)} of {tr.events:,} events", title_justify="left")
    for col in ("#", "time", "reaction", *tr.species):
        table.add_column(shown(col), justify="right" if col != "reaction" else "left", overflow="fold")
    for i in range(min(show, tr.events)):
        table.add_row(str(i + 1), f"{tr.times[i]:.6g}", shown(tr.reactions[tr.fired[i]]), *map(str, tr.states[i]))
    console.print(table)
    if output is not None:
        _write_csv(output, tr)
        console.print(f"wrote {tr.events:,} events to {shown(output)}", highlight=False, soft_wrap=True)
    if tr.matches_store is None:
        console.print("not compared: this replicate's task is not done in the store yet")
    elif tr.matches_store:
        console.print(f"[green]matches the store[/]: all {tr.counts.size:,} sampled counts are identical")
    else:
        differ = int((tr.counts != tr.stored_counts).sum())
        errors.print(f"[bold red]differs from the store[/] in {differ:,} of {tr.counts.size:,} sampled counts")
        raise typer.Exit(EXIT_FAILED_TASKS)


def _write_csv(path: Path, tr) -> None:
    import os

    partial = path.with_name(f".{path.name}.partial")
    try:
        with partial.open("w", newline="", encoding="utf-8") as f:
            out = csv.writer(f)
            out.writerow(["event", "time", "reaction", *tr.species])
            for i in range(tr.events):
                out.writerow([i + 1, repr(float(tr.times[i])), tr.reactions[tr.fired[i]], *tr.states[i].tolist()])
        os.replace(partial, path)
    except OSError as exc:
        partial.unlink(missing_ok=True)
        raise SpecError("sweep trace", "--output", f"cannot write: {exc.strerror or exc}", str(path)) from exc
