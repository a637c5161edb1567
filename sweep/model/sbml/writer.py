"""Write one of our models as SBML Level 3 Version 2 (``sweep export-model``).

Species are amounts in items (``hasOnlySubstanceUnits="true"``, model ``substanceUnits`` and
``extentUnits`` = ``item``), so every kinetic law is exactly our propensity in molecules per
time: ``c * A * B`` for ``A + B ->``, ``c * A * (A - 1) / 2`` for ``2 A ->`` (the number of
distinct pairs, Gillespie 1977), and a custom law's expression as MathML. The named laws are
written as function definitions (``hill_up``, ``hill_down``, ``michaelis``) and called. A
molar model (``units = { constants = "molar", volume = V }``) is written with its constants
already converted: ``c = factor * k`` inside the law, custom laws as ``N_A V f(X / (N_A V))``.
Derived parameters become initial assignments, so the file keeps how they are computed.
Reading the file back (``sweep.model.sbml.read``) gives the same network and the same constants.
"""

from __future__ import annotations

import decimal
import math
import re
from typing import Mapping, Sequence

from sweep.errors import SpecError
from sweep.model import Model, concentration_factor
from sweep.model.sbml import laws
from sweep.model.sbml.math import PLACEHOLDER, to_ast

NAMED = {
    "hill_up": "lambda(x, vmax, K, n, vmax * x^n / (K^n + x^n))",
    "hill_down": "lambda(x, vmax, K, n, vmax * K^n / (K^n + x^n))",
    "michaelis": "lambda(s, vmax, Km, vmax * s / (Km + s))",
}


def write(model: Model, source: str = "model", values: Mapping[str, float] | None = None,
          derived: Sequence[tuple[str, object]] = (), model_id: str = "model") -> str:
    """The SBML text of ``model``.

    Parameters
    ----------
    model : Model
    source : str
        File the model came from, for errors.
    values : mapping, optional
        Parameter values to write (a spec's fixed values); default the model's own.
    derived : sequence of (name, sweep.model.expr.Expr)
        A spec's derived parameters, written as initial assignments.
    model_id : str
        The ``<model id>``.

    Returns
    -------
    str
        SBML Level 3 Version 2 that libsbml's consistency check accepts.

    Raises
    ------
    SpecError
        A model name that collides with a function definition's name.

    Example
    -------
    >>> text = write(sweep.load("configs/reporter.toml").model)
    """
    if model.interventions:
        # events would be the faithful form, but thinning (keep) has no SBML event equivalent; refused
        # rather than written without them
        first = model.interventions[0]
        raise SpecError(first.source, first.field, "a model with [[change]] or [[when]] cannot be exported yet",
                        fix="export the model without its interventions")
    import libsbml

    values = dict(model.parameter_values if values is None else values)
    doc = libsbml.SBMLDocument(3, 2)
    m = doc.createModel()
    m.setId(model_id)
    m.setSubstanceUnits("item")
    m.setExtentUnits("item")
    taken = set(model.species) | set(values) | {r.name for r in model.reactions}
    used = _named_laws_used(model)
    for name in used:
        if name in taken:
            raise SpecError(source, name, "a model name equals a named law's name, which SBML cannot tell apart",
                            fix="rename it")
        f = m.createFunctionDefinition()
        f.setId(name)
        f.setMath(libsbml.parseL3Formula(NAMED[name]))
    compartment = _fresh("cell", taken)
    c = m.createCompartment()
    c.setId(compartment)
    c.setSize(model.volume if model.volume is not None else 1.0)
    c.setSpatialDimensions(3)
    c.setConstant(True)
    if model.volume is not None:
        c.setUnits("litre")
    _species(m, model, values, compartment)
    for name, value in values.items():
        p = m.createParameter()
        p.setId(name)
        p.setValue(float(value))
        p.setConstant(True)
    numbers: list[float] = []
    for name, expression in derived:
        a = m.createInitialAssignment()
        a.setSymbol(name)
        a.setMath(to_ast(expression.tree, numbers))
    for r in model.reactions:
        _reaction(m, model, r, numbers)
    text = libsbml.writeSBMLToString(doc)
    return _full_precision(text, numbers, values, compartment, c.getSize())


