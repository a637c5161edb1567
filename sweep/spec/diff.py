"""Which keys were edited between the spec a store was made with and the spec given now.

This lists edits key by key (ignoring comments, spacing, key order, ``run.store`` and the
``[cluster]`` table), for the message that refuses a resume. Whether a resume is allowed is
decided by ``sweep.spec.identity`` (what decides the bytes), not here: key order, which this
ignores, can move species columns, reactions and points.
"""

from __future__ import annotations

import hashlib
import json
import tomllib
from typing import Any

_IGNORED = ("run.store",)
_IGNORED_TABLES = ("cluster.", "plot.")  # batch settings, figure defaults: where and how shown, not what


def content(spec_text: str, model_text: str, design_file_sha256: str = "") -> dict[str, Any]:
    """Flattened dotted keys of the spec (and of its model file under ``model file.``).

    A design read from a file (a table of points) enters through that file's SHA-256.
    """
    flat = _flatten(tomllib.loads(spec_text))
    if model_text.lstrip().startswith("<"):
        # an SBML (XML) model file: any edit to it, even of layout or notes, counts as a change
        flat["model file SHA-256"] = hashlib.sha256(model_text.encode()).hexdigest()
    elif model_text:
        flat.update(_flatten(tomllib.loads(model_text), "model file."))
    if design_file_sha256:
        flat["design file SHA-256"] = design_file_sha256
    for key in _IGNORED:
        flat.pop(key, None)
    for key in [k for k in flat if k.startswith(_IGNORED_TABLES)]:
        del flat[key]
    return flat


def digest(spec_text: str, model_text: str, design_file_sha256: str = "") -> str:
    """SHA-256 of the canonical content (kept in the store's attributes as ``content_sha256``)."""
    canonical = json.dumps(content(spec_text, model_text, design_file_sha256), sort_keys=True, default=str)
    return hashlib.sha256(canonical.encode()).hexdigest()


def changes(old: tuple[str, str], new: tuple[str, str]) -> list[str]:
    """Readable list of changes from ``old`` to ``new`` (each (spec text, model text[, design file SHA-256])).

    Example
    -------
    >>> changes(("[run]\\nreplicates = 100", ""), ("[run]\\nreplicates = 200", ""))
    ['run.replicates: 100 -> 200']
    """
    a, b = content(*old), content(*new)
    out = []
    for key in sorted(set(a) | set(b)):
        if key not in b:
            out.append(f"{key}: removed (was {_show(a[key])})")
        elif key not in a:
            out.append(f"{key}: added ({_show(b[key])})")
        elif a[key] != b[key]:
            out.append(f"{key}: {_show(a[key])} -> {_show(b[key])}")
    return out


def _flatten(doc: dict, prefix: str = "") -> dict[str, Any]:
    flat: dict[str, Any] = {}
    for key, value in doc.items():
        if isinstance(value, dict):
            flat.update(_flatten(value, f"{prefix}{key}."))
        else:
            flat[f"{prefix}{key}"] = value
    return flat


def _show(value: Any) -> str:
    text = json.dumps(value, default=str)
    return text if len(text) <= 60 else text[:57] + "..."
