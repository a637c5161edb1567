"""The job-array route on a real Slurm: `sweep submit --template array`, shards, the finishing job.

Each sweep's store is compared with one local Dask run of the same spec: ``counts``,
``status`` and ``events`` must be bit-identical (the per-replicate seed streams of
``numpy.random.SeedSequence(root, spawn_key=(point, replicate))`` make them so), whatever
Slurm did to the jobs. Job states are read with ``scontrol -o show job`` (Slurm manual,
SchedMD: ``JobState``, ``ExitCode``); array syntax and ``afterany`` as in sbatch(1).
Timings are printed (``pytest -s``) for the notes; nothing asserts on speed.
"""

from __future__ import annotations

import math
import os
import re
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

import sweep
from sweep import store
from sweep.store import records
from sweep.batch import walltime
from sweep.execute.run import task_inputs
from sweep.execute.tasks import make_tasks
from sweep.execute.worker import run_task, warm_up
from support.models import DIMERISING
from support.backend_conformance import assert_complete_and_tidy
from support.stores import arrays, assert_identical

pytestmark = pytest.mark.slurm

DIMER = DIMERISING
# 24 tasks of roughly 0.2-0.5 s each on the 2-core test machine
SMALL = """
[run]
replicates = 600
replicates_per_task = 100
seed = 11
[time]
end = 40.0
samples = 9
[design.vary]
k = [300.0, 400.0]
h = [0.01, 0.02]
"""
DATA = ("counts", "status", "events")
LIVE = "PENDING,RUNNING,CONFIGURING,COMPLETING,SUSPENDED,REQUEUED"


def _assert_identical(path: Path, expected: dict[str, np.ndarray]) -> None:
    assert_identical(path, expected, DATA)
    assert_complete_and_tidy(path)  # the finishing side folded the records


@pytest.fixture(scope="module")
def small(tmp_path_factory, spec_writer):
    """The small spec and its local Dask run."""
    folder = tmp_path_factory.mktemp("array-ref")
    path = spec_writer(folder, SMALL, model=DIMER)
    spec = sweep.load(path, store=folder / "ref.zarr")
    assert sweep.run(spec, workers=2).complete
    return path, arrays(spec.store, DATA)


def _submit(spec_path: Path, target: Path, out: Path, *args: str) -> tuple[str, str]:
    cmd = [sys.executable, "-m", "sweep.cli", "submit", str(spec_path), "--store", str(target), "--out", str(out),
           "--template", "array", *args]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=120, env={**os.environ, "COLUMNS": "200"})
    assert done.returncode == 0, done.stdout + done.stderr
    array = re.search(r"submitted array job (\d+)", done.stdout)
    finish = re.search(r"submitted finishing job (\d+)", done.stdout)
    assert array and finish, done.stdout
    assert f"watch progress with: sweep status {target}" in done.stdout
    return array[1], finish[1]


def _live_jobs(name: str) -> list[str]:
    out = subprocess.run(["squeue", "-h", "-t", LIVE, f"--name={name},{name}-finish", "-o", "%i"],
                         capture_output=True, text=True, timeout=30)
    return out.stdout.split()


def _wait_until_idle(name: str, timeout: float) -> float:
    """Wait until no job of this sweep is pending or running; returns when that was (time.monotonic)."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if not _live_jobs(name):
            return time.monotonic()
        time.sleep(0.5)
    subprocess.run(["scancel", f"--name={name}"], timeout=30)
    subprocess.run(["scancel", f"--name={name}-finish"], timeout=30)
    raise AssertionError(f"jobs of {name} still running after {timeout:.0f} s")


def _jobs(job_id: str) -> list[dict[str, str]]:
    """Every element of a job (array) as scontrol's key=value pairs."""
    out = subprocess.run(["scontrol", "-o", "show", "job", job_id], capture_output=True, text=True, timeout=30)
    return [dict(re.findall(r"(\w+)=(\S*)", line)) for line in out.stdout.splitlines() if line.strip()]


def _array_ids(out: Path) -> list[str]:
    """Array job ids of every round, from the finishing jobs' logs and the first submission."""
    ids = []
    for log in sorted((out / "logs").glob("*-finish-*.out"), key=lambda p: int(p.stem.rsplit("-", 1)[1])):
        ids += re.findall(r"submitted array job (\d+)", log.read_text())
    return ids


def test_small_sweep_through_a_job_array_matches_a_local_run(small, tmp_path):
    spec_path, expected = small
    target, out = tmp_path / "arrayA.zarr", tmp_path / "arrayA.slurm"
    began = time.monotonic()
    array, finish = _submit(spec_path, target, out, "--tasks-per-element", "6", "--walltime", "00:05:00",
                            "--memory", "1GB")
    ended = _wait_until_idle("sweep-arrayA", timeout=300)
    print(f"\n[measured] test (a): 24 tasks, 4 array elements: submit to finish {ended - began:.1f} s")
    elements = _jobs(array)
    assert len(elements) == 4 and {e["JobState"] for e in elements} == {"COMPLETED"}, elements
    assert _jobs(finish)[0]["JobState"] == "COMPLETED"
    assert "nothing to submit: all 24 tasks" in next((out / "logs").glob("*-finish-*.out")).read_text()
    assert sorted(p.name for p in out.glob("*.sbatch")) == ["array.sbatch", "finish.sbatch"]  # one round
    _assert_identical(target, expected)


