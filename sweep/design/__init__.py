"""Parameter designs: pure functions from a design spec to a points array."""

from __future__ import annotations

from sweep.design import grid

DESIGNS = {
    "grid": grid.expand,
}

__all__ = ["DESIGNS"]
