"""`sweep bench`: kernel speed in reaction events per CPU-second; `--sweep`: whole sweeps end to end."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table

from sweep.cli.common import EXIT_BAD_INPUT, console, errors, exits_on_errors, shown, si


@exits_on_errors
def bench(
    method: Annotated[list[str] | None, typer.Option(help="Kernel method(s) to measure (repeat the option for several); default direct, or direct, nrm and cr with --large.")] = None,
    network: Annotated[list[str] | None, typer.Option(help="Built-in network(s); default all but the large ones.")] = None,
    large: Annotated[bool, typer.Option("--large", help="Measure the networks of 100, 1,000 and 10,000 reactions (a ring of reversible hops and an invented random network).")] = False,
    spec_path: Annotated[Path | None, typer.Option("--spec", help="Also measure the first point of this spec.")] = None,
    repeats: Annotated[int, typer.Option(min=1, help="Timed batches; the median is shown.")] = 5,
    sweeps: Annotated[bool, typer.Option("--sweep", help="Instead: run the demo, a 1,024-task grid and 1,000 "
                                         "tiny tasks end to end on a local cluster, beside the kernel alone.")] = False,
    workers: Annotated[int, typer.Option(min=1, help="Workers of the local cluster (--sweep).")] = 2,
) -> None:
    """Print reaction events per CPU-second of a kernel on one core (or, with --sweep, of whole sweeps)."""
    if sweeps:
        _sweeps(workers)
        return
    from sweep.plan.bench import LARGE, LARGE_METHODS, NETWORKS, measure, measure_spec  # numba: only when measuring

    unknown = [n for n in network or () if n not in NETWORKS]
    if unknown:
        errors.print(f"error: --network {shown(unknown[0])}: not a built-in network; one of {', '.join(NETWORKS)}")
        raise typer.Exit(EXIT_BAD_INPUT)
    methods = method or (list(LARGE_METHODS) if large else ["direct"])
    names = list(network) if network else (list(LARGE) if large else None)
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


def _sweeps(workers: int) -> None:
    from sweep.plan import throughput

    with console.status("running the benchmark sweeps (a minute or two)..."):
        figures = throughput.measure(workers)
    table = Table(title=f"Whole sweeps on a local cluster of {workers} workers", title_justify="left")
    for column in ("sweep", "tasks", "events", "wall s", "events / wall-s", f"÷ ({workers} x kernel alone)",
                   "tasks / s"):
        table.add_column(column, justify="left" if column == "sweep" else "right")
    for f in figures:
        table.add_row(f.name, f"{f.tasks:,}", si(f.events), f"{f.wall_seconds:.1f}", si(f.events_per_second),
                      f"{f.of_kernel:.2f}", f"{f.tasks_per_second:.0f}")
    console.print(table)
    console.print("kernel alone: the same replicates through the kernel on one core, seeding included; "
                  "wall time includes the cluster's start and close", highlight=False)


def _compare(methods: list[str], names: list[str] | None, repeats: int) -> None:
    """Several methods side by side: ns per event, and each one's speed relative to the first."""
    from sweep.plan.bench import measure

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
