"""One SBML reaction to one or two of our reactions (mass action, split, or a propensity).

Decisions, in order:

1. the law is mass action over the reactants (``laws.mass_action``): ``rate = c``;
2. the reaction is reversible and its law is ``F * (forward - backward)`` in any arrangement of
   factors (``laws.factored_difference``), each part mass action over the reactants and the
   products respectively: two reactions ``<id>_fwd`` and ``<id>_rev``;
3. the same shape with other laws (``(Vf*a/Ka - Vr*b/Kb) / (1 + a/Ka + b/Kb)``), where the
   forward part reads no product-only species and the backward part no reactant-only species:
   two reactions with custom laws ``F*f`` and ``F*g`` (a modelling choice, docs/sbml.md);
4. the reaction is reversible and its law subtracts anywhere else (it can go negative):
   refused, for every method (propensities are clamped at 0, so a net rate cannot be kept);
5. otherwise a custom propensity: named laws where the law (or a term of a sum) has their
   shape, else the law with counts substituted (``laws.propensity``).

Boundary and constant species never change: in a mass-action reaction they keep their place
among the reactants (so the propensity reads them) and appear on the product side with the same
multiplicity; in a custom reaction they are left out of both sides (the propensity reads them).
"""

from __future__ import annotations

import math
from typing import Any, Mapping

from sweep.model import expr as expressions
from sweep.spec import limits
from sweep.model.sbml import laws, rules
from sweep.model.sbml.math import TIME, from_ast, render


def convert(ctx, reaction) -> dict[str, dict[str, Any]]:
    """Our reaction entries (name -> ``{reaction, rate}`` or ``{reaction, propensity}``) for one SBML reaction.

    Problems are appended to ``ctx.problems``; notes to ``ctx.notes``.
    """
    rid = reaction.getId()
    where = f"reaction {rid}"
    reactants = _side(ctx, reaction.getListOfReactants(), where, "reactant")
    products = _side(ctx, reaction.getListOfProducts(), where, "product")
    tree = _law(ctx, reaction, where)
    if reactants is None or products is None or tree is None:
        return {}
    formula = _formula(reaction)
    species, beta = ctx.species_ids, ctx.beta
    if reaction.getReversible() and not _net(tree):
        ctx.notes.append((where, "declared reversible, but its law has no backward term: it runs forward only"))
    timed = TIME in laws.names(tree)  # a time-dependent law is never a constant times counts
    ma = None if timed else laws.mass_action(tree, reactants, species, beta, ctx.alpha_e)
    if ma is not None:
        rate, shown = _rate(ctx, rid, ma)
        ctx.notes.append((where, f"{formula} -> mass action, c = {shown}"))
        return {rid: {"reaction": _mass_action_equation(ctx, reactants, products, ma.catalysts), "rate": rate}}
    if reaction.getReversible():
        split = _split(ctx, rid, tree, reactants, products, formula)
        if split is not None:
            return split
        if _net(tree):
            ctx.problems.append(
                f"{where}: reversible, and its law ({formula}) is not a difference of two mass-action terms "
                "(forward over the reactants minus backward over the products), so its net rate can be negative; "
                "every method here needs propensities >= 0 (they are clamped at 0): write a forward and a "
                "backward irreversible reaction, each with its own law")
            return {}
    propensity, named = laws.propensity(tree, species, beta, ctx.alpha_e)
    how = "named law" if named else "custom law"
    ctx.notes.append((where, f"{formula} -> {how}, counts substituted (propensity in molecules per time)"))
    equation = _equation(_drop_fixed(ctx, reactants), _drop_fixed(ctx, products))
    return {rid: {"reaction": equation, "propensity": render(propensity)}}


