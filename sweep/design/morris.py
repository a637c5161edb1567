"""Morris one-at-a-time trajectories for elementary-effects screening, via SALib::

    [design]
    kind = "morris"
    trajectories = 20                  # r: trajectories of D + 1 points each
    levels = 4                         # p: grid levels per parameter (even; default 4)
    [design.vary]
    k_tx = { low = 0.1, high = 10, distribution = "log-uniform" }
    k_off = { low = 0.01, high = 1 }

Morris (1991): each trajectory starts at a random point of a p-level grid in the unit cube
and moves one parameter at a time by delta = p / (2 (p - 1)), in random order, so its D + 1
points give one elementary effect per parameter. The unit-cube points are mapped through
each parameter's range, uniform or log-uniform, as ``sweep.analysis.morris`` maps them back;
distributions without a range (normal, lognormal) and integer parameters are refused, since
elementary effects need the exact grid step. r trajectories cost r (D + 1) points, and the
points keep SALib's trajectory order. Takes ``[design.conditions]`` like the other sampled
designs: the same trajectories at each condition level.
"""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np

from sweep.design import Design, levels, rng, sampled
from sweep.errors import SpecError

#: the sensitivity method a sweep of this design gets (one-at-a-time trajectories: elementary effects (Morris 1991; Campolongo et al. 2007))
SENSITIVITY = "morris"

DEFAULT_LEVELS = 4
DISTRIBUTIONS = ("uniform", "log-uniform")
_KEYS = ("kind", "trajectories", "levels", "vary", "conditions")


def parse(table: Mapping[str, Any], known: Mapping[str, float], source: str) -> Design:
    """Validate ``kind = "morris"``.

    Raises
    ------
    SpecError
        Unknown key or parameter, fewer than 2 trajectories, an odd or too small number of
        levels, a distribution other than uniform or log-uniform, an integer parameter.
    """
    levels.check_keys(table, _KEYS, source, "design", "a Morris design")
    r = sampled.count(table, "trajectories", source)
    if r < 2:
        raise SpecError(source, "design.trajectories", "at least 2 trajectories are needed for the spread sigma", r,
                        "use 10 or more (Campolongo, Cariboni & Saltelli 2007 use 10 to 20)")
    p = table.get("levels", DEFAULT_LEVELS)
    if isinstance(p, bool) or not isinstance(p, int) or p < 2 or p % 2:
        raise SpecError(source, "design.levels", "must be an even whole number >= 2", p,
                        "use 4 (the default) or 6: with an even p every level is visited equally often (Morris 1991)")
    drawn, conditions = sampled.parse_axes(table, known, source)
    for m in drawn:
        field = f"design.vary.{m.name}"
        if m.distribution not in DISTRIBUTIONS:
            raise SpecError(source, f"{field}.distribution", "a Morris design moves on a grid between low and high",
                            m.distribution, 'give low and high with distribution = "uniform" or "log-uniform"')
        if m.integer:
            raise SpecError(source, f"{field}.integer", "a Morris design needs the exact grid step; rounding moves it",
                            True, "leave integer out, or vary it in a grid or Latin hypercube design")
    return Design("morris", sampled.names(drawn, conditions),
                  (("trajectories", r), ("levels", p), ("margins", drawn), ("conditions", conditions)))


def expand(design: Design, seed: int) -> np.ndarray:
    """SALib's trajectories in the unit cube, mapped through the ranges, per condition.

    Example
    -------
    >>> d = parse({"kind": "morris", "trajectories": 3, "vary": {"k": {"low": 0, "high": 1},
    ...            "g": {"low": 1, "high": 2}}}, {"k": 1.0, "g": 1.0}, "s.toml")
    >>> expand(d, 1).shape
    (9, 2)
    """
    from SALib.sample import morris  # imported here: SALib pulls in matplotlib and pandas

    d = len(design.option("margins"))
    unit_problem = {"num_vars": d, "names": [f"u{j}" for j in range(d)], "bounds": [[0.0, 1.0]] * d}
    unit = morris.sample(unit_problem, design.option("trajectories"), num_levels=design.option("levels"),
                         seed=rng(seed))
    return sampled.cross(design, unit)


def points_per_condition(design: Design) -> int:
    """r (D + 1): one trajectory visits D + 1 points (Morris 1991)."""
    return design.option("trajectories") * (len(design.option("margins")) + 1)


def size(design: Design) -> int:
    """r (D + 1) points per condition."""
    return points_per_condition(design) * sampled.conditions(design)


def describe(design: Design) -> dict[str, Any]:
    """Kind, names, ranges and what the elementary-effects analysis needs (levels, trajectories)."""
    drawn = design.option("margins")
    return sampled.describe(
        design, trajectories=design.option("trajectories"), num_levels=design.option("levels"),
        delta=design.option("levels") / (2 * (design.option("levels") - 1)),
        bounds=[[m.low, m.high] for m in drawn], dists=[m.distribution for m in drawn],
        points_per_condition=points_per_condition(design),
        layout="SALib.sample.morris: r trajectories of D + 1 points, one parameter moving per step",
    )
