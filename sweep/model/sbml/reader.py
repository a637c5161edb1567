"""Read an SBML document into one of our model tables (species, parameters, reactions).

The table has the shape of a TOML model file and goes through ``sweep.model.parse_model``, so
validation and compilation are shared. Everything unit-dependent is converted here:

- initial amounts and concentrations to molecule counts (rounded to the nearest whole number,
  the rounding reported by ``sweep check``);
- mass-action laws to stochastic constants c (Gillespie 1977), as a number, a parameter, or a
  derived parameter ``<reaction>__c = factor * k`` when the conversion needs a factor, so the
  SBML parameter stays the one a spec sweeps;
- other laws to count-based propensities (``sweep.model.sbml.laws``).

Every unsupported element is collected and refused at once, naming it by id.
"""

from __future__ import annotations

import keyword
import math
from dataclasses import dataclass, field
from typing import Any

from sweep.model import expr as expressions
from sweep.spec import inputs
from sweep.errors import SpecError
from sweep.model.sbml import laws
from sweep.model.sbml.math import AVOGADRO, from_ast, render
from sweep.model.sbml.reactions import convert
from sweep.model.sbml.units import molecules_per



@dataclass(frozen=True)
class Imported:
    """An SBML model read into our terms.

    Attributes
    ----------
    table : dict
        A model table (``species``, ``parameters``, ``reactions``) for ``sweep.model.parse_model``.
    derived : tuple of (name, expression text)
        Parameters computed from SBML parameters at every point (converted rate constants,
        initial assignments).
    aliases : tuple of (dotted name, internal name)
        Local parameters: ``"r1.k"`` is the model parameter ``r1__k``.
    notes : tuple of (element, conversion)
        What was converted and how, for ``sweep check``.
    """

    table: dict
    derived: tuple[tuple[str, str], ...]
    aliases: tuple[tuple[str, str], ...]
    notes: tuple[tuple[str, str], ...]


@dataclass
class _Species:
    compartment: str
    beta: float          # molecules per unit of the species' symbol in math
    symbol: str          # "amount" or "concentration"
    fixed: bool          # boundary or constant: no reaction changes it


@dataclass
class _Context:
    source: str
    model: Any = None
    converted: bool = False                          # read as Level 2 (no packages there)
    functions: dict = field(default_factory=dict)
    compartments: dict = field(default_factory=dict)
    species: dict = field(default_factory=dict)
    values: dict = field(default_factory=dict)       # parameter values, internal names
    taken: set = field(default_factory=set)
    problems: list = field(default_factory=list)
    notes: list = field(default_factory=list)
    derived: dict = field(default_factory=dict)
    aliases: dict = field(default_factory=dict)
    alpha_e: float = 1.0
    # built once, before the reactions (per reaction they made the import O(R x S))
    all_species: frozenset = frozenset()                # every species id in the document
    species_ids: frozenset = frozenset()                # the species that were read (ctx.species)
    beta: dict = field(default_factory=dict)            # species -> molecules per unit in math

    def fresh(self, base: str) -> str:
        """A model name not used by the document or by another generated name."""
        while base in self.taken:
            base += "_"
        self.taken.add(base)
        return base