def _side(ctx, refs, where: str, role: str) -> dict[str, int] | None:
    """Species -> whole stoichiometry, or None after recording a problem."""
    out: dict[str, int] = {}
    ok = True
    for ref in refs:
        sid = ref.getSpecies()
        if not ref.isSetStoichiometry():
            ctx.problems.append(f"{where}: {role} {sid} has no stoichiometry")
            ok = False
            continue
        value = ref.getStoichiometry()
        if not math.isfinite(value) or value != int(value) or value < 1 or value > limits.MAX_STOICHIOMETRY:
            ctx.problems.append(f"{where}: {role} {sid} has stoichiometry {value:g}; only whole numbers from 1 to "
                                f"{limits.MAX_STOICHIOMETRY:,} describe molecules")
            ok = False
            continue
        if sid in ctx.ruled_species:
            continue  # set by an assignment rule (a boundary species): no reaction changes it, laws read its rule
        if sid not in ctx.species:
            ok = False  # its own problem is already listed
            continue
        out[sid] = out.get(sid, 0) + int(value)
    return out if ok else None


def _law(ctx, reaction, where: str) -> tuple | None:
    law = reaction.getKineticLaw()
    if law is None or law.getMath() is None:
        ctx.problems.append(f"{where}: no kinetic law")
        return None
    env = {c: ("num", v) for c, v in ctx.compartments.items()}
    for lp in law.getListOfLocalParameters():
        internal = ctx.fresh(f"{reaction.getId()}__{lp.getId()}")
        ctx.aliases[f"{reaction.getId()}.{lp.getId()}"] = internal
        ctx.notes.append((f"parameter {reaction.getId()}.{lp.getId()}",
                          f"local to reaction {reaction.getId()}: a spec names it \"{reaction.getId()}.{lp.getId()}\", "
                          f"the model (and the store) {internal}"))
        env[lp.getId()] = ("name", internal)
        if not lp.isSetValue():
            ctx.problems.append(f"{where}: local parameter {lp.getId()} has no value")
            continue
        ctx.values[internal] = float(lp.getValue())
    tree = from_ast(law.getMath(), env, ctx.functions, ctx.problems, f"{where} kinetic law")
    if tree is not None:
        tree = rules.inline(ctx, tree, f"{where} kinetic law")
    if tree is None:
        return None
    # membership tests, not set unions: building the sets for every reaction made import O(R x S)
    used = laws.names(tree)
    unknown = {n for n in used if n not in ctx.species and n not in ctx.values and n not in ctx.derived
               and n not in ctx.all_species}
    sizeless = sorted(unknown & ctx.sizeless)
    if sizeless:
        ctx.problems.append(f"{where} kinetic law: reads the size of compartment {', '.join(sizeless)}, which has "
                            "no size; give it one")
    unknown -= ctx.sizeless
    if unknown:
        ctx.problems.append(f"{where} kinetic law: reads {', '.join(sorted(unknown))}, which is not a species, "
                            "parameter or compartment (species references' ids are not supported in math)")
    if unknown or sizeless:
        return None
    if any(n in ctx.all_species and n not in ctx.species for n in used):
        return None  # a species with its own problem
    return tree


def _formula(reaction) -> str:
    import libsbml

    return libsbml.formulaToL3String(reaction.getKineticLaw().getMath())


def _rate(ctx, base: str, ma: laws.MassAction) -> tuple[float | str, str]:
    """A number, an SBML parameter, or a derived parameter ``<base>__c = factor * K``."""
    if ma.constant is None:
        return float(ma.factor), f"{ma.factor:.10g}"
    if ma.factor == 1.0 and ma.constant[0] == "name":
        return ma.constant[1], ma.constant[1]
    name = ctx.fresh(f"{base}__c")
    tree = ma.constant if ma.factor == 1.0 else ("*", ("num", float(ma.factor)), ma.constant)
    add_derived(ctx, name, tree)
    return name, f"{name} = {render(tree)} (derived at every point)"


def add_derived(ctx, name: str, tree: tuple) -> None:
    """Record ``name = tree`` as derived and give it its value at the model's own parameters."""
    text = render(tree)
    ctx.derived[name] = text
    ctx.values[name] = float(expressions.evaluate(expressions.parse(text, ctx.source, name), ctx.values))


