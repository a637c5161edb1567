"""`sweep run`: run or resume a sweep with a live progress bar."""

from __future__ import annotations

import shlex
import sys
from pathlib import Path
from typing import Annotated

import typer
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn, TimeRemainingColumn
from rich.table import Table

import sweep
from sweep import store as store_mod
from sweep.cli import clustering, sharding
from sweep.cli.common import (EXIT_BAD_INPUT, EXIT_FAILED_TASKS, console, duration, errors, exits_on_errors, lost_lines,
                              shown, si)

EXIT_INTERRUPTED = 130  # the shell's convention for a run stopped by SIGINT
EXIT_TERMINATED = 143  # 128 + SIGTERM


@exits_on_errors
def run(
    spec_path: Annotated[Path, typer.Argument(metavar="SPEC", help="The sweep spec (TOML).")],
    store: Annotated[Path | None, typer.Option(help="Results store; overrides run.store.")] = None,
    workers: Annotated[int | None, typer.Option(min=1, help="Local worker processes (default: one per core).")] = None,
    scheduler: Annotated[str | None, typer.Option(help="Address of an existing Dask scheduler, e.g. tcp://10.0.0.5:8786, or its scheduler file (JSON).")] = None,
    fresh: Annotated[bool, typer.Option("--fresh", help="Delete the existing store and start over.")] = False,
    yes: Annotated[bool, typer.Option("--yes", "-y", help="Do not ask before deleting with --fresh.")] = False,
    break_lock: Annotated[bool, typer.Option("--break-lock", help="Take the store's lock from a run on another host that is known to be dead.")] = False,
    shard: Annotated[str | None, typer.Option(metavar="I/N", help="Run only shard I of N (1-based), in this process, with no Dask cluster; shards may run at once on one store.")] = None,
    time_left: Annotated[str | None, typer.Option(metavar="DURATION", help="With --shard: stop before a task that would not finish within this time (seconds or [D-]HH:MM:SS); default: the Slurm job's time limit.")] = None,
    cluster: Annotated[clustering.ClusterKind | None, typer.Option(help="Run the Dask workers as batch jobs, scaled with the work (settings: --profile, then the spec's \\[cluster] table, then the flags below).")] = None,
    profile: Annotated[Path | None, typer.Option(help="With --cluster: site profile, a TOML file with a \\[cluster] table (see configs/slurm_site_example.toml).")] = None,
    partition: Annotated[str | None, typer.Option(help="With --cluster: Slurm partition.")] = None,
    account: Annotated[str | None, typer.Option(help="With --cluster: Slurm account to charge.")] = None,
    walltime: Annotated[str | None, typer.Option(help="With --cluster: time limit of each worker job, HH:MM:SS.")] = None,
    max_jobs: Annotated[int | None, typer.Option(min=1, help="With --cluster: most worker jobs at once.")] = None,
) -> None:
    """Run the sweep; run it again on the same store and it resumes where it stopped."""
    if shard is not None or time_left is not None:
        sharding.run_shard(spec_path, store, shard, time_left, break_lock,
                           others={"--workers": workers, "--scheduler": scheduler, "--fresh": fresh,
                                   "--cluster": cluster, "--profile": profile})
        return
    spec = sweep.load(spec_path, store=store)
    flags = {"partition": partition, "account": account, "walltime": walltime, "max_jobs": max_jobs}
    batch = clustering.resolve(cluster, profile, spec, flags, workers, scheduler)
    resume = _resume_command(spec_path, spec.store, workers, scheduler) + (
        " " + shlex.join(clustering.resume_words(cluster, profile, flags)) if batch else "")
    if fresh and store_mod.exists(spec.store) and not yes:
        if not sys.stdin.isatty():
            errors.print(f"[bold red]error:[/] --fresh would delete {shown(spec.store)}; add --yes to confirm",
                         highlight=False, soft_wrap=True)
            raise typer.Exit(EXIT_BAD_INPUT)
        typer.confirm(f"Delete {spec.store} and start over?", abort=True)  # click prints this: no markup
    bar = Progress(
        TextColumn("[bold]{task.description}"), BarColumn(), MofNCompleteColumn(), TextColumn("tasks"),
        TextColumn("{task.fields[rate]} events/s"), TimeElapsedColumn(), TextColumn("ETA"), TimeRemainingColumn(),
        console=console, transient=False,
    )
    state = {}

    def on_start(started: sweep.Started) -> None:
        for line in started.repaired:
            errors.print(f"[yellow]repaired:[/] {shown(line)}")
        if batch is not None:
            console.print(f"Dask scheduler: {shown(started.address)}", highlight=False)
        console.print(f"store: {shown(spec.store)}", highlight=False, soft_wrap=True)
        if started.resumed:
            console.print(f"resuming: {started.pending:,} of {started.total:,} tasks left")
        if started.dashboard:
            console.print(f"Dask dashboard: {shown(started.dashboard)}")
        bar.start()
        state["task"] = bar.add_task("simulating", total=started.total,
                                     completed=started.total - started.pending, rate="-")

    def on_progress(p: sweep.Progress) -> None:
        # an adaptive sweep's total grows with each round (sweep.adaptive)
        bar.update(state["task"], completed=p.done, total=p.total, rate=si(p.events_per_second))

    if batch is not None:
        clustering.announce(batch, spec.store)
    try:
        summary = sweep.run(spec, workers=workers, scheduler=scheduler, cluster=batch, fresh=fresh,
                            break_lock=break_lock, on_start=on_start, on_progress=on_progress)
    except KeyboardInterrupt:
        bar.stop()
        # between an adaptive sweep's rounds the bar has started: what finished is recorded
        errors.print("interrupted; every finished task is recorded" if "task" in state
                     else "interrupted while the store was being created; the next run rebuilds it"
                     if store_mod.incomplete(spec.store) else "interrupted before any task ran; nothing was lost")
        console.print(f"resume with: {shown(resume)}", highlight=False, soft_wrap=True)
        raise typer.Exit(EXIT_INTERRUPTED) from None
    finally:
        bar.stop()
    _report(summary, spec)
    _check_results(summary, spec)
    if summary.stopped or summary.failed:
        console.print(f"resume with: {shown(resume)}", highlight=False, soft_wrap=True)
        raise typer.Exit({"interrupted": EXIT_INTERRUPTED, "terminated": EXIT_TERMINATED}.get(summary.stopped or "",
                                                                                EXIT_FAILED_TASKS))


