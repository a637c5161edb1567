"""Partial rank correlation coefficients (PRCC) with p-values, for LHS, grid and table designs.

Marino, Hogue, Ray & Kirschner (2008), J. Theor. Biol. 254:178-196, section 2.3:
rank-transform every parameter and the output; for parameter j, regress its ranks and the
output's ranks linearly on the ranks of all other parameters; the PRCC is the Pearson
correlation of the two residuals. It measures a monotone (not only linear) association of
the output with x_j once the other parameters' effects are removed, and lies in [-1, 1].

Significance: t = r sqrt(df / (1 - r^2)) with df = n - 2 - p, p = number of other
parameters, follows Student's t under no association (Marino et al. 2008, eq. 9); the
p-value is two-sided. The confidence interval uses Fisher's z = atanh(r) with standard error
1 / sqrt(n - 3 - p) (the partial-correlation version of Fisher 1924).

A PRCC is reported only from at least ``d + 3`` points with a value (d parameters), the fewest
for which both the t-test (df >= 2) and the interval exist; from fewer it is NaN with a note,
never a number: two points give a PRCC of exactly +-1 whatever the model does.
"""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd
from scipy import stats

CONF_LEVEL = 0.95


def indices(x: np.ndarray, y: np.ndarray, names: Sequence[str], facts: Mapping[str, Any], seed: int = 0) -> pd.DataFrame:
    """PRCC of ``y`` with each column of ``x`` (rows with NaN output are dropped).

    Example
    -------
    >>> rng = np.random.default_rng(1)
    >>> x = rng.random((50, 2))
    >>> table = indices(x, np.exp(x[:, 0]), ["a", "b"], {})
    >>> round(float(table["value"][0]), 6)
    1.0
    """
    keep = np.isfinite(y)
    x, y = np.asarray(x, dtype=np.float64)[keep], np.asarray(y, dtype=np.float64)[keep]
    n, d = x.shape
    df = n - 2 - (d - 1)
    rows = []
    for j, name in enumerate(names):
        if n < d + 3:
            rows.append({"parameter": name, "index": "PRCC", "value": np.nan, "conf_low": np.nan, "conf_high": np.nan,
                         "p_value": np.nan, "note": f"too few points with a value ({n} of {keep.size}; PRCC of {d} "
                                                    f"parameter{'s' if d != 1 else ''} needs at least {d + 3})"})
            continue
        r = prcc(x, y, j)
        note = ""
        if not np.isfinite(r) and not note:
            note = "undefined: the parameter or the output is constant once the others are accounted for"
        rows.append({"parameter": name, "index": "PRCC", "value": r, **_significance(r, df, n, d), "note": note})
    return pd.DataFrame(rows)


def prcc(x: np.ndarray, y: np.ndarray, j: int) -> float:
    """The PRCC of ``y`` with column ``j`` of ``x`` (NaN if undefined)."""
    rx = np.column_stack([stats.rankdata(col) for col in x.T])
    ry = stats.rankdata(y)
    others = np.column_stack([np.ones(len(y)), np.delete(rx, j, axis=1)])
    res_x = _residual(others, rx[:, j])
    res_y = _residual(others, ry)
    scale = np.sqrt((res_x @ res_x) * (res_y @ res_y))
    # residuals of exactly collinear ranks are rounding noise: call those undefined
    if scale <= 1e-9 * len(y) ** 3:
        return float("nan")
    return float(np.clip((res_x @ res_y) / scale, -1.0, 1.0))


def _residual(design: np.ndarray, target: np.ndarray) -> np.ndarray:
    coef, *_ = np.linalg.lstsq(design, target, rcond=None)
    return target - design @ coef


def _significance(r: float, df: int, n: int, d: int) -> dict[str, float]:
    if not np.isfinite(r) or df < 1:
        return {"conf_low": np.nan, "conf_high": np.nan, "p_value": np.nan}
    if abs(r) >= 1.0:
        p = 0.0
    else:
        t = r * np.sqrt(df / (1.0 - r * r))
        p = float(2.0 * stats.t.sf(abs(t), df))
    dof_z = n - 3 - (d - 1)
    if dof_z < 1:
        return {"conf_low": np.nan, "conf_high": np.nan, "p_value": p}
    z = np.arctanh(np.clip(r, -1 + 1e-15, 1 - 1e-15))
    half = stats.norm.ppf(0.5 + CONF_LEVEL / 2) / np.sqrt(dof_z)
    return {"conf_low": float(np.tanh(z - half)), "conf_high": float(np.tanh(z + half)), "p_value": p}
