"""`sweep fit`: calibrate rate constants to observed distributions by ABC-SMC (see docs/fit.md)."""

from __future__ import annotations

import shlex
from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table

from sweep.cli import clustering
from sweep.cli.common import console, duration, errors, exits_on_errors, shown

EXIT_INTERRUPTED = 130
EXIT_STOPPED = 1


@exits_on_errors
def fit(
    spec_path: Annotated[Path, typer.Argument(metavar="FIT_SPEC", help="The fit spec (TOML with \\[fit] tables).")],
    store: Annotated[Path | None, typer.Option(help="The fit's folder; overrides run.store.")] = None,
    workers: Annotated[int | None, typer.Option(min=1, help="Local worker processes (default: one per core).")] = None,
    scheduler: Annotated[str | None, typer.Option(help="Address (or scheduler file) of an existing Dask scheduler.")] = None,
    serial: Annotated[bool, typer.Option("--serial", help="Simulate in this process, with no Dask cluster.")] = False,
    fresh: Annotated[bool, typer.Option("--fresh", help="Delete this fit's folder and start over.")] = False,
    dry_run: Annotated[bool, typer.Option("--dry-run", help="Estimate the cost from a short calibration; run nothing.")] = False,
    simulate_data: Annotated[str | None, typer.Option(metavar="NAME=VALUE,...", help="Write demo data to \\[fit].data from these true values, then stop.")] = None,
    cells: Annotated[int, typer.Option(min=2, help="With --simulate-data: cells per condition and time.")] = 200,
    data_seed: Annotated[int, typer.Option(help="With --simulate-data: seed of the data's simulation.")] = 1,
    species: Annotated[str | None, typer.Option(help="With --simulate-data: species or observables to write, comma-separated (default: the last species).")] = None,
    cluster: Annotated[clustering.ClusterKind | None, typer.Option(help="Run the Dask workers as batch jobs for the whole fit (settings: --profile, then the fit spec's \\[cluster] table, then the flags below).")] = None,
    profile: Annotated[Path | None, typer.Option(help="With --cluster: site profile, a TOML file with a \\[cluster] table (see configs/slurm_site_example.toml).")] = None,
    partition: Annotated[str | None, typer.Option(help="With --cluster: Slurm partition.")] = None,
    account: Annotated[str | None, typer.Option(help="With --cluster: Slurm account to charge.")] = None,
    walltime: Annotated[str | None, typer.Option(help="With --cluster: time limit of each worker job, HH:MM:SS.")] = None,
    max_jobs: Annotated[int | None, typer.Option(min=1, help="With --cluster: most worker jobs at once.")] = None,
) -> None:
    """Fit the \\[fit.priors] parameters to the observed data; run again to resume where it stopped."""
    from sweep.execute.execution import Execution
    from sweep.fit import driver, report, synthetic
    from sweep.fit import spec as fitspec
    from sweep.fit.engine import Incomplete

    if simulate_data is not None:
        loaded = fitspec.load(spec_path, store, need_data=False)
        truth = synthetic.truth_from_text([simulate_data])
        names = tuple(species.split(",")) if species else (loaded.sweep.model.species[-1],)
        out = synthetic.simulate(loaded, truth, cells, data_seed, names)
        console.print(f"wrote {cells} cells per condition and time to {shown(out)}", highlight=False)
        return
    loaded = fitspec.load(spec_path, store)
    if dry_run:
        _dry_run(loaded, workers)
        return
    flags = {"partition": partition, "account": account, "walltime": walltime, "max_jobs": max_jobs}
    batch = clustering.resolve(cluster, profile, loaded.sweep, flags, workers, scheduler)
    if serial and (batch is not None or workers or scheduler):
        raise typer.BadParameter("--serial simulates in this process: drop --workers, --scheduler and --cluster",
                                 param_hint="--serial")
    execution = Execution("shard", shard=(1, 1)) if serial else Execution.choose(workers=workers, scheduler=scheduler,
                                                                                 cluster=batch)
    if batch is not None:
        clustering.announce(batch, loaded.store)
    resume = shlex.join(["sweep", "fit", str(spec_path)] + clustering.resume_words(cluster, profile, flags))

    def on_round(p) -> None:
        tol = "inf" if p.tolerance == float("inf") else f"{p.tolerance:.4g}"
        console.print(f"round {p.round}: tolerance {tol}, {p.candidates:,} candidates, "
                      f"acceptance {p.acceptance:.3f}, ESS {p.ess:.0f}", highlight=False)

    try:
        result = driver.run(loaded, execution, fresh=fresh, on_round=on_round)
    except KeyboardInterrupt:
        errors.print("interrupted; every finished batch task is recorded")
        console.print(f"resume with: {shown(resume)}", highlight=False)
        raise typer.Exit(EXIT_INTERRUPTED) from None
    except Incomplete as exc:
        errors.print(f"[yellow]stopped:[/] {shown(exc)}", highlight=False)
        console.print(f"resume with: {shown(resume)}", highlight=False)
        raise typer.Exit(EXIT_INTERRUPTED if exc.summary.stopped == "interrupted" else EXIT_STOPPED) from None
    paths = report.write(loaded, result)
    _show(result, paths)


def _show(result, paths) -> None:
    from sweep.fit import summary

    import xarray as xr

    ds = xr.open_zarr(result.posterior_path, consolidated=False).load()
    table = Table(title=f"Posterior (stopped: {result.outcome.stopped})", title_justify="left")
    for col in ("parameter", "mean", "median", "50 % CI", "95 % CI"):
        table.add_column(col)
    for r in summary.posterior_table(ds["theta"].values, ds["weight"].values, list(ds["param"].values)):
        table.add_row(shown(r["parameter"]), f"{r['mean']:.4g}", f"{r['median']:.4g}",
                      f"{r['ci50_low']:.4g} - {r['ci50_high']:.4g}", f"{r['ci95_low']:.4g} - {r['ci95_high']:.4g}")
    console.print(table)
    console.print(f"{result.outcome.simulations:,} trajectories in all rounds; wall time {duration(result.seconds)}; "
                  f"{result.outcome.unfinished:,} replicates stopped early (counted, see docs/fit.md)", highlight=False)
    console.print(f"posterior: xarray.open_zarr({shown(repr(str(result.posterior_path)))}, consolidated=False)",
                  highlight=False)
    for name, path in paths.items():
        console.print(f"  {name}: {shown(path)}", highlight=False)


def _dry_run(loaded, workers) -> None:
    import os

    from sweep.fit.estimate import estimate

    n = workers or os.cpu_count() or 1
    with console.status("calibrating..."):
        cost = estimate(loaded, n)
    console.print(f"calibration: {cost.seconds_per_candidate:.3g} worker-seconds per candidate "
                  f"({loaded.sweep.replicates} replicates x {len(loaded.conditions)} conditions)", highlight=False)
    console.print(f"expected candidates per round: {', '.join(f'{c:,}' for c in cost.candidates)} "
                  f"(acceptance assumed: quantile x 0.75^(t-1), see sweep.fit.estimate)", highlight=False)
    console.print(f"about {cost.simulations:,} trajectories, {duration(cost.seconds)} on {n} workers "
                  "(an order of magnitude: later rounds' acceptance is not known in advance)", highlight=False)
