"""What the sampled designs (``lhs``, ``sobol``, ``saltelli``, ``morris``) share.

Each draws an (n, D) sample in the unit cube, maps column j through parameter j's
distribution (``margins``), and optionally crosses the result with a grid over one or two
*condition* parameters: the same sample is repeated at every condition, so differences
between conditions are not differences between samples ("sensitivity at each inducer level")::

    [design.conditions]
    IPTG = [0, 10, 100]

Points are condition-major: all n sampled points at the first condition, then at the next
(the last condition parameter changes fastest). ``names`` lists the condition parameters first.
"""

from __future__ import annotations

import itertools
import math
from typing import Any, Mapping

import numpy as np

from sweep.spec import limits
from sweep.design import Design, levels, margins
from sweep.errors import SpecError

MAX_CONDITIONS = 2


def parse_axes(table: Mapping[str, Any], known: Mapping[str, float], source: str,
               ) -> tuple[tuple[margins.Margin, ...], tuple[tuple[str, tuple[float, ...]], ...]]:
    """The ``[design.vary]`` distributions and the ``[design.conditions]`` levels."""
    vary = _table(table, "vary", source, required=True)
    conditions = _table(table, "conditions", source, required=False)
    if len(conditions) > MAX_CONDITIONS:
        raise SpecError(source, "design.conditions", f"at most {MAX_CONDITIONS} condition parameters",
                        list(conditions), "sample the others under [design.vary], or use a grid design")
    out = []
    for name, entry in conditions.items():
        field = f"design.conditions.{name}"
        if name in vary:
            raise SpecError(source, field, "also sampled under [design.vary]", fix="keep it in one of the two")
        out.append((name, levels.parse(name, entry, known, source, field)))
    drawn = tuple(margins.parse(name, entry, known, source, f"design.vary.{name}") for name, entry in vary.items())
    return drawn, tuple(out)


def _table(table, key, source, required) -> dict:
    value = table.get(key, {})
    if not isinstance(value, dict):
        raise SpecError(source, f"design.{key}", "must be a table", value, f"write it as [design.{key}]")
    if required and not value:
        raise SpecError(source, f"design.{key}", "missing or empty",
                        fix=f'add [design.{key}] with e.g. k = {{ low = 0.1, high = 10, distribution = "log-uniform" }}')
    return value


def count(table: Mapping[str, Any], key: str, source: str, power_of_two: bool = False) -> int:
    """A whole-number count >= 1 (a power of two where the Sobol sequence's balance needs it)."""
    value = table.get(key)
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        raise SpecError(source, f"design.{key}", "missing" if value is None else "must be a whole number >= 1",
                        value if value is not None else ..., f"add {key} = <whole number> under [design]")
    if value > limits.MAX_POINTS:
        raise SpecError(source, f"design.{key}", f"more than the {limits.MAX_POINTS:,} points a sweep can hold",
                        value, f"use at most {limits.MAX_POINTS:,}")
    if power_of_two and value & (value - 1):
        below = 1 << (value.bit_length() - 1)
        raise SpecError(source, f"design.{key}", "must be a power of two (Sobol points are balanced only then)",
                        value, f"use {below} or {below * 2}")
    return value


def conditions(design: Design) -> int:
    """How many condition levels the sample is repeated at (1 without conditions)."""
    return math.prod(len(v) for _, v in design.option("conditions", ()))


def names(drawn, conditions) -> tuple[str, ...]:
    return tuple(n for n, _ in conditions) + tuple(m.name for m in drawn)


def cross(design: Design, unit: np.ndarray) -> np.ndarray:
    """Map a unit-cube sample through the margins and repeat it at every condition."""
    drawn = design.option("margins")
    values = np.column_stack([m.values(unit[:, j]) for j, m in enumerate(drawn)]).astype(np.float64)
    conditions = design.option("conditions", ())
    if not conditions:
        return values
    grid = np.array(list(itertools.product(*(v for _, v in conditions))), dtype=np.float64)
    n = values.shape[0]
    return np.hstack([np.repeat(grid, n, axis=0), np.tile(values, (grid.shape[0], 1))])


def describe(design: Design, **extra: Any) -> dict[str, Any]:
    """The facts every sampled design records, plus ``extra``."""
    drawn = design.option("margins")
    conditions = design.option("conditions", ())
    parameters = {name: {"condition": True, "values": list(v), "low": min(v), "high": max(v)} for name, v in conditions}
    parameters.update((m.name, m.describe()) for m in drawn)
    return {"kind": design.kind, "names": list(design.names), "sampled": [m.name for m in drawn],
            "conditions": {name: list(v) for name, v in conditions}, "parameters": parameters, **extra}
