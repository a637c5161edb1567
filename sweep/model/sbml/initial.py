"""SBML initial assignments, in general: to parameters and species, reading parameters,
species' initial values and assignment-rule targets.

Each becomes a derived parameter, computed at every point of a sweep (so a varied parameter
moves what is computed from it). In an initial assignment a species symbol means its initial
value in its own units (SBML L3V2 section 4.12), i.e. its initial count divided by its
molecules-per-unit factor beta, so ``S`` is replaced by ``S0 / beta`` where ``S0`` is the number
or the derived parameter that holds S's initial count. An assignment to a species gives its
initial count as ``beta * value`` (rounded to a whole count where the method needs one).
"""

from __future__ import annotations

from typing import Any

from sweep.model import expr as expressions
from sweep.model.sbml import laws, rules
from sweep.model.sbml.math import from_ast, render


def assign(ctx, initial: dict[str, Any]) -> None:
    """Read every initial assignment into ``ctx.derived`` and ``initial`` (species -> count or name)."""
    env = {c: ("num", v) for c, v in ctx.compartments.items()}
    parameters = {p.getId() for p in ctx.model.getListOfParameters()}
    pending = []
    for a in ctx.model.getListOfInitialAssignments():
        symbol = a.getSymbol()
        where = f"initial assignment to {symbol}"
        if symbol in ctx.assigned_targets:
            continue  # an assignment rule holds at t = 0 too and wins (SBML L3V2 section 4.11.3)
        if ctx.model.getParameter(symbol) is None and symbol not in ctx.species:
            if ctx.model.getCompartment(symbol) is not None:
                ctx.problems.append(f"{where}: a compartment's size enters the laws as a fixed number; initial "
                                    "assignments to sizes are not supported (write the size)")
            elif ctx.model.getSpecies(symbol) is None:
                ctx.problems.append(f"{where}: only parameters and species can be assigned initially")
            continue  # a species with its own problem
        tree = from_ast(a.getMath(), env, ctx.functions, ctx.problems, where)
        tree = rules.inline(ctx, tree, where) if tree is not None else None
        if tree is None:
            continue
        pending.append((symbol, where, tree))
    names = {}
    for symbol, _, _ in pending:
        if symbol in ctx.species:
            names[symbol] = ctx.fresh(f"{symbol}__initial")
    for symbol, where, tree in pending:
        tree = _species_read(ctx, tree, initial, names)
        unknown = laws.names(tree) - parameters - set(ctx.derived) - set(names.values()) - set(ctx.values)
        if unknown:
            ctx.problems.append(f"{where}: reads {', '.join(sorted(unknown))}, which has no initial value")
            continue
        if symbol in ctx.species:
            beta = ctx.species[symbol].beta
            name = names[symbol]
            if beta == 1.0 and tree[0] == "name":
                initial[symbol] = tree[1]  # the count is that parameter (our export writes this)
                ctx.taken.discard(name)
                continue
            scaled = tree if beta == 1.0 else ("*", ("num", float(beta)), tree)
            # a whole count, rounded as a literal initial amount is (reader._count)
            ctx.derived[name] = render(("call", "floor", (("+", scaled, ("num", 0.5)),)))
            initial[symbol] = name
        else:
            ctx.derived[symbol] = render(tree)
    evaluate(ctx)


def _species_read(ctx, tree: tuple, initial: dict, names: dict) -> tuple:
    """A species' symbol in an initial assignment is its initial value in its own units."""
    read = laws.names(tree) & set(ctx.species)
    env = {}
    for s in read:
        start = ("name", names[s]) if s in names else (
            ("name", initial[s]) if isinstance(initial[s], str) else ("num", float(initial[s])))
        beta = ctx.species[s].beta
        env[s] = start if beta == 1.0 else ("/", start, ("num", float(beta)))
    return laws.substitute(tree, env) if env else tree


def evaluate(ctx) -> None:
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
            try:
                ctx.values[n] = float(expressions.evaluate(remaining.pop(n), ctx.values))
            except (ArithmeticError, ValueError) as exc:
                ctx.problems.append(f"initial assignment to {n}: cannot be evaluated at the model's values ({exc})")
