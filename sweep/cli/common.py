"""Shared pieces of the CLI: consoles, error mapping, number formatting, and the forms every
command reads alike (``--point``, ``--time``, a store given as its spec)."""

from __future__ import annotations

import functools
import re
from pathlib import Path
from typing import Callable, Sequence

import typer
import typer.core
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


# --- help screens -----------------------------------------------------------------------------
# typer marks every flag "<bool>" (a flag takes no value) and writes required arguments as
# "{STORE}" in the usage line; neither is how a command line reads. Both are display only.


def _flag_type(self, ctx):
    if getattr(self, "is_flag", False) and not getattr(self, "count", False):
        return None
    return _option_type(self, ctx)


def _usage_name(self) -> str:
    name = self.display_name_raw
    name = name if self.required else f"[{name}]"
    return name + ("..." if self.nargs != 1 else "")


_option_type = typer.core.TyperOption.display_type_rich
typer.core.TyperOption.display_type_rich = _flag_type
typer.core.TyperArgument._usage_display_name = _usage_name


# --- the forms every command reads alike ---------------------------------------------------------

POINT_FORMS = "a point (3), a list (0,3,5) or an inclusive range (0:3); repeat the option to add more"
TIME_FORMS = "a sample time (the nearest is taken) or an inclusive range START:END; repeat to add more"


def parse_points(items: Sequence[str] | None, option: str = "--point", source: str = "sweep") -> list:
    """``["3", "0:2,7"]`` -> ``[3, (0, 2), 7]``: points and inclusive ``(first, last)`` ranges.

    Raises
    ------
    SpecError
        A piece that is neither a whole number nor a FIRST:LAST range, or a range that runs backwards.

    Example
    -------
    >>> parse_points(["3", "0:2,7"])
    [3, (0, 2), 7]
    """
    out: list = []
    for item in items or ():
        for piece in str(item).split(","):
            out.append(_piece(piece.strip(), option, source, int, str(item)))
    return out


def parse_times(items: Sequence[str] | None, option: str = "--time", source: str = "sweep") -> list:
    """``["600", "300:400"]`` -> ``[600.0, (300.0, 400.0)]``: sample times and inclusive ranges."""
    out: list = []
    for item in items or ():
        for piece in str(item).split(","):
            out.append(_piece(piece.strip(), option, source, float, str(item)))
    return out


def _piece(text: str, option: str, source: str, kind, whole: str):
    form = "FIRST:LAST" if kind is int else "START:END"
    try:
        if ":" in text:
            first, last = text.split(":", 1)
            low, high = kind(first), kind(last)
            if high < low:
                raise SpecError(source, option, "range end is before its start", whole,
                                f"write FIRST:LAST with FIRST <= LAST, e.g. {'0:3' if kind is int else '300:600'}")
            return (low, high)
        return kind(text)
    except ValueError as exc:
        raise SpecError(source, option, f"not a number or a {form} range", whole,
                        POINT_FORMS if kind is int else TIME_FORMS) from exc


def expand_points(selection: Sequence, n: int, option: str = "--point", source: str = "sweep") -> list[int]:
    """Points and ranges from ``parse_points`` as a list of indices within ``0..n-1`` (order kept, no repeats)."""
    out: list[int] = []
    for item in selection:
        first, last = item if isinstance(item, tuple) else (item, item)
        if not 0 <= first <= last < n:
            raise SpecError(source, option, f"must be within 0..{n - 1}", item if not isinstance(item, tuple)
                            else f"{first}:{last}")
        out.extend(range(first, last + 1))
    return list(dict.fromkeys(out))


def store_path(path: Path) -> Path:
    """The store a command should read: ``path`` itself, or the store of the spec ``path`` names.

    A user who gives a spec where a store is expected (``sweep status configs/reporter.toml``)
    gets its store, with a note saying so; a spec whose store does not exist yet is refused
    with the command that makes it.
    """
    from sweep import store as store_mod

    if not path.is_file():
        return path
    try:
        import sweep

        spec = sweep.load(path)
    except SweepError as exc:
        raise StoreError(f"{path}: is a file, not a results store (a store is a folder written by "
                         f"`sweep run`), and not a spec that loads: {exc}") from None
    if not store_mod.exists(spec.store):
        raise StoreError(f"{path}: this is a spec; its store {spec.store} does not exist yet "
                         f"(run `sweep run {path}` first)")
    errors.print(f"note: {shown(path)} is a spec; its store is {shown(spec.store)}", highlight=False,
                 soft_wrap=True)
    return spec.store


def time_unit(path: Path) -> str | None:
    """The store's time unit (``attrs["time_unit"]``, e.g. "min"), or None for a store without one."""
    from sweep import store as store_mod

    try:
        unit = store_mod.attributes(path).get("time_unit")
    except StoreError:
        return None
    return str(unit) if unit else None


def at_time(t: float, unit: str | None) -> str:
    """'t=600 min' (or 't=600' without a unit)."""
    return f"t={t:g}" + (f" {unit}" if unit else "")


def lost_lines(lost, points: int, max_events: int | None, limit: int = 12) -> list[str]:
    """What a person needs about replicates lost to the event cap or to numerical failures.

    ``lost`` holds ``sweep.store.status.LostReplicates``, fewest finished first. Plain text (not markup).
    """
    if not lost:
        return []
    capped = sum(r.capped for r in lost)
    numerical = sum(r.numerical for r in lost)
    what = " and ".join(part for part in (f"{capped:,} at the event cap" if capped else "",
                                          f"{numerical:,} to numerical failures" if numerical else "") if part)
    lines = [f"{len(lost):,} of {points:,} points lost replicates ({what}); every statistic leaves them out, "
             "so these points lean towards their quieter replicates:"]
    for r in lost[:limit]:
        params = ", ".join(f"{k}={v:g}" for k, v in r.params.items())
        parts = [f"{r.capped:,} capped" if r.capped else "", f"{r.numerical:,} failed" if r.numerical else ""]
        lines.append(f"  point {r.point}{f' ({params})' if params else ''}: {r.finished:,} of {r.run:,} finished, "
                     f"{', '.join(p for p in parts if p)}")
    if len(lost) > limit:
        lines.append(f"  ... and {len(lost) - limit:,} more points")
    if capped:
        now = f" (now {max_events:,})" if max_events else ""
        lines.append(f"fix: raise run.max_events{now} in the spec, then run it into a new store (--store PATH) "
                     "or start over with --fresh --yes: the cap decides the bytes, so a resume refuses a new one")
    return lines
