"""`sweep bench`: kernel speed in reaction events per CPU-second."""

from __future__ import annotations

from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table

from sweep.bench import LARGE, LARGE_METHODS, NETWORKS, measure, measure_spec
from sweep.cli.common import console, exits_on_errors, si

Network = StrEnum("Network", {name: name for name in NETWORKS})


@exits_on_errors
def bench(
    method: Annotated[list[str] | None, typer.Option(help="Kernel method(s) to measure (repeat the option for several); default direct, or direct, nrm and cr with --large.")] = None,
    network: Annotated[list[Network] | None, typer.Option(help="Built-in network(s); default all but the large ones.")] = None,
    large: Annotated[bool, typer.Option("--large", help="Measure the networks of 100, 1,000 and 10,000 reactions (a ring of reversible hops and an invented random network).")] = False,
    spec_path: Annotated[Path | None, typer.Option("--spec", help="Also measure the first point of this spec.")] = None,
    repeats: Annotated[int, typer.Option(min=1, help="Timed batches; the median is shown.")] = 5,
) -> None:
    """Print reaction events per CPU-second of a kernel on one core."""
    methods = method or (list(LARGE_METHODS) if large else ["direct"])
    names = [n.value for n in network] if network else (list(LARGE) if large else None)
    if len(methods) > 1:
        _compare(methods, names, repeats)
        return
    results = measure(methods[0], names, repeats=repeats)
    if spec_path is not None:
        results.append(measure_spec(spec_path, repeats=repeats))
    unit = results[0].unit if results else "events"  # tau-leaping counts steps, cle steps, ode evaluations
    table = Table(title=f"Kernel speed, one core ({methods[0]})", title_justify="left")
    table.add_column("network")
    table.add_column(f"{unit} / CPU-s", justify="right")
    table.add_column(f"ns / {unit.rstrip('s')}", justify="right")
    table.add_column(f"{unit} / replicate", justify="right")
    for r in results:
        table.add_row(r.network, si(r.events_per_cpu_second), f"{1e9 / r.events_per_cpu_second:.1f}",
                      si(r.events_per_replicate))
    console.print(table)


def _compare(methods: list[str], names: list[str] | None, repeats: int) -> None:
    """Several methods side by side: ns per event, and each one's speed relative to the first."""
    by_method = {m: measure(m, names, repeats=repeats) for m in methods}
    first = by_method[methods[0]]
    table = Table(title=f"Kernel speed, one core: ns per event (speed-up over {methods[0]})", title_justify="left")
    table.add_column("network")
    for m in methods:
        table.add_column(m, justify="right")
    for i, base in enumerate(first):
        cells = []
        for m in methods:
            r = by_method[m][i]
            cells.append(f"{1e9 / r.events_per_cpu_second:.1f}" if m == methods[0] else
                         f"{1e9 / r.events_per_cpu_second:.1f} ({r.events_per_cpu_second / base.events_per_cpu_second:.2g}x)")
        table.add_row(base.network, *cells)
    console.print(table)
