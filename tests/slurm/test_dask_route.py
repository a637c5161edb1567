"""The Dask route on a real Slurm: `sweep run SPEC --cluster slurm` (dask-jobqueue's SLURMCluster).

Every store is compared with a local run of the same spec (`sweep run --workers 2`): ``counts``,
``status`` and ``events`` must be bit-identical, because each replicate draws from its own
stream ``numpy.random.SeedSequence(root, spawn_key=(point, replicate))`` whatever ran it.
Job states, times and limits come from ``scontrol -o show job`` (Slurm manual, SchedMD:
``JobState``, ``RunTime``, ``SubmitTime``); Slurm enforces ``--time`` with about 30 s of
slack (observed on this machine, tests/../notes). Timings are printed (``pytest -s``);
nothing asserts on speed.
"""

from __future__ import annotations

import os
import re
import shlex
import signal
import subprocess
import sys
import time
from datetime import datetime
from pathlib import Path

import numpy as np
import pytest
import zarr
from support.models import DIMERISING
from support.stores import arrays, assert_identical

pytestmark = pytest.mark.slurm

DIMER = DIMERISING
# 24 tasks of about 0.5 s each (4.6 ms per replicate at end = 400 on the 2-core test machine)
SMALL = """
[run]
replicates = 600
replicates_per_task = 100
seed = 5
[time]
end = 400.0
samples = 9
[design.vary]
k = [300.0, 400.0]
h = [0.01, 0.02]
"""
# 120 tasks of about 2 s each: about 240 s of work (job run times summed: about 270 s on the idle
# 2-core test machine, more under load), over three times a 1-minute job's walltime, with room to spare
LONG = SMALL.replace("replicates = 600", "replicates = 13200").replace("replicates_per_task = 100",
                                                                      "replicates_per_task = 440")
LONG_TASKS = 4 * 30
WALLTIME = 60.0
DATA = ("counts", "status", "events")
ENV = {**os.environ, "COLUMNS": "200"}


def _cluster_table(job_name: str, **extra: object) -> str:
    values = {"interface": "lo", "memory": "1GB", "job_name": job_name, "poll_seconds": 5, **extra}
    return "\n[cluster]\n" + "\n".join(f"{k} = {_toml(v)}" for k, v in values.items()) + "\n"


def _toml(value: object) -> str:
    if isinstance(value, str):
        return f'"{value}"'
    if isinstance(value, list):
        return "[" + ", ".join(_toml(v) for v in value) + "]"
    return str(value).lower() if isinstance(value, bool) else str(value)


def _sweep(*args: str, timeout: float = 600) -> tuple[subprocess.CompletedProcess, float]:
    began = time.monotonic()
    result = subprocess.run([sys.executable, "-m", "sweep.cli", "run", *args], capture_output=True, text=True,
                            timeout=timeout, env=ENV)
    return result, time.monotonic() - began


def _queued(job_name: str) -> list[str]:
    out = subprocess.run(["squeue", "-h", "-n", job_name, "-o", "%i %T"], capture_output=True, text=True, check=True)
    return [line for line in out.stdout.splitlines() if line.strip()]


def _gone(job_name: str, within: float = 30.0) -> list[str]:
    """Our jobs still in the queue after ``within`` seconds (COMPLETING takes KillWait)."""
    deadline = time.monotonic() + within
    while (left := _queued(job_name)) and time.monotonic() < deadline:
        time.sleep(0.5)
    return left


def _job(job_id: str) -> dict[str, str]:
    out = subprocess.run(["scontrol", "-o", "show", "job", job_id], capture_output=True, text=True)
    return dict(re.findall(r"(\w+)=(\S+)", out.stdout))


def _seconds(text: str) -> float:
    parts = [int(p) for p in re.split(r"[-:]", text)]
    return float(sum(p * m for p, m in zip(reversed(parts), (1, 60, 3600, 86400))))


