"""Latin hypercube sample (McKay, Beckman & Conover 1979) via ``scipy.stats.qmc``::

    [design]
    kind = "lhs"
    points = 200                       # sample size n
    optimization = "random-cd"         # optional: space-filling (centred discrepancy) optimisation
    [design.vary]
    k_tx = { low = 0.1, high = 10, distribution = "log-uniform" }
    k_off = { low = 0.01, high = 1 }
    [design.conditions]                # optional: the same sample at each of these levels
    IPTG = [0, 10, 100]

Each parameter's range is cut into n strata of equal probability and every stratum holds
exactly one point. ``random-cd`` only permutes values within columns, so it keeps that
property; scipy's other option (Lloyd) moves points off the strata and is not offered.
"""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np
from scipy.stats import qmc

from sweep.design import Design, levels, rng, sampled
from sweep.errors import SpecError

#: the sensitivity method a sweep of this design gets (points spread over the space: partial rank correlation (Marino et al. 2008))
SENSITIVITY = "prcc"

OPTIMIZATIONS = ("random-cd",)
# random-cd takes ~3 s for 1,000 points and grows faster than linearly; every `sweep.load`
# expands the design, so larger optimised samples are refused rather than left to stall
MAX_OPTIMIZED_POINTS = 1000
_KEYS = ("kind", "points", "optimization", "vary", "conditions")


def parse(table: Mapping[str, Any], known: Mapping[str, float], source: str) -> Design:
    """Validate ``kind = "lhs"``.

    Raises
    ------
    SpecError
        Unknown key or parameter, a bad count, optimisation or distribution.
    """
    levels.check_keys(table, _KEYS, source, "design", "a Latin hypercube design")
    n = sampled.count(table, "points", source)
    optimization = table.get("optimization")
    if optimization is not None and optimization not in OPTIMIZATIONS:
        raise SpecError(source, "design.optimization", "unknown optimisation", optimization,
                        f"choose {', '.join(OPTIMIZATIONS)} or leave it out")
    if optimization is not None and n > MAX_OPTIMIZED_POINTS:
        raise SpecError(source, "design.optimization", f"too slow beyond {MAX_OPTIMIZED_POINTS:,} points", optimization,
                        "leave it out: a plain Latin hypercube this large is already well spread")
    drawn, conditions = sampled.parse_axes(table, known, source)
    return Design("lhs", sampled.names(drawn, conditions),
                  (("points", n), ("optimization", optimization), ("margins", drawn), ("conditions", conditions)))


def expand(design: Design, seed: int) -> np.ndarray:
    """The sample mapped through each parameter's distribution, crossed with the conditions.

    Example
    -------
    >>> d = parse({"kind": "lhs", "points": 4, "vary": {"k": {"low": 0, "high": 1}}}, {"k": 1.0}, "s.toml")
    >>> sorted((expand(d, 1)[:, 0] * 4).astype(int).tolist())
    [0, 1, 2, 3]
    """
    drawn = design.option("margins")
    sampler = qmc.LatinHypercube(len(drawn), optimization=design.option("optimization"), rng=rng(seed))
    return sampled.cross(design, sampler.random(design.option("points")))


def size(design: Design) -> int:
    """The sample size times the number of conditions."""
    return design.option("points") * sampled.conditions(design)


def describe(design: Design) -> dict[str, Any]:
    """Kind, names, distributions, sample size and optimisation."""
    return sampled.describe(design, points_per_condition=design.option("points"),
                            optimization=design.option("optimization"))
