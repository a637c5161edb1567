"""`sweep export-model`: one of our models written as SBML Level 3 Version 2."""

from __future__ import annotations

import os
import re
from pathlib import Path
from typing import Annotated

import typer

from sweep.cli.common import console, exits_on_errors, shown
from sweep.errors import SpecError


@exits_on_errors
def export_model(
    source: Annotated[Path, typer.Argument(metavar="SPEC_OR_MODEL",
                                           help="A spec, a TOML model file, or an SBML file (.xml/.sbml).")],
    output: Annotated[Path | None, typer.Option("--output", "-o", help="SBML file to write (e.g. model.xml).")] = None,
    old_out: Annotated[Path | None, typer.Option("--out", hidden=True, help="Old spelling of --output.")] = None,
    force: Annotated[bool, typer.Option("--force", help="Overwrite the --output file if it exists.")] = False,
) -> None:
    """Write a model as SBML Level 3 Version 2: species as amounts in items, laws as our propensities.

    From a spec, parameters take the spec's fixed values from its \\[parameters] table,
    varied ones keep the model's own value, and derived parameters become initial assignments.
    """
    from sweep.model import sbml
    from sweep.spec import load_model

    out = output or old_out
    if out is None:
        raise SpecError("sweep export-model", "--output", "missing", fix="name the SBML file to write: -o/--output "
                        "model.xml")
    model, values, derived = load_model(source)
    model_id = re.sub(r"\W", "_", source.stem) or "model"
    if not re.match(r"[A-Za-z_]", model_id):
        model_id = f"m_{model_id}"
    text = sbml.write(model, str(source), values, derived, model_id=model_id)
    if out.exists() and not force:
        raise SpecError(str(out), "", "already exists", fix="use --force to overwrite it, or choose another --output")
    tmp = out.with_name(f".{out.name}.tmp")
    try:
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, out)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise SpecError(str(out), "", f"cannot write the file: {exc.strerror or exc}") from exc
    console.print(f"wrote [bold]{shown(out)}[/]: {len(model.species)} species, {len(model.reactions)} reactions, "
                  f"{len(values)} parameters (SBML Level 3 Version 2, amounts in items)")
