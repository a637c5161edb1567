"""`sweep plan`: the design, the task count, the store size and a run-time estimate."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Annotated, Any

import typer
from rich.table import Table

from sweep import load
from sweep import plan as planner
from sweep.cli.common import EXIT_BAD_INPUT, console, duration, errors, exits_on_errors, si
from sweep.design import describe


@exits_on_errors
def plan(
    spec_path: Annotated[Path, typer.Argument(metavar="SPEC", help="The sweep spec (TOML).")],
    workers: Annotated[int | None, typer.Option(min=1, help="Workers to estimate the run time for (default: one per core here).")] = None,
    seconds: Annotated[float, typer.Option("--seconds", min=0.1, help="Time budget of the calibration run.")] = 2.0,
    yes: Annotated[bool, typer.Option("--yes", "-y", help="Plan a design beyond the sane limits (more than 1,000,000 tasks or 1 TB).")] = False,
) -> None:
    """Print the design, tasks, store size and a run-time estimate from a short calibration run."""
    spec = load(spec_path)
    workers = workers or os.cpu_count() or 1
    sized = planner.size(spec)
    console.print(f"[bold]{spec_path}[/]  (SHA-256 {spec.sha256[:12]})")
    console.print(_design_table(spec))
    reasons = planner.limits(sized)
    if reasons and not yes:
        console.print(_size_table(sized, None))
        errors.print(f"[bold red]error:[/] {spec_path}: design too large: {'; '.join(reasons)} "
                     "(shrink the design, or add --yes to plan it anyway)", highlight=False, soft_wrap=True)
        raise typer.Exit(EXIT_BAD_INPUT)
    with console.status("calibrating: simulating a few replicates at a few points..."):
        result = planner.plan(spec, workers, seconds=seconds)
    console.print(_size_table(sized, result))
    console.print(_calibration_table(result))
    console.print(
        f"estimated run time on {workers} worker{'s' if workers != 1 else ''}: [bold]~{duration(result.seconds)}[/]\n"
        f"  {si(result.events_total)} reaction events at {si(result.events_per_second)} events/s per worker, "
        f"{result.write_seconds * 1e3:.0f} ms to write a task's chunk, longest task "
        f"~{duration(result.longest_task_seconds)}, start-up and shut-down ~{duration(planner.STARTUP_SECONDS)}",
        highlight=False,
    )
    cores = os.cpu_count() or 1
    if workers > cores:
        console.print(f"[yellow]note:[/] {workers} workers but {cores} cores here: "
                      "the estimate assumes each worker has a core of its own")
    busy = os.getloadavg()[0] if hasattr(os, "getloadavg") else 0.0
    if busy > 0.5 * cores:
        console.print(f"[yellow]note:[/] load average {busy:.1f} on {cores} cores: other processes are busy, "
                      "so a local run will likely take longer than estimated")
    for warning in result.warnings:
        console.print(f"[yellow]warning:[/] {warning}", highlight=False)
    if reasons:
        console.print(f"[yellow]beyond the sane limits:[/] {'; '.join(reasons)}")


def _design_table(spec) -> Table:
    facts = describe(spec.design)
    table = Table(title=f"Design: {spec.design.kind}{_design_note(facts)}", title_justify="left")
    for column in ("parameter", "values", "range"):
        table.add_column(column)
    points = spec.points()
    for q, name in enumerate(spec.param_names):
        fact = facts["parameters"].get(name, {})
        table.add_row(name, _how(fact), f"{points[:, q].min():.4g} .. {points[:, q].max():.4g}")
    for name, expr in spec.derived:
        table.add_row(f"[dim]{name}[/]", f"[dim]= {expr.text}[/]", "[dim]derived[/]")
    derived = dict(spec.derived)
    for name, value in spec.fixed:
        if name not in spec.param_names and name not in derived:
            table.add_row(f"[dim]{name}[/]", f"[dim]{value:g}[/]", "[dim]fixed[/]")
    return table


def _design_note(facts: dict[str, Any]) -> str:
    notes = []
    if facts.get("conditions"):
        notes.append(f"crossed with {' x '.join(f'{len(v)} {n}' for n, v in facts['conditions'].items())}")
    if facts.get("optimization"):
        notes.append(f"optimisation {facts['optimization']}")
    if "N" in facts:
        notes.append(f"N = {facts['N']}, D = {facts['D']}, "
                     f"{'with' if facts['calc_second_order'] else 'without'} second order")
    if facts.get("file"):
        notes.append(f"from {facts['file']}")
    return f" ({'; '.join(notes)})" if notes else ""


def _how(fact: dict[str, Any]) -> str:
    """How a parameter's values are chosen, in a few words."""
    if "values" in fact:
        values = fact["values"]
        shown = ", ".join(f"{v:g}" for v in values[:6]) + (", ..." if len(values) > 6 else "")
        return f"{'condition ' if fact.get('condition') else ''}{len(values)} levels: {shown}"
    kind = fact.get("distribution")
    if kind is None:
        return "from the table"
    shape = {"normal": f"mean {fact.get('mean', 0):g}, sd {fact.get('sd', 0):g}",
             "lognormal": f"median {fact.get('median', 0):g}, sigma {fact.get('sigma', 0):g}"}.get(kind, "")
    return f"{kind}{' ' + shape if shape else ''}{', integer' if fact.get('integer') else ''}"


