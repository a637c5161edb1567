"""The ``sweep`` command line: a thin typer layer over the public API in ``sweep``.

Exit codes: 0 ok, 1 some tasks failed or the store could not be written, 2 bad input (spec,
model, store or options), 130 interrupted by Ctrl-C; a shard (``run --shard``) also 75 (stopped
before its time limit, see ``sweep.walltime``) and 143 (SIGTERM).
"""

from __future__ import annotations

import typer

from sweep.cli import (analyzing, bench, exporting, inspect, models, planning, plotting, running, setup,
                       submitting, tracing)

app = typer.Typer(
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


def main() -> None:
    app()
