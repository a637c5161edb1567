"""The ``sweep`` command line: a thin typer layer over the public API in ``sweep``.

Exit codes: 0 ok, 1 some tasks failed or the store could not be written, 2 bad input (spec,
model, store or options), 130 interrupted by Ctrl-C; a shard (``run --shard``) also 75 (stopped
before its time limit, see ``sweep.batch.walltime``) and 143 (SIGTERM).

Ctrl-C ends the program with status 130 and one line on stderr at any moment, never with a
traceback. Importing this package is cheap: ``main`` takes over SIGINT before it imports and
builds the commands (typer, rich, numpy, zarr: about a second).

- Outside a command (importing, parsing the command line, exiting) nothing is half-done, so
  SIGINT ends the process at once; in the last moments of Python's shutdown, after every
  atexit callback, it is ignored (the process is ending with its status anyway).
- While a command runs (``Commands.invoke``), SIGINT raises ``KeyboardInterrupt`` as usual, so
  the command can stop cleanly (``sweep run`` records what finished and stops its cluster); a
  command that does not catch it ends with "interrupted". See ``_Interrupts`` for the two ways
  a ``KeyboardInterrupt`` would otherwise get lost or leave noise behind.

A process started with SIGINT ignored (``cmd &`` in a script) keeps ignoring it.
"""

from __future__ import annotations

import _thread
import atexit
import functools
import os
import signal
import sys
import threading
from types import FrameType
from typing import TYPE_CHECKING, Any, Callable

if TYPE_CHECKING:
    import typer

EXIT_INTERRUPTED = 130  # the shell's convention for a program stopped by SIGINT
REPEAT_SECONDS = 0.05  # a dropped KeyboardInterrupt is raised again this much later


def main() -> None:
    """Run the command line (the ``sweep`` script and ``python -m sweep.cli``)."""
    owned = _take_sigint(_end_while_starting)
    if owned:
        # registered before any library's: runs last. Python's finalization, after it, puts back
        # the default action (death by SIGINT) for handled signals, but leaves an ignored one
        atexit.register(signal.signal, signal.SIGINT, signal.SIG_IGN)
    from typer.main import get_command

    command = get_command(_commands())  # the heavy imports, then typer's work on every command
    interrupts = _Interrupts(sys.unraisablehook) if owned else None
    try:
        command(obj=interrupts)  # Commands.invoke finds it as ctx.obj
    finally:
        if owned:
            signal.signal(signal.SIGINT, _end_while_exiting)
        # CPython: under ``python -m``, once a KeyboardInterrupt has passed through an exec() of a
        # string (code that libraries generate, e.g. dataclasses while a module imports), the
        # process ends by SIGINT instead of with our status, caught or not: Py_RunMain checks a
        # flag that run_eval_code_obj sets. Running an empty string through exec() clears it.
        exec("", {})


def __getattr__(name: str) -> Any:
    if name == "app":  # ``from sweep.cli import app`` (the tests' CliRunner) builds it on first use
        return _commands()
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


@functools.cache
def _commands() -> typer.Typer:
    import typer
    from typer.core import TyperGroup

    from sweep.cli import (analyzing, bench, exporting, fitting, inspect, models, planning, plotting, running, setup,
                           submitting, tracing)

    class Commands(TyperGroup):
        """Runs a command with SIGINT as KeyboardInterrupt; one that lets it through ends with one line and 130."""

        def invoke(self, ctx):
            interrupts = ctx.obj if isinstance(ctx.obj, _Interrupts) else None  # None: a test's CliRunner
            if interrupts is not None:
                interrupts.take()
            try:
                return super().invoke(ctx)
            except KeyboardInterrupt:
                typer.echo("interrupted", err=True)
                raise typer.Exit(EXIT_INTERRUPTED) from None
            finally:
                if interrupts is not None:
                    signal.signal(signal.SIGINT, _end_while_exiting)
                    if interrupts.seen:  # again: leaving a ``warnings.catch_warnings()`` undid the filters
                        _quiet_abandoned_work()

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
    app.command("fit")(fitting.fit)
    return app


class _Interrupts:
    """SIGINT while a command runs: a KeyboardInterrupt that is never lost.

    Where SIGINT lands in a callback that C code made (llvmlite's object-cache callback while
    numba loads a kernel) or in a ``__del__``, Python cannot raise it there: it prints
    "Exception ignored" with a traceback and carries on, and the Ctrl-C would be lost.
    ``unraisable`` raises it again in the main thread a moment later, once out of the callback
    (raised from the hook itself, it would land in the hook and be dropped the same way).
    After a Ctrl-C, objects it left half-built (llvmlite's again) may fail in ``__del__``, and
    work it abandoned may fail or warn; none of that is worth a traceback.
    """

    def __init__(self, previous_hook: Callable[[Any], Any]):
        self.previous_hook = previous_hook
        self.seen = False

    def take(self) -> None:
        signal.signal(signal.SIGINT, self.interrupt)
        sys.unraisablehook = self.unraisable

    def interrupt(self, signum: int, frame: FrameType | None) -> None:
        if not self.seen:
            self.seen = True
            _quiet_abandoned_work()
        raise KeyboardInterrupt

    def unraisable(self, unraisable: Any) -> None:
        if isinstance(unraisable.exc_value, KeyboardInterrupt):
            again = threading.Timer(REPEAT_SECONDS, _thread.interrupt_main)  # as if SIGINT came again
            again.daemon = True
            again.start()
        elif not self.seen:
            self.previous_hook(unraisable)


def _quiet_abandoned_work() -> None:
    """Keep Python from printing the failures of the work a Ctrl-C abandoned.

    A Ctrl-C in the middle of a zarr read or write leaves its coroutine in zarr's event loop,
    which goes on without the warning filters the interrupted code had set, and fails when
    zarr's thread pool shuts down at exit: zarr warns, asyncio prints "Task exception was never
    retrieved" with a traceback, or Python warns that a coroutine "was never awaited". What
    finished is in the store's records either way.
    """
    import logging
    import warnings

    logging.getLogger("asyncio").disabled = True
    warnings.filterwarnings("ignore", message=r"coroutine '.*' was never awaited", category=RuntimeWarning)
    warnings.filterwarnings("ignore", module=r"zarr\.")


def _take_sigint(handler: Callable[[int, FrameType | None], Any]) -> bool:
    """Install ``handler`` for SIGINT unless SIGINT is ignored; False when it is (or off the main thread)."""
    try:
        if signal.getsignal(signal.SIGINT) is signal.SIG_IGN:
            return False
        signal.signal(signal.SIGINT, handler)
    except ValueError:  # not the main thread
        return False
    return True


def _end_while_starting(signum: int, frame: FrameType | None) -> None:
    _end("interrupted while starting; nothing was done")


def _end_while_exiting(signum: int, frame: FrameType | None) -> None:
    _end("interrupted while exiting")


def _end(message: str) -> None:
    """End the process now: nothing is half-done outside a command (see the module docstring)."""
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except Exception:  # a closed or broken stream must not stop the exit
            pass
    try:
        os.write(2, f"{message}\n".encode())
    except OSError:
        pass
    os._exit(EXIT_INTERRUPTED)
