"""The ``sweep`` command line: a thin typer layer over the public API in ``sweep``.

Exit codes: 0 ok, 1 some tasks failed or the store could not be written, 2 bad input (spec,
model, store or options), 130 interrupted by Ctrl-C; a shard (``run --shard``) also 75 (stopped
before its time limit, see ``sweep.walltime``) and 143 (SIGTERM).

Ctrl-C ends the program with status 130 and one line on stderr at any moment, never with a
traceback. Importing this package is cheap; ``main`` takes over SIGINT before it imports the
commands (typer, rich, numpy, zarr: about a second), and again once the command has ended:

- while importing, and while exiting, nothing is half-done, so SIGINT ends the process at once;
- while a command runs, SIGINT raises ``KeyboardInterrupt`` as usual, so the command can stop
  cleanly (``sweep run`` records what finished and stops its cluster); a command that does
  not catch it ends with the same line.

A process started with SIGINT ignored (``cmd &`` in a script) keeps ignoring it.
"""

from __future__ import annotations

import functools
import os
import signal
import sys
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import typer

EXIT_INTERRUPTED = 130  # the shell's convention for a program stopped by SIGINT


def main() -> None:
    """Run the command line (the ``sweep`` script and ``python -m sweep.cli``)."""
    if not _take_sigint(_ending("interrupted while starting; nothing was done")):
        _commands()()  # SIGINT is ignored (or this is not the main thread): leave it so
        return
    commands = _commands()
    signal.signal(signal.SIGINT, signal.default_int_handler)
    try:
        commands()
    except SystemExit as exc:
        status = exc.code if isinstance(exc.code, int) else 1 if exc.code else 0
        _take_sigint(_ending(f"interrupted while exiting (the command had ended with status {status})"))
        raise
    except BaseException:
        _take_sigint(_ending("interrupted while exiting"))
        raise


def __getattr__(name: str) -> Any:
    if name == "app":  # ``from sweep.cli import app`` (the tests' CliRunner) builds it on first use
        return _commands()
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


@functools.cache
def _commands() -> typer.Typer:
    import typer
    from typer.core import TyperGroup

    from sweep.cli import (analyzing, bench, exporting, inspect, models, planning, plotting, running, setup,
                           submitting, tracing)

    class Commands(TyperGroup):
        """Ends a command that lets ``KeyboardInterrupt`` through with one line and status 130."""

        def invoke(self, ctx):
            try:
                return super().invoke(ctx)
            except KeyboardInterrupt:
                typer.echo("interrupted", err=True)
                raise typer.Exit(EXIT_INTERRUPTED) from None

    app = typer.Typer(
        cls=Commands,
        name="sweep",
        help="Parameter sweeps of stochastic reaction-network simulations into a resumable Zarr store.",
        no_args_is_help=True,
        add_completion=False,
        pretty_exceptions_enable=False,
    )
    app.command("init")(setup.init)
    app.command("check")(setup.check)
    app.command("plan")(planning.plan)
    app.command("run")(running.run)
    app.command("status")(inspect.status)
    app.command("trace")(tracing.trace)
    app.command("analyze")(analyzing.analyze)
    app.command("plot")(plotting.plot)
    app.command("export")(exporting.export)
    app.command("export-model")(models.export_model)
    app.command("bench")(bench.bench)
    app.command("submit")(submitting.submit)
    return app


def _take_sigint(handler) -> bool:
    """Install ``handler`` for SIGINT unless SIGINT is ignored; False when it is (or off the main thread)."""
    try:
        if signal.getsignal(signal.SIGINT) is signal.SIG_IGN:
            return False
        signal.signal(signal.SIGINT, handler)
    except ValueError:  # not the main thread
        return False
    return True


def _ending(message: str):
    def handler(signum, frame):
        for stream in (sys.stdout, sys.stderr):
            try:
                stream.flush()
            except Exception:  # a closed or broken stream must not stop the exit
                pass
        _say(message)
        os._exit(EXIT_INTERRUPTED)

    return handler


def _say(message: str) -> None:
    try:
        os.write(2, f"{message}\n".encode())
    except OSError:
        pass
