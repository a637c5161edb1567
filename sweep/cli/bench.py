"""`sweep bench`: kernel speed in reaction events per CPU-second."""

from __future__ import annotations

from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table

from sweep.plan.bench import NETWORKS, measure, measure_spec
from sweep.cli.common import console, exits_on_errors, si

Network = StrEnum("Network", {name: name for name in NETWORKS})


@exits_on_errors
def bench(
    method: Annotated[str, typer.Option(help="Kernel method to measure.")] = "direct",
    network: Annotated[list[Network] | None, typer.Option(help="Built-in network(s); default all.")] = None,
    spec_path: Annotated[Path | None, typer.Option("--spec", help="Also measure the first point of this spec.")] = None,
    repeats: Annotated[int, typer.Option(min=1, help="Timed batches; the median is shown.")] = 5,
) -> None:
    """Print reaction events per CPU-second of a kernel on one core."""
    results = measure(method, [n.value for n in network] if network else None, repeats=repeats)
    if spec_path is not None:
        results.append(measure_spec(spec_path, repeats=repeats))
    unit = results[0].unit if results else "events"  # tau-leaping counts steps, cle steps, ode evaluations
    table = Table(title=f"Kernel speed, one core ({method})", title_justify="left")
    table.add_column("network")
    table.add_column(f"{unit} / CPU-s", justify="right")
    table.add_column(f"ns / {unit.rstrip('s')}", justify="right")
    table.add_column(f"{unit} / replicate", justify="right")
    for r in results:
        table.add_row(r.network, si(r.events_per_cpu_second), f"{1e9 / r.events_per_cpu_second:.1f}",
                      si(r.events_per_replicate))
    console.print(table)