def _size_table(sized: planner.Size, result: planner.Plan | None) -> Table:
    table = Table(title="Size", show_header=False, title_justify="left")
    table.add_column(style="bold")
    table.add_column()
    table.add_row("points", f"{sized.points:,}")
    table.add_row("replicates", f"{sized.replicates:,} per point ({sized.points * sized.replicates:,} trajectories)")
    table.add_row("tasks", f"{sized.tasks:,} of up to {sized.replicates_per_task:,} replicates")
    table.add_row("samples x species", f"{sized.samples:,} x {sized.species:,}")
    store = f"{_bytes(sized.raw_bytes)} raw"
    if result is not None:
        store += (f", ~{_bytes(result.compressed_bytes)} compressed (ratio {result.compression_ratio:.2f}, "
                  f"from a trial chunk of {result.trial_replicates:,} replicates)")
    table.add_row("store", store)
    return table


def _calibration_table(result: planner.Plan) -> Table:
    """The cheapest, the median and the costliest of the calibrated points."""
    costs = sorted(result.costs, key=lambda c: c.events_per_replicate)
    mean = sum(c.events_per_replicate for c in costs) / len(costs)
    plural = "s" if len(costs) != 1 else ""
    table = Table(title=f"Calibration: {len(costs)} point{plural}, {sum(c.replicates for c in costs):,} replicates, "
                        f"mean {si(mean)} events per replicate ({duration(result.calibration_seconds)})",
                  title_justify="left")
    for column in ("", "point", "parameters", "events/rep", "ms/rep"):
        table.add_column(column, justify="left" if column in ("", "parameters") else "right")
    picks = {"cheapest": costs[0], "median": costs[len(costs) // 2], "costliest": costs[-1]}
    if len(costs) == 1:
        picks = {"only": costs[0]}
    shown = set()
    for label, c in picks.items():
        if c.point in shown:
            continue
        shown.add(c.point)
        flag = " (extrapolated)" if c.extrapolated else " (event cap)" if c.at_event_cap else ""
        table.add_row(label, str(c.point), ", ".join(f"{n}={v:.3g}" for n, v in c.values),
                      f"{si(c.events_per_replicate)}{flag}", f"{c.seconds_per_replicate * 1e3:.3g}")
    return table


def _bytes(n: float) -> str:
    for unit, scale in (("TB", 1e12), ("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if n >= scale:
            return f"{n / scale:.3g} {unit}"
    return f"{n:.0f} B"
