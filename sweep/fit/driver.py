"""Run (or resume) a fit: claim its folder, keep one pool of workers for all rounds, drive the loop.

One cluster serves every batch of every round (a local Dask cluster, an existing scheduler, or
Slurm jobs): starting a cluster per batch would cost seconds each. ``Execution("shard",
shard=(1, 1))`` runs every batch in this process instead (no Dask).
"""

from __future__ import annotations

import contextlib
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterator

from sweep.execute.execution import Execution
from sweep.fit import records, smc
from sweep.fit.engine import SweepEvaluator, with_client
from sweep.fit.loop import Outcome, fit as fit_loop
from sweep.fit.spec import FitSpec

PREDICTIVE = 2  # spawn-key kind of the posterior predictive draws (0: proposals, 1: batch seeds)


@dataclass(frozen=True)
class FitSummary:
    outcome: Outcome
    folder: Path
    seconds: float
    simulating_seconds: float  # inside the batches' sweeps (pool start excluded)
    simulations_run: int  # trajectories simulated by this process (a resumed fit: fewer than in total)
    predictive: dict | None = None  # component index -> pooled simulated values of posterior draws

    @property
    def posterior_path(self) -> Path:
        return self.folder / "posterior.zarr"


def labels(fit: FitSpec) -> tuple[str, ...]:
    """One label per distance component: ``condition|t=TIME|species``."""
    return tuple(f"{c.condition}|t={c.time:g}|{c.species}" for c in fit.observed.components)


def run(fit: FitSpec, execution: Execution | None = None, *, fresh: bool = False,
        on_round: Callable | None = None, on_batch: Callable | None = None, draws: int = 20) -> FitSummary:
    """Run the fit to a stop rule (resuming whatever its folder holds) and write ``posterior.zarr``.

    Raises
    ------
    StoreError
        The folder holds another fit.
    sweep.fit.engine.Incomplete
        A batch's sweep stopped early (Ctrl-C, SIGTERM, failed tasks): rerun to continue.

    Example
    -------
    >>> summary = run(load("configs/reporter_fit.toml"), Execution("local", workers=2))
    """
    began = time.perf_counter()
    execution = execution if execution is not None else Execution("local")
    records.claim(fit.store, fit.sha256, fit.path, fresh)
    folder = records.Folder(fit.store, fit.prior.names, labels(fit))
    with _pool(execution, fit.store) as batch_execution:
        evaluator = SweepEvaluator(fit, folder, batch_execution, on_batch)
        outcome = fit_loop(fit.settings, fit.prior, evaluator, folder, on_round)
        predictive = _predictive(fit, evaluator, outcome, draws) if draws else None
    records.write(records.posterior_dataset(outcome.populations, fit.prior.names, labels(fit), outcome.stopped,
                                            outcome.simulations), fit.store / "posterior.zarr")
    return FitSummary(outcome, fit.store, time.perf_counter() - began, evaluator.seconds, evaluator.simulations,
                      predictive)


def _predictive(fit: FitSpec, evaluator: SweepEvaluator, outcome: Outcome, draws: int) -> dict:
    """Simulate ``draws`` particles drawn from the posterior (``<folder>/predictive``, a sweep store)."""
    post = outcome.posterior
    rng = smc.stream(fit.settings.seed, PREDICTIVE, 0, 0)
    chosen = rng.choice(post.theta.shape[0], size=draws, p=post.weight / post.weight.sum())
    seed = smc.batch_seed(fit.settings.seed, PREDICTIVE, 0)
    counts, status = evaluator.simulate(post.theta[chosen], fit.store / "predictive", seed)
    names = fit.condition_names
    out = {}
    for k, comp in enumerate(fit.observed.components):
        c = names.index(comp.condition)
        out[k] = counts[:, c, :, k][status[:, c, :] == 0]
    return out


@contextlib.contextmanager
def _pool(execution: Execution, store: Path) -> Iterator[Execution]:
    if execution.backend == "shard":
        yield Execution("shard", shard=(1, 1), pack=execution.pack)
        return
    if execution.backend == "local":
        from sweep.execute import local

        with local.connect(execution.workers) as client:
            yield with_client(execution, client)
    elif execution.backend == "scheduler" and execution.client is None:
        from sweep.execute import scheduler

        with scheduler.connect(execution.address) as client:
            yield with_client(execution, client)
    elif execution.backend == "slurm":
        from sweep.execute import slurm

        config = execution.cluster
        with slurm.connect(config, store) as client:
            yield with_client(execution, client, slots=config.max_jobs * config.workers_per_job)
    else:
        yield execution
