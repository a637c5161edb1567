"""Reaction models: species, parameters and reactions in chemical notation.

A model is a TOML table (inline in the spec under ``[model]`` or in its own file)::

    [species]
    mRNA = 0            # initial molecule count, or the name of a parameter
    [parameters]
    k_tx = 0.5
    [reactions]
    transcription = { reaction = "0 -> mRNA", rate = "k_tx" }
    dimerise      = { reaction = "2 P -> P2", rate = 0.001 }

Rates are stochastic (per-molecule-combination) mass-action constants c_j: the
propensity of ``2 P -> P2`` is c * P(P-1)/2 (Gillespie 1977).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

from kernels.network import Network
from sweep.errors import SpecError

_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
_TERM = re.compile(r"^(?:(\d+)\s*\*?\s*)?([A-Za-z_][A-Za-z0-9_]*)$")
_ARROW = "->"


@dataclass(frozen=True)
class Reaction:
    """One reaction: reactant and product multiplicities and its rate (name or number)."""

    name: str
    reactants: tuple[tuple[str, int], ...]
    products: tuple[tuple[str, int], ...]
    rate: str | float

    @property
    def equation(self) -> str:
        return f"{_side(self.reactants)} -> {_side(self.products)}"


@dataclass(frozen=True)
class Model:
    """A validated model. ``initial`` holds counts or parameter names."""

    species: tuple[str, ...]
    initial: tuple[int | str, ...]
    parameters: tuple[tuple[str, float], ...]
    reactions: tuple[Reaction, ...]

    @property
    def parameter_values(self) -> dict[str, float]:
        return dict(self.parameters)


def _side(terms: tuple[tuple[str, int], ...]) -> str:
    if not terms:
        return "0"
    return " + ".join(name if m == 1 else f"{m} {name}" for name, m in terms)


def parse_equation(text: str, source: str, field: str) -> tuple[tuple, tuple]:
    """Parse ``"2 A + B -> C"`` into ((("A", 2), ("B", 1)), (("C", 1),)).

    ``0`` (or an empty side) means nothing; repeated species add up (``A + A`` is ``2 A``).
    """
    if not isinstance(text, str) or text.count(_ARROW) != 1 or "<" in text:
        raise SpecError(source, field, "a reaction is written 'reactants -> products'", text,
                        "use exactly one '->', e.g. 'A + B -> C' or '0 -> A'; write a "
                        "reversible reaction as two reactions")
    left, right = text.split(_ARROW)
    return _parse_side(left, text, source, field), _parse_side(right, text, source, field)


def _parse_side(side: str, text: str, source: str, field: str) -> tuple[tuple[str, int], ...]:
    side = side.strip()
    if side in ("", "0"):
        return ()
    counts: dict[str, int] = {}
    for term in side.split("+"):
        match = _TERM.match(term.strip())
        if not match:
            raise SpecError(source, field, f"cannot read the term {term.strip()!r}", text,
                            "terms look like 'A', '2 A' or '2A', joined by '+'; '0' means nothing")
        mult = int(match.group(1) or 1)
        if mult < 1:
            raise SpecError(source, field, f"stoichiometry of {match.group(2)} must be at least 1", text)
        counts[match.group(2)] = counts.get(match.group(2), 0) + mult
    return tuple(counts.items())


def parse_model(table: Mapping[str, Any], source: str, prefix: str = "") -> Model:
    """Validate a model table and return a frozen ``Model``.

    Parameters
    ----------
    table : mapping
        The parsed TOML with ``species``, ``parameters`` and ``reactions`` tables.
    source : str
        File name used in error messages.
    prefix : str
        Dotted prefix of the table in that file (``"model."`` when inline in a spec).

    Raises
    ------
    SpecError
        Naming the file, the field and the fix.
    """
    _check_keys(table, {"species", "parameters", "reactions"}, source, prefix.rstrip("."))
    species_t = _table(table, "species", source, prefix, required=True)
    params_t = _table(table, "parameters", source, prefix, required=False)
    reactions_t = _table(table, "reactions", source, prefix, required=True)

    parameters = []
    for name, value in params_t.items():
        field = f"{prefix}parameters.{name}"
        _check_name(name, source, field)
        parameters.append((name, _number(value, source, field)))
    param_names = {n for n, _ in parameters}

    species, initial = [], []
    for name, value in species_t.items():
        field = f"{prefix}species.{name}"
        _check_name(name, source, field)
        if name in param_names:
            raise SpecError(source, field, "a species and a parameter share this name", name,
                            "rename one of them")
        species.append(name)
        initial.append(_initial(value, param_names, source, field))

    reactions = tuple(_reaction(name, spec, set(species), param_names, source, f"{prefix}reactions.{name}")
                      for name, spec in reactions_t.items())
    if not reactions:
        raise SpecError(source, f"{prefix}reactions", "the model has no reactions",
                        fix="add at least one, e.g. decay = { reaction = \"A -> 0\", rate = 0.1 }")
    _check_parameter_uses(dict(parameters), reactions, initial, source, prefix)
    return Model(tuple(species), tuple(initial), tuple(parameters), reactions)


def _check_parameter_uses(values, reactions, initial, source, prefix) -> None:
    for r in reactions:
        if isinstance(r.rate, str) and values[r.rate] < 0:
            raise SpecError(source, f"{prefix}parameters.{r.rate}", f"used as the rate of {r.name!r}, so it must be >= 0",
                            values[r.rate])
    for v in initial:
        if isinstance(v, str) and (values[v] < 0 or values[v] != int(values[v])):
            raise SpecError(source, f"{prefix}parameters.{v}", "sets an initial count, so it must be a whole number >= 0",
                            values[v])


def _table(table, key, source, prefix, required):
    value = table.get(key, {} if not required else None)
    if value is None:
        raise SpecError(source, f"{prefix}{key}", "missing table", fix=f"add a [{prefix}{key}] table")
    if not isinstance(value, dict):
        raise SpecError(source, f"{prefix}{key}", "must be a table", value)
    if required and not value:
        raise SpecError(source, f"{prefix}{key}", "is empty", fix=f"list at least one entry under [{prefix}{key}]")
    return value


def _check_keys(table, allowed, source, field):
    for key in table:
        if key not in allowed:
            where = f"{field}.{key}" if field else key
            raise SpecError(source, where, "unknown key", fix=f"expected one of: {', '.join(sorted(allowed))}")


def _check_name(name, source, field):
    if not _NAME.match(name):
        raise SpecError(source, field, "names must be identifiers (letters, digits, '_')", name)


def _number(value, source, field) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not np.isfinite(value):
        raise SpecError(source, field, "must be a finite number", value)
    return float(value)


def _initial(value, param_names, source, field) -> int | str:
    if isinstance(value, str):
        if value not in param_names:
            raise SpecError(source, field, "initial count names an unknown parameter", value,
                            "give a whole number or the name of a parameter in [parameters]")
        return value
    if isinstance(value, bool) or not isinstance(value, (int, float)) or value < 0 or value != int(value):
        raise SpecError(source, field, "initial count must be a whole number >= 0", value)
    return int(value)


def _reaction(name, spec, species, param_names, source, field) -> Reaction:
    if not isinstance(spec, dict):
        raise SpecError(source, field, "must be a table", spec,
                        'write it as { reaction = "A -> B", rate = "k" }')
    _check_keys(spec, {"reaction", "rate"}, source, field)
    if "reaction" not in spec or "rate" not in spec:
        missing = "reaction" if "reaction" not in spec else "rate"
        raise SpecError(source, f"{field}.{missing}", "missing", fix='write { reaction = "A -> B", rate = "k" }')
    reactants, products = parse_equation(spec["reaction"], source, f"{field}.reaction")
    for sp, _ in reactants + products:
        if sp not in species:
            raise SpecError(source, f"{field}.reaction", f"unknown species {sp!r}", spec["reaction"],
                            f"declare it under [species]; known: {', '.join(sorted(species))}")
    rate = spec["rate"]
    if isinstance(rate, str):
        if rate not in param_names:
            raise SpecError(source, f"{field}.rate", "unknown parameter", rate,
                            "give a number or the name of a parameter in [parameters]")
    else:
        rate = _number(rate, source, f"{field}.rate")
        if rate < 0:
            raise SpecError(source, f"{field}.rate", "rate constants must be >= 0", rate)
    return Reaction(name, reactants, products, rate)


def compile_network(model: Model) -> Network:
    """Build the kernels' plain arrays: reactants, net changes and the dependency graph."""
    index = {name: i for i, name in enumerate(model.species)}
    n_r = len(model.reactions)
    k = max(1, max(len(r.reactants) for r in model.reactions))
    changes = [_net_change(r, index) for r in model.reactions]
    l_max = max(1, max(len(c) for c in changes))
    reactant_idx = np.full((n_r, k), -1, dtype=np.int32)
    reactant_mult = np.zeros((n_r, k), dtype=np.int32)
    change_idx = np.full((n_r, l_max), -1, dtype=np.int32)
    change_val = np.zeros((n_r, l_max), dtype=np.int32)
    for j, r in enumerate(model.reactions):
        for i, (sp, m) in enumerate(r.reactants):
            reactant_idx[j, i], reactant_mult[j, i] = index[sp], m
        for i, (s, v) in enumerate(sorted(changes[j].items())):
            change_idx[j, i], change_val[j, i] = s, v
    depends_on = [{index[sp] for sp, _ in r.reactants} for r in model.reactions]
    dep_ptr, dep_idx = [0], []
    for j in range(n_r):
        touched = set(changes[j])
        dep_idx.extend(r for r in range(n_r) if depends_on[r] & touched)
        dep_ptr.append(len(dep_idx))
    return Network(reactant_idx, reactant_mult, change_idx, change_val,
                   np.asarray(dep_ptr, dtype=np.int32), np.asarray(dep_idx, dtype=np.int32))


def _net_change(reaction: Reaction, index: Mapping[str, int]) -> dict[int, int]:
    change: dict[int, int] = {}
    for sp, m in reaction.reactants:
        change[index[sp]] = change.get(index[sp], 0) - m
    for sp, m in reaction.products:
        change[index[sp]] = change.get(index[sp], 0) + m
    return {s: v for s, v in change.items() if v != 0}


def rate_constants(model: Model, values: Mapping[str, float]) -> np.ndarray:
    """Stochastic rate constant of each reaction for one point's parameter values."""
    return np.array([values[r.rate] if isinstance(r.rate, str) else r.rate for r in model.reactions],
                    dtype=np.float64)


def initial_counts(model: Model, values: Mapping[str, float]) -> np.ndarray:
    """Initial molecule counts for one point's parameter values (int64)."""
    return np.array([values[v] if isinstance(v, str) else v for v in model.initial], dtype=np.int64)


def describe(model: Model) -> list[tuple[str, str, str]]:
    """Rows (name, equation, rate) in our own notation, for ``sweep check``."""
    return [(r.name, r.equation, str(r.rate)) for r in model.reactions]
