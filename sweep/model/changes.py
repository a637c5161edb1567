"""Interventions as written: timed changes (``[[change]]``) and state-triggered ones (``[[when]]``).

A model file (or a spec, whose lists add to its model's) lists them::

    [[change]]                      # at t = 60 (a number or a parameter name: sweepable)
    at = 60.0
    set = { k_tx = 4.0 }            # species counts or parameters
    add = { inducer = 100 }         # species only; also subtract
    keep = { mRNA = 0.5 }           # binomial thinning; keep = 0.5 thins every species
    every = 120.0                   # optional: again every 120 from `at` ...
    count = 5                       # ... 5 times in all (without count: to the end)

    [[when]]
    condition = "P >= 500"          # one species, one of >= > <= <, a number or a parameter
    set = { k_tx = 0.0 }
    repeat = false                  # once (the default), or each time it becomes true again

This module only reads and checks what is written, against the model's names; the values a
parameter gives at a point are checked, and each point's ``kernels.interventions.Schedule`` built, by
``sweep.model.schedule``. A condition is read with Python's parser and checked node by node,
never evaluated.
"""

from __future__ import annotations

import ast
import math
from dataclasses import dataclass
from typing import Any, Collection, Mapping

from sweep.errors import SpecError

Value = "float | str"  # a number, or the name of a parameter (resolved at each point)
KINDS = ("set", "add", "subtract", "keep")
COMPARISONS = {ast.GtE: ">=", ast.Gt: ">", ast.LtE: "<=", ast.Lt: "<"}
_CHANGE_KEYS = {"at", "every", "count", *KINDS}
_WHEN_KEYS = {"condition", "repeat", *KINDS}
MAX_LISTED = 10_000  # entries in one [[change]] or [[when]] list (limits.MAX_INSTANTS bounds their instants)


@dataclass(frozen=True)
class Step:
    """One operation: ``kind`` ("set", "add", "subtract", "keep") of ``target`` (a species, or a
    parameter for "set") with ``value`` (a number or a parameter name). ``field`` names it in errors."""

    kind: str
    target: str
    value: float | str
    field: str


@dataclass(frozen=True)
class Change:
    """A timed change: its steps at ``at``, and again every ``every`` (``count`` times in all, or to the end)."""

    at: float | str
    steps: tuple[Step, ...]
    every: float | str | None
    count: int | str | None
    source: str
    field: str


@dataclass(frozen=True)
class Trigger:
    """A state-triggered change: its steps when ``species compare threshold`` becomes true (once or each time)."""

    species: str
    compare: str
    threshold: float | str
    steps: tuple[Step, ...]
    repeat: bool
    source: str
    field: str


Intervention = Change | Trigger


def parse_lists(table: Mapping[str, Any], species: Collection[str], parameters: Collection[str],
                source: str, prefix: str = "") -> tuple[Intervention, ...]:
    """The ``change`` and ``when`` lists of a model or spec table, checked against its names.

    Raises
    ------
    SpecError
        Naming the file, the field (``change[0].keep.mRNA``) and the fix.

    Example
    -------
    >>> parse_lists({"change": [{"at": 5.0, "add": {"A": 10}}]}, ["A"], [], "m.toml")[0].at
    5.0
    """
    names = _Names(tuple(species), frozenset(parameters), source)
    out: list[Intervention] = []
    for key, parse in (("change", _change), ("when", _when)):
        entries = table.get(key, [])
        field = f"{prefix}{key}"
        if not isinstance(entries, list) or not all(isinstance(e, dict) for e in entries):
            raise SpecError(source, field, "must be a list of tables", entries,
                            f"write each one under its own [[{field}]] header")
        if len(entries) > MAX_LISTED:
            raise SpecError(source, field, f"{len(entries):,} entries, more than {MAX_LISTED:,}",
                            fix="use every/count for a repeated change")
        out.extend(parse(entry, names, f"{field}[{i}]") for i, entry in enumerate(entries))
    return tuple(out)


@dataclass(frozen=True)
class _Names:
    species: tuple[str, ...]
    parameters: frozenset[str]
    source: str

    def error(self, field: str, problem: str, value: Any = ..., fix: str = "") -> SpecError:
        return SpecError(self.source, field, problem, value, fix)


def _change(entry: dict, names: _Names, field: str) -> Change:
    _keys(entry, _CHANGE_KEYS, names, field)
    if "at" not in entry:
        raise names.error(f"{field}.at", "missing", fix="give the time of the change: a number >= 0 or a parameter")
    at = _value(entry["at"], names, f"{field}.at", minimum=0.0, what="a time")
    every = count = None
    if "every" in entry:
        every = _value(entry["every"], names, f"{field}.every", minimum=0.0, what="a period", strict=True)
    if "count" in entry:
        if "every" not in entry:
            raise names.error(f"{field}.count", "a count needs a period", entry["count"],
                              "add every = <period>, or remove count")
        count = _value(entry["count"], names, f"{field}.count", minimum=1.0, what="a number of occurrences",
                       whole=True)
        count = int(count) if not isinstance(count, str) else count
    return Change(at, _steps(entry, names, field), every, count, names.source, field)


def _when(entry: dict, names: _Names, field: str) -> Trigger:
    _keys(entry, _WHEN_KEYS, names, field)
    if "condition" not in entry:
        raise names.error(f"{field}.condition", "missing", fix='e.g. condition = "P >= 500"')
    species, compare, threshold = _condition(entry["condition"], names, f"{field}.condition")
    repeat = entry.get("repeat", False)
    if not isinstance(repeat, bool):
        raise names.error(f"{field}.repeat", "must be true or false", repeat,
                          "false: once (the default); true: each time the condition becomes true again")
    return Trigger(species, compare, threshold, _steps(entry, names, field), repeat, names.source, field)


