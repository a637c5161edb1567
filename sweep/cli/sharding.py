"""`sweep run SPEC --shard I/N`: one shard, in this process, with plain log lines (batch-job friendly).

Exit codes: 0 the shard's tasks are all done; 1 some failed; 2 bad input (or the shard is
already running, or a whole run holds the store); 75 stopped before its walltime ran out,
the rest left for a resubmission; 130 Ctrl-C; 143 SIGTERM (a cancelled or timed-out job).
"""

from __future__ import annotations

import time
from pathlib import Path

import typer

import sweep
from sweep.batch import walltime
from sweep.execute.execution import parse_shard
from sweep.cli.common import EXIT_BAD_INPUT, EXIT_FAILED_TASKS, console, duration, errors, shown, si

EXIT_WALLTIME = walltime.EXIT_WALLTIME
EXIT_INTERRUPTED = 130
EXIT_TERMINATED = 143  # 128 + SIGTERM, the shell's convention
LOG_EVERY_SECONDS = 10.0


def run_shard(spec_path: Path, store: Path | None, shard: str | None, time_left: str | None, break_lock: bool,
              others: dict) -> None:
    """Parse and check the shard options, run the shard, print its summary, exit with its code."""
    if shard is None:
        _bad("--time-left needs --shard I/N (a whole run has no time limit of its own)")
    given = [name for name, value in others.items() if value]
    if given:
        _bad(f"--shard runs in this process without Dask; drop {', '.join(given)}")
    try:
        index, count = parse_shard(shard)
    except ValueError as exc:
        _bad(f"--shard {exc}")
    try:
        left = walltime.parse_duration(time_left) if time_left is not None else walltime.time_left()
    except ValueError as exc:
        _bad(f"--time-left {exc}")
    spec = sweep.load(spec_path, store=store)
    limit = "no time limit" if left is None else f"{duration(left)} left"
    console.print(f"shard {index}/{count} of {shown(spec.store)} ({limit})", highlight=False)
    summary = sweep.run_shard(spec, index, count, time_left=left, break_lock=break_lock, on_progress=_logger())
    _report(summary)
    raise typer.Exit(_exit_code(summary))


def _bad(message: str) -> None:
    errors.print(f"[bold red]error:[/] {shown(message)}", highlight=False, soft_wrap=True)
    raise typer.Exit(EXIT_BAD_INPUT)


def _logger():
    last = [time.monotonic()]

    def log(p: sweep.Progress) -> None:
        if time.monotonic() - last[0] >= LOG_EVERY_SECONDS or p.done + p.failed == p.total:
            last[0] = time.monotonic()
            console.print(f"  {p.done}/{p.total} tasks of this shard done, {p.failed} failed, "
                          f"{si(p.events_per_second)} events/s", highlight=False)

    return log


def _report(s: sweep.RunSummary) -> None:
    console.print(f"shard {s.index}/{s.count}: {s.tasks_run} tasks run, {s.tasks_skipped} already done, "
                  f"{len(s.failed)} failed, {s.tasks_left} left, of {s.tasks_in_shard} in this shard "
                  f"({s.tasks_total} in the sweep); {s.events:,} events in {duration(s.seconds)}", highlight=False)
    for f in s.failed[:20]:
        errors.print(f"[red]failed[/] point {f.point} block {f.block}: {shown(f.error)}", highlight=False)
    if s.stopped == "walltime":
        console.print(f"stopped before the time limit: the next task would not finish in the "
                      f"{duration(max(s.time_left or 0.0, 0.0))} left; {s.tasks_left} task(s) left for a "
                      f"resubmission (exit code {EXIT_WALLTIME})", highlight=False)
    elif s.stopped:
        console.print(f"stopped: {shown(s.stopped)}; {s.tasks_left} task(s) left; run the same command again to "
                      "finish this shard", highlight=False)


def _exit_code(s: sweep.RunSummary) -> int:
    if s.stopped == "walltime":
        return EXIT_WALLTIME
    if s.stopped == "interrupted":
        return EXIT_INTERRUPTED
    if s.stopped == "terminated":
        return EXIT_TERMINATED
    if s.stopped or s.failed:
        return EXIT_FAILED_TASKS
    return 0
