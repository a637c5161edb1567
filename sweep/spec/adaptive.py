"""The ``[run.adaptive]`` table: the precision target of adaptive replicates (parsed with the spec).

    [run.adaptive]
    statistic = "fano"                 # mean | var | sd | cv | fano (as in `sweep analyze`)
    species = "protein"                # optional with a single species
    time = "last"                      # or a sample time (the nearest sample is used)
    precision = 0.05                   # target standard error: 5 % of the value ...
    relative = true                    # ... or, with false, in the statistic's own units
    max_replicates = 5000              # never more than this per point (the store's size)

The rounds that meet it are ``sweep.execute.adaptive``'s.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

from sweep.analysis.options import NAMES, SPECIES_STATISTICS
from sweep.errors import SpecError

_KEYS = ("statistic", "species", "time", "precision", "relative", "max_replicates")


@dataclass(frozen=True)
class Adaptive:
    """The ``[run.adaptive]`` target. ``time`` is a sample time of the spec's grid."""

    statistic: str
    species: str
    time: float
    precision: float
    relative: bool
    max_replicates: int

    @property
    def description(self) -> str:
        """'standard error of the mean of A at t = 20 <= 5 % of the value'."""
        target = f"{100 * self.precision:.3g} % of the value" if self.relative else f"{self.precision:g}"
        return f"standard error of the {NAMES[self.statistic]} of {self.species} at t = {self.time:g} <= {target}"


def parse(table: Any, replicates: int, species: Sequence[str], times: Sequence[float], deterministic: bool,
          source: str) -> Adaptive:
    """Validate ``[run.adaptive]``.

    Raises
    ------
    SpecError
        An unknown key, statistic or species; a time outside the grid; a precision that is not
        a positive number; ``max_replicates`` below ``run.replicates``; a deterministic method.

    Example
    -------
    >>> parse({"max_replicates": 800}, 100, ["A"], [0.0, 5.0, 10.0], False, "s.toml").time
    10.0
    """
    where = "run.adaptive"
    if not isinstance(table, dict):
        raise SpecError(source, where, "must be a table", table, "write it as [run.adaptive]")
    unknown = sorted(set(table) - set(_KEYS))
    if unknown:
        raise SpecError(source, f"{where}.{unknown[0]}", "unknown key", fix=f"the keys are: {', '.join(_KEYS)}")
    if deterministic:
        raise SpecError(source, where, "a deterministic method has one trajectory per point; nothing to add",
                        fix="remove [run.adaptive], or choose a stochastic method")
    statistic = table.get("statistic", "mean")
    if statistic not in SPECIES_STATISTICS:
        raise SpecError(source, f"{where}.statistic", "unknown statistic", statistic,
                        f"choose one of: {', '.join(SPECIES_STATISTICS)}")
    return Adaptive(statistic, _species(table, species, source), _time(table, times, source),
                    _precision(table, source), _flag(table, "relative", source),
                    _max_replicates(table, replicates, source))


def _species(table, species, source) -> str:
    if "species" not in table and len(species) == 1:
        return species[0]
    name = table.get("species")
    if name not in species:
        raise SpecError(source, "run.adaptive.species", "missing" if name is None else "not a species of the model",
                        name if name is not None else ..., f"choose one of: {', '.join(species)}")
    return name


def _time(table, times, source) -> float:
    """The sample time nearest ``time`` ("last" by default), refusing times off the grid."""
    value = table.get("time", "last")
    grid = np.asarray(times, dtype=np.float64)
    if value == "last":
        return float(grid[-1])
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise SpecError(source, "run.adaptive.time", 'must be a sample time or "last"', value)
    spacing = float(np.min(np.diff(grid))) if grid.size > 1 else 0.0
    if value < grid[0] - spacing / 2 or value > grid[-1] + spacing / 2:
        raise SpecError(source, "run.adaptive.time", f"outside the sampled times {grid[0]:g}..{grid[-1]:g}", value,
                        'give a time within [time], or "last"')
    return float(grid[int(np.argmin(np.abs(grid - value)))])


def _precision(table, source) -> float:
    value = table.get("precision", 0.05)
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not (math.isfinite(value) and value > 0):
        raise SpecError(source, "run.adaptive.precision", "must be a number > 0", value,
                        "e.g. 0.05 for a standard error of 5 % of the value")
    return float(value)


def _flag(table, key, source) -> bool:
    value = table.get(key, True)
    if not isinstance(value, bool):
        raise SpecError(source, f"run.adaptive.{key}", "must be true or false", value)
    return value


def _max_replicates(table, replicates, source) -> int:
    value = table.get("max_replicates")
    if isinstance(value, bool) or not isinstance(value, int):
        raise SpecError(source, "run.adaptive.max_replicates", "missing" if value is None else "must be a whole number",
                        value if value is not None else ..., f"add max_replicates = <whole number >= {replicates}>")
    if value < replicates:
        raise SpecError(source, "run.adaptive.max_replicates", f"must be at least run.replicates ({replicates})", value)
    return value