def read(text: str, source: str) -> Imported:
    """Import an SBML document (text) into a model table and its conversion notes.

    Parameters
    ----------
    text : str
        The SBML file's content (Level 2 is converted to Level 3 Version 2 first).
    source : str
        The file name, for error messages.

    Returns
    -------
    Imported

    Raises
    ------
    SpecError
        Unreadable or invalid SBML, or a list of every unsupported element by id.

    Example
    -------
    >>> imported = read(open("configs/toggle_sbml.xml").read(), "configs/toggle_sbml.xml")
    >>> sorted(imported.table)
    ['parameters', 'reactions', 'species']
    """
    ctx = _Context(source)
    inputs.check_xml(text, source)  # nesting and size, before libsbml (which crashes on deep nesting)
    ctx.model, ctx.converted = _document(text, source)
    model = ctx.model
    _unsupported_elements(ctx)
    ctx.functions = {f.getId(): f for f in model.getListOfFunctionDefinitions()}
    ctx.taken = {e.getId() for lst in (model.getListOfSpecies(), model.getListOfParameters(),
                                        model.getListOfCompartments(), model.getListOfReactions(),
                                        model.getListOfFunctionDefinitions()) for e in lst}
    for name in sorted(ctx.taken & set(keyword.kwlist)):
        ctx.problems.append(f"id {name!r}: a reserved word of our expression grammar (Python's); rename it")
    _compartments(ctx)
    _extent(ctx)
    ctx.values.update({p.getId(): p.getValue() for p in model.getListOfParameters() if p.isSetValue()})
    initial = _species(ctx)
    ctx.all_species = frozenset(s.getId() for s in model.getListOfSpecies())
    ctx.species_ids = frozenset(ctx.species)
    ctx.beta = {s: info.beta for s, info in ctx.species.items()}
    _initial_assignments(ctx, initial)
    for p in model.getListOfParameters():
        if not p.isSetValue() and p.getId() not in ctx.derived:
            ctx.problems.append(f"parameter {p.getId()}: no value")
    reactions = {}
    for reaction in model.getListOfReactions():
        reactions.update(convert(ctx, reaction))
    if ctx.problems:
        listing = "\n  - ".join(ctx.problems)
        raise SpecError(source, "", f"the SBML model uses {len(ctx.problems)} unsupported element(s):\n  - {listing}",
                        fix="remove or rewrite them; docs/models.md, 'Models from SBML', lists what is supported")
    parameters = {name: float(value) for name, value in ctx.values.items()}
    table = {"species": initial, "parameters": parameters, "reactions": reactions}
    return Imported(table, tuple((n, t) for n, t in ctx.derived.items()), tuple(ctx.aliases.items()),
                    tuple(ctx.notes))


def _document(text: str, source: str):
    import libsbml

    doc = libsbml.readSBMLFromString(text)
    _raise_errors(doc, source, "not readable as SBML")
    converted = doc.getLevel() < 3
    if converted:
        props = libsbml.ConversionProperties(libsbml.SBMLNamespaces(3, 2))
        props.addOption("setLevelAndVersion", True)
        if doc.convert(props) != libsbml.LIBSBML_OPERATION_SUCCESS:
            _raise_errors(doc, source, "cannot convert this SBML Level 2 model to Level 3 Version 2")
            raise SpecError(source, "", "cannot convert this SBML Level 2 model to Level 3 Version 2",
                            fix="save it as SBML Level 3")
    doc.setConsistencyChecks(libsbml.LIBSBML_CAT_UNITS_CONSISTENCY, False)
    doc.setConsistencyChecks(libsbml.LIBSBML_CAT_MODELING_PRACTICE, False)
    doc.checkConsistency()
    _raise_errors(doc, source, "the SBML document is not valid")
    if doc.getModel() is None:
        raise SpecError(source, "", "the SBML document has no <model>")
    return doc.getModel(), converted


def _raise_errors(doc, source: str, problem: str) -> None:
    import libsbml

    errors = [doc.getError(i) for i in range(doc.getNumErrors())]
    bad = [e for e in errors if e.getSeverity() in (libsbml.LIBSBML_SEV_ERROR, libsbml.LIBSBML_SEV_FATAL)]
    if bad:
        # libsbml's message is the rule, a reference, then what is wrong here: keep the last part
        shown = "\n  - ".join(f"line {e.getLine()}: {e.getShortMessage()}: "
                              f"{e.getMessage().strip().splitlines()[-1].strip()}" for e in bad[:5])
        more = f"\n  ... and {len(bad) - 5} more" if len(bad) > 5 else ""
        raise SpecError(source, "", f"{problem} ({len(bad)} error(s)):\n  - {shown}{more}",
                        fix="check the file with an SBML validator")


