"""Substance and extent units of an SBML model as molecules per unit.

Only what decides the numbers is read: how many molecules one unit of substance (or of reaction
extent) is. ``item`` is one molecule; ``mole`` is Avogadro's number of them; a unit definition
made of exactly one ``mole`` or ``item`` unit with exponent 1 scales that by
``(multiplier * 10**scale)`` (SBML Level 3 Version 2, section 4.4). A definition made of one
``dimensionless`` unit (curated models redefine ``substance`` so, for normalised amounts) is read
as items: one unit is one molecule, a modelling choice that ``sweep check`` states. Anything else
(grams, products of units) cannot be turned into molecule counts and is refused.
Volume and time units are not converted: laws and sizes are used in the model's own units,
which is consistent by construction (a concentration is an amount per compartment size).
"""

from __future__ import annotations

from sweep.model.sbml.math import AVOGADRO


def molecules_per(unit_id: str, model, what: str, problems: list[str],
                  notes: list | None = None) -> float | None:
    """Molecules per one ``unit_id`` of substance; None (and a problem) if it is not a substance unit.

    Parameters
    ----------
    unit_id : str
        A base unit (``"mole"``, ``"item"``) or the id of a unit definition.
    model : libsbml.Model
    what : str
        The element using it, for the problem text (e.g. ``"species A substanceUnits"``).
    problems : list of str
        Appended to when the unit cannot be converted.
    notes : list of (element, text), optional
        Appended to when a dimensionless unit is read as items.

    Example
    -------
    >>> molecules_per("item", None, "species A", [])
    1.0
    """
    if unit_id == "item":
        return 1.0
    if unit_id == "mole":
        return AVOGADRO
    if unit_id == "dimensionless":
        if notes is not None and ("unit dimensionless", _ITEMS.format(unit_id, 1.0)) not in notes:
            notes.append(("unit dimensionless", _ITEMS.format(unit_id, 1.0)))
        return 1.0
    definition = model.getUnitDefinition(unit_id) if model is not None else None
    if definition is None:
        problems.append(f"{what}: {unit_id!r} is not a substance unit (use mole, item, or a unit definition of one)")
        return None
    import libsbml

    units = [definition.getUnit(i) for i in range(definition.getNumUnits())]
    if len(units) == 1 and units[0].getKind() == libsbml.UNIT_KIND_DIMENSIONLESS:
        scale = units[0].getMultiplier() * 10.0 ** units[0].getScale()
        if notes is not None and (f"unit {unit_id}", _ITEMS.format(unit_id, scale)) not in notes:
            notes.append((f"unit {unit_id}", _ITEMS.format(unit_id, scale)))
        return scale
    kinds = {libsbml.UNIT_KIND_MOLE: AVOGADRO, libsbml.UNIT_KIND_ITEM: 1.0}
    if len(units) != 1 or units[0].getKind() not in kinds or units[0].getExponentAsDouble() != 1.0:
        problems.append(f"{what}: unit definition {unit_id!r} is not a multiple of mole or item")
        return None
    unit = units[0]
    return kinds[unit.getKind()] * unit.getMultiplier() * 10.0 ** unit.getScale()


_ITEMS = ("defined as dimensionless: read as items, one {0} = {1:g} molecule(s) (a normalised amount "
          "taken as a molecule count; set a model volume or rescale the model if that is not meant)")
