"""Full factorial grid over explicit value lists::

    [design]
    kind = "grid"
    [design.vary]
    k_tx = [0.5, 1.0, 2.0]
    k_off = [0.05, 0.1]
"""

from __future__ import annotations

import itertools
from typing import Any, Mapping

import numpy as np

from sweep.design import Design
from sweep.errors import SpecError


def parse(table: Mapping[str, Any], known: Mapping[str, float], source: str) -> Design:
    """Validate ``kind = "grid"`` with a ``[design.vary]`` table of value lists."""
    for key in table:
        if key not in ("kind", "vary"):
            raise SpecError(source, f"design.{key}", "unknown key", fix="a grid design takes: kind, vary")
    vary = table.get("vary", {})
    if not isinstance(vary, dict):
        raise SpecError(source, "design.vary", "must be a table", vary)
    values = []
    for name, listed in vary.items():
        field = f"design.vary.{name}"
        if name not in known:
            raise SpecError(source, field, "not a parameter of the model",
                            fix=f"known parameters: {', '.join(known) or '(none)'}")
        if not isinstance(listed, list) or not listed or not all(_is_number(v) for v in listed):
            raise SpecError(source, field, "must be a non-empty list of numbers", listed,
                            f"e.g. {name} = [0.1, 0.2, 0.4]")
        values.append((name, tuple(float(v) for v in listed)))
    return Design("grid", tuple(n for n, _ in values), (("values", tuple(values)),))


def expand(design: Design, seed: int = 0) -> np.ndarray:
    """Every combination of the listed values; the last parameter varies fastest.

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


def _is_number(v) -> bool:
    return not isinstance(v, bool) and isinstance(v, (int, float)) and bool(np.isfinite(v))
