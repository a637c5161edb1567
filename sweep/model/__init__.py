"""Reaction-network models: the model tables, rate expressions, rate laws and SBML import/export.

``tables`` parses a model table into a frozen ``Model`` and compiles it into the kernels'
``Network``; ``expr`` parses rate expressions with a whitelist (never ``eval``); ``ratelaws``
turns laws into the kernels' law programs; ``sbml`` reads and writes the open standard.
"""

from typing import TYPE_CHECKING

from sweep import lazy

_NAMES = {
    "AVOGADRO": "sweep.model.tables",
    "UNIT_SYSTEMS": "sweep.model.tables",
    "Model": "sweep.model.tables",
    "Reaction": "sweep.model.tables",
    "compile_network": "sweep.model.tables",
    "concentration_factor": "sweep.model.tables",
    "describe": "sweep.model.tables",
    "initial_counts": "sweep.model.tables",
    "listing": "sweep.model.tables",
    "parse_equation": "sweep.model.tables",
    "parse_model": "sweep.model.tables",
    "rate_constants": "sweep.model.tables",
}
__all__ = sorted(_NAMES)
__getattr__, __dir__ = lazy.exports(__name__, _NAMES)

if TYPE_CHECKING:  # what type checkers and IDEs see
    from sweep.model.tables import (AVOGADRO, UNIT_SYSTEMS, Model, Reaction, compile_network, concentration_factor,
                                    describe, initial_counts, listing, parse_equation, parse_model, rate_constants)
