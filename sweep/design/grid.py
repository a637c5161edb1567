"""Full factorial grid over explicit value lists."""

from __future__ import annotations

import itertools
from typing import Mapping, Sequence

import numpy as np


def expand(values: Mapping[str, Sequence[float]]) -> np.ndarray:
    """Return every combination of the listed values, shape (points, parameters).

    The last parameter varies fastest, so the order is that of nested loops written in
    the order the parameters appear in the spec.

    Example
    -------
    >>> expand({"k": [1.0, 2.0], "g": [0.1, 0.2, 0.3]}).shape
    (6, 2)
    """
    if not values:
        return np.zeros((1, 0))
    combos = itertools.product(*values.values())
    return np.array(list(combos), dtype=np.float64).reshape(-1, len(values))
