"""`sweep run --cluster slurm`: resolve the batch settings once and say what will be submitted."""

from __future__ import annotations

from enum import StrEnum
from pathlib import Path
from typing import Any

import typer

from sweep.batch import settings as clusters
from sweep.cli.common import console, errors, shown
from sweep.spec import Spec


class ClusterKind(StrEnum):
    slurm = "slurm"


def resolve(kind: ClusterKind | None, profile: Path | None, spec: Spec, flags: dict[str, Any],
            workers: int | None, scheduler: str | None) -> clusters.ClusterConfig | None:
    """The resolved ``ClusterConfig`` (profile < spec [cluster] < flags), or None without ``--cluster``.

    Raises
    ------
    typer.BadParameter
        Cluster flags without ``--cluster``, or ``--cluster`` with ``--workers`` / ``--scheduler`` (exit 2).
    SpecError
        A bad value in the profile, the spec's ``[cluster]`` table or a flag (exit 2).
    """
    given = [f"--{k.replace('_', '-')}" for k, v in flags.items() if v is not None] + (["--profile"] if profile else [])
    if kind is None:
        if given:
            raise typer.BadParameter(f"{', '.join(given)} only apply to --cluster slurm", param_hint="--cluster")
        return None
    if workers:
        raise typer.BadParameter("--workers is for a local cluster; with --cluster slurm set max_jobs "
                                 "(and processes per job) in the profile or with --max-jobs", param_hint="--workers")
    if scheduler:
        raise typer.BadParameter("give either --scheduler or --cluster, not both", param_hint="--scheduler")
    return clusters.resolve(profile, dict(spec.cluster), str(spec.path), flags)


def announce(config: clusters.ClusterConfig, store: Path) -> None:
    """Print what will be submitted, the walltime plan and whether the traffic is encrypted."""
    config = clusters.for_store(config, store)
    where = f"partition {config.partition}" if config.partition else "the default partition"
    console.print(f"Slurm: {config.min_jobs} to {config.max_jobs} jobs on {shown(where)}, each {config.cores} "
                  f"core{'s' if config.cores != 1 else ''}, {shown(config.memory)}, walltime {shown(config.walltime)}, "
                  f"{config.workers_per_job} worker{'s' if config.workers_per_job != 1 else ''}", highlight=False)
    console.print(f"workers retire {config.margin_seconds:.0f} s (± {config.stagger_seconds:.0f} s) before the "
                  "walltime; new jobs take their place while work remains", highlight=False)
    console.print(f"job logs: {shown(config.log_dir)}", highlight=False)
    if config.tls:
        console.print("scheduler and workers talk over TLS with a temporary certificate", highlight=False)
    else:
        errors.print(f"[bold yellow]warning:[/] TLS is off (tls = false, from {shown(config.where('tls'))}): "
                     "anyone who can reach the scheduler's port can run code as you; "
                     "leave tls on unless the network is yours alone", highlight=False)


def resume_words(kind: ClusterKind | None, profile: Path | None, flags: dict[str, Any]) -> list[str]:
    """The cluster part of the command that resumes the run."""
    if kind is None:
        return []
    words = ["--cluster", kind.value] + (["--profile", str(profile)] if profile else [])
    for key, value in flags.items():
        if value is not None:
            words += [f"--{key.replace('_', '-')}", str(value)]
    return words
