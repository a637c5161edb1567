"""Models from SBML (the open Systems Biology Markup Language), and our models written as SBML.

A spec names an SBML file as its model (``model = "circuit.xml"``: a model file ending in
``.xml`` or ``.sbml`` is read as SBML). ``read`` turns it into a model table that
``sweep.model.parse_model`` validates like any TOML model; ``write`` does the reverse for
``sweep export-model``. libsbml is imported on first use only, so ``sweep --help`` does not
pay for it.

Modules: ``reader`` (document, units, species, initial assignments), ``reactions`` (one
reaction at a time), ``laws`` (mass-action and named-law recognition, conversion to counts),
``math`` (MathML <-> our expression trees, by walking the tree), ``units`` (molecules per
substance unit), ``names`` (dotted local-parameter names in a spec), ``writer`` (export).
"""

from __future__ import annotations

from pathlib import Path

from sweep.model.sbml.names import adapt
from sweep.model.sbml.reader import Imported, read
from sweep.model.sbml.writer import write

SUFFIXES = (".xml", ".sbml")


def is_sbml(path: str | Path) -> bool:
    """Whether a model file is read as SBML (by its suffix: ``.xml`` or ``.sbml``)."""
    return Path(path).suffix.lower() in SUFFIXES


__all__ = ["Imported", "SUFFIXES", "adapt", "is_sbml", "read", "write"]