def _full_precision(text: str, numbers: list[float], values: Mapping[str, float], compartment: str,
                    size: float) -> str:
    """Put back the digits libsbml drops (it writes 15 significant digits; a double needs up to 17).

    Math numbers were written as placeholder names (``to_ast``); attribute values are rewritten
    in place. The result reads back to the very same doubles, so a round trip keeps every bit.
    """
    for i, value in enumerate(numbers):
        plain = format(decimal.Decimal(repr(value)), "f")   # MathML real: decimal notation only
        text = text.replace(f"<ci> {PLACEHOLDER.format(i)} </ci>", f"<cn> {plain} </cn>")
    exact = [("parameter", name, "value", float(v)) for name, v in values.items()]
    exact.append(("compartment", compartment, "size", float(size)))
    for tag, ident, attr, value in exact:
        if float(f"{value:.15g}") != value:
            pattern = re.compile(rf'(<{tag} id="{re.escape(ident)}"[^>]*? {attr}=")[^"]*(")')
            text = pattern.sub(lambda match: f"{match.group(1)}{value!r}{match.group(2)}", text, count=1)
    return text


def _fresh(base: str, taken: set[str]) -> str:
    while base in taken:
        base += "_"
    taken.add(base)
    return base


def _named_laws_used(model: Model) -> list[str]:
    found: set[str] = set()

    def visit(tree):
        if tree[0] == "call":
            if tree[1] in NAMED:
                found.add(tree[1])
            for a in tree[2]:
                visit(a)
        elif tree[0] not in ("num", "name"):
            for t in tree[1:]:
                visit(t)

    for r in model.reactions:
        if r.propensity is not None:
            visit(r.propensity.tree)
    return sorted(found)


def _species(m, model: Model, values: Mapping[str, float], compartment: str) -> None:
    import libsbml

    for name, initial in zip(model.species, model.initial):
        s = m.createSpecies()
        s.setId(name)
        s.setCompartment(compartment)
        s.setHasOnlySubstanceUnits(True)
        s.setBoundaryCondition(False)
        s.setConstant(False)
        s.setInitialAmount(float(values[initial] if isinstance(initial, str) else initial))
        if isinstance(initial, str):
            a = m.createInitialAssignment()
            a.setSymbol(name)
            node = libsbml.ASTNode(libsbml.AST_NAME)
            node.setName(initial)
            a.setMath(node)


def _reaction(m, model: Model, r, numbers: list[float]) -> None:
    reaction = m.createReaction()
    reaction.setId(r.name)
    reaction.setReversible(False)
    for sid, mult in r.reactants:
        ref = reaction.createReactant()
        ref.setSpecies(sid)
        ref.setStoichiometry(mult)
        ref.setConstant(True)
    for sid, mult in r.products:
        ref = reaction.createProduct()
        ref.setSpecies(sid)
        ref.setStoichiometry(mult)
        ref.setConstant(True)
    law = reaction.createKineticLaw()
    if r.propensity is None:
        tree = _mass_action_law(model, r)
    else:
        tree = r.propensity.tree
        if model.omega is not None:
            read = laws.names(tree) & set(model.species)
            tree = laws.to_counts(tree, read, {s: model.omega for s in read}, model.omega)
        listed = {s for s, _ in r.reactants} | {s for s, _ in r.products}
        for sid in sorted(laws.names(tree) & set(model.species) - listed):
            ref = reaction.createModifier()
            ref.setSpecies(sid)
    law.setMath(to_ast(tree, numbers))


def _mass_action_law(model: Model, r) -> tuple:
    """``c * prod_s S (S-1) ... (S-m+1) / prod m!``: the propensity of Gillespie (1977)."""
    c = ("name", r.rate) if isinstance(r.rate, str) else ("num", float(r.rate))
    if model.omega is not None:
        factor = concentration_factor(r, model.omega)
        c = ("num", float(r.rate) * factor) if c[0] == "num" else ("*", ("num", factor), c)
    tree = c
    divisor = 1
    for sid, mult in r.reactants:
        tree = ("*", tree, ("name", sid))
        for i in range(1, mult):
            tree = ("*", tree, ("-", ("name", sid), ("num", float(i))))
        divisor *= math.factorial(mult)
    return ("/", tree, ("num", float(divisor))) if divisor != 1 else tree
