"""Parameter designs: each kind is one module with three functions.

- ``parse(table, known, source) -> Design`` validates the spec's ``[design]`` table
  (``known`` maps every model parameter to its fixed value) and raises ``SpecError``.
- ``expand(design, seed) -> ndarray (points, len(design.names))`` gives the points; a pure
  function of the design and the spec's root seed (no I/O, clock or environment).
- ``describe(design) -> dict`` gives JSON-ready facts (kind, names, per-parameter ranges and
  what an analysis needs later, e.g. Saltelli's N and D); the store keeps them.
- ``size(design) -> int`` gives the number of points ``expand`` would give, computed without
  expanding, so a spec asking for too many (``sweep.spec.limits.MAX_POINTS``) is refused first.

Same design and seed, same points in the same order: resume and per-point seeds depend on it.

Randomised designs draw from ``rng(seed)``: ``SeedSequence(seed, spawn_key=DESIGN_SPAWN_KEY)``
with a 1-tuple spawn key. Replicate streams use 2-tuples ``(point, replicate)`` and the plan's
calibration runs 3-tuples ``(point, replicate, 1)``; spawn keys of different lengths give
different entropy pools, so the design's numbers never coincide with a replicate's.
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

from sweep.errors import SpecError

DESIGNS: dict[str, str] = {
    "grid": "sweep.design.grid",
    "lhs": "sweep.design.lhs",
    "sobol": "sweep.design.sobol",
    "saltelli": "sweep.design.saltelli",
    "table": "sweep.design.table",
    "morris": "sweep.design.morris",
}

# 0xDE5 reads "DES(ign)"; any constant works as long as the key's length differs from the
# replicate streams' (point, replicate) and the calibration runs' (point, replicate, 1).
DESIGN_SPAWN_KEY = (0xDE5,)


@dataclass(frozen=True)
class Design:
    """A validated design: its kind, the varied parameter names, and kind-specific options.

    ``options`` is a tuple of (key, value) pairs with hashable values, so the design is frozen.
    """

    kind: str
    names: tuple[str, ...]
    options: tuple[tuple[str, Any], ...] = ()

    def option(self, key: str, default: Any = None) -> Any:
        return dict(self.options).get(key, default)


def rng(seed: int) -> np.random.Generator:
    """The design's random generator for a root seed (see the module docstring).

    Example
    -------
    >>> float(rng(1).random()) == float(rng(1).random())
    True
    """
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=DESIGN_SPAWN_KEY))


def parse(table: Mapping[str, Any], known: Mapping[str, float], source: str) -> Design:
    """Validate a ``[design]`` table with the module registered for its ``kind``.

    Raises
    ------
    SpecError
        Unknown kind, or whatever the kind's module finds wrong (naming the field).
    """
    kind = table.get("kind", "grid")
    if not isinstance(kind, str) or kind not in DESIGNS:
        raise SpecError(source, "design.kind", "unknown design", kind, f"choose one of: {', '.join(DESIGNS)}")
    return importlib.import_module(DESIGNS[kind]).parse(table, known, source)


def expand(design: Design, seed: int) -> np.ndarray:
    """The design's points, shape (points, varied parameters)."""
    return importlib.import_module(DESIGNS[design.kind]).expand(design, seed)


def size(design: Design) -> int:
    """The number of points ``expand`` gives, without expanding them.

    Example
    -------
    >>> size(parse({"vary": {"k": [1, 2], "g": [1, 2, 3]}}, {"k": 1.0, "g": 1.0}, "spec.toml"))
    6
    """
    return int(importlib.import_module(DESIGNS[design.kind]).size(design))


def describe(design: Design) -> dict[str, Any]:
    """JSON-serialisable facts about a design, for the store's attributes and for analysis.

    Always ``kind``, ``names`` and ``parameters`` (name -> ``low``, ``high`` and how the
    values are chosen; ``None`` for an unbounded side); each kind adds what it needs, e.g.
    Saltelli's ``N``, ``D``, ``calc_second_order`` and ``bounds`` to pair the samples again.

    Example
    -------
    >>> describe(parse({"vary": {"k": [1, 2]}}, {"k": 1.0}, "spec.toml"))["names"]
    ['k']
    """
    return importlib.import_module(DESIGNS[design.kind]).describe(design)


def sensitivity(kind: str) -> str:
    """The sensitivity method (a key of ``sweep.analysis.METHODS``) that design ``kind`` names."""
    return importlib.import_module(DESIGNS[kind]).SENSITIVITY


__all__ = ["DESIGNS", "DESIGN_SPAWN_KEY", "Design", "describe", "expand", "parse", "rng", "sensitivity", "size"]
