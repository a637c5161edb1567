"""Saltelli's sampling scheme for variance-based (Sobol) sensitivity indices, via SALib::

    [design]
    kind = "saltelli"
    base_samples = 64                  # N, a power of two
    second_order = true                # also pair the samples for second-order indices (default)
    [design.vary]
    k_tx = { low = 0.1, high = 10, distribution = "log-uniform" }
    k_off = { low = 0.01, high = 1 }

From two independent N x D scrambled Sobol matrices A and B, SALib builds N blocks of
2D + 2 rows (D + 2 without second order): A, then A with column i taken from B for each i,
then (second order) B with column i taken from A, then B (Saltelli 2002; Saltelli et al.
2010). The points keep that order, so an analysis pairs them again from ``describe``'s N, D
and ``calc_second_order`` (SALib.analyze.sobol takes the outputs in exactly this order).
With ``[design.conditions]`` each condition holds one whole Saltelli sample.
"""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np

from sweep.design import Design, levels, rng, sampled
from sweep.errors import SpecError

#: the sensitivity method a sweep of this design gets (the Saltelli cross-sampled matrices: Sobol indices (Saltelli 2002))
SENSITIVITY = "sobol"

_KEYS = ("kind", "base_samples", "second_order", "vary", "conditions")


def parse(table: Mapping[str, Any], known: Mapping[str, float], source: str) -> Design:
    """Validate ``kind = "saltelli"``.

    Raises
    ------
    SpecError
        Unknown key or parameter, N not a power of two, a bad distribution.
    """
    levels.check_keys(table, _KEYS, source, "design", "a Saltelli design")
    n = sampled.count(table, "base_samples", source, power_of_two=True)
    second = table.get("second_order", True)
    if not isinstance(second, bool):
        raise SpecError(source, "design.second_order", "must be true or false", second)
    drawn, conditions = sampled.parse_axes(table, known, source)
    return Design("saltelli", sampled.names(drawn, conditions),
                  (("base_samples", n), ("second_order", second), ("margins", drawn), ("conditions", conditions)))


def rows_per_sample(n: int, d: int, second_order: bool) -> int:
    """N(2D + 2) rows with second-order pairs, N(D + 2) without (Saltelli et al. 2010)."""
    return n * (2 * d + 2 if second_order else d + 2)


def expand(design: Design, seed: int) -> np.ndarray:
    """SALib's Saltelli matrix in the unit cube, mapped through the margins, per condition."""
    from SALib.sample import sobol  # imported here: SALib pulls in matplotlib and pandas

    d = len(design.option("margins"))
    unit_problem = {"num_vars": d, "names": [f"u{j}" for j in range(d)], "bounds": [[0.0, 1.0]] * d}
    unit = sobol.sample(unit_problem, design.option("base_samples"), calc_second_order=design.option("second_order"),
                        scramble=True, seed=rng(seed))
    return sampled.cross(design, unit)


def size(design: Design) -> int:
    """N(2D + 2) or N(D + 2) rows per condition."""
    d = len(design.option("margins"))
    return rows_per_sample(design.option("base_samples"), d, design.option("second_order")) * sampled.conditions(design)


def describe(design: Design) -> dict[str, Any]:
    """Kind, names, distributions, and what SALib's analysis needs to pair the samples."""
    drawn = design.option("margins")
    n, d, second = design.option("base_samples"), len(drawn), design.option("second_order")
    return sampled.describe(
        design, N=n, D=d, calc_second_order=second,
        bounds=[[m.describe()["low"], m.describe()["high"]] for m in drawn],
        dists=[m.distribution for m in drawn],
        points_per_condition=rows_per_sample(n, d, second),
        layout="SALib.sample.sobol: per base sample, A, AB_1..AB_D, [BA_1..BA_D,] B",
    )
