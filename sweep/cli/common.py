"""Shared pieces of the CLI: consoles, error mapping, number formatting."""

from __future__ import annotations

import functools
import re
from typing import Callable

import typer
from rich.console import Console
from rich.markup import escape

from sweep.errors import SpecError, StoreError, SweepError

console = Console()
errors = Console(stderr=True)

EXIT_FAILED_TASKS = 1
EXIT_BAD_INPUT = 2

# C0 and C1 control characters but tab and newline: an escape sequence stored in a store made by
# someone else must not reach the terminal raw
_CONTROL = re.compile(r"[\x00-\x08\x0b-\x1f\x7f-\x9f]")


def shown(text: object) -> str:
    r"""User or stored text made safe to print with rich: control characters as ``\xNN``, markup escaped.

    Example
    -------
    >>> print(shown("declare it under [species]\x1b"))
    declare it under \[species]\x1b
    """
    return escape(_CONTROL.sub(lambda m: f"\\x{ord(m.group()):02x}", str(text)))


def exits_on_errors(command: Callable) -> Callable:
    """Turn our errors into a one-line message and the documented exit code."""

    @functools.wraps(command)
    def wrapper(*args, **kwargs):
        try:
            return command(*args, **kwargs)
        except (SpecError, StoreError) as exc:
            errors.print(f"[bold red]error:[/] {shown(exc)}", highlight=False, soft_wrap=True)
            raise typer.Exit(EXIT_BAD_INPUT) from None
        except SweepError as exc:
            errors.print(f"[bold red]error:[/] {shown(exc)}", highlight=False, soft_wrap=True)
            raise typer.Exit(EXIT_FAILED_TASKS) from None

    return wrapper


def si(value: float) -> str:
    """1234567 -> '1.23 M' (for events and rates)."""
    for unit, scale in (("G", 1e9), ("M", 1e6), ("k", 1e3)):
        if abs(value) >= scale:
            return f"{value / scale:.3g} {unit}"
    return f"{value:.3g}"


def duration(seconds: float) -> str:
    if seconds < 60:
        return f"{seconds:.1f} s"
    minutes, sec = divmod(int(round(seconds)), 60)
    hours, minutes = divmod(minutes, 60)
    return f"{hours}h {minutes:02d}m" if hours else f"{minutes}m {sec:02d}s"