def _report(summary: sweep.RunSummary, spec: sweep.Spec) -> None:
    if summary.tasks_run == 0 and summary.complete:
        for line in summary.repaired:
            errors.print(f"[yellow]repaired:[/] {shown(line)}")
        console.print(f"nothing to do: all {summary.tasks_total:,} tasks of {shown(summary.store)} are done")
        return
    title = "Sweep finished" if summary.complete else (
        f"Sweep stopped: {shown(summary.stopped)}" if summary.stopped else "Sweep finished with failures")
    table = Table(title=title, show_header=False, title_justify="left")
    table.add_column(style="bold")
    table.add_column(overflow="fold")
    table.add_row("store", shown(summary.store))
    table.add_row("points x replicates", f"{summary.points:,} x {spec.replicates:,}" + (
        f" to {spec.store_replicates:,} (adaptive)" if spec.adaptive else ""))
    left = summary.tasks_total - summary.tasks_run - summary.tasks_skipped
    table.add_row("tasks", f"{summary.tasks_run:,} run, {summary.tasks_skipped:,} already done, "
                           f"{len(summary.failed):,} failed, {left:,} left, of {summary.tasks_total:,}")
    table.add_row("reaction events", f"{summary.events:,}")
    table.add_row("wall time", f"{duration(summary.seconds)} ({duration(summary.simulating_seconds)} simulating)")
    table.add_row("events per second", f"{si(summary.events_per_second)} while simulating, "
                                       f"{si(summary.events / summary.seconds if summary.seconds else 0)} overall")
    table.add_row("stopped at event cap", f"{summary.capped:,} replicates")
    table.add_row("numerical failures", f"{summary.numerical:,} replicates")
    if summary.adaptive is not None:
        _adaptive_rows(table, summary.adaptive)
    console.print(table)
    for failure in summary.failed[:20]:
        errors.print(f"[red]failed[/] point {failure.point} block {failure.block}: {shown(failure.error)}",
                     highlight=False)
    if len(summary.failed) > 20:
        errors.print(f"... and {len(summary.failed) - 20} more; `sweep status {shown(summary.store)}` lists them all")
    if summary.complete:
        console.print(f"open it with: [bold]xarray.open_zarr({shown(repr(str(summary.store)))})[/]", highlight=False)


def _check_results(summary: sweep.RunSummary, spec: sweep.Spec) -> None:
    """After a run: list the points that lost replicates, and check an approximate method's copy numbers.

    The run made the low-copy report and kept it in the store's attributes (``attrs["low_copy"]``),
    where `sweep status` and `sweep analyze` find it.
    """
    from sweep.analysis import validity

    if not store_mod.exists(summary.store) or summary.tasks_run == 0:
        return
    st = sweep.status(summary.store)
    for i, line in enumerate(lost_lines(st.lost, st.points, st.max_events)):
        errors.print(("[yellow]warning:[/] " if i == 0 else "") + shown(line), highlight=False, soft_wrap=True)
    record = summary.low_copy
    if spec.method not in validity.APPROXIMATE or record is None:
        return
    lines = validity.describe_low_copy(record)
    for i, line in enumerate(lines):
        errors.print(("[yellow]warning:[/] " if i == 0 else "  ") + shown(line), highlight=False, soft_wrap=True)
    if not lines:
        console.print(f"copy numbers: no species spent {record['share']:.0%} of its samples below "
                      f"{record['threshold']:g} molecules, where method {spec.method} would not hold")


def _adaptive_rows(table: Table, outcome) -> None:
    """The target and why points stopped adding replicates (``sweep.execute.adaptive.Outcome``)."""
    from sweep.execute.adaptive import describe_states

    summary = outcome.summary()
    table.add_row("adaptive target", summary["description"])
    table.add_row("adaptive points", "; ".join(describe_states(summary["points"], outcome.target.max_replicates)))
    reps = summary["replicates"]
    if reps:
        table.add_row("replicates per point", f"{reps['min']:,} to {reps['max']:,} (median {reps['median']:,.0f})")


def _resume_command(spec_path: Path, store: Path, workers: int | None, scheduler: str | None) -> str:
    words = ["sweep", "run", str(spec_path), "--store", str(store)]
    if workers:
        words += ["--workers", str(workers)]
    if scheduler:
        words += ["--scheduler", scheduler]
    return shlex.join(words)
