"""SBML assignment rules and rate rules.

An assignment rule ``T = f(...)`` holds at every instant (SBML L3V2 section 4.11.3). Its target
is never changed by a reaction (the standard forbids a rule-set species as a non-boundary
reactant or product), so the import does not make it a state variable: wherever a kinetic law,
another rule or an initial assignment reads ``T``, ``f`` is put in its place (inlined, in the
symbol's own units), so the law's dependency graph follows the species ``f`` reads. A rule-set
species is then listed as an observable (``f`` in molecules: ``beta * f`` with counts
substituted), and so is a rule-set parameter that reads species.

A rate rule ``dT/dt = f`` changes ``T`` continuously. Only the deterministic method honours it:
the import records it in ``ctx.ode_only`` (a spec with another method is refused, naming the
rule), makes a rule-set parameter a state variable (``promote``), and writes the rule as two
channels ``0 -> T`` at ``max(g, 0)`` and ``T -> 0`` at ``max(-g, 0)`` with ``g = beta * f`` over
counts (``rate_reactions``): their difference is ``dT/dt`` exactly, although each law is
clamped at 0. Like every state of the ODE, ``T`` is read clipped at 0 by the laws, so a
variable that starts negative is refused (a membrane voltage is not a molecule number).
"""

from __future__ import annotations

from sweep.model.sbml.math import from_ast

_MAX_INLINE_DEPTH = 64  # chains of rules reading rules; deeper is taken for a cycle


def collect(ctx) -> None:
    """Read every rule into ``ctx.assigned`` / ``ctx.rated`` (targets -> trees), or a problem."""
    model = ctx.model
    env = {c: ("num", v) for c, v in ctx.compartments.items()}
    for rule in model.getListOfRules():
        target = rule.getVariable()
        if rule.isAlgebraic():
            ctx.problems.append("algebraic rule: algebraic rules (implicit constraints) are not supported")
            continue
        kind = "rate" if rule.isRate() else "assignment"
        where = f"{kind} rule for {target}"
        if model.getCompartment(target) is not None:
            ctx.problems.append(f"{where}: a compartment whose size changes is not supported "
                                "(sizes are fixed numbers in the laws)")
            continue
        reference = model.getSpeciesReference(target)  # libsbml returns an empty reference for other ids
        if reference is not None and reference.getId() == target and model.getSpecies(target) is None:
            ctx.problems.append(f"{where}: rules for stoichiometries are not supported")
            continue
        tree = from_ast(rule.getMath(), env, ctx.functions, ctx.problems, where)
        if tree is None:
            ctx.refused_rules[target] = where
            continue
        if rule.isRate():
            if target not in ctx.species:
                if target not in ctx.values:
                    ctx.problems.append(f"{where}: its variable has no usable initial value")
                ctx.refused_rules[target] = where
                continue
            ctx.rated[target] = tree
            ctx.ode_only.append((where, "a rate rule changes its variable continuously; only method = \"ode\" "
                                 "integrates it"))
        else:
            ctx.assigned[target] = tree


def targets(model) -> tuple[set[str], set[str]]:
    """(assignment-rule targets, rate-rule targets), before anything else is read."""
    assigned, rated = set(), set()
    for rule in model.getListOfRules():
        if rule.isAssignment():
            assigned.add(rule.getVariable())
        elif rule.isRate():
            rated.add(rule.getVariable())
    return assigned, rated


def inline(ctx, tree: tuple, where: str) -> tuple | None:
    """``tree`` with every assignment-rule target replaced by its rule's math (recursively).

    Returns None (and records a problem that names the rule) when ``tree`` reads the target of
    a rule that could not be read, or rules that read each other in a cycle.
    """
    try:
        return _inline(ctx, tree, where, 0)
    except _Cycle as exc:
        ctx.problems.append(f"{where}: reads {exc.args[0]}, set by assignment rules that read each other in a "
                            "cycle; break the cycle")
        return None
    except _Refused as exc:
        name = exc.args[0]
        ctx.problems.append(f"{where}: reads {name}, which is set by the {ctx.refused_rules[name]} "
                            "(refused, see its own line)")
        return None


class _Cycle(Exception):
    pass


class _Refused(Exception):
    pass


def _inline(ctx, tree: tuple, where: str, depth: int) -> tuple:
    kind = tree[0]
    if kind == "num":
        return tree
    if kind == "name":
        name = tree[1]
        if name in ctx.refused_rules:
            raise _Refused(name)
        if name not in ctx.assigned:
            return tree
        if depth > _MAX_INLINE_DEPTH:
            raise _Cycle(name)
        return _inline(ctx, ctx.assigned[name], where, depth + 1)
    if kind == "call":
        return ("call", tree[1], tuple(_inline(ctx, a, where, depth) for a in tree[2]))
    return (kind, *(_inline(ctx, t, where, depth) for t in tree[1:]))


def observables(ctx, to_counts) -> dict[str, str]:
    """Rule-set species (in molecules) and rule-set parameters that read species, as observables.

    ``to_counts(tree, beta)`` converts a tree in the symbols' units to one over counts and
    parameters, scaled by ``beta`` (molecules per unit of the target).
    """
    from sweep.model.sbml import laws
    from sweep.model.sbml.math import render

    out = {}
    for target, tree in ctx.assigned.items():
        full = inline(ctx, tree, f"assignment rule for {target}")
        if full is None:
            continue
        read = laws.names(full)
        if target in ctx.ruled_species or read & ctx.species_ids:
            beta = ctx.ruled_species.get(target, 1.0)
            if read - ctx.species_ids - set(ctx.values):
                continue  # reads something that is not a value (its problem is listed elsewhere)
            out[target] = render(to_counts(full, beta))
    return out


def promote(ctx, initial: dict, species_record) -> None:
    """A parameter set by a rate rule becomes a state variable (initial value: the parameter's)."""
    for rule in ctx.model.getListOfRules():
        target = rule.getVariable()
        if not rule.isRate() or ctx.model.getParameter(target) is None:
            continue
        where = f"rate rule for {target}"
        value = ctx.values.pop(target, None)
        if value is None:
            ctx.problems.append(f"{where}: the parameter has no value to start from")
            continue
        if not value >= 0:
            ctx.problems.append(f"{where}: its variable starts at {value:g}; the ODE's state is a molecule number, "
                                "read clipped at 0, so a variable that can be negative is not supported")
            continue
        ctx.species[target] = species_record("", 1.0, "amount", True)
        initial[target] = float(value) if value != int(value) else int(value)
        ctx.notes.append((f"parameter {target}", "changed by a rate rule: a state variable of the ODE "
                          "(a column of counts), starting at its value"))


def rate_reactions(ctx, to_counts) -> dict[str, dict]:
    """Two channels per rate rule, ``0 -> T`` at max(g, 0) and ``T -> 0`` at max(-g, 0)."""
    from sweep.model.sbml.math import render

    out = {}
    for target, tree in ctx.rated.items():
        where = f"rate rule for {target}"
        full = inline(ctx, tree, where)
        if full is None:
            continue
        g = to_counts(full, ctx.species[target].beta)
        up, down = ctx.fresh(f"{target}__rate_up"), ctx.fresh(f"{target}__rate_down")
        out[up] = {"reaction": f"0 -> {target}", "propensity": render(("call", "max", (g, ("num", 0.0))))}
        out[down] = {"reaction": f"{target} -> 0", "propensity": render(("call", "max", (("neg", g), ("num", 0.0))))}
        ctx.notes.append((where, f"d{target}/dt = {render(full)} -> channels {up} and {down} (ODE only)"))
    return out
