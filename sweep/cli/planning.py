"""`sweep plan`: the design, the task count, the store size and a run-time estimate."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Annotated, Any

import numpy as np
import typer
from rich.table import Table

from sweep import load
from sweep import plan as planner
from sweep.cli.common import EXIT_BAD_INPUT, console, duration, errors, exits_on_errors, shown, si
from sweep.design import describe


@exits_on_errors
def plan(
    spec_path: Annotated[Path, typer.Argument(metavar="SPEC", help="The sweep spec (TOML).")],
    workers: Annotated[int | None, typer.Option(min=1, help="Workers to estimate the run time for (default: one per core here).")] = None,
    seconds: Annotated[float, typer.Option("--seconds", min=0.1, help="Time budget of the calibration run.")] = 2.0,
    yes: Annotated[bool, typer.Option("--yes", "-y", help="Plan a design beyond the sane limits (more than 1,000,000 tasks or 1 TB).")] = False,
    compare_methods: Annotated[bool, typer.Option("--compare-methods", help="Also run the exact direct method beside the spec's approximate one (tau_leap, cle, ode) at a few points, and print the difference in each species' mean and variance, with standard errors, and each method's speed.")] = False,
) -> None:
    """Print the design, tasks, store size and a run-time estimate from a short calibration run."""
    spec = load(spec_path)
    workers = workers or os.cpu_count() or 1
    sized = planner.size(spec)
    console.print(f"[bold]{shown(spec_path)}[/]  (SHA-256 {spec.sha256[:12]})")
    console.print(_design_table(spec))
    reasons = planner.limits(sized)
    if reasons and not yes:
        console.print(_size_table(sized, None))
        errors.print(f"[bold red]error:[/] {shown(spec_path)}: design too large: {'; '.join(reasons)} "
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
        f"~{duration(result.longest_task_seconds)}, start-up and shut-down ~{duration(planner.STARTUP_SECONDS)}"
        + (f", compiling the model's kernel ~{duration(result.compile_seconds)} (not in the disk cache yet)"
           if result.compile_seconds else ""),
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
        console.print(f"[yellow]warning:[/] {shown(warning)}", highlight=False)
    if reasons:
        console.print(f"[yellow]beyond the sane limits:[/] {'; '.join(reasons)}")
    if compare_methods:
        _compare(spec, seconds)


def _compare(spec, seconds: float) -> None:
    """`--compare-methods`: the spec's approximate method against the exact direct method."""
    import kernels
    from sweep.plan import compare
    if kernels.METHODS[spec.method].exact:  # the method's record, so a new approximate method needs no edit here
        console.print(f"--compare-methods: method {shown(spec.method)} is exact already; nothing to compare")
        return
    with console.status(f"comparing {spec.method} with the exact {compare.EXACT} method at a few points..."):
        result = compare.compare(spec, seconds=max(2 * seconds, 2.0))
    m = shown(spec.method)
    table = Table(title=f"{m} against the exact {compare.EXACT} method at t={result.time:g} (difference = {m} - exact "
                        "(its standard error); ! = beyond 3.29 se)", title_justify="left")
    for col in ("point", "species", f"mean: exact -> {m}", "difference", f"variance: exact -> {m}", "difference",
                "largest mean z (at t)"):
        table.add_column(col, justify="left" if col == "species" else "right", overflow="fold")
    flagged = []
    deterministic = spec.method in kernels.DETERMINISTIC
    for p in result.points:
        for c in p.species:
            d_mean, se_mean = c.mean_difference
            d_var, se_var = c.var_difference
            if c.differs:
                flagged.append(f"point {p.point} {c.species}")
            table.add_row(str(p.point), shown(c.species) + (" [bold red]![/]" if c.differs else ""),
                          f"{c.exact.mean:.4g} -> {c.approx.mean:.4g}", _pm(d_mean, se_mean),
                          f"{c.exact.var:.4g} -> {c.approx.var:.4g}" if not deterministic else f"{c.exact.var:.4g}",
                          _pm(d_var, se_var) if not deterministic else "-", f"{c.worst_z:+.1f} ({c.worst_time:g})")
    console.print(table)
    speeds = ", ".join(f"point {p.point}: {p.exact_seconds * 1e3:.3g} ms vs {p.approx_seconds * 1e3:.3g} ms"
                       for p in result.points)
    console.print(f"time per replicate, exact vs {shown(spec.method)}: {speeds} "
                  f"({result.speedup:.3g}x {'faster' if result.speedup >= 1 else 'slower'})", highlight=False,
                  soft_wrap=True)
    replicates = ", ".join(f"{p.point}: {p.species[0].exact.n:,} / {p.species[0].approx.n:,}" for p in result.points)
    console.print(f"replicates (exact / {shown(spec.method)}) per point: {replicates}", highlight=False)
    if flagged:
        console.print(f"[bold yellow]warning:[/] {shown(spec.method)} differs from the exact method by more than "
                      f"{compare.Z} standard errors (two-sided level 0.1 %) at {len(flagged)} of "
                      f"{sum(len(p.species) for p in result.points)} (point, species): "
                      f"{shown(', '.join(flagged[:8]))}; its assumptions do not hold there: use method "
                      "\"direct\" (or \"nrm\")", highlight=False, soft_wrap=True)
    else:
        console.print(f"no difference beyond {compare.Z} standard errors at these points: {shown(spec.method)} "
                      "agrees with the exact method here, to this precision", highlight=False)


def _pm(value: float, se: float) -> str:
    """'+2.96 (0.094)': a difference and its standard error."""
    if not np.isfinite(value):
        return "-"
    return f"{value:+.3g} ({se:.2g})" if np.isfinite(se) and se > 0 else f"{value:+.3g}"


def _design_table(spec) -> Table:
    facts = describe(spec.design)
    table = Table(title=f"Design: {shown(spec.design.kind)}{shown(_design_note(facts))}", title_justify="left")
    for column in ("parameter", "values", "range"):
        table.add_column(column)
    points = spec.points()
    for q, name in enumerate(spec.param_names):
        fact = facts["parameters"].get(name, {})
        table.add_row(shown(name), shown(_how(fact)), f"{points[:, q].min():.4g} .. {points[:, q].max():.4g}")
    for name, expr in spec.derived:
        table.add_row(f"[dim]{shown(name)}[/]", f"[dim]= {shown(expr.text)}[/]", "[dim]derived[/]")
    derived = dict(spec.derived)
    for name, value in spec.fixed:
        if name not in spec.param_names and name not in derived:
            table.add_row(f"[dim]{shown(name)}[/]", f"[dim]{value:g}[/]", "[dim]fixed[/]")
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
        listed = ", ".join(f"{v:g}" for v in values[:6]) + (", ..." if len(values) > 6 else "")
        return f"{'condition ' if fact.get('condition') else ''}{len(values)} levels: {listed}"
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
    seen = set()
    for label, c in picks.items():
        if c.point in seen:
            continue
        seen.add(c.point)
        flag = " (extrapolated)" if c.extrapolated else " (event cap)" if c.at_event_cap else ""
        table.add_row(label, str(c.point), shown(", ".join(f"{n}={v:.3g}" for n, v in c.values)),
                      f"{si(c.events_per_replicate)}{flag}", f"{c.seconds_per_replicate * 1e3:.3g}")
    return table


def _bytes(n: float) -> str:
    for unit, scale in (("TB", 1e12), ("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if n >= scale:
            return f"{n / scale:.3g} {unit}"
    return f"{n:.0f} B"
