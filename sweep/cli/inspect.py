"""`sweep status`: how far a store has got, what failed, and whether its chunks are sound."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table

import sweep
from sweep.cli.common import EXIT_FAILED_TASKS, console, exits_on_errors
from sweep.status import verify as verify_store


def _adaptive_rows(table: Table, st: sweep.StoreStatus) -> None:
    """Why points stopped adding replicates (``sweep.adaptive``)."""
    from sweep.adaptive import describe_states

    summary = st.adaptive
    table.add_row("adaptive target", summary.get("description", ""))
    table.add_row("adaptive points", "; ".join(describe_states(summary.get("points", {}), st.replicates)))
    reps = summary.get("replicates") or {}
    if reps:
        table.add_row("replicates per point", f"{reps['min']:,} to {reps['max']:,} (median {reps['median']:,.0f}), "
                                              f"{reps['total']:,} in all")


@exits_on_errors
def status(
    store: Annotated[Path, typer.Argument(metavar="STORE", help="A results store written by `sweep run`.")],
    verify: Annotated[bool, typer.Option("--verify", help="Re-read every chunk marked done; unmark bad ones so a rerun repairs them.")] = False,
) -> None:
    """Show done/failed/pending tasks, replicates stopped early, and the spec the store holds."""
    st = sweep.status(store)
    table = Table(title=f"{st.path}", show_header=False, title_justify="left")
    table.add_column(style="bold")
    table.add_column()
    needed = st.tasks_total - st.tasks_not_needed
    pct = 100.0 * st.tasks_done / needed if needed else 100.0
    skipped = f"{st.tasks_not_needed:,} not needed (adaptive), " if st.adaptive else ""
    table.add_row("tasks", f"{st.tasks_done:,} done, {len(st.failed):,} failed, "
                           f"{st.tasks_pending - len(st.failed):,} pending, {skipped}of {st.tasks_total:,} "
                           f"({pct:.1f}% done)")
    table.add_row("points x replicates", f"{st.points:,} x {st.replicates:,}")
    if st.adaptive:
        _adaptive_rows(table, st)
    table.add_row("stopped at event cap", f"{st.capped:,} replicates")
    table.add_row("numerical failures", f"{st.numerical:,} replicates")
    table.add_row("method, root seed", f"{st.method}, {st.root_seed}")
    table.add_row("species", ", ".join(st.species))
    table.add_row("varied parameters", ", ".join(st.param_names) or "(none)")
    table.add_row("spec", f"{st.spec_path} (SHA-256 {st.spec_sha256[:12]})")
    table.add_row("created, last run", f"{st.created}, {st.last_run or 'never'}")
    if st.writer is not None:
        state = {True: "running now", False: "stale (that process is gone)", None: "on another host"}[st.writer_alive]
        table.add_row("lock", f"{st.writer.describe()}: {state}")
    for claim in st.shards:
        table.add_row("shard", claim.describe())
    console.print(table)
    if st.failed:
        failed = Table(title="Failed tasks (a rerun tries them again)", title_justify="left")
        for col in ("point", "block", *st.param_names, "error"):
            failed.add_column(col)
        for f in st.failed:
            failed.add_row(str(f.point), str(f.block), *(f"{f.params[n]:g}" for n in st.param_names), f.error)
        console.print(failed)
    if verify:
        problems = verify_store(store)
        if problems:
            for point, block, problem in problems:
                console.print(f"[red]bad[/] point {point} block {block}: {problem}; marked not done")
            console.print(f"{len(problems)} task(s) will be recomputed by the next `sweep run`")
            raise typer.Exit(EXIT_FAILED_TASKS)
        console.print(f"verified: every chunk of the {st.tasks_done:,} done tasks is present and readable")
