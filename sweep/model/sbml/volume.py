"""A system volume for macroscopic SBML models, the copy numbers it gives, and the time unit.

A curated model in micromolar in a 1 L compartment holds ~1e17 molecules: fine for the ODE, far
beyond what an exact stochastic method can step through. A spec's ``model_volume = V`` (litres)
scales every molecules-per-substance factor (``N_A`` per mole, and so on) by ``f = V / V_model``,
where ``V_model`` is the model's largest compartment in litres. That is the same as multiplying
every compartment size by ``f`` while keeping every concentration: the model's own equations, in
its own units, are unchanged (the ODE solution divided by the factor is the same), and the copy
numbers, so the stochastic noise, are those of a system of volume V (Gillespie 1977: the
propensity of a reaction is its deterministic rate times N_A V).
"""

from __future__ import annotations

import math

from sweep.errors import SpecError

FEW = 10          # below this many molecules of every species, noise dominates: exact methods fit
MANY = 1e7        # above this, an exact method steps through ~N events per unit time: ode or cle fits better


def scale(ctx, model_volume: float | None) -> float:
    """``model_volume / V_model`` (1 when no volume is given), with a note saying so."""
    if model_volume is None:
        return 1.0
    if isinstance(model_volume, bool) or not isinstance(model_volume, (int, float)) \
            or not math.isfinite(model_volume) or model_volume <= 0:
        raise SpecError(ctx.source, "model_volume", "must be a finite number of litres > 0", model_volume,
                        "e.g. model_volume = 1e-15 (one femtolitre, a bacterium)")
    sizes = []
    for c in ctx.model.getListOfCompartments():
        if c.getId() in ctx.compartments and c.getSpatialDimensionsAsDouble() == 3:
            sizes.append((ctx.compartments[c.getId()] * _litres(ctx.model, c), c.getId()))
    if not sizes:
        raise SpecError(ctx.source, "model_volume", "the SBML model has no 3-dimensional compartment with a size "
                        "to rescale", model_volume, "remove model_volume")
    largest, cid = max(sizes)
    factor = float(model_volume) / largest
    ctx.notes.append(("model volume", f"{model_volume:g} L for the largest compartment {cid} ({largest:g} L): every "
                      f"molecules-per-unit factor is scaled by {factor:.6g}, concentrations kept"))
    return factor


def _litres(model, compartment) -> float:
    """Litres per unit of the compartment's size: litre or metre^3 based definitions, else 1."""
    import libsbml

    unit = compartment.getUnits() if compartment.isSetUnits() else model.getVolumeUnits()
    if unit in ("", "litre", "liter"):
        return 1.0
    definition = model.getUnitDefinition(unit)
    if definition is None or definition.getNumUnits() != 1:
        return 1.0
    u = definition.getUnit(0)
    size = u.getMultiplier() * 10.0 ** u.getScale()
    if u.getKind() in (libsbml.UNIT_KIND_LITRE, libsbml.UNIT_KIND_LITER) and u.getExponentAsDouble() == 1:
        return size
    if u.getKind() in (libsbml.UNIT_KIND_METRE, libsbml.UNIT_KIND_METER) and u.getExponentAsDouble() == 3:
        return 1000.0 * size ** 3
    return 1.0


def describe_counts(ctx, initial: dict, model_volume: float | None) -> None:
    """A note with the initial copy numbers, and a warning when they are all very small or some very large."""
    counts = [float(v) if not isinstance(v, str) else ctx.values.get(v, math.nan) for v in initial.values()]
    counts = [c for c in counts if math.isfinite(c)]
    if not counts:
        return
    high, low = max(counts), min(counts)
    ctx.notes.append(("copy numbers", f"initial counts from {low:.6g} to {high:.6g} molecules"
                      + (" (with the model volume)" if model_volume is not None else "")))
    if high > MANY:
        ctx.notes.append(("warning", f"initial counts up to {high:.3g} molecules: an exact stochastic method "
                          "takes about that many events per unit time; use method = \"ode\" or \"cle\", or set a "
                          "smaller model_volume"))
    elif 0 < high < FEW:
        ctx.notes.append(("warning", f"every initial count is below {FEW} molecules: the ODE and CLE "
                          "approximations are poor here; an exact method fits (or set a larger model_volume)"))


_TIME_WORDS = {"second": "s", "minute": "min", "hour": "h", "day": "d"}


def time_unit(model) -> str:
    """The model's ``timeUnits`` as a short word ("s", "min", "h", "d" or the unit's id); "" if absent."""
    if not model.isSetTimeUnits():
        return ""
    unit = model.getTimeUnits()
    if unit == "second":
        return "s"
    definition = model.getUnitDefinition(unit)
    if definition is None or definition.getNumUnits() != 1:
        return unit
    u = definition.getUnit(0)
    seconds = u.getMultiplier() * 10.0 ** u.getScale()
    for word, short in (("second", "s"), ("minute", "min"), ("hour", "h"), ("day", "d")):
        if math.isclose(seconds, {"second": 1, "minute": 60, "hour": 3600, "day": 86400}[word], rel_tol=1e-9):
            return short
    return unit
