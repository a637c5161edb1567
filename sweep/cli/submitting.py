"""`sweep submit`: render the sbatch scripts of a sweep and submit them to Slurm."""

from __future__ import annotations

import shlex
from dataclasses import replace
from enum import StrEnum
from pathlib import Path
from typing import Annotated

import typer

import sweep
from sweep.batch import settings as clusters
from sweep.batch import submit as submit_mod
from sweep.cli.common import EXIT_FAILED_TASKS, console, errors, exits_on_errors, shown


class Template(StrEnum):
    array = "array"
    allocation = "allocation"


@exits_on_errors
def submit(
    spec_path: Annotated[Path, typer.Argument(metavar="SPEC", help="The sweep spec (TOML).")],
    template: Annotated[Template, typer.Option(help="array: a job array of shards plus a finishing job; allocation: one job running a Dask cluster.")] = Template.array,
    store: Annotated[Path | None, typer.Option(help="Results store; overrides run.store.")] = None,
    output: Annotated[Path | None, typer.Option("--output", "-o", help="Folder for the scripts and logs (default: <store name>.slurm beside the store).")] = None,
    out: Annotated[Path | None, typer.Option("--out", hidden=True, help="Old spelling of --output.")] = None,
    dry_run: Annotated[bool, typer.Option("--dry-run", help="Write and print the scripts; submit nothing.")] = False,
    profile: Annotated[Path | None, typer.Option(help="Site profile: a TOML file with a \\[cluster] table (docs/running.md).")] = None,
    partition: Annotated[str | None, typer.Option(envvar="SWEEP_PARTITION", help="Slurm partition.")] = None,
    account: Annotated[str | None, typer.Option(envvar="SWEEP_ACCOUNT", help="Slurm account to charge.")] = None,
    walltime: Annotated[str | None, typer.Option(envvar="SWEEP_WALLTIME", help="Time limit of each job, HH:MM:SS (default 01:00:00).")] = None,
    memory: Annotated[str | None, typer.Option(envvar="SWEEP_MEMORY", help="Memory of each array element (allocation: of each core), e.g. 2GB.")] = None,
    job_extra: Annotated[list[str] | None, typer.Option(help="Extra #SBATCH option, e.g. --qos=short (repeatable).")] = None,
    setup: Annotated[list[str] | None, typer.Option(help="Shell line run before sweep, e.g. 'module load python' (repeatable).")] = None,
    log_dir: Annotated[Path | None, typer.Option(help="Folder for the jobs' output (default: <out>/logs).")] = None,
    max_array: Annotated[int, typer.Option(min=1, help="Largest job array the site allows (Slurm's MaxArraySize).")] = submit_mod.DEFAULT_MAX_ARRAY,
    tasks_per_element: Annotated[int | None, typer.Option(min=1, help="Tasks per array element (default: about ten minutes of work, at most half the walltime, from a short calibration).")] = None,
    shards: Annotated[int | None, typer.Option(min=1, help="Keep this shard count (resubmissions); default: from the pending tasks.")] = None,
    resubmits: Annotated[int, typer.Option(min=0, help="How often the finishing job may resubmit what is missing.")] = submit_mod.DEFAULT_RESUBMITS,
    workers: Annotated[int | None, typer.Option(min=1, help="allocation: Dask workers (default: the profile's cores).")] = None,
    finish: Annotated[bool, typer.Option("--finish", help="Run as the finishing job: fold records, report, resubmit what is missing.")] = False,
    templates: Annotated[Path | None, typer.Option(help="Folder of the sbatch templates (default: slurm_templates/).")] = None,
) -> None:
    """Render the Slurm scripts for a sweep and submit them (print them with --dry-run)."""
    spec = sweep.load(spec_path, store=store)
    flags = {"partition": partition, "account": account, "walltime": walltime, "memory": memory,
             "job_extra": job_extra or None, "setup": setup or None, "log_dir": str(log_dir) if log_dir else None}
    # one loader for both routes: profile < the spec's [cluster] table < flags (sweep.cluster)
    prof = clusters.resolve(profile, dict(spec.cluster), str(spec.path), flags)
    out_dir = (output or out or submit_mod.default_out(spec.store)).resolve()
    name = prof.job_name if prof.where("job_name") != "the default" else submit_mod.job_name(spec.store)
    job = submit_mod.Job(spec.path.resolve(), spec.store.resolve(), out_dir, out_dir / "profile.toml", name,
                         Path.cwd())
    if prof.log_dir:  # the finishing job may run elsewhere: pin the folder
        prof = replace(prof, log_dir=str(submit_mod.log_folder(job, prof)))
    if template is Template.allocation:
        result = submit_mod.submit_allocation(spec, job, prof, workers=workers or prof.cores, dry_run=dry_run,
                                              templates=templates)
    elif finish:
        if shards is None:
            errors.print("[bold red]error:[/] --finish needs --shards N (the finishing job passes it)")
            raise typer.Exit(2)
        result = submit_mod.finish_array(spec, job, prof, shards=shards, resubmits=resubmits, max_array=max_array,
                                         templates=templates)
    else:
        result = submit_mod.submit_array(spec, job, prof, max_array=max_array, tasks_per_element=tasks_per_element,
                                         shards=shards, resubmits=resubmits, dry_run=dry_run, templates=templates)
    _report(result, job, dry_run)
    if result.note == "budget spent":
        raise typer.Exit(EXIT_FAILED_TASKS)


def _report(result: submit_mod.Submission, job: submit_mod.Job, dry_run: bool) -> None:
    watch = shlex.join(["sweep", "status", str(job.store)])
    if result.note == "complete":
        console.print(f"nothing to submit: all {result.tasks_total:,} tasks of {shown(job.store)} are done", highlight=False)
        return
    if result.note == "budget spent":
        errors.print(f"{result.pending:,} of {result.tasks_total:,} tasks are still missing and no resubmission is "
                     f"left; submit again with: sweep submit {shown(shlex.quote(str(job.spec)))} --store "
                     f"{shown(shlex.quote(str(job.store)))} --template array", highlight=False)
        return
    if result.layout:
        lay = result.layout
        console.print(f"{result.pending:,} of {result.tasks_total:,} tasks pending: {len(lay.pending_shards):,} "
                      f"array element(s) of {lay.shards:,} shards (about {lay.tasks_per_element:,} tasks each)",
                      highlight=False)
    for path, text in result.scripts:
        if dry_run:
            console.rule(shown(path))
            console.print(text, highlight=False, markup=False, soft_wrap=True)
        else:
            console.print(f"wrote {shown(path)}", highlight=False)
    if dry_run:
        console.print("dry run: nothing submitted", highlight=False)
        return
    names = ["array job", "finishing job"] if result.layout else ["job"]
    for name, job_id in zip(names, result.job_ids):
        console.print(f"submitted {name} {shown(job_id)}", highlight=False)
    console.print(f"watch progress with: {shown(watch)}", highlight=False)
