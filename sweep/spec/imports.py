"""The spec's side of a model file: which reader, the SBML system volume, what only ODE honours, time unit.

``model_volume = 1e-15`` (litres, top level of a spec) is passed to the SBML import, which scales
the copy numbers to a system of that volume (``sweep.model.sbml.volume``). Constructs only the
deterministic method honours (``Imported.ode_only``) are refused here for the other methods,
naming each element. ``[time] unit`` defaults to the SBML model's ``timeUnits``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any, Mapping

from sweep.errors import SpecError
from sweep.model import Model, parse_model
from sweep.model import sbml
from sweep.spec import inputs


def load_model(doc: Mapping[str, Any], path: Path, model_text: str) -> tuple[Model, sbml.Imported | None]:
    """The spec's model (inline table, TOML file or SBML file) and, for SBML, what the import says."""
    src = str(path)
    entry = doc.get("model")
    volume = doc.get("model_volume")
    if entry is None:
        raise SpecError(src, "model", "missing", fix='add model = "my_model.toml" or a [model] table')
    if isinstance(entry, str):
        model_path = path.parent / entry
        if sbml.is_sbml(model_path):
            imported = sbml.read(model_text, str(model_path), model_volume=_volume(volume, src))
            return parse_model(imported.table, str(model_path)), imported
        _no_volume(volume, src)
        return parse_model(inputs.parse_toml(model_text, str(model_path)), str(model_path)), None
    if isinstance(entry, dict):
        _no_volume(volume, src)
        return parse_model(entry, src, "model."), None
    raise SpecError(src, "model", "must be a file name or a table", entry)


def _volume(value: Any, src: str) -> float | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not value > 0 or value == float("inf"):
        raise SpecError(src, "model_volume", "must be a finite number of litres > 0", value,
                        "e.g. model_volume = 1e-15 (one femtolitre, about a bacterium)")
    return float(value)


def _no_volume(value: Any, src: str) -> None:
    if value is not None:
        raise SpecError(src, "model_volume", "applies to SBML models only", value,
                        'a TOML model sets its volume with units = { constants = "molar", volume = ... }')


def check_method(imported: sbml.Imported | None, method: str, src: str, model_file: str) -> None:
    """Refuse, for a method other than the ODE, what only the ODE honours (each element by id)."""
    if imported is None or not imported.ode_only or method == "ode":
        return
    listing = "\n  - ".join(f"{element}: {why}" for element, why in imported.ode_only)
    raise SpecError(src, "run.method", f"the {method} method cannot honour {len(imported.ode_only)} element(s) of "
                    f"the SBML model {model_file}:\n  - {listing}", method,
                    'use method = "ode", or remove them from the model')


def time_unit(table: Mapping[str, Any], imported: sbml.Imported | None, src: str) -> str:
    """``[time] unit``, else the SBML model's ``timeUnits`` in words, else ""."""
    if "unit" in table:
        unit = table["unit"]
        if not isinstance(unit, str) or not unit.strip() or len(unit) > 32:
            raise SpecError(src, "time.unit", "must be a short non-empty string", unit, 'e.g. unit = "min"')
        return unit.strip()
    return imported.time_unit if imported is not None else ""