def _unsupported_elements(ctx: _Context) -> None:
    """Events, rules, constraints, conversion factors, fast reactions, required packages."""
    model, out = ctx.model, ctx.problems
    for i, event in enumerate(model.getListOfEvents()):
        out.append(f"event {event.getId() or '#' + str(i + 1)}: events are not supported")
    for rule in model.getListOfRules():
        kind = "algebraic" if rule.isAlgebraic() else "rate" if rule.isRate() else "assignment"
        target = f" for {rule.getVariable()}" if rule.getVariable() else ""
        out.append(f"{kind} rule{target}: rules are not supported")
    for i, constraint in enumerate(model.getListOfConstraints()):
        out.append(f"constraint {constraint.getId() or '#' + str(i + 1)}: constraints are not checked during "
                   "a simulation, so they are refused rather than ignored")
    if model.isSetConversionFactor():
        out.append(f"model conversionFactor {model.getConversionFactor()}: conversion factors are not supported")
    for s in model.getListOfSpecies():
        if s.isSetConversionFactor():
            out.append(f"species {s.getId()} conversionFactor: conversion factors are not supported")
    for r in model.getListOfReactions():
        if r.isSetFast() and r.getFast():
            out.append(f"reaction {r.getId()}: fast=true (rapid equilibrium) is not supported")
    doc = model.getSBMLDocument()
    declared = doc.getNamespaces()
    for i in range(0 if ctx.converted else doc.getNumPlugins()):
        # a Level 2 file has no packages; the conversion adds libsbml's layout/render plugins
        plugin = doc.getPlugin(i)
        name = plugin.getPackageName()
        if name == "l3v2extendedmath" or not declared.hasURI(plugin.getURI()):
            continue  # libsbml's own plugin for Level 3 Version 2 math, not a package in the file
        if doc.getPackageRequired(name):
            out.append(f"package {name!r} (required=true): SBML packages are not supported")
        else:
            ctx.notes.append((f"package {name}", "not required for simulation: its content is not read"))
    for i in range(doc.getNumUnknownPackages()):
        out.append(f"package {doc.getUnknownPackageURI(i)}: unknown SBML package")


def _compartments(ctx: _Context) -> None:
    for c in ctx.model.getListOfCompartments():
        cid = c.getId()
        if not c.isSetSize() or not math.isfinite(c.getSize()) or c.getSize() <= 0:
            if not c.isSetSize():
                ctx.problems.append(f"compartment {cid}: no size (needed to convert concentrations to counts)")
            else:
                ctx.problems.append(f"compartment {cid}: size {c.getSize()} must be a finite number > 0")
            continue
        ctx.compartments[cid] = float(c.getSize())
        unit = f" {c.getUnits()}" if c.isSetUnits() else ""
        ctx.notes.append((f"compartment {cid}", f"size {c.getSize():g}{unit}: fixed (not sweepable); "
                          "appears in laws as that number"))


def _extent(ctx: _Context) -> None:
    """Molecules per extent unit: extentUnits, else the model's substanceUnits (same meaning)."""
    model = ctx.model
    if model.isSetExtentUnits():
        unit, how = model.getExtentUnits(), "extentUnits"
    elif model.isSetSubstanceUnits():
        unit, how = model.getSubstanceUnits(), "substanceUnits (no extentUnits declared)"
    else:
        if model.getNumReactions():
            ctx.problems.append("model extentUnits: not declared, so a kinetic law's rate cannot be converted to "
                                'molecules per time (declare extentUnits="mole" or "item" on <model>)')
        return
    alpha = molecules_per(unit, model, "model extentUnits", ctx.problems)
    if alpha is not None:
        ctx.alpha_e = alpha
        time = f" per {model.getTimeUnits()}" if model.isSetTimeUnits() else " per model time unit"
        ctx.notes.append(("reaction rates", f"extent in {unit} (model {how}) = {alpha:.10g} molecules: "
                          f"propensity = {alpha:.10g} x kinetic law{time}"))


def _species(ctx: _Context) -> dict[str, Any]:
    """Each species' count factor and initial count (or a note that an assignment sets it)."""
    model, initial = ctx.model, {}
    assigned = {a.getSymbol() for a in model.getListOfInitialAssignments()}
    for s in model.getListOfSpecies():
        sid = s.getId()
        unit = s.getSubstanceUnits() if s.isSetSubstanceUnits() else model.getSubstanceUnits()
        if not unit:
            ctx.problems.append(f"species {sid}: substance units not declared (declare substanceUnits=\"item\" "
                                "or \"mole\" on the species or on <model>)")
            continue
        alpha = molecules_per(unit, model, f"species {sid} substanceUnits", ctx.problems)
        size = ctx.compartments.get(s.getCompartment())
        if alpha is None or size is None:
            continue
        only = s.getHasOnlySubstanceUnits()
        if not only and ctx.model.getCompartment(s.getCompartment()).getSpatialDimensionsAsDouble() == 0:
            ctx.problems.append(f"species {sid}: a concentration in a 0-dimensional compartment")
            continue
        beta = alpha if only else alpha * size
        fixed = s.getBoundaryCondition() or s.getConstant()
        ctx.species[sid] = _Species(s.getCompartment(), beta, "amount" if only else "concentration", fixed)
        reads = (f"laws read it as an amount in {unit} = count / {beta:.10g}" if only else
                 f"laws read it as a concentration = count / ({alpha:.10g} x {size:g}) = count / {beta:.10g}")
        held = "; held fixed (" + ("boundaryCondition" if s.getBoundaryCondition() else "constant") + ")" \
            if fixed else ""
        if sid in assigned:
            ctx.notes.append((f"species {sid}", f"initial value from an initial assignment; {reads}{held}"))
            initial[sid] = 0
            continue
        initial[sid] = _count(ctx, s, sid, alpha, size, unit, f"{reads}{held}")
    return initial


