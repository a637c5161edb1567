"""`sweep status`: how far a store has got, what failed, and whether its chunks are sound."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table

import sweep
from sweep.cli.common import EXIT_FAILED_TASKS, console, errors, exits_on_errors, lost_lines, shown, store_path


def _adaptive_rows(table: Table, st: sweep.StoreStatus) -> None:
    """Why points stopped adding replicates (``sweep.execute.adaptive``)."""
    from sweep.execute.adaptive import describe_states

    summary = st.adaptive
    table.add_row("adaptive target", shown(summary.get("description", "")))
    table.add_row("adaptive points", "; ".join(describe_states(summary.get("points", {}), st.replicates)))
    reps = summary.get("replicates") or {}
    if reps:
        table.add_row("replicates per point", f"{reps['min']:,} to {reps['max']:,} (median {reps['median']:,.0f}), "
                                              f"{reps['total']:,} in all")


@exits_on_errors
def status(
    store: Annotated[Path, typer.Argument(metavar="STORE", help="A results store written by `sweep run` (or its spec: its store is shown).")],
    verify: Annotated[bool, typer.Option("--verify", help="Re-read every chunk marked done; unmark bad ones so a rerun repairs them.")] = False,
) -> None:
    """Show done/failed/pending tasks, replicates stopped early, and the spec the store holds."""
    store = store_path(store)
    st = sweep.status(store)
    table = Table(title=shown(st.path), show_header=False, title_justify="left")
    table.add_column(style="bold")
    table.add_column(overflow="fold")
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
    table.add_row("species", shown(", ".join(st.species)))
    table.add_row("varied parameters", shown(", ".join(st.param_names) or "(none)"))
    table.add_row("spec", f"{shown(st.spec_path)} (SHA-256 {shown(st.spec_sha256[:12])})")
    table.add_row("created, last run", shown(f"{st.created}, {st.last_run or 'never'}"))
    if st.writer is not None:
        state = {True: "running now", False: "stale (that process is gone)", None: "on another host"}[st.writer_alive]
        table.add_row("lock", f"{shown(st.writer.describe())}: {state}")
    for claim in st.shards:
        table.add_row("shard", shown(claim.describe()))
    for note in st.damaged:
        table.add_row("[red]damaged[/]", f"{shown(note)}; `sweep status --verify` repairs what it can")
    console.print(table)
    _warnings(st)
    if st.failed:
        failed = Table(title="Failed tasks (a rerun tries them again)", title_justify="left")
        for col in ("point", "block", *st.param_names, "error"):
            failed.add_column(shown(col))
        for f in st.failed:
            failed.add_row(str(f.point), str(f.block), *(f"{f.params.get(n, float('nan')):g}" for n in st.param_names),
                           shown(f.error))
        console.print(failed)
    if verify:
        _verify(store)


def _warnings(st: sweep.StoreStatus) -> None:
    """Lost replicates, and an approximate method at low copy numbers: results that only look fine."""
    from sweep.analysis.validity import APPROXIMATE, describe_low_copy

    for i, line in enumerate(lost_lines(st.lost, st.points, st.max_events)):
        console.print(("[yellow]warning:[/] " if i == 0 else "") + shown(line), highlight=False, soft_wrap=True)
    if st.method in APPROXIMATE:
        lines = describe_low_copy(st.low_copy or {})
        if st.low_copy is None:
            lines = [f"method {st.method} is approximate: not checked for low copy numbers yet (`sweep analyze` "
                     "checks it)"]
        elif not lines:
            console.print(f"low copy numbers: none (method {shown(st.method)}; no species below "
                          f"{st.low_copy.get('threshold', 10):g} molecules in {st.low_copy.get('share', 0.05):.0%} "
                          "of its samples)", highlight=False)
        for i, line in enumerate(lines):
            console.print(("[yellow]warning:[/] " if i == 0 else "  ") + shown(line), highlight=False, soft_wrap=True)


def _verify(store: Path) -> None:
    """Print what ``--verify`` found and repaired; exit 1 when anything was wrong."""
    from sweep.store.status import verify as verify_store  # zarr: only when a store is read

    found = verify_store(store)
    for name, problem in found.coordinates.items():
        errors.print(f"[red]damaged[/] coordinate {shown(name)}: {shown(problem)}")
    if found.done_damaged:
        errors.print(f"[red]damaged[/] {shown(found.done_damaged)}")
    for point, block, problem in found.tasks:
        errors.print(f"[red]bad[/] point {point} block {block}: {shown(problem)}; marked not done")
    if found.repaired is not None:
        for line in found.repaired.describe():
            console.print(f"repaired: {shown(line)}")
    if found.tasks:
        console.print(f"{len(found.tasks)} task(s) will be recomputed by the next `sweep run`")
    if not found.checksums:
        console.print("note: this store was written before chunks carried checksums: verify checked that each "
                      "chunk is present and decodes, but a flipped bit inside a chunk can go unnoticed")
    elif not found.positions:
        console.print("note: this store keeps no checksums recorded per task: a chunk file moved to another "
                      "task's place cannot be told from the right one")
    if not found.sound:
        raise typer.Exit(EXIT_FAILED_TASKS)
    console.print(f"verified: every chunk of the {found.checked:,} done tasks and of the coordinates is present "
                  "and matches its checksum")
