"""Per-parameter distributions of the sampled designs (``lhs``, ``sobol``, ``saltelli``).

A sampled design draws points in the unit cube and maps column j through the inverse
distribution function of parameter j, so stratification (LHS) and low discrepancy (Sobol)
carry over to every margin. One entry per parameter under ``[design.vary]``::

    k_tx = { low = 0.1, high = 10 }                                   # uniform
    k_on = { low = 1e-3, high = 1, distribution = "log-uniform" }     # uniform in log k
    g_p  = { distribution = "normal", mean = 0.02, sd = 0.005, low = 0 }   # truncated at 0
    k_tl = { distribution = "lognormal", median = 5, sigma = 0.5 }    # sigma = sd of ln k
    A0   = { low = 0, high = 50, integer = true }                     # whole numbers 0..50

``low``/``high`` truncate a normal or lognormal. An integer parameter is drawn from its
distribution widened by half a unit on each side and rounded, so every whole number from
low to high can occur (equally often under a uniform distribution).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np
from scipy import stats

from sweep.design import levels
from sweep.errors import SpecError

DISTRIBUTIONS = ("uniform", "log-uniform", "normal", "lognormal")
_SHAPE_KEYS = {"uniform": (), "log-uniform": (), "normal": ("mean", "sd"), "lognormal": ("median", "sigma")}
_KEYS = ("distribution", "low", "high", "mean", "sd", "median", "sigma", "integer")
# u is clipped this far from 0 and 1 so an unbounded normal never maps to +-inf
_EDGE = 2.0 ** -53


@dataclass(frozen=True)
class Margin:
    """One parameter's distribution; ``low``/``high`` are None where it is unbounded."""

    name: str
    distribution: str
    low: float | None = None
    high: float | None = None
    mean: float | None = None
    sd: float | None = None
    median: float | None = None
    sigma: float | None = None
    integer: bool = False

    def values(self, u: np.ndarray) -> np.ndarray:
        """Map unit-interval values ``u`` to parameter values (the inverse distribution function)."""
        u = np.asarray(u, dtype=np.float64)
        low, high = self.low, self.high
        if self.integer:
            low = None if low is None else low - 0.5
            high = None if high is None else high + 0.5
        if self.distribution == "uniform":
            x = np.clip(low + u * (high - low), low, high)
        elif self.distribution == "log-uniform":
            # exp(log) can land an ulp outside the range at u = 0 or 1 (a Morris grid's end levels)
            x = np.clip(np.exp(np.log(low) + u * (np.log(high) - np.log(low))), low, high)
        elif self.distribution == "normal":
            x = _truncated_normal(u, self.mean, self.sd, low, high)
        else:
            log_low = None if low is None or low <= 0 else np.log(low)
            x = np.exp(_truncated_normal(u, np.log(self.median), self.sigma, log_low,
                                         None if high is None else np.log(high)))
        if self.integer:
            x = np.clip(np.floor(x + 0.5), self.low if self.low is not None else -np.inf,
                        self.high if self.high is not None else np.inf)
        return x

    def describe(self) -> dict[str, Any]:
        out = {"distribution": self.distribution, "low": self.low, "high": self.high, "integer": self.integer}
        for key in _SHAPE_KEYS[self.distribution]:
            out[key] = getattr(self, key)
        if self.distribution == "lognormal" and self.low is None:
            out["low"] = 0.0  # a lognormal is positive even untruncated
        return out


def _truncated_normal(u, mean, sd, low, high) -> np.ndarray:
    a = -np.inf if low is None else (low - mean) / sd
    b = np.inf if high is None else (high - mean) / sd
    return stats.truncnorm.ppf(np.clip(u, _EDGE, 1.0 - _EDGE), a, b, loc=mean, scale=sd)


def parse(name: str, entry: Any, known: Mapping[str, float], source: str, field: str) -> Margin:
    """Validate one ``[design.vary]`` entry of a sampled design.

    Raises
    ------
    SpecError
        Unknown parameter or key, missing bounds, an empty or reversed range, a log-uniform
        range touching zero, a non-positive sd/median/sigma, non-whole integer bounds.
    """
    levels.check_known(name, known, source, field)
    if not isinstance(entry, dict):
        raise SpecError(source, field, "must be a table describing a distribution", entry,
                        f"e.g. {name} = {{ low = 0.1, high = 10, distribution = \"log-uniform\" }}; "
                        "lists of values belong to a grid design or to [design.conditions]")
    levels.check_keys(entry, _KEYS, source, field, "a sampled parameter")
    distribution = entry.get("distribution", "uniform")
    if distribution not in DISTRIBUTIONS:
        raise SpecError(source, f"{field}.distribution", "unknown distribution", distribution,
                        f"choose one of: {', '.join(DISTRIBUTIONS)}")
    shape = _SHAPE_KEYS[distribution]
    for key in ("mean", "sd", "median", "sigma"):
        if key in entry and key not in shape:
            raise SpecError(source, f"{field}.{key}", f"not used by a {distribution} distribution",
                            fix=f"a {distribution} distribution takes: {', '.join(('low', 'high') + shape)}")
    low, high = levels.bounds(entry, source, field, required=not shape)
    integer = levels.flag(entry, "integer", source, field)
    if integer:
        levels.whole(entry, low, high, source, field)
    _check_positive(distribution, entry, low, integer, source, field)
    shapes = {key: _shape(entry, key, source, field) for key in shape}
    return Margin(name, distribution, low, high, integer=integer, **shapes)


def _shape(entry, key, source, field) -> float:
    value = entry.get(key)
    if not levels.is_number(value):
        raise SpecError(source, f"{field}.{key}", "missing" if key not in entry else "must be a finite number",
                        value if key in entry else ..., f"add {key} = <number>")
    if key != "mean" and value <= 0:
        raise SpecError(source, f"{field}.{key}", "must be > 0", value)
    return float(value)


def _check_positive(distribution, entry, low, integer, source, field) -> None:
    if distribution == "log-uniform" and (low <= 0 or (integer and low < 1)):
        raise SpecError(source, f"{field}.low", "a log range cannot touch zero", entry["low"],
                        "give low > 0 (e.g. 1e-3; 1 for an integer parameter), or use distribution = \"uniform\"")
    if distribution == "lognormal" and low is not None and low < 0:
        raise SpecError(source, f"{field}.low", "a lognormal is positive: low must be >= 0", low)
