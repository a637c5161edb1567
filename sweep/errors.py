"""Errors raised to users. The CLI maps SpecError/StoreError to exit code 2."""

from __future__ import annotations

from typing import Any


class SweepError(Exception):
    """Base of every error this package raises on purpose."""


class SpecError(SweepError):
    """A spec or model file is wrong. The message names the file, the field and the fix."""

    def __init__(self, source: str, field: str, problem: str, value: Any = ..., fix: str = ""):
        self.source, self.field, self.problem, self.fix = source, field, problem, fix
        where = f"{source}: {field}" if field else f"{source}"
        if value is not ... and field:
            where += f" = {value!r}"
        message = f"{where}: {problem}"
        if fix:
            message += f" ({fix})"
        super().__init__(message)


class KernelError(SweepError):
    """A kernel could not run the given input."""


class StoreError(SweepError):
    """A results store is missing, unreadable, or belongs to another sweep."""
