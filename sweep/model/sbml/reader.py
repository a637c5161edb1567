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
import re
from dataclasses import dataclass, field
from typing import Any

from sweep.spec import inputs
from sweep.errors import SpecError
from sweep.model.sbml import initial as initial_values
from sweep.model.sbml import events, laws, rules, volume
from sweep.model import observables
from sweep.model.sbml.math import AVOGADRO, TIME
from sweep.model.sbml.reactions import convert
from sweep.model.sbml.units import molecules_per



# our expression grammar parses with Python's own parser, so its keywords cannot be names
_RESERVED = frozenset(keyword.kwlist)


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
    ode_only : tuple of (element, reason)
        Constructs only ``method = "ode"`` honours (rate rules); other methods refuse them.
    observables : tuple of (name, expression text)
        Assignment-rule targets that read species, as expressions over counts and parameters.
    time_unit : str
        The model's ``timeUnits`` in words ("" when not declared).
    """

    table: dict
    derived: tuple[tuple[str, str], ...]
    aliases: tuple[tuple[str, str], ...]
    notes: tuple[tuple[str, str], ...]
    ode_only: tuple[tuple[str, str], ...] = ()
    observables: tuple[tuple[str, str], ...] = ()
    time_unit: str = ""


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
    assigned: dict = field(default_factory=dict)        # assignment-rule target -> tree (sweep.model.sbml.rules)
    rated: dict = field(default_factory=dict)           # rate-rule target -> tree
    refused_rules: dict = field(default_factory=dict)   # rule target -> "assignment rule for X" (math refused)
    ruled_species: dict = field(default_factory=dict)   # assignment-rule species -> molecules per unit
    sizeless: set = field(default_factory=set)          # compartments without a size
    ode_only: list = field(default_factory=list)        # (element, reason): only method = "ode" honours it
    scale: float = 1.0                                  # model volume / the model's own volume
    assigned_targets: set = field(default_factory=set)  # assignment-rule targets (read before the rest)
    initially_assigned: set = field(default_factory=set)  # initial-assignment symbols

    def fresh(self, base: str) -> str:
        """A model name not used by the document or by another generated name."""
        while base in self.taken:
            base += "_"
        self.taken.add(base)
        return base


def read(text: str, source: str, model_volume: float | None = None) -> Imported:
    """Import an SBML document (text) into a model table and its conversion notes.

    Parameters
    ----------
    text : str
        The SBML file's content (Level 2 is converted to Level 3 Version 2 first).
    source : str
        The file name, for error messages.
    model_volume : float, optional
        The system volume in litres (a spec's ``model_volume``): every molecules-per-mole factor
        is scaled by model_volume / the model's own volume (``sweep.model.sbml.volume``).

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
    ctx.model, ctx.converted = _document(text, source, ctx.notes)
    model = ctx.model
    _unsupported_elements(ctx)
    ctx.functions = {f.getId(): f for f in model.getListOfFunctionDefinitions()}
    ctx.taken = {e.getId() for lst in (model.getListOfSpecies(), model.getListOfParameters(),
                                        model.getListOfCompartments(), model.getListOfReactions(),
                                        model.getListOfFunctionDefinitions()) for e in lst}
    for name in sorted(ctx.taken & _RESERVED):
        ctx.problems.append(f"id {name!r}: a reserved word of our expression grammar (Python's); rename it")
    if ctx.taken & _RESERVED:
        _refuse(ctx)  # now: every law that read the name would fail to parse, with a confusing message
    ctx.assigned_targets, _ = rules.targets(model)
    ctx.initially_assigned = {a.getSymbol() for a in model.getListOfInitialAssignments()}
    _compartments(ctx)
    ctx.scale = volume.scale(ctx, model_volume)
    _extent(ctx)
    ctx.values.update({p.getId(): p.getValue() for p in model.getListOfParameters()
                       if p.isSetValue() and p.getId() not in ctx.assigned_targets})
    if TIME not in ctx.taken:
        ctx.values[TIME] = 0.0  # t = 0 where initial assignments read it (SBML L3V2 section 3.4.6); see _time
    initial = _species(ctx)
    rules.promote(ctx, initial, _Species)
    ctx.all_species = frozenset(s.getId() for s in model.getListOfSpecies())
    ctx.species_ids = frozenset(ctx.species)
    ctx.beta = {s: info.beta for s, info in ctx.species.items()}
    rules.collect(ctx)
    initial_values.assign(ctx, initial)
    initial_derived = set(ctx.derived)  # initial assignments (an event must not assign what they read)
    for p in model.getListOfParameters():
        pid = p.getId()
        if not p.isSetValue() and pid not in ctx.derived and pid not in ctx.assigned_targets \
                and pid not in ctx.refused_rules:
            ctx.problems.append(f"parameter {pid}: no value")
    reactions = {}
    for reaction in model.getListOfReactions():
        reactions.update(convert(ctx, reaction))
    _time(ctx, reactions)
    counts = lambda tree, beta: laws.to_counts(tree, laws.names(tree) & ctx.species_ids, ctx.beta, beta)  # noqa: E731
    reactions.update(rules.rate_reactions(ctx, counts))
    observed, unread = observables.storable(rules.observables(ctx, counts))
    ctx.notes.extend(unread)
    timed, watched = events.convert(ctx, initial, initial_derived)
    volume.describe_counts(ctx, initial, model_volume)
    _refuse(ctx)
    parameters = {name: float(value) for name, value in ctx.values.items()}
    table = {"species": initial, "parameters": parameters, "reactions": reactions}
    if observed:  # checked and stored like a TOML model's [observables] (sweep.model.observables)
        table["observables"] = dict(observed)
    table.update({k: v for k, v in (("change", timed), ("when", watched)) if v})
    return Imported(table, tuple((n, t) for n, t in ctx.derived.items()), tuple(ctx.aliases.items()),
                    tuple(ctx.notes), tuple(ctx.ode_only), tuple(observed.items()), volume.time_unit(model))


def _time(ctx: _Context, reactions: dict) -> None:
    """The time csymbol: a parameter the ODE sets to t (``Network.time_slot``); ODE only in laws."""
    pattern = re.compile(rf"\b{TIME}\b")
    in_laws = [r for r, e in reactions.items() if pattern.search(e.get("propensity", ""))]
    if TIME in ctx.taken:
        if in_laws or any(pattern.search(t) for t in ctx.derived.values()):
            ctx.problems.append(f"id {TIME!r}: the name the import gives SBML's time csymbol; rename it")
        return
    if not (in_laws or any(pattern.search(t) for t in ctx.derived.values())):
        ctx.values.pop(TIME, None)  # nothing reads the time: no such parameter
    for rid in in_laws:
        ctx.ode_only.append((f"reaction {rid}", "its law reads the time csymbol (it changes between reaction "
                             "events, which the exact and leaping methods hold piecewise constant); only "
                             "method = \"ode\" evaluates it at every step"))


def _refuse(ctx: _Context) -> None:
    if ctx.problems:
        listing = "\n  - ".join(ctx.problems)
        raise SpecError(ctx.source, "", f"the SBML model uses {len(ctx.problems)} unsupported element(s):\n"
                        f"  - {listing}", fix="remove or rewrite them; docs/sbml.md lists what is supported")


def _document(text: str, source: str, warnings: list):
    import libsbml

    doc = libsbml.readSBMLFromString(text)
    _raise_errors(doc, source, "not readable as SBML", warnings)
    converted = doc.getLevel() < 3
    if converted:
        props = libsbml.ConversionProperties(libsbml.SBMLNamespaces(3, 2))
        props.addOption("setLevelAndVersion", True)
        # not strict: the converter's own validation would stop at errors in annotations or in
        # unit declarations, which the import does not read (the check below still runs)
        props.addOption("strict", False)
        if doc.convert(props) != libsbml.LIBSBML_OPERATION_SUCCESS:
            _raise_errors(doc, source, "cannot convert this SBML Level 2 model to Level 3 Version 2", warnings)
            raise SpecError(source, "", "cannot convert this SBML Level 2 model to Level 3 Version 2",
                            fix="save it as SBML Level 3")
    doc.setConsistencyChecks(libsbml.LIBSBML_CAT_UNITS_CONSISTENCY, False)
    doc.setConsistencyChecks(libsbml.LIBSBML_CAT_MODELING_PRACTICE, False)
    doc.checkConsistency()
    _raise_errors(doc, source, "the SBML document is not valid", warnings)
    if doc.getModel() is None:
        raise SpecError(source, "", "the SBML document has no <model>")
    return doc.getModel(), converted


# libsbml error ids about annotations and notes (SBML L3V2 section 3.2: neither carries math),
# and the unit-consistency category, whose checks are switched off above (units are converted
# by sweep.model.sbml.units from what decides the numbers, not validated)
_HARMLESS_IDS = frozenset(range(10401, 10410)) | frozenset(range(10801, 10810))


def _harmless(error) -> bool:
    import libsbml

    return error.getErrorId() in _HARMLESS_IDS or error.getCategory() == libsbml.LIBSBML_CAT_UNITS_CONSISTENCY


def _raise_errors(doc, source: str, problem: str, warnings: list) -> None:
    import libsbml

    errors = [doc.getError(i) for i in range(doc.getNumErrors())]
    bad = [e for e in errors if e.getSeverity() in (libsbml.LIBSBML_SEV_ERROR, libsbml.LIBSBML_SEV_FATAL)]
    harmless: dict[str, int] = {}
    for e in bad:
        if _harmless(e):
            key = f"{e.getShortMessage()} (libsbml error {e.getErrorId()}, first at line {e.getLine()})"
            harmless[key] = harmless.get(key, 0) + 1
    # libsbml's message is the rule, a reference, then what is wrong here: keep the last part
    shown = [f"line {e.getLine()}: {e.getShortMessage()}: {e.getMessage().strip().splitlines()[-1].strip()}"
             for e in bad if not _harmless(e)]
    doc.getErrorLog().clearLog()  # the next check appends to the same log: report each error once
    for key, n in harmless.items():
        times = f", {n} times" if n > 1 else ""
        warnings.append(("warning", f"{key}{times}: not in math, so the import goes on"))
    if shown:
        more = f"\n  ... and {len(shown) - 5} more" if len(shown) > 5 else ""
        listing = "\n  - ".join(shown[:5])
        raise SpecError(source, "", f"{problem} ({len(shown)} error(s)):\n  - {listing}{more}",
                        fix="check the file with an SBML validator")


def _unsupported_elements(ctx: _Context) -> None:
    """Constraints, conversion factors, fast reactions, required packages."""
    model, out = ctx.model, ctx.problems
    # events: sweep.model.sbml.events; rules: sweep.model.sbml.rules
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
        if not c.isSetSize() and cid not in ctx.initially_assigned:
            # fine while nothing in it is a concentration and no law reads its size (checked there)
            ctx.sizeless.add(cid)
            ctx.notes.append((f"compartment {cid}", "no size: its species are amounts only"))
            continue
        if not c.isSetSize() or not math.isfinite(c.getSize()) or c.getSize() <= 0:
            if not c.isSetSize():
                continue  # its initial assignment is refused (sweep.model.sbml.initial)
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
    alpha = molecules_per(unit, model, "model extentUnits", ctx.problems, ctx.notes)
    if alpha is not None:
        alpha *= ctx.scale
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
        alpha = molecules_per(unit, model, f"species {sid} substanceUnits", ctx.problems, ctx.notes)
        only = s.getHasOnlySubstanceUnits()
        cid = s.getCompartment()
        if cid in ctx.sizeless and not only:
            ctx.problems.append(f"compartment {cid}: no size, and species {sid} in it is a concentration (the size "
                                "converts it to counts): give the compartment a size, or declare the species "
                                "hasOnlySubstanceUnits=\"true\"")
            continue
        size = 1.0 if cid in ctx.sizeless else ctx.compartments.get(cid)
        if alpha is None or size is None:
            continue
        alpha *= ctx.scale
        if not only and ctx.model.getCompartment(cid).getSpatialDimensionsAsDouble() == 0:
            ctx.problems.append(f"species {sid}: a concentration in a 0-dimensional compartment")
            continue
        beta = alpha if only else alpha * size
        if sid in ctx.assigned_targets:
            ctx.ruled_species[sid] = beta
            ctx.notes.append((f"species {sid}", "set by an assignment rule: not a state variable; laws that read "
                              "it read the rule's math, and it is an observable"))
            continue
        fixed = s.getBoundaryCondition() or s.getConstant()
        ctx.species[sid] = _Species(cid, beta, "amount" if only else "concentration", fixed)
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


__all__ = ["AVOGADRO", "Imported", "read"]