def _worker_jobs(log_dir: Path, job_name: str) -> dict[str, str]:
    """Slurm job id -> its worker log, for the jobs whose Dask worker registered with the scheduler."""
    logs = {p.name[len(job_name) + 1:-4]: p.read_text(errors="replace") for p in log_dir.glob(f"{job_name}-*.err")}
    return {job: text for job, text in logs.items() if "Registered to:" in text}


def _startup(job_id: str, log: str) -> tuple[float, float]:
    """Seconds from sbatch to the job's start, and from sbatch to its worker registering."""
    info = _job(job_id)
    submit = datetime.fromisoformat(info["SubmitTime"])
    start = datetime.fromisoformat(info["StartTime"])
    stamp = re.search(r"^(\S+ \S+) - distributed.worker - INFO - +Registered to:", log, re.M)[1]
    registered = datetime.strptime(stamp, "%Y-%m-%d %H:%M:%S,%f")
    return (start - submit).total_seconds(), (registered - submit).total_seconds()


@pytest.fixture(scope="module")
def small_reference(tmp_path_factory, spec_writer):
    folder = tmp_path_factory.mktemp("dask-small")
    spec = spec_writer(folder, SMALL, model=DIMER)
    result, seconds = _sweep(str(spec), "--store", str(folder / "local.zarr"), "--workers", "2")
    assert result.returncode == 0, result.stdout + result.stderr
    print(f"\nMEASURE small sweep, local --workers 2: {seconds:.1f} s")
    return spec, arrays(folder / "local.zarr", DATA)


def test_small_sweep_through_two_slurm_workers_matches_a_local_run(small_reference, tmp_path, spec_writer):
    _, expected = small_reference
    name = f"swdask-small-{os.getpid()}"
    spec = spec_writer(tmp_path, SMALL + _cluster_table(name, min_jobs=2, max_jobs=2, walltime="00:10:00"),
                       model=DIMER)
    store = tmp_path / "slurm.zarr"
    result, seconds = _sweep(str(spec), "--store", str(store), "--cluster", "slurm")
    out = result.stdout + result.stderr
    assert result.returncode == 0, out
    assert "scheduler and workers talk over TLS with a temporary certificate" in out
    assert "Dask scheduler: tls://" in out
    assert_identical(store, expected, DATA)
    log_dir = tmp_path / "slurm.zarr.logs"
    workers = _worker_jobs(log_dir, name)
    assert len(workers) == 2, sorted(log_dir.iterdir())  # two distinct Slurm jobs ran a worker each
    for log in workers.values():
        assert re.search(r"Registered to: +tls://", log)  # the worker side of the TLS link
    assert not _gone(name)  # every job was cancelled when the sweep ended
    assert not list(log_dir.glob(".dask-jobqueue.worker.*"))  # the key copy was deleted
    for job_id, log in sorted(workers.items()):
        queued, registered = _startup(job_id, log)
        print(f"MEASURE job {job_id}: sbatch -> start {queued:.0f} s, sbatch -> worker registered {registered:.1f} s,"
              f" final state {_job(job_id).get('JobState')}")
    print(f"MEASURE small sweep, --cluster slurm, submit to finish: {seconds:.1f} s")


