"""`sweep init` and `sweep check`: start a spec, and see what it would run."""

from __future__ import annotations

from importlib import resources
from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table

from sweep import load
from sweep.cli.common import console, errors, exits_on_errors, shown
from sweep.errors import SpecError
from sweep.model import describe
from sweep.execute.tasks import n_blocks

_TEMPLATES = ("spec.toml", "model.toml")


@exits_on_errors
def init(
    directory: Annotated[Path, typer.Argument(help="Folder to write spec.toml and model.toml into.")] = Path("."),
    force: Annotated[bool, typer.Option("--force", help="Overwrite existing files.")] = False,
) -> None:
    """Write a commented example spec and model to start from."""
    directory.mkdir(parents=True, exist_ok=True)
    for name in _TEMPLATES:
        target = directory / name
        if target.exists() and not force:
            raise SpecError(str(target), "", "already exists", fix="use --force to overwrite, or pick another folder")
    for name in _TEMPLATES:
        text = resources.files("sweep.templates").joinpath(name).read_text(encoding="utf-8")
        (directory / name).write_text(text, encoding="utf-8")
        console.print(f"wrote [bold]{shown(directory / name)}[/]")
    console.print(f"next: [bold]sweep check {shown(directory / 'spec.toml')}[/], then "
                  f"[bold]sweep run {shown(directory / 'spec.toml')}[/]")


@exits_on_errors
def check(
    spec_path: Annotated[Path, typer.Argument(metavar="SPEC", help="The sweep spec (TOML).")],
    store: Annotated[Path | None, typer.Option(help="Results store; overrides run.store.")] = None,
) -> None:
    """Validate a spec and its model and print what would run."""
    spec = load(spec_path, store=store)
    model = spec.model
    points = spec.points()
    reactions = Table(title="Reactions", title_justify="left")
    for col in ("name", "reaction", "rate"):
        reactions.add_column(col)
    for row in describe(model):
        reactions.add_row(*map(shown, row))
    species = ", ".join(f"{s}={v}" for s, v in zip(model.species, model.initial))
    tasks = points.shape[0] * n_blocks(spec.replicates, spec.replicates_per_task)  # counted, not listed
    console.print(f"[green]ok[/] {shown(spec_path)}  (SHA-256 {spec.sha256[:12]})")
    console.print(f"species: {shown(species)}")
    if spec.observables:  # computed from the counts and stored beside them (sweep.model.observables)
        console.print(f"observables: {shown('; '.join(f'{n} = {t}' for n, t in spec.observables))}")
    if model.omega is not None:
        console.print(f"units: molar constants in a volume of {model.volume:g} L (N_A V = {model.omega:.6g}); "
                      "mass-action constants become c = k m!/(N_A V)^(order-1), laws read concentrations")
    console.print(reactions)
    if spec.model_notes:
        console.print(_conversions(spec))
    if spec.interventions:
        timed = sum(1 for i in spec.interventions if hasattr(i, "at"))
        console.print(f"interventions: {timed} timed (change), {len(spec.interventions) - timed} "
                      "state-triggered (when)", highlight=False)
        for where, text in spec.intervention_notes:
            console.print(f"[yellow]note[/] {shown(where)}: {shown(text)}", highlight=False)
    design = Table(title=f"Design: {spec.design.kind}", title_justify="left")
    design.add_column("parameter")
    design.add_column("values")
    for q, name in enumerate(spec.param_names):
        design.add_row(shown(name), _values(points[:, q]))
    derived = dict(spec.derived)
    for name, expr in spec.derived:
        design.add_row(f"[dim]{shown(name)}[/]", f"[dim]= {shown(expr.text)} (derived)[/]")
    fixed = [(n, v) for n, v in spec.fixed if n not in spec.param_names and n not in derived]
    for name, value in fixed:
        design.add_row(f"[dim]{shown(name)}[/]", f"[dim]{value:g} (fixed)[/]")
    console.print(design)
    n_t = len(spec.times)
    console.print(
        f"{points.shape[0]:,} points x {spec.replicates:,} replicates = {points.shape[0] * spec.replicates:,} "
        f"trajectories in {tasks:,} tasks of up to {spec.replicates_per_task:,} replicates\n"
        f"method {spec.method}, {n_t} samples from t={spec.times[0]:g} to t={spec.times[-1]:g}, "
        f"root seed {spec.seed}, event cap {spec.max_events:,}\n"
        f"store {shown(spec.store)}", highlight=False,
    )
    if spec.adaptive is not None:
        console.print(f"adaptive: more replicates, up to {spec.adaptive.max_replicates:,} per point, until the "
                      f"{shown(spec.adaptive.description)}", highlight=False)
    _advise(spec)


def _advise(spec) -> None:
    """Say when another exact method should be much faster for a network this large."""
    import kernels

    note = kernels.advice(spec.method, len(spec.model.reactions))
    if note:
        errors.print(f"[yellow]note:[/] {shown(note)}", highlight=False)


def _conversions(spec) -> Table:
    """What the SBML import converted, element by element (``Spec.model_notes``)."""
    table = Table(title="Imported from SBML: conversions applied", title_justify="left")
    table.add_column("element")
    table.add_column("conversion")
    for element, text in spec.model_notes:
        table.add_row(shown(element), shown(text))
    return table


def _values(column) -> str:
    """A parameter's values: listed when few, else their range and count."""
    distinct = sorted(set(float(v) for v in column))
    if len(distinct) <= 8:
        return ", ".join(f"{v:g}" for v in distinct)
    return f"{distinct[0]:g} .. {distinct[-1]:g} ({len(distinct):,} distinct values)"
