"""Elementary effects (Morris screening) for Morris designs, via SALib's analyzer.

Morris (1991), Technometrics 33:161-174: along each of r one-at-a-time trajectories on a
p-level grid, the elementary effect of x_i is (y(x + delta e_i) - y(x)) / delta. Reported per
parameter: mu (mean effect), mu_star (mean absolute effect, Campolongo, Cariboni & Saltelli
2007, the screening measure) with a bootstrap confidence interval, and sigma (spread: a
non-linear effect or interactions).

Effects are taken in the unit cube of the design: each parameter's values are mapped back
through its distribution (uniform or log-uniform between ``low`` and ``high`` in the design
facts), so mu_star is "output change per whole range" and parameters compare on one scale.

The points come from the ``morris`` design (``sweep.design.morris``: SALib's trajectories,
uniform or log-uniform ranges), whose facts record ``num_levels``, the ranges and the
distributions this module maps back through (``num_levels`` defaults to 4 if missing).
"""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

CONF_LEVEL = 0.95
RESAMPLES = 1000


def indices(x: np.ndarray, y: np.ndarray, names: Sequence[str], facts: Mapping[str, Any], seed: int = 0) -> pd.DataFrame:
    """mu_star (with confidence interval), mu and sigma of ``y`` for each column of ``x``.

    ``x`` is the design's points in trajectory order: r trajectories of D + 1 rows each.
    """
    from SALib.analyze import morris

    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    d = len(names)
    note = ""
    if y.size == 0 or y.size % (d + 1):
        note = f"{y.size} outputs are not whole trajectories of {d + 1} points"
    elif not np.all(np.isfinite(y)):
        note = f"{int(np.count_nonzero(~np.isfinite(y)))} points have no value; elementary effects need every point"
    if note:
        return pd.DataFrame([_row(name, index, np.nan, np.nan, note) for index in ("mu_star", "mu", "sigma")
                             for name in names])
    unit = to_unit(x, names, facts)
    problem = {"num_vars": d, "names": list(names), "bounds": [[0.0, 1.0]] * d}
    result = morris.analyze(problem, unit, y, num_resamples=RESAMPLES, conf_level=CONF_LEVEL,
                            num_levels=int(facts.get("num_levels", 4)), seed=seed)
    rows = [_row(name, "mu_star", result["mu_star"][i], result["mu_star_conf"][i], "") for i, name in enumerate(names)]
    rows += [_row(name, "mu", result["mu"][i], np.nan, "") for i, name in enumerate(names)]
    rows += [_row(name, "sigma", result["sigma"][i], np.nan, "") for i, name in enumerate(names)]
    return pd.DataFrame(rows)


def to_unit(x: np.ndarray, names: Sequence[str], facts: Mapping[str, Any]) -> np.ndarray:
    """Map each column to [0, 1] through its design distribution (uniform if not recorded).

    Example
    -------
    >>> facts = {"parameters": {"k": {"low": 1.0, "high": 100.0, "distribution": "log-uniform"}}}
    >>> to_unit(np.array([[1.0], [10.0], [100.0]]), ["k"], facts).ravel().tolist()
    [0.0, 0.5, 1.0]
    """
    out = np.empty_like(x)
    parameters = facts.get("parameters", {})
    for j, name in enumerate(names):
        info = parameters.get(name, {})
        col = x[:, j]
        low = info.get("low") if info.get("low") is not None else float(np.min(col))
        high = info.get("high") if info.get("high") is not None else float(np.max(col))
        if info.get("distribution") == "log-uniform":
            col, low, high = np.log(col), np.log(low), np.log(high)
        out[:, j] = (col - low) / (high - low) if high > low else 0.0
    return out


def _row(parameter, index, value, conf, note) -> dict[str, Any]:
    value, conf = float(value), float(conf)
    return {"parameter": parameter, "index": index, "value": value, "conf_low": value - conf,
            "conf_high": value + conf, "p_value": np.nan, "note": note}
