"""Statistics, distributions and sensitivity of a sweep, computed lazily over its store.

Sensitivity methods are one module each, registered below with one line. Every method module
has the same function::

    indices(x: ndarray (n, d), y: ndarray (n,), names: list[str], facts: dict, seed: int)
        -> pandas.DataFrame with columns parameter, index, value, conf_low, conf_high, p_value, note

``x`` holds the points' values of the ``d`` parameters analysed (in the design's order, one
condition at a time), ``y`` one output per point (NaN where undefined), ``facts`` the design's
description (``sweep.design.describe``), ``seed`` seeds any bootstrap. Which method a store
gets is named by its design's module (``SENSITIVITY``; ``sweep.design.sensitivity``).

Values are dotted module names, imported on first use (SALib pulls in matplotlib and pandas).
"""

from __future__ import annotations

import importlib
from types import ModuleType

METHODS: dict[str, str] = {
    "prcc": "sweep.analysis.prcc",
    "sobol": "sweep.analysis.sobol",
    "morris": "sweep.analysis.morris",
}

def get(name: str) -> ModuleType:
    """The module of sensitivity method ``name`` (a key of ``METHODS``)."""
    return importlib.import_module(METHODS[name])


__all__ = ["METHODS", "get"]