def _split(ctx, rid: str, tree: tuple, reactants, products, formula: str) -> dict | None:
    """Two reactions for ``F * (f - g)``: mass action each where they are, else two custom laws."""
    parts = laws.factored_difference(tree)
    if parts is None:
        return None
    common, f, g = parts
    forward, backward = ((t if common == ("num", 1.0) else ("*", common, t)) for t in (f, g))
    species, beta = ctx.species_ids, ctx.beta
    timed = TIME in laws.names(tree)
    fma = None if timed else laws.mass_action(forward, reactants, species, beta, ctx.alpha_e)
    bma = None if timed else laws.mass_action(backward, products, species, beta, ctx.alpha_e)
    names = ctx.fresh(f"{rid}_fwd"), ctx.fresh(f"{rid}_rev")
    if fma is not None and bma is not None:
        out = {}
        for name, ma, left, right in ((names[0], fma, reactants, products), (names[1], bma, products, reactants)):
            rate, shown = _rate(ctx, name, ma)
            out[name] = {"reaction": _mass_action_equation(ctx, left, right, ma.catalysts), "rate": rate}
            ctx.notes.append((f"reaction {rid}", f"{formula} -> split: {name} mass action, c = {shown}"))
        return out
    only_products = set(products) - set(reactants)
    only_reactants = set(reactants) - set(products)
    if (_subtracts(f) or _subtracts(g) or _subtracts_species(common) or laws.names(f) & only_products
            or laws.names(g) & only_reactants):
        return None
    # a modelling choice (docs/sbml.md): the net rate F (f - g) becomes two channels F f and F g;
    # their difference is the law, exactly as the deterministic equations see it
    out = {}
    for name, part, left, right in ((names[0], forward, reactants, products), (names[1], backward, products, reactants)):
        propensity, _ = laws.propensity(part, species, beta, ctx.alpha_e)
        out[name] = {"reaction": _equation(_drop_fixed(ctx, left), _drop_fixed(ctx, right)),
                     "propensity": render(propensity)}
        ctx.notes.append((f"reaction {rid}", f"{formula} -> split into two laws (forward over the reactants, "
                          f"backward over the products): {name} = {render(part)}"))
    return out


def _subtracts_species(tree: tuple) -> bool:
    """A subtraction in a numerator factor of the shared part (it could turn both channels negative)."""
    return any(e > 0 and _subtracts(a) for a, e in laws.product(tree).atoms)


def _net(tree: tuple) -> bool:
    """Whether the law is a net rate: it, or a factor of its numerator, is a difference.

    A subtraction deeper down (inside a function call, a power, a denominator, an inlined
    ``piecewise`` of the time) does not make the law change sign by itself.
    """
    if tree[0] == "neg":
        return True
    prod = laws.product(tree)
    return prod.coef < 0 or any(e > 0 and (a[0] == "neg" or laws.difference(a) is not None) for a, e in prod.atoms)


def _subtracts(tree: tuple) -> bool:
    if tree[0] in ("-", "neg"):
        return True
    if tree[0] in ("num", "name"):
        return False
    children = tree[2] if tree[0] == "call" else tree[1:]
    return any(_subtracts(c) for c in children)


def _mass_action_equation(ctx, reactants: Mapping[str, int], products: Mapping[str, int],
                          catalysts: tuple[str, ...]) -> str:
    left = dict(reactants)
    right = dict(products)
    for c in catalysts:
        left[c] = left.get(c, 0) + 1
        right[c] = right.get(c, 0) + 1
    for s in list(left) + list(right):
        if ctx.species[s].fixed:
            # held fixed: as many on the right as on the left, so the net change is zero
            if left.get(s):
                right[s] = left[s]
            else:
                right.pop(s, None)
    return _equation(left, right)


def _drop_fixed(ctx, side: Mapping[str, int]) -> dict[str, int]:
    return {s: m for s, m in side.items() if not ctx.species[s].fixed}


def _equation(left: Mapping[str, int], right: Mapping[str, int]) -> str:
    def side(terms):
        return " + ".join(s if m == 1 else f"{m} {s}" for s, m in terms.items()) or "0"
    return f"{side(left)} -> {side(right)}"