def test_a_cancelled_element_is_resubmitted_and_the_sweep_completes(small, tmp_path):
    spec_path, expected = small
    target, out = tmp_path / "cancelB.zarr", tmp_path / "cancelB.slurm"
    began = time.monotonic()
    array, _ = _submit(spec_path, target, out, "--tasks-per-element", "6", "--walltime", "00:05:00",
                       "--memory", "1GB", "--resubmits", "2")
    record = records.done_file(target, 1, 4)
    deadline = time.monotonic() + 120
    while len(records.read_file(record)) < 1:  # shard 1 (element 0) has finished a task: it is mid-run
        assert time.monotonic() < deadline, "element 0 never recorded a task"
        time.sleep(0.02)
    subprocess.run(["scancel", f"{array}_0"], check=True, timeout=30)
    ended = _wait_until_idle("sweep-cancelB", timeout=300)
    print(f"\n[measured] test (b): one element cancelled: submit to finish {ended - began:.1f} s")
    first = {e["ArrayTaskId"]: e for e in _jobs(array)}
    assert first["0"]["JobState"] == "CANCELLED", first["0"]
    assert {first[i]["JobState"] for i in "123"} == {"COMPLETED"}
    cancelled_log = next((out / "logs").glob(f"*-{array}_0.out")).read_text()
    assert "left" in cancelled_log
    rounds = _array_ids(out)
    assert len(rounds) == 1, rounds  # one resubmission: the cancelled shard only
    assert "#SBATCH --array=0\n" in (out / "array-1.sbatch").read_text()
    assert {e["JobState"] for e in _jobs(rounds[0])} == {"COMPLETED"}
    _assert_identical(target, expected)


def _one_task_seconds(spec: sweep.Spec) -> float:
    """Seconds one task of ``spec`` takes in this process (kernel warm, after one untimed task)."""
    points = spec.points()
    tasks = make_tasks(points.shape[0], spec.replicates, spec.replicates_per_task)[:2]
    store.create(spec.store, spec, points, math.ceil(spec.replicates / spec.replicates_per_task))
    first, second = list(task_inputs(spec, points, tasks))
    warm_up(first)
    run_task(first)
    began = time.perf_counter()
    run_task(second)
    return time.perf_counter() - began


def test_work_of_several_walltimes_completes_through_resubmission(tmp_path, spec_writer):
    """1-minute jobs, at least 3 minutes of work: shards stop before their limit and are resubmitted."""
    probe = sweep.load(spec_writer(tmp_path, _long_body(2), name="probe.toml", model=DIMER),
                       store=tmp_path / "probe.zarr")
    seconds = _one_task_seconds(probe)
    # at least 3 x 60 s of single-core work, with a margin, in tasks of about a second and a half
    points = max(4, math.ceil(200.0 / (seconds * 4)))
    spec_path = spec_writer(tmp_path, _long_body(points), name="long.toml", model=DIMER)
    tasks = points * 4
    target, out = tmp_path / "wallD.zarr", tmp_path / "wallD.slurm"
    began = time.monotonic()
    array, _ = _submit(spec_path, target, out, "--tasks-per-element", str(math.ceil(tasks / 2)),
                       "--walltime", "0:01:00", "--memory", "1GB", "--resubmits", "10")
    # the local reference runs meanwhile, on the same two cores
    reference = sweep.load(spec_path, store=tmp_path / "ref.zarr")
    summary = sweep.run(reference, workers=2)
    assert summary.complete
    ended = _wait_until_idle("sweep-wallD", timeout=900)
    rounds = [array, *_array_ids(out)]
    print(f"\n[measured] test (d): {tasks} tasks of ~{seconds:.2f} s (~{tasks * seconds:.0f} s of work) on "
          f"2 shards with --time=0:01:00: {len(rounds)} array rounds, submit to finish {ended - began:.1f} s")
    assert tasks * seconds >= 3 * 60
    assert len(rounds) >= 2, rounds
    for job in rounds:
        for element in _jobs(job):
            # never killed at the limit: each element finished its shard or stopped itself in time (75)
            assert (element["JobState"], element["ExitCode"]) in {("COMPLETED", "0:0"),
                                                                  ("FAILED", f"{walltime.EXIT_WALLTIME}:0")}, element
    stopped = [log for log in (out / "logs").glob("sweep-wallD-*_*.out")
               if "stopped before the time limit" in log.read_text()]
    assert stopped
    _assert_identical(target, arrays(reference.store, DATA))


def _long_body(points: int) -> str:
    return f"""
[run]
replicates = 2000
replicates_per_task = 500
seed = 5
[time]
end = 40.0
samples = 9
[design.vary]
k = {{ low = 300.0, high = 400.0, count = {points} }}
"""


def test_one_allocation_running_a_dask_cluster_matches_a_local_run(small, tmp_path):
    spec_path, expected = small
    target, out = tmp_path / "allocE.zarr", tmp_path / "allocE.slurm"
    profile = tmp_path / "site.toml"
    profile.write_text('[cluster]\nwalltime = "00:05:00"\nmemory = "2GB"\ncores = 2\ninterface = "lo"\n')
    began = time.monotonic()
    cmd = [sys.executable, "-m", "sweep.cli", "submit", str(spec_path), "--store", str(target), "--out", str(out),
           "--template", "allocation", "--profile", str(profile)]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=120, env={**os.environ, "COLUMNS": "200"})
    assert done.returncode == 0, done.stdout + done.stderr
    job = re.search(r"submitted job (\d+)", done.stdout)[1]
    ended = _wait_until_idle("sweep-allocE", timeout=300)
    print(f"\n[measured] allocation with 2 Dask workers (srun): submit to finish {ended - began:.1f} s")
    log = next((out / "logs").glob(f"*-{job}.out")).read_text()
    assert _jobs(job)[0]["JobState"] == "COMPLETED", log
    assert "Sweep finished" in log, log
    _assert_identical(target, expected)
