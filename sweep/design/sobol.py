"""Scrambled Sobol sequence (Sobol 1967; Owen scrambling) via ``scipy.stats.qmc``::

    [design]
    kind = "sobol"
    points = 256                       # a power of two
    [design.vary]
    k_tx = { low = 0.1, high = 10, distribution = "log-uniform" }
    k_off = { low = 0.01, high = 1 }

A low-discrepancy sample: for n = 2^m points every elementary interval of length 1/n in
each coordinate holds exactly one point, as in a Latin hypercube, and the first two
coordinates are also balanced jointly. The scrambling is seeded from the root seed.
Takes ``[design.conditions]`` like the other sampled designs.
"""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np
from scipy.stats import qmc

from sweep.design import Design, levels, rng, sampled

#: the sensitivity method a sweep of this design gets (points spread over the space: partial rank correlation (Marino et al. 2008))
SENSITIVITY = "prcc"

_KEYS = ("kind", "points", "vary", "conditions")


def parse(table: Mapping[str, Any], known: Mapping[str, float], source: str) -> Design:
    """Validate ``kind = "sobol"``.

    Raises
    ------
    SpecError
        Unknown key or parameter, a count that is not a power of two, a bad distribution.
    """
    levels.check_keys(table, _KEYS, source, "design", "a Sobol design")
    n = sampled.count(table, "points", source, power_of_two=True)
    drawn, conditions = sampled.parse_axes(table, known, source)
    return Design("sobol", sampled.names(drawn, conditions),
                  (("points", n), ("margins", drawn), ("conditions", conditions)))


def expand(design: Design, seed: int) -> np.ndarray:
    """The first ``points`` scrambled Sobol points, mapped and crossed with the conditions."""
    sampler = qmc.Sobol(len(design.option("margins")), scramble=True, rng=rng(seed))
    return sampled.cross(design, sampler.random(design.option("points")))


def size(design: Design) -> int:
    """The number of points times the number of conditions."""
    return design.option("points") * sampled.conditions(design)


def describe(design: Design) -> dict[str, Any]:
    """Kind, names, distributions and sample size."""
    return sampled.describe(design, points_per_condition=design.option("points"))