def _count(ctx: _Context, s, sid: str, alpha: float, size: float, unit: str, reads: str) -> int:
    if s.isSetInitialAmount():
        value = s.getInitialAmount() * alpha
        how = f"initialAmount {s.getInitialAmount():g} {unit} x {alpha:.10g}"
    elif s.isSetInitialConcentration():
        value = s.getInitialConcentration() * size * alpha
        how = f"initialConcentration {s.getInitialConcentration():g} x size {size:g} x {alpha:.10g}"
    else:
        ctx.problems.append(f"species {sid}: no initialAmount, initialConcentration or initial assignment")
        return 0
    # the cap of the integer-state methods (int32) is the spec's to apply: it depends on the method
    if not math.isfinite(value) or value < 0:
        ctx.problems.append(f"species {sid}: initial count {value:g} ({how}) is not a finite number >= 0")
        return 0
    count = math.floor(value + 0.5)
    shown = f"{value:.10g}" if count == value else f"{value:.10g}, rounded to {count}"
    ctx.notes.append((f"species {sid}", f"{how} = {shown} molecules; {reads}"))
    return count


def _initial_assignments(ctx: _Context, initial: dict[str, Any]) -> None:
    """Initial assignments to parameters and species become derived parameters."""
    env = {c: ("num", v) for c, v in ctx.compartments.items()}
    parameters = {p.getId() for p in ctx.model.getListOfParameters()}
    pending = []
    for a in ctx.model.getListOfInitialAssignments():
        symbol = a.getSymbol()
        where = f"initial assignment to {symbol}"
        if ctx.model.getParameter(symbol) is None and symbol not in ctx.species:
            if ctx.model.getSpecies(symbol) is None:
                ctx.problems.append(f"{where}: only parameters and species can be assigned initially")
            continue
        tree = from_ast(a.getMath(), env, ctx.functions, ctx.problems, where)
        if tree is None:
            continue
        unknown = laws.names(tree) - parameters
        if unknown:
            ctx.problems.append(f"{where}: may use only parameters and numbers, not {', '.join(sorted(unknown))}")
            continue
        pending.append((symbol, tree))
    for symbol, tree in pending:
        if symbol in ctx.species:
            beta = ctx.species[symbol].beta
            if beta == 1.0 and tree[0] == "name":
                initial[symbol] = tree[1]
                continue
            name = ctx.fresh(f"{symbol}__initial")
            tree = tree if beta == 1.0 else ("*", ("num", beta), tree)
            initial[symbol] = name
        else:
            name = symbol
        ctx.derived[name] = render(tree)
    _evaluate_derived(ctx)


def _evaluate_derived(ctx: _Context) -> None:
    """Values of the derived parameters at the model's own values (dependency order)."""
    parsed = {n: expressions.parse(t, ctx.source, f"derived {n}") for n, t in ctx.derived.items()}
    remaining = dict(parsed)
    while remaining:
        ready = [n for n, e in remaining.items() if not (set(e.names) & set(remaining))]
        if not ready:
            ctx.problems.append(f"initial assignments form a cycle: {', '.join(sorted(remaining))}")
            return
        for n in ready:
            missing = [m for m in remaining[n].names if m not in ctx.values]
            if missing:
                del remaining[n]
                continue
            ctx.values[n] = float(expressions.evaluate(remaining.pop(n), ctx.values))


__all__ = ["AVOGADRO", "Imported", "read"]
