"""Write the small TOML documents a fit generates (one sweep spec per batch).

Only what a sweep spec holds: tables, strings, booleans, finite numbers and lists of them.
Floats are written with ``repr``, which round-trips exactly, so the batch spec's numbers are
the fit spec's numbers to the bit.
"""

from __future__ import annotations

import json
import math
from typing import Any, Mapping


def dumps(doc: Mapping[str, Any]) -> str:
    """A TOML document for ``doc`` (nested dicts become ``[a.b]`` tables)."""
    lines: list[str] = []
    _table(doc, (), lines)
    return "\n".join(lines).lstrip("\n") + "\n"


def _table(table: Mapping[str, Any], prefix: tuple[str, ...], lines: list[str]) -> None:
    scalars = {k: v for k, v in table.items() if not isinstance(v, dict)}
    tables = {k: v for k, v in table.items() if isinstance(v, dict)}
    if prefix and (scalars or not tables):
        lines.append("")
        lines.append("[" + ".".join(_key(k) for k in prefix) + "]")
    for key, value in scalars.items():
        lines.append(f"{_key(key)} = {_value(value)}")
    for key, value in tables.items():
        _table(value, prefix + (key,), lines)


def _key(key: str) -> str:
    return key if key.replace("_", "").replace("-", "").isalnum() and key.isascii() else json.dumps(key)


def _value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"cannot write {value!r} to TOML")
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value)  # JSON's escapes are TOML basic-string escapes
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_value(v) for v in value) + "]"
    raise TypeError(f"cannot write a {type(value).__name__} to TOML")
