"""Sensitivity of per-point outputs to the swept parameters, by the method the design calls for.

``indices`` is the one entry point: ``sweep analyze`` calls it with the store's design facts,
points and outputs, and the tests call it the same way on functions with known indices.

A design with ``[design.conditions]`` repeats one sample at each condition level; the
sample's parameters are analysed separately at each condition ("sensitivity at each inducer
level"), and the ``condition`` column names it (empty without conditions).
"""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np
import pandas as pd

from sweep import analysis

#: ``points``: points with a value the index was computed from; ``design_points``: points of the design (condition)
COLUMNS = ("method", "condition", "parameter", "index", "value", "conf_low", "conf_high", "p_value", "points",
           "design_points", "note")


def method_for(facts: Mapping[str, Any]) -> str | None:
    """The registered method for the design's kind (None: no sensitivity analysis for it)."""
    from sweep import design

    kind = facts.get("kind", "")
    return design.sensitivity(kind) if kind in design.DESIGNS else None


def indices(facts: Mapping[str, Any], points: np.ndarray, y: np.ndarray, seed: int = 0) -> pd.DataFrame:
    """Sensitivity indices of ``y`` (one value per point) to the design's parameters.

    Parameters
    ----------
    facts : the design's description (``sweep.design.describe``); ``kind`` picks the method,
        ``names`` names the columns of ``points``, ``conditions`` (if any) splits the points.
    points : (points, parameters) parameter values, in the design's order.
    y : output at each point (NaN where undefined).
    seed : seeds bootstrap confidence intervals.

    Returns
    -------
    pandas.DataFrame
        Columns ``COLUMNS``; empty if the design's kind has no method.

    Example
    -------
    >>> facts = {"kind": "lhs", "names": ["a", "b"]}
    >>> x = np.random.default_rng(2).random((40, 2))
    >>> table = indices(facts, x, np.exp(x[:, 0]) - x[:, 1])
    >>> table[["parameter", "index"]].values.tolist(), bool(table["value"][0] > 0 > table["value"][1])
    ([['a', 'PRCC'], ['b', 'PRCC']], True)
    """
    method = method_for(facts)
    if method is None:
        return pd.DataFrame(columns=list(COLUMNS))
    names = list(facts.get("names", []))
    conditions = dict(facts.get("conditions") or {})
    analysed = [n for n in names if n not in conditions]
    columns = [names.index(n) for n in analysed]
    module = analysis.get(method)
    tables = []
    for label, rows in _groups(points, names, conditions):
        table = module.indices(points[rows][:, columns], np.asarray(y)[rows], analysed, facts, seed)
        table.insert(0, "condition", label)
        table.insert(0, "method", method)
        table["points"] = int(np.count_nonzero(np.isfinite(np.asarray(y)[rows])))
        table["design_points"] = int(len(rows))
        tables.append(table)
    return pd.concat(tables, ignore_index=True)[list(COLUMNS)]


def _groups(points: np.ndarray, names: list[str], conditions: Mapping[str, list]) -> list[tuple[str, np.ndarray]]:
    """(label, row indices) of each condition, in the order the design lists the points."""
    if not conditions:
        return [("", np.arange(points.shape[0]))]
    columns = [names.index(n) for n in conditions]
    keys = points[:, columns]
    out = []
    for key in dict.fromkeys(map(tuple, keys)):
        rows = np.flatnonzero(np.all(keys == np.asarray(key), axis=1))
        out.append((", ".join(f"{n}={v:g}" for n, v in zip(conditions, key)), rows))
    return out
