"""A spec's parameter names for an imported SBML model.

SBML local parameters are named ``reaction_id.param_id`` in a spec; our expression grammar has
no dots, so the model calls them ``reaction_id__param_id`` and this module renames the spec's
keys before validation: ``[parameters]``, ``[design.vary]``, ``[design.conditions]`` and
``[derived]`` (keys and the names inside its expressions). TOML needs the dotted name quoted
(``"r1.k" = 0.5``); the unquoted form, which TOML reads as a nested table, is accepted too.

It also adds the parameters the import derives from SBML parameters (converted rate constants,
initial assignments) to ``[derived]``, and refuses a spec that sets or varies one of them.
"""

from __future__ import annotations

import re
from typing import Any, Mapping

from sweep.errors import SpecError


def adapt(doc: Mapping[str, Any], aliases: Mapping[str, str], derived: Mapping[str, str], source: str) -> dict:
    """Return a copy of the parsed spec with dotted local-parameter names renamed and SBML-derived parameters added.

    Parameters
    ----------
    doc : mapping
        The parsed spec TOML.
    aliases : mapping
        ``"r1.k" -> "r1__k"``.
    derived : mapping
        Internal name -> expression text computed by the import.
    source : str
        The spec file, for errors.

    Raises
    ------
    SpecError
        When the spec sets, varies or derives a parameter the import computes.

    Example
    -------
    >>> adapt({"parameters": {"r1.k": 2.0}}, {"r1.k": "r1__k"}, {}, "s.toml")["parameters"]
    {'r1__k': 2.0}
    """
    out = dict(doc)
    reactions = {dotted.split(".", 1)[0] for dotted in aliases}
    if isinstance(out.get("parameters"), dict):
        out["parameters"] = _rename(out["parameters"], aliases, reactions)
    design = out.get("design")
    if isinstance(design, dict):
        design = dict(design)
        for key in ("vary", "conditions"):
            if isinstance(design.get(key), dict):
                design[key] = _rename(design[key], aliases, reactions, table=design.get("kind") == "table")
        out["design"] = design
    if "derived" in out and not isinstance(out["derived"], dict):
        return out  # sweep.spec reports the malformed table
    user = out.get("derived", {})
    user = {k: (_rename_text(v, aliases) if isinstance(v, str) else v)
            for k, v in _rename(user, aliases, reactions).items()}
    _refuse_overrides(out, user, derived, source)
    if derived or user:
        out["derived"] = {**derived, **user}
    return out


def _rename(entries: Mapping[str, Any], aliases: Mapping[str, str], reactions: set[str],
            table: bool = False) -> dict:
    out = {}
    for key, value in entries.items():
        if key in reactions and isinstance(value, dict) and value and all(f"{key}.{k}" in aliases for k in value):
            # unquoted r1.k = ... : TOML made it the nested table {"r1": {"k": ...}}
            for sub, inner in value.items():
                out[aliases[f"{key}.{sub}"]] = _column(inner, f"{key}.{sub}", table)
        elif key in aliases:
            out[aliases[key]] = _column(value, key, table)
        else:
            out[key] = value
    return out


def _column(value: Any, dotted: str, table: bool) -> Any:
    """A table design reads the column named like the key unless told: keep the dotted name."""
    if table and isinstance(value, dict) and "column" not in value:
        return {**value, "column": dotted}
    return value


def _rename_text(text: str, aliases: Mapping[str, str]) -> str:
    if not aliases:
        return text
    pattern = re.compile(r"(?<![A-Za-z0-9_.])(" + "|".join(re.escape(d) for d in sorted(aliases, key=len, reverse=True))
                         + r")(?![A-Za-z0-9_.])")
    return pattern.sub(lambda m: aliases[m.group(1)], text)


def _refuse_overrides(doc: Mapping[str, Any], user_derived: Mapping[str, Any], derived: Mapping[str, str],
                      source: str) -> None:
    design = doc.get("design") if isinstance(doc.get("design"), dict) else {}
    places = (("parameters", doc.get("parameters")), ("design.vary", design.get("vary")),
              ("design.conditions", design.get("conditions")), ("derived", user_derived))
    for where, entries in places:
        for name in entries if isinstance(entries, dict) else ():
            if name in derived:
                raise SpecError(source, f"{where}.{name}", f"computed by the SBML import as {derived[name]}",
                                fix="set or vary the SBML parameters it is computed from instead")
