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
propensity of ``2 P -> P2`` is c * P(P-1)/2 (Gillespie 1977). A reaction may instead give its
whole propensity as an expression (``sweep.model.expr``'s whitelist plus the named laws)::

    express = { reaction = "0 -> P", propensity = "hill_down(R, vmax, K, n)" }

where species read molecule counts. With ``units = { constants = "molar", volume = 1e-15 }``
(litres) the constants are deterministic ones in mol/L units, converted with N_A V as
``concentration_factor`` says, and propensity expressions are read in concentrations.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

from kernels.network import Network
from sweep.model import changes as interventions_, expr, ratelaws
from sweep.model import observables as observed
from sweep.spec import limits
from sweep.errors import SpecError

_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
_TERM = re.compile(r"^(?:(\d+)\s*\*?\s*)?([A-Za-z_][A-Za-z0-9_]*)$")
_ARROW = "->"
AVOGADRO = 6.02214076e23  # per mole, exact since the 2019 SI redefinition
UNIT_SYSTEMS = ("molecules", "molar")
TIME = "sbml_time"  # the parameter that stands for the simulation time in laws (SBML's time csymbol)


@dataclass(frozen=True)
class Reaction:
    """One reaction: reactant and product multiplicities, and its mass-action rate (name or
    number) or, for a custom law, its propensity expression (then ``rate`` is None)."""

    name: str
    reactants: tuple[tuple[str, int], ...]
    products: tuple[tuple[str, int], ...]
    rate: str | float | None
    propensity: expr.Expr | None = None

    @property
    def order(self) -> int:
        return sum(m for _, m in self.reactants)

    @property
    def equation(self) -> str:
        return f"{_side(self.reactants)} -> {_side(self.products)}"


@dataclass(frozen=True)
class Model:
    """A validated model. ``initial`` holds counts or parameter names.

    ``constants`` is "molecules" (stochastic constants, the default) or "molar" (deterministic
    constants in mol/L units, converted with ``volume`` in litres).
    """

    species: tuple[str, ...]
    initial: tuple[int | str, ...]
    parameters: tuple[tuple[str, float], ...]
    reactions: tuple[Reaction, ...]
    constants: str = "molecules"
    volume: float | None = None
    # [observables]: (name, expression) read from the counts on the sample grid (sweep.model.observables)
    observables: tuple[tuple[str, expr.Expr], ...] = ()
    # [[change]] and [[when]] (sweep.model.changes): interventions during a run, in the order written
    interventions: tuple[interventions_.Intervention, ...] = ()

    @property
    def omega(self) -> float | None:
        """N_A V, molecules per mol/L, for molar models; None otherwise."""
        return AVOGADRO * self.volume if self.constants == "molar" else None

    @property
    def law_parameters(self) -> tuple[str, ...]:
        """Parameters the custom laws read, in model order (they follow the R constants in ``rates``)."""
        used = {n for r in self.reactions if r.propensity is not None for n in r.propensity.names}
        return tuple(name for name, _ in self.parameters if name in used)

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
            raise SpecError(source, field, f"cannot read the term {term.strip()[:40]!r}", text,
                            "terms look like 'A', '2 A' or '2A', joined by '+'; '0' means nothing")
        digits = match.group(1) or "1"
        mult = int(digits) if len(digits) <= 6 else limits.MAX_STOICHIOMETRY + 1
        if mult < 1:
            raise SpecError(source, field, f"stoichiometry of {match.group(2)} must be at least 1", text)
        counts[match.group(2)] = counts.get(match.group(2), 0) + mult
    for name, mult in counts.items():
        if mult > limits.MAX_STOICHIOMETRY:
            raise SpecError(source, field, f"{name} appears more than {limits.MAX_STOICHIOMETRY:,} times on one side",
                            text, f"a reaction takes or makes at most {limits.MAX_STOICHIOMETRY:,} of one species")
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
    _check_keys(table, {"species", "parameters", "reactions", "units", "observables", "change", "when"}, source,
                prefix.rstrip("."))
    species_t = _table(table, "species", source, prefix, required=True)
    params_t = _table(table, "parameters", source, prefix, required=False)
    reactions_t = _table(table, "reactions", source, prefix, required=True)
    for key, found, most in (("species", species_t, limits.MAX_SPECIES), ("reactions", reactions_t, limits.MAX_REACTIONS)):
        if len(found) > most:
            raise SpecError(source, f"{prefix}{key}", f"{len(found):,} {key}, more than the {most:,} a model may have",
                            fix=f"at most {most:,} {key}")

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

    constants, volume = _units(table.get("units"), source, f"{prefix}units")
    known = set(species)  # built once: a set per reaction made large models quadratic
    reactions = tuple(_reaction(name, spec, known, param_names, source, f"{prefix}reactions.{name}")
                      for name, spec in reactions_t.items())
    if not reactions:
        raise SpecError(source, f"{prefix}reactions", "the model has no reactions",
                        fix="add at least one, e.g. decay = { reaction = \"A -> 0\", rate = 0.1 }")
    _check_parameter_uses(dict(parameters), reactions, initial, source, prefix)
    readouts = observed.parse(table.get("observables"), tuple(species), param_names, {r.name for r in reactions},
                              source, f"{prefix}observables")
    listed = interventions_.parse_lists(table, species, param_names, source, prefix)
    model = Model(tuple(species), tuple(initial), tuple(parameters), reactions, constants, volume, readouts,
                  listed)
    _check_dependencies(model, source, prefix)
    return model


def _units(table, source, field) -> tuple[str, float | None]:
    if table is None:
        return "molecules", None
    if not isinstance(table, dict):
        raise SpecError(source, field, "must be a table", table, 'e.g. units = { constants = "molar", volume = 1e-15 }')
    _check_keys(table, {"constants", "volume"}, source, field)
    constants = table.get("constants", "molecules")
    if constants not in UNIT_SYSTEMS:
        raise SpecError(source, f"{field}.constants", "unknown unit system", constants,
                        '"molecules" (stochastic constants, the default) or "molar" (mol/L, needs volume)')
    volume = table.get("volume")
    if constants == "molar":
        if volume is None:
            raise SpecError(source, f"{field}.volume", "molar constants need the reaction volume",
                            fix="give the volume in litres, e.g. volume = 1e-15 (1 femtolitre)")
        volume = _number(volume, source, f"{field}.volume")
        if volume <= 0:
            raise SpecError(source, f"{field}.volume", "must be > 0 (litres)", volume)
    elif volume is not None:
        raise SpecError(source, f"{field}.volume", "a volume only applies to molar constants", volume,
                        'add constants = "molar", or remove the volume')
    return constants, volume


def concentration_factor(reaction: Reaction, omega: float) -> float:
    """Factor turning a deterministic constant k (mol/L units) into the stochastic c.

    c = k * prod_s m_s! / (N_A V)^(order - 1) (Gillespie 1977): c = k/(N_A V) for A + B,
    c = 2k/(N_A V) for 2A, c = k for A ->, c = k N_A V for 0 ->.
    """
    factor = float(omega) ** (1 - reaction.order)
    for _, m in reaction.reactants:
        factor *= math.factorial(m)
    return factor


def _check_parameter_uses(values, reactions, initial, source, prefix) -> None:
    for r in reactions:
        if r.propensity is not None:
            continue
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
    if not isinstance(name, str) or not _NAME.fullmatch(name):
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
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value < 0:
        raise SpecError(source, field, "initial count must be a number >= 0", value,
                        f"a finite whole number; at most {limits.MAX_COUNT:,} for the integer-state methods "
                        "(direct, nrm, tau_leap)")
    # a fractional amount is a state only the real-valued methods (cle, ode) hold: sweep.spec refuses
    # it for the others (sweep.spec.values)
    return int(value) if value == int(value) else float(value)


def _reaction(name, spec, species, param_names, source, field) -> Reaction:
    _check_name(name, source, field)
    if not isinstance(spec, dict):
        raise SpecError(source, field, "must be a table", spec,
                        'write it as { reaction = "A -> B", rate = "k" }')
    _check_keys(spec, {"reaction", "rate", "propensity"}, source, field)
    if "reaction" not in spec:
        raise SpecError(source, f"{field}.reaction", "missing", fix='write { reaction = "A -> B", rate = "k" }')
    if ("rate" in spec) == ("propensity" in spec):
        raise SpecError(source, field, "give exactly one of rate (mass action) and propensity (a custom law)",
                        fix='e.g. { reaction = "A -> B", rate = "k" } or '
                            '{ reaction = "0 -> P", propensity = "hill_down(R, vmax, K, n)" }')
    reactants, products = parse_equation(spec["reaction"], source, f"{field}.reaction")
    for sp, _ in reactants + products:
        if sp not in species:
            raise SpecError(source, f"{field}.reaction", f"unknown species {sp!r}", spec["reaction"],
                            f"declare it under [species]; known: {listing(sorted(species))}")
    if "propensity" in spec:
        law = expr.parse(spec["propensity"], source, f"{field}.propensity")
        for n in law.names:
            if n not in species and n not in param_names:
                raise SpecError(source, f"{field}.propensity", f"unknown name {n!r} in the rate law of {name!r}",
                                spec["propensity"], "use species and parameter names of this model")
        return Reaction(name, reactants, products, None, law)
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
    dep_ptr, dep_idx = [0], []
    for row in _dependency_rows(model, index, changes):
        dep_idx.extend(row)
        dep_ptr.append(len(dep_idx))
    law_mask = np.array([r.propensity is not None for r in model.reactions], dtype=np.int8)
    laws_read = model.law_parameters
    time_slot = n_r + laws_read.index(TIME) if TIME in laws_read else -1
    return Network(reactant_idx, reactant_mult, change_idx, change_val,
                   np.asarray(dep_ptr, dtype=np.int32), np.asarray(dep_idx, dtype=np.int32), law_mask,
                   _rate_law(model, index), time_slot)


def _readers(model: Model, index: Mapping[str, int]) -> list[list[int]]:
    """For each species, the reactions whose propensity reads it, in ascending order.

    A custom law depends on every species it reads (modifiers included), not only its reactants.
    """
    readers: list[list[int]] = [[] for _ in model.species]
    for r, reaction in enumerate(model.reactions):
        read = {index[sp] for sp, _ in reaction.reactants}
        if reaction.propensity is not None:
            read |= {index[n] for n in reaction.propensity.names if n in index}
        for s in read:
            readers[s].append(r)
    return readers


def _dependency_rows(model: Model, index: Mapping[str, int], changes: list[dict[int, int]]):
    """Row j of the dependency graph for each reaction j: the reactions whose propensity reads a
    species that j changes, ascending (Gibson & Bruck 2000).

    Linear in the graph's size through a species -> readers index; the rows are exactly those of
    testing every pair (j, r), in the same order, which the kernels' bit-identity depends on.
    """
    readers = _readers(model, index)
    for j in range(len(model.reactions)):
        touched = [s for s in changes[j] if readers[s]]
        if len(touched) == 1:
            yield readers[touched[0]]
        else:
            yield sorted(set().union(*(readers[s] for s in touched)))


def _check_dependencies(model: Model, source: str, prefix: str) -> None:
    """Refuse a dependency graph beyond ``limits.MAX_DEPENDENCIES`` entries before building it."""
    index = {name: i for i, name in enumerate(model.species)}
    changes = [_net_change(r, index) for r in model.reactions]
    readers = _readers(model, index)
    # an upper bound first: the sum over j of the readers of each species j changes
    bound = sum(len(readers[s]) for c in changes for s in c)
    if bound <= limits.MAX_DEPENDENCIES:
        return
    total = 0
    for row in _dependency_rows(model, index, changes):
        total += len(row)
        if total > limits.MAX_DEPENDENCIES:
            break
    else:
        return
    writers = [0] * len(model.species)
    for c in changes:
        for s in c:
            writers[s] += 1
    hub = max(range(len(model.species)), key=lambda s: writers[s] * len(readers[s]))
    raise SpecError(source, f"{prefix}reactions", f"the dependency graph (reactions to recompute after each "
                    f"reaction) has more than {limits.MAX_DEPENDENCIES:,} entries; species {model.species[hub]!r} "
                    f"is changed by {writers[hub]:,} reactions and read by {len(readers[hub]):,}",
                    fix="simulate a smaller network, or one where fewer reactions share a species")


def _rate_law(model: Model, index: Mapping[str, int]):
    laws = {j: r.propensity.tree for j, r in enumerate(model.reactions) if r.propensity is not None}
    if not laws:
        return None
    params = {name: k for k, name in enumerate(model.law_parameters)}
    return ratelaws.compile_laws(laws, index, params, len(model.reactions), model.omega)


def _net_change(reaction: Reaction, index: Mapping[str, int]) -> dict[int, int]:
    change: dict[int, int] = {}
    for sp, m in reaction.reactants:
        change[index[sp]] = change.get(index[sp], 0) - m
    for sp, m in reaction.products:
        change[index[sp]] = change.get(index[sp], 0) + m
    return {s: v for s, v in change.items() if v != 0}


def rate_constants(model: Model, values: Mapping[str, float]) -> np.ndarray:
    """The kernels' ``rates`` for one point's parameter values.

    The stochastic rate constant of each reaction (converted from molar units if the model
    says so; 0 for a custom law), followed by the parameters the custom laws read, if any.
    """
    omega = model.omega
    rates = []
    for r in model.reactions:
        if r.propensity is not None:
            rates.append(0.0)
            continue
        k = values[r.rate] if isinstance(r.rate, str) else r.rate
        rates.append(k * concentration_factor(r, omega) if omega is not None else k)
    rates.extend(values[name] for name in model.law_parameters)
    return np.array(rates, dtype=np.float64)


def initial_counts(model: Model, values: Mapping[str, float]) -> np.ndarray:
    """Initial molecule counts for one point's parameter values.

    int64; float64 only when a count is beyond int64 or not whole, which a spec allows only for
    the methods with a real-valued state (``sweep.spec`` caps the integer-state methods at int32).
    """
    counts = [values[v] if isinstance(v, str) else v for v in model.initial]
    if all(abs(c) <= limits.INT64_MAX and c == int(c) for c in counts):
        return np.array(counts, dtype=np.int64)
    return np.array([float(c) for c in counts], dtype=np.float64)


DESCRIBED = 1000  # rows ``describe`` lists; a terminal table of more is slow to draw and to read


def describe(model: Model, rows: int = DESCRIBED) -> list[tuple[str, str, str]]:
    """Rows (name, equation, rate or propensity) in our own notation, for ``sweep check``.

    At most ``rows`` reactions are listed, then one row saying how many more there are.
    """
    out = [(r.name, r.equation, f"propensity {r.propensity.text}" if r.propensity else str(r.rate))
           for r in model.reactions[:rows]]
    if len(model.reactions) > rows:
        out.append(("...", f"and {len(model.reactions) - rows:,} more reactions", ""))
    return out


def listing(names, most: int = 20) -> str:
    """Names for a message, the first ``most`` of them (in the order given) and how many more."""
    names = list(names)
    shown = ", ".join(names[:most]) or "(none)"
    return shown + (f", ... ({len(names) - most:,} more)" if len(names) > most else "")
