"""Parameter designs: each kind is one module with two pure functions.

- ``parse(table, known, source) -> Design`` validates the spec's ``[design]`` table
  (``known`` maps every model parameter to its fixed value) and raises ``SpecError``.
- ``expand(design, seed) -> ndarray (points, len(design.names))`` gives the points.

Same design and seed, same points in the same order: resume and per-point seeds depend on it.
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

from sweep.errors import SpecError

DESIGNS: dict[str, str] = {
    "grid": "sweep.design.grid",
}


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


def parse(table: Mapping[str, Any], known: Mapping[str, float], source: str) -> Design:
    """Validate a ``[design]`` table with the module registered for its ``kind``."""
    kind = table.get("kind", "grid")
    if kind not in DESIGNS:
        raise SpecError(source, "design.kind", "unknown design", kind, f"choose one of: {', '.join(DESIGNS)}")
    return importlib.import_module(DESIGNS[kind]).parse(table, known, source)


def expand(design: Design, seed: int) -> np.ndarray:
    """The design's points, shape (points, varied parameters)."""
    return importlib.import_module(DESIGNS[design.kind]).expand(design, seed)


__all__ = ["DESIGNS", "Design", "expand", "parse"]
