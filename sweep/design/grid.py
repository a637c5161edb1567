"""Full factorial grid over explicit value lists and ranges::

    [design]
    kind = "grid"
    [design.vary]
    k_tx = [0.5, 1.0, 2.0]                                          # these values
    k_off = { low = 0.01, high = 1.0, count = 5, spacing = "log" }  # 5 values, equal ratios
    A0 = { low = 0, high = 100, count = 6, integer = true }         # 0, 20, ..., 100

Points run through every combination; the last parameter changes fastest.
"""

from __future__ import annotations

import itertools
import math
from typing import Any, Mapping

import numpy as np

from sweep.design import Design, levels
from sweep.errors import SpecError

#: the sensitivity method a sweep of this design gets (points spread over the space: partial rank correlation (Marino et al. 2008))
SENSITIVITY = "prcc"


def parse(table: Mapping[str, Any], known: Mapping[str, float], source: str) -> Design:
    """Validate ``kind = "grid"`` with a ``[design.vary]`` table of value lists or ranges.

    Raises
    ------
    SpecError
        Unknown key or parameter, or a bad list or range (see ``sweep.design.levels``).
    """
    levels.check_keys(table, ("kind", "vary"), source, "design", "a grid design")
    vary = table.get("vary", {})
    if not isinstance(vary, dict):
        raise SpecError(source, "design.vary", "must be a table", vary)
    values = tuple((name, levels.parse(name, entry, known, source, f"design.vary.{name}"))
                   for name, entry in vary.items())
    return Design("grid", tuple(n for n, _ in values), (("values", values),))


def expand(design: Design, seed: int = 0) -> np.ndarray:
    """Every combination of the levels; the last parameter varies fastest. Ignores ``seed``.

    Example
    -------
    >>> expand(Design("grid", ("k", "g"), (("values", (("k", (1.0, 2.0)), ("g", (0.1, 0.2, 0.3)))),))).shape
    (6, 2)
    """
    values = dict(design.option("values", ()))
    if not values:
        return np.zeros((1, 0))
    combos = itertools.product(*values.values())
    return np.array(list(combos), dtype=np.float64).reshape(-1, len(values))


def size(design: Design) -> int:
    """The product of the level counts (1 without varied parameters)."""
    return math.prod(len(v) for _, v in design.option("values", ()))


def describe(design: Design) -> dict[str, Any]:
    """Kind, names, and each parameter's levels with their range."""
    values = design.option("values", ())
    return {"kind": "grid", "names": list(design.names),
            "parameters": {name: {"values": list(v), "low": min(v), "high": max(v)} for name, v in values}}
