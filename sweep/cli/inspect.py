"""`sweep status`: how far a store has got, and what it holds."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table

import sweep
from sweep.cli.common import console, exits_on_errors


@exits_on_errors
def status(
    store: Annotated[Path, typer.Argument(metavar="STORE", help="A results store written by `sweep run`.")],
) -> None:
    """Show done/pending tasks, replicates stopped early, and the spec the store holds."""
    st = sweep.status(store)
    table = Table(title=f"{st.path}", show_header=False, title_justify="left")
    table.add_column(style="bold")
    table.add_column()
    pct = 100.0 * st.tasks_done / st.tasks_total if st.tasks_total else 100.0
    table.add_row("tasks", f"{st.tasks_done:,} done, {st.tasks_pending:,} pending, of {st.tasks_total:,} ({pct:.1f}%)")
    table.add_row("points x replicates", f"{st.points:,} x {st.replicates:,}")
    table.add_row("stopped at event cap", f"{st.capped:,} replicates")
    table.add_row("numerical failures", f"{st.numerical:,} replicates")
    table.add_row("method, root seed", f"{st.method}, {st.root_seed}")
    table.add_row("species", ", ".join(st.species))
    table.add_row("varied parameters", ", ".join(st.param_names) or "(none)")
    table.add_row("spec", f"{st.spec_path} (SHA-256 {st.spec_sha256[:12]})")
    table.add_row("created, last run", f"{st.created}, {st.last_run or 'never'}")
    console.print(table)
