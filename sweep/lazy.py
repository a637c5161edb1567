"""Names a package exports, imported from their modules on first use (PEP 562).

A package facade that imported its modules eagerly would make every import of one leaf
module (``sweep.spec.limits``) pay for all of them, and would tie the packages into import
cycles (the model reads the spec's limits; the spec reads models). A lazy facade costs nothing
until a name is used, and resolves it once.
"""

from __future__ import annotations

import importlib
import sys
from typing import Any, Callable


def exports(package: str, names: dict[str, str]) -> tuple[Callable[[str], Any], Callable[[], list[str]]]:
    """``__getattr__`` and ``__dir__`` for ``package``: ``names`` maps a public name to its module.

    A value ``"module:attr"`` exports ``attr`` of ``module`` under the public name.
    """
    def __getattr__(name: str) -> Any:
        try:
            module, _, attr = names[name].partition(":")
        except KeyError:
            raise AttributeError(f"module {package!r} has no attribute {name!r}") from None
        value = getattr(importlib.import_module(module), attr or name)
        setattr(sys.modules[package], name, value)  # later look-ups find it without coming here
        return value

    def __dir__() -> list[str]:
        return sorted(set(vars(sys.modules[package])) | set(names))

    return __getattr__, __dir__