def test_ctrl_c_cancels_the_jobs_and_a_resume_outlives_several_walltimes(tmp_path, spec_writer):
    reference = spec_writer(tmp_path, LONG, model=DIMER, name="local.toml")
    result, local_seconds = _sweep(str(reference), "--store", str(tmp_path / "local.zarr"), "--workers", "2")
    assert result.returncode == 0, result.stdout + result.stderr
    expected = arrays(tmp_path / "local.zarr", DATA)
    print(f"\nMEASURE long sweep, local --workers 2: {local_seconds:.1f} s")

    name = f"swdask-long-{os.getpid()}"
    spec = spec_writer(tmp_path, LONG + _cluster_table(name, max_jobs=2, walltime="00:01:00"), model=DIMER)
    store = tmp_path / "slurm.zarr"
    cmd = [sys.executable, "-m", "sweep.cli", "run", str(spec), "--store", str(store), "--cluster", "slurm"]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=ENV,
                            start_new_session=True)
    deadline = time.monotonic() + 120
    while _done(store) < 2:  # both jobs are working
        assert proc.poll() is None and time.monotonic() < deadline, proc.communicate()
        time.sleep(0.2)
    os.killpg(proc.pid, signal.SIGINT)  # as a terminal's Ctrl-C does: the whole process group
    out, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, out + err
    assert not _gone(name), "jobs left in the queue after Ctrl-C"
    resume = out.strip().splitlines()[-1]
    assert resume.startswith("resume with: ") and "--cluster slurm" in resume, out
    interrupted_at = _done(store)
    before = set(_worker_jobs(tmp_path / "slurm.zarr.logs", name))

    command = shlex.split(resume.removeprefix("resume with: "))
    result, seconds = _sweep(*command[2:])
    out = result.stdout + result.stderr
    assert result.returncode == 0, out
    assert f"resuming: {LONG_TASKS - interrupted_at} of {LONG_TASKS} tasks left" in out
    assert_identical(store, expected, DATA)
    assert not _gone(name)

    logs = {job: log for job, log in _worker_jobs(tmp_path / "slurm.zarr.logs", name).items() if job not in before}
    states = {job: _job(job) for job in logs}
    runtimes = [_seconds(s["RunTime"]) for s in states.values() if "RunTime" in s]
    retired = sum("worker-lifetime-reached" in log for log in logs.values())
    print(f"MEASURE long sweep, --cluster slurm resume: {seconds:.1f} s for {LONG_TASKS - interrupted_at} tasks, "
          f"{len(logs)} worker jobs, {retired} retired at their lifetime, job run times {sorted(runtimes)}, "
          f"states {sorted(s.get('JobState', '?') for s in states.values())}")
    # three walltimes of work went through jobs that each lived less than one walltime
    assert sum(runtimes) >= 3 * WALLTIME, runtimes
    assert len(logs) >= 4 and retired >= 2, (len(logs), retired)
    assert all(r < WALLTIME for r in runtimes), runtimes  # each worker left before Slurm's limit
    assert not any(s.get("JobState") in ("TIMEOUT", "FAILED", "NODE_FAIL") for s in states.values()), states
    assert not any("DUE TO TIME LIMIT" in log for log in logs.values())


def _done(store: Path) -> int:
    try:
        return int(zarr.open_group(store, mode="r")["done"][:].sum())
    except Exception:  # not created yet
        return 0


def test_jobs_that_never_start_a_worker_stop_the_sweep_with_their_log(tmp_path, spec_writer):
    name = f"swdask-broken-{os.getpid()}"
    setup = ["echo 'module: python/9.9 not found' >&2", "exit 3"]  # a typical broken site setup line
    spec = spec_writer(tmp_path, SMALL + _cluster_table(name, max_jobs=2, setup=setup, poll_seconds=2),
                       model=DIMER)
    result, seconds = _sweep(str(spec), "--store", str(tmp_path / "s.zarr"), "--cluster", "slurm", timeout=180)
    out = " ".join((result.stdout + result.stderr).split())
    assert result.returncode == 1, out
    assert "3 Slurm jobs in a row ended before their Dask worker connected" in out
    assert "module: python/9.9 not found" in out and "check cluster.setup" in out
    assert not _gone(name)
    print(f"\nMEASURE broken setup detected after {seconds:.1f} s")


def test_a_job_slurm_refuses_stops_the_sweep_with_sbatchs_message(tmp_path, spec_writer):
    name = f"swdask-refused-{os.getpid()}"
    spec = spec_writer(tmp_path, SMALL + _cluster_table(name), model=DIMER)
    result, _ = _sweep(str(spec), "--store", str(tmp_path / "s.zarr"), "--cluster", "slurm",
                       "--partition", "no-such-partition", timeout=120)
    out = " ".join((result.stdout + result.stderr).split())
    assert result.returncode == 1, out
    assert "Slurm refused the worker job 3 times" in out and "invalid partition" in out.lower()
    assert "from --partition" in out
    assert not _gone(name)
