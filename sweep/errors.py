"""Errors raised to users. The CLI maps SpecError/StoreError to exit code 2."""

from __future__ import annotations

from typing import Any

# a value or field longer than this is cut in the message (a 1 MB name must not fill the terminal)
_SHOWN = 200


class SweepError(Exception):
    """Base of every error this package raises on purpose."""


class SpecError(SweepError):
    """A spec or model file is wrong. The message names the file, the field and the fix."""

    def __init__(self, source: str, field: str, problem: str, value: Any = ..., fix: str = ""):
        self.source, self.field, self.problem, self.fix = source, field, problem, fix
        where = f"{_cut(str(source))}: {_cut(field)}" if field else f"{_cut(str(source))}"
        if value is not ... and field:
            where += f" = {_shown(value)}"
        message = f"{where}: {problem}"
        if fix:
            message += f" ({fix})"
        super().__init__(message)


def _cut(text: str) -> str:
    if len(text) <= _SHOWN:
        return text
    return f"{text[:_SHOWN // 2]}...{text[-20:]} ({len(text):,} characters)"


def _shown(value: Any) -> str:
    """``repr(value)``, shortened; a value nested too deeply to print says so instead."""
    try:
        text = repr(value)
    except (RecursionError, MemoryError, ValueError):
        return "<a value nested too deeply to show>"
    return _cut(text)


class KernelError(SweepError):
    """A kernel could not run the given input."""


class StoreError(SweepError):
    """A results store is missing, unreadable, or belongs to another sweep."""
