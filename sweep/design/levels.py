"""Grid levels of one parameter: an explicit list, or a range with a count and a spacing.

Used by the ``grid`` design and by the ``[design.conditions]`` of the sampled designs::

    k_tx = [0.5, 1.0, 2.0]                                      # these values
    k_on = { low = 0.01, high = 1.0, count = 5, spacing = "log" }  # 0.01, 0.0316, ..., 1.0
    A0   = { low = 0, high = 100, count = 6, integer = true }   # 0, 20, ..., 100

``spacing`` is ``"linear"`` (default) or ``"log"`` (equal ratios; needs low > 0). With
``integer = true`` the levels are rounded to whole numbers (initial molecule counts).
"""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np

from sweep.spec import limits
from sweep.errors import SpecError

SPACINGS = ("linear", "log")
_RANGE_KEYS = ("low", "high", "count", "spacing", "integer")


def parse(name: str, entry: Any, known: Mapping[str, float], source: str, field: str) -> tuple[float, ...]:
    """Validate one parameter's levels and return them in order.

    Raises
    ------
    SpecError
        Unknown parameter, empty list, non-numbers, an empty or reversed range, a count
        below 2, a log range touching zero, or whole-number levels that coincide.
    """
    check_known(name, known, source, field)
    if isinstance(entry, list):
        if not entry or not all(is_number(v) for v in entry):
            raise SpecError(source, field, "must be a non-empty list of numbers", entry,
                            f"e.g. {name} = [0.1, 0.2, 0.4]")
        return tuple(float(v) for v in entry)
    if not isinstance(entry, dict):
        raise SpecError(source, field, "must be a list of values or a range", entry,
                        f"e.g. {name} = [0.1, 0.2] or {name} = {{ low = 0.1, high = 10, count = 5, spacing = \"log\" }}")
    return _range(name, entry, source, field)


def _range(name: str, entry: Mapping[str, Any], source: str, field: str) -> tuple[float, ...]:
    check_keys(entry, _RANGE_KEYS, source, field, "a grid range")
    low, high = bounds(entry, source, field, required=True)
    count = entry.get("count")
    if isinstance(count, bool) or not isinstance(count, int) or count < 2:
        raise SpecError(source, f"{field}.count", "must be a whole number >= 2", count,
                        "the number of levels from low to high; for a single value use a list")
    if count > limits.MAX_POINTS:
        raise SpecError(source, f"{field}.count", f"more levels than the {limits.MAX_POINTS:,} points a sweep can "
                        "hold", count, f"use at most {limits.MAX_POINTS:,} levels (fewer when other parameters vary)")
    spacing = entry.get("spacing", "linear")
    if spacing not in SPACINGS:
        raise SpecError(source, f"{field}.spacing", "unknown spacing", spacing, "choose linear or log")
    if spacing == "log" and low <= 0:
        raise SpecError(source, f"{field}.low", "a log range cannot touch zero", low,
                        "give low > 0 (e.g. 1e-3), or use spacing = \"linear\"")
    integer = flag(entry, "integer", source, field)
    if integer:
        whole(entry, low, high, source, field)
    values = np.geomspace(low, high, count) if spacing == "log" else np.linspace(low, high, count)
    if integer:
        values = np.round(values)
        if len(np.unique(values)) < count:
            raise SpecError(source, f"{field}.count", f"{count} whole-number levels from {low:g} to {high:g} repeat",
                            count, "lower the count or widen the range")
    return tuple(float(v) for v in values)


def bounds(entry: Mapping[str, Any], source: str, field: str, required: bool) -> tuple[Any, Any]:
    """``low`` and ``high`` of a range (None when absent and not required); low < high."""
    out = []
    for key in ("low", "high"):
        value = entry.get(key)
        if value is None and not required:
            out.append(None)
            continue
        if not is_number(value):
            raise SpecError(source, f"{field}.{key}", "must be a finite number" if key in entry else "missing",
                            value if key in entry else ..., f"add {key} = <number>")
        out.append(float(value))
    low, high = out
    if low is not None and high is not None:
        if low == high:
            raise SpecError(source, field, "empty range: low equals high", dict(entry),
                            "widen it, or hold the parameter fixed under [parameters]")
        if low > high:
            raise SpecError(source, field, "low must be below high", dict(entry), "swap them")
    return low, high


def whole(entry: Mapping[str, Any], low: Any, high: Any, source: str, field: str) -> None:
    """With ``integer = true``, the given bounds must be whole numbers."""
    for key, value in (("low", low), ("high", high)):
        if value is not None and value != int(value):
            raise SpecError(source, f"{field}.{key}", "an integer parameter needs whole-number bounds", entry[key])


def flag(entry: Mapping[str, Any], key: str, source: str, field: str) -> bool:
    value = entry.get(key, False)
    if not isinstance(value, bool):
        raise SpecError(source, f"{field}.{key}", "must be true or false", value)
    return value


def check_known(name: str, known: Mapping[str, float], source: str, field: str) -> None:
    if name not in known:
        raise SpecError(source, field, "not a parameter of the model",
                        fix=f"known parameters: {', '.join(known) or '(none)'}")


def check_keys(table: Mapping[str, Any], allowed, source: str, prefix: str, what: str) -> None:
    for key in table:
        if key not in allowed:
            raise SpecError(source, f"{prefix}.{key}", "unknown key", fix=f"{what} takes: {', '.join(allowed)}")


def is_number(v: Any) -> bool:
    return not isinstance(v, bool) and isinstance(v, (int, float)) and bool(np.isfinite(v))
