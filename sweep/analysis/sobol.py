"""First-order, total and second-order Sobol indices with confidence intervals (Saltelli designs).

The outputs must be in the order of SALib's Saltelli sample (``sweep.design.saltelli``):
N blocks of A, AB_1..AB_D, [BA_1..BA_D,] B. SALib's analyzer (``SALib.analyze.sobol``) then
uses the estimators of Saltelli et al. (2010), Comput. Phys. Commun. 181:259-270, table 2
(first order: b; total: f, Jansen 1999), and bootstrap confidence intervals over the N base
samples (Archer, Saltelli & Sobol 1997). ``conf_low``/``conf_high`` are value -/+ SALib's
half-width at ``CONF_LEVEL``.

Every point of the design is needed: a missing output (a point not run, or a Fano factor at
a zero mean) breaks the pairing, so the indices are then NaN with a note saying why.
"""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

CONF_LEVEL = 0.95
RESAMPLES = 1000


def indices(x: np.ndarray, y: np.ndarray, names: Sequence[str], facts: Mapping[str, Any], seed: int = 0) -> pd.DataFrame:
    """S1, ST (and S2 for second-order designs) of ``y``; ``x`` is not used (the order pairs them).

    ``facts`` needs ``calc_second_order`` (default true).
    """
    from SALib.analyze import sobol  # SALib pulls in matplotlib and pandas

    y = np.asarray(y, dtype=np.float64)
    d = len(names)
    second = bool(facts.get("calc_second_order", True))
    block = 2 * d + 2 if second else d + 2
    note = _problem(y, block)
    if note:
        return _rows(names, second, {}, note)
    problem = {"num_vars": d, "names": list(names), "bounds": [[0.0, 1.0]] * d}
    result = sobol.analyze(problem, y, calc_second_order=second, num_resamples=RESAMPLES,
                           conf_level=CONF_LEVEL, seed=seed)
    return _rows(names, second, result, "")


def _problem(y: np.ndarray, block: int) -> str:
    if y.size == 0 or y.size % block:
        return f"{y.size} outputs are not whole Saltelli blocks of {block} points"
    missing = int(np.count_nonzero(~np.isfinite(y)))
    if missing:
        return (f"{missing} of {y.size} points have no value (not run, or e.g. a Fano factor at zero mean); "
                "Sobol indices need every point")
    if np.ptp(y) == 0:
        return "the output is the same at every point"
    return ""


def _rows(names, second: bool, result, note: str) -> pd.DataFrame:
    rows = []
    for index in ("S1", "ST"):
        for i, name in enumerate(names):
            rows.append(_row(name, index, result, index, i, None, note))
    if second:
        for i, a in enumerate(names):
            for j in range(i + 1, len(names)):
                rows.append(_row(f"{a}:{names[j]}", "S2", result, "S2", i, j, note))
    return pd.DataFrame(rows)


def _row(parameter, index, result, key, i, j, note) -> dict[str, Any]:
    if not result:
        value = conf = np.nan
    elif j is None:
        value, conf = float(result[key][i]), float(result[f"{key}_conf"][i])
    else:
        value, conf = float(result[key][i, j]), float(result[f"{key}_conf"][i, j])
    return {"parameter": parameter, "index": index, "value": value, "conf_low": value - conf,
            "conf_high": value + conf, "p_value": np.nan, "note": note}