def _keys(entry: dict, allowed: set, names: _Names, field: str) -> None:
    for key in entry:
        if key not in allowed:
            raise names.error(f"{field}.{key}", "unknown key", fix=f"expected one of: {', '.join(sorted(allowed))}")


def _steps(entry: dict, names: _Names, field: str) -> tuple[Step, ...]:
    """The operations in the order written (``kernels.changes`` applies them in that order)."""
    steps: list[Step] = []
    for kind in [k for k in entry if k in KINDS]:
        table = entry[kind]
        where = f"{field}.{kind}"
        if kind == "keep" and not isinstance(table, dict):
            table = {s: table for s in names.species}  # keep = f: every species
        if not isinstance(table, dict) or not table:
            raise names.error(where, "must be a non-empty table of name = value", table,
                              f"e.g. {kind} = {{ A = 10 }}")
        for target, value in table.items():
            steps.append(_step(kind, target, value, names, f"{where}.{target}"))
    if not steps:
        raise names.error(field, "changes nothing", fix=f"give at least one of {', '.join(KINDS)}")
    return tuple(steps)


def _step(kind: str, target: Any, value: Any, names: _Names, field: str) -> Step:
    is_species = target in names.species
    if not is_species and not (kind == "set" and target in names.parameters):
        what = "a species or a parameter" if kind == "set" else "a species"
        raise names.error(field, f"not {what} of the model", fix=f"{kind} applies to {what}")
    if kind == "keep":
        v = _value(value, names, field, minimum=0.0, maximum=1.0, what="a survival probability")
    elif is_species:
        v = _value(value, names, field, minimum=0.0, what="a number of molecules", whole=True)
    else:
        v = _value(value, names, field, minimum=None, what="a parameter value")
    return Step(kind, target, v, field)


def _value(value: Any, names: _Names, field: str, *, minimum: float | None, what: str,
           maximum: float | None = None, strict: bool = False, whole: bool = False) -> float | str:
    """A number within bounds, or a parameter name (checked at every point by ``sweep.model.schedule``)."""
    if isinstance(value, str):
        if value not in names.parameters:
            raise names.error(field, f"{value!r} is not a parameter of the model", value,
                              f"give {what} as a number, or the name of a parameter in [parameters]")
        return value
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise names.error(field, f"must be {what}: a finite number or a parameter name", value)
    problem = bounds_problem(float(value), minimum, maximum, strict, whole)
    if problem:
        raise names.error(field, f"{what} {problem}", value)
    return float(value)


def bounds_problem(v: float, minimum: float | None, maximum: float | None, strict: bool, whole: bool) -> str:
    """What is wrong with ``v`` for these bounds ("" if nothing); shared with the per-point checks."""
    if minimum is not None and (v <= minimum if strict else v < minimum):
        return f"must be {'>' if strict else '>='} {minimum:g}"
    if maximum is not None and v > maximum:
        return f"must be <= {maximum:g}"
    if whole and v != int(v):
        return "must be a whole number"
    return ""


def _condition(text: Any, names: _Names, field: str) -> tuple[str, str, float | str]:
    """``"P >= 500"`` -> ("P", ">=", 500.0): one species, one comparison, a number or a parameter."""
    fix = 'write "<species> <op> <number or parameter>" with op one of >= > <= <, e.g. "P >= 500"'
    if not isinstance(text, str) or len(text) > 200:
        raise names.error(field, "must be a short condition in quotes", text, fix)
    try:
        tree = ast.parse(text.strip(), mode="eval").body
    except SyntaxError as exc:
        raise names.error(field, "cannot read the condition", text, fix) from exc
    if not (isinstance(tree, ast.Compare) and len(tree.ops) == 1 and type(tree.ops[0]) in COMPARISONS
            and isinstance(tree.left, ast.Name)):
        raise names.error(field, "not a single comparison of a species", text, fix)
    species = tree.left.id
    if species not in names.species:
        raise names.error(field, f"{species!r} is not a species of the model", text, fix)
    right = tree.comparators[0]
    negative = isinstance(right, ast.UnaryOp) and isinstance(right.op, ast.USub)
    node = right.operand if negative else right
    if isinstance(node, ast.Name) and not negative:
        threshold: float | str = _value(node.id, names, field, minimum=None, what="a threshold")
    elif isinstance(node, ast.Constant) and type(node.value) in (int, float) and math.isfinite(node.value):
        threshold = -float(node.value) if negative else float(node.value)
    else:
        raise names.error(field, "the threshold must be a number or a parameter name", text, fix)
    return species, COMPARISONS[type(tree.ops[0])], threshold


def referenced(interventions: tuple[Intervention, ...]) -> set[str]:
    """Parameters whose values the interventions read (times, periods, counts, amounts, thresholds)."""
    out: set[str] = set()
    for item in interventions:
        fields = [s.value for s in item.steps]
        fields += [item.at, item.every, item.count] if isinstance(item, Change) else [item.threshold]
        out |= {v for v in fields if isinstance(v, str)}
    return out


def describe(interventions: tuple[Intervention, ...]) -> list[dict[str, Any]]:
    """JSON-ready form, in order (the fingerprint of a sweep includes it: ``sweep.spec.identity``)."""
    out = []
    for item in interventions:
        steps = [[s.kind, s.target, s.value] for s in item.steps]
        if isinstance(item, Change):
            out.append({"at": item.at, "every": item.every, "count": item.count,
                        "steps": steps})
        else:
            out.append({"condition": [item.species, item.compare, item.threshold],
                        "repeat": item.repeat, "steps": steps})
    return out
