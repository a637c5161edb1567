"""The spec's ``[derived]`` table: parameters computed at every point from the others, in an order
in which each expression comes after the ones it reads (a cycle is refused)."""

from __future__ import annotations

from typing import Mapping

from sweep.errors import SpecError
from sweep.model import expr as expressions
from sweep.model import listing


def _known(values) -> str:
    return f"known parameters: {listing(values)}"


def parse(table, known, overrides, varied, src) -> tuple[tuple[str, expressions.Expr], ...]:
    """Parse ``[derived]`` and order it so every expression comes after the ones it uses."""
    exprs = {}
    for name, text in table.items():
        field = f"derived.{name}"
        if name not in known:
            raise SpecError(src, field, "not a parameter of the model", fix=_known(known))
        if name in overrides or name in varied:
            where = "[parameters]" if name in overrides else "[design]"
            raise SpecError(src, field, f"also set under {where}", fix="a parameter is fixed, varied or derived: pick one")
        if not isinstance(text, str):
            raise SpecError(src, field, "must be an expression in quotes", text,
                            f'e.g. {name} = "k_on * Kd"; a fixed value belongs under [parameters]')
        expr = expressions.parse(text, src, field)
        for used in expr.names:
            if used not in known:
                raise SpecError(src, field, f"unknown name {used!r}", text, _known(known))
        exprs[name] = expr
    return tuple((name, exprs[name]) for name in _evaluation_order(exprs, src))


def _evaluation_order(exprs: Mapping[str, expressions.Expr], src: str) -> list[str]:
    """Depth-first topological order of the derived parameters; a cycle is an error."""
    order: list[str] = []
    state: dict[str, str] = {}

    def visit(name: str, path: list[str]) -> None:
        if state.get(name) == "done":
            return
        if state.get(name) == "open":
            cycle = path[path.index(name):] + [name]
            raise SpecError(src, f"derived.{name}", f"derived parameters form a cycle: {' -> '.join(cycle)}",
                            fix="at least one of them must be fixed or varied instead")
        state[name] = "open"
        for used in exprs[name].names:
            if used in exprs:
                visit(used, path + [name])
        state[name] = "done"
        order.append(name)

    for name in exprs:
        visit(name, [])
    return order
