"""Shards (`sweep run --shard I/N`): several real processes writing one real store at once.

Every store is compared with one undisturbed local Dask run of the same spec: ``counts``,
``status`` and ``events`` must be bit-identical (the per-replicate seed streams of
``numpy.random.SeedSequence(root, spawn_key=(point, replicate))`` make them so), and the
completion record must end complete with nothing left in ``shards/``.
"""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import psutil
import pytest
from typer.testing import CliRunner

import sweep
from sweep import store
from sweep.execute import session
from sweep.store import claims, records
from sweep.batch import jobs, walltime
from sweep.execute.execution import parse_shard
from sweep.cli import app
from sweep.store.lock import LOCK_NAME
from support.models import DIMERISING
from support.backend_conformance import BackendConformance, assert_complete_and_tidy
from support.stores import assert_identical

# 48 tasks of a few tenths of a second each (the model of test_resume.py)
MODEL = DIMERISING
BODY = """
[run]
replicates = 240
replicates_per_task = 20
seed = 99
[time]
end = 40.0
samples = 9
[design.vary]
k = [300.0, 400.0]
h = [0.01, 0.02]
"""
DATA = ("counts", "status", "events")
TASKS = 48
runner = CliRunner()


@pytest.fixture(scope="module")
def reference(reference_run):
    """The spec file and the arrays of one undisturbed run."""
    return reference_run(BODY, MODEL)


def _assert_identical_and_tidy(path: Path, expected: dict[str, np.ndarray]) -> None:
    assert_identical(path, expected, DATA)  # the shards' records folded into `done` itself
    assert_complete_and_tidy(path)


class TestInProcessShards(BackendConformance):
    """``sweep run --shard I/N`` with no Dask: here two shards one after the other in this process,
    the second folding both records into ``done``."""

    @pytest.fixture(scope="class")
    def route(self):
        return lambda spec: [sweep.run_shard(spec, 1, 2), sweep.run_shard(spec, 2, 2)]


def _shard_cmd(spec_path: Path, store_path: Path, which: str, *extra: str) -> list[str]:
    return [sys.executable, "-m", "sweep.cli", "run", str(spec_path), "--store", str(store_path), "--shard", which,
            *extra]


def _start(cmd: list[str]) -> subprocess.Popen:
    return subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env={**os.environ, "COLUMNS": "200"})


def _run(cmd: list[str]) -> subprocess.CompletedProcess:
    return subprocess.run(cmd, capture_output=True, text=True, timeout=300, env={**os.environ, "COLUMNS": "200"})


def test_partition_is_fixed_balanced_and_covers_every_task_once():
    tasks = list(range(103))
    parts = [session.select(tasks, i, 4) for i in range(1, 5)]
    assert sorted(sum(parts, [])) == tasks
    assert {len(p) for p in parts} == {25, 26}
    # any contiguous stretch (e.g. what an earlier run did not reach) is spread evenly too
    assert {sum(1 for t in p if 40 <= t < 80) for p in parts} == {10}
    assert parse_shard("3/8") == (3, 8)
    for bad in ("0/4", "5/4", "3", "a/b", "1/0"):
        with pytest.raises(ValueError, match="I/N"):
            parse_shard(bad)


def test_walltime_budget_and_durations():
    now = [0.0]
    budget = walltime.Budget.starting_now(20.0, clock=lambda: now[0])
    assert budget.next_fits()  # nothing measured: only the reserve must fit
    budget.record(2.0)
    budget.record(4.0)
    # estimate = max(1.5 x mean 3.0, longest 4.0) + reserve 5.0 = 9.5 s
    assert budget.estimate() == pytest.approx(max(walltime.SAFETY_FACTOR * 3.0, 4.0) + walltime.RESERVE_SECONDS)
    now[0] = 10.4  # 9.6 s left
    assert budget.next_fits()
    now[0] = 10.6  # 9.4 s left
    assert not budget.next_fits()
    assert walltime.Budget.starting_now(None).next_fits()
    # Slurm's time formats (sbatch(1) --time; squeue(1) %L), from the Slurm manual pages
    assert walltime.parse_duration("1-02:03:04") == 93784
    assert walltime.parse_duration("02:03:04") == 7384
    assert walltime.parse_duration("3:04") == 184
    assert walltime.parse_duration("45") == 45
    assert walltime.time_left({"SLURM_JOB_END_TIME": "1000"}, now=940.0) == 60.0
    assert walltime.time_left({}) is None
    assert jobs.job_id({"SLURM_JOB_ID": "25", "SLURM_ARRAY_JOB_ID": "25", "SLURM_ARRAY_TASK_ID": "5"}) == "25_5"


def test_four_shards_at_once_complete_and_match_a_local_run(reference, tmp_path):
    spec_path, expected = reference
    target = tmp_path / "sharded.zarr"  # does not exist yet: the first shard in creates it, under the lock
    procs = [_start(_shard_cmd(spec_path, target, f"{i}/4")) for i in (1, 2, 3, 4)]
    outs = [p.communicate(timeout=300) for p in procs]
    for p, (out, err) in zip(procs, outs):
        assert p.returncode == 0, out + err
    ran = sum(int(out.split("tasks run")[0].split()[-1]) for out, _ in outs)
    assert ran == TASKS  # every task exactly once across the shards: no duplicated work
    _assert_identical_and_tidy(target, expected)
    result = runner.invoke(app, ["status", str(target)])
    assert f"{TASKS} done, 0 failed, 0 pending" in result.output, result.output
    # a whole run afterwards finds nothing to do
    result = runner.invoke(app, ["run", str(spec_path), "--store", str(target), "--workers", "1"])
    assert result.exit_code == 0 and "nothing to do" in result.output, result.output


SIGNAL_AFTER = Path(__file__).resolve().parents[1] / "support" / "signal_after.py"


def _stopped_after_first_task(spec_path: Path, target: Path, which: str) -> subprocess.Popen:
    """A shard that stops itself (SIGSTOP) right after recording its first task: alive, holding its
    claim, for as long as the test needs, however fast the machine."""
    proc = _start([sys.executable, str(SIGNAL_AFTER), "1", "SIGSTOP", *_shard_cmd(spec_path, target, which)[3:]])
    deadline = time.monotonic() + 120
    while psutil.Process(proc.pid).status() != psutil.STATUS_STOPPED:
        assert proc.poll() is None, proc.communicate()
        assert time.monotonic() < deadline, "the shard recorded nothing"
        time.sleep(0.01)
    return proc


def test_a_shard_runs_once_at_a_time_and_a_killed_shard_is_taken_over(reference, tmp_path):
    spec_path, expected = reference
    target = tmp_path / "claimed.zarr"
    # stopped, not dead: its claim is live for as long as the checks below take
    first = _stopped_after_first_task(spec_path, target, "1/2")
    # the same shard again while the first runs: refused, exit code 2, naming the holder
    twin = _run(_shard_cmd(spec_path, target, "1/2"))
    assert twin.returncode == 2, twin.stdout + twin.stderr
    assert "shard 1/2 is already running" in twin.stderr and f"pid {first.pid}" in twin.stderr
    # another shard count while it runs: refused (the partitions would overlap)
    other_n = _run(_shard_cmd(spec_path, target, "1/3"))
    assert other_n.returncode == 2 and "same N" in other_n.stderr, other_n.stderr
    # a whole run while a shard runs: refused, and the shard goes on
    whole = runner.invoke(app, ["run", str(spec_path), "--store", str(target), "--workers", "1"])
    assert whole.exit_code == 2 and "shards (`sweep run --shard`) are writing this store" in whole.output
    first.send_signal(signal.SIGKILL)
    first.wait(timeout=30)
    recorded = len(records.read_file(records.done_file(target, 1, 2)))
    assert 1 <= recorded < TASKS // 2
    assert (records.folder(target) / claims.claim_name(1, 2)).exists()  # left behind: stale
    status = runner.invoke(app, ["status", str(target)])
    assert "shard 1/2" in status.output and "(gone)" in status.output, status.output
    again = _run(_shard_cmd(spec_path, target, "1/2"))
    assert again.returncode == 0, again.stdout + again.stderr
    assert f"{recorded} already done" in again.stdout, again.stdout
    second = _run(_shard_cmd(spec_path, target, "2/2"))
    assert second.returncode == 0, second.stdout + second.stderr
    _assert_identical_and_tidy(target, expected)


def test_a_whole_run_holding_the_store_keeps_shards_out(reference, tmp_path):
    spec_path, _ = reference
    target = tmp_path / "held.zarr"
    target.mkdir()
    me = psutil.Process()
    (target / LOCK_NAME).write_text(json.dumps({"host": socket.gethostname(), "pid": me.pid,
                                                "process_started": me.create_time(),
                                                "started": "2026-01-01T00:00:00+00:00"}))
    result = runner.invoke(app, ["run", str(spec_path), "--store", str(target), "--shard", "1/2"])
    assert result.exit_code == 2, result.output
    assert "a whole `sweep run` is writing this store" in result.output and f"pid {me.pid}" in result.output


def test_walltime_stops_a_shard_cleanly_and_a_rerun_finishes(reference, tmp_path):
    spec_path, expected = reference
    target = tmp_path / "walltime.zarr"
    # no time at all: not a single task starts; exit code 75 says "resubmit me"
    none = _run(_shard_cmd(spec_path, target, "1/1", "--time-left", "0"))
    assert none.returncode == walltime.EXIT_WALLTIME, none.stdout + none.stderr
    assert "0 tasks run" in none.stdout and "left for a resubmission" in none.stdout
    # some time: a few tasks, then a clean stop before the next one could overrun. A clock that moves
    # 0.5 s per reading makes this independent of the machine's speed: with 7 s at the start, the checks
    # before tasks 1-4 see 6.5, 6.0, 5.5 and 5.0 s left, and the 4th falls short of the 5 s reserve plus
    # the task estimate (any machine where a task takes under 0.3 s)
    ticks = iter(np.arange(0.5, 1000.0, 0.5))
    some = sweep.run_shard(sweep.load(spec_path, store=target), 1, 1, time_left=7.0, clock=lambda: float(next(ticks)))
    assert some.stopped == "walltime" and some.tasks_run == 3, some
    done = int(store.read_done(target).sum())
    assert done == 3
    assert not list(target.rglob("*.partial"))
    rest = _run(_shard_cmd(spec_path, target, "1/1"))
    assert rest.returncode == 0, rest.stdout + rest.stderr
    assert f"{TASKS - done} tasks run, {done} already done" in rest.stdout
    _assert_identical_and_tidy(target, expected)


def test_bad_shard_options_are_bad_input(reference, tmp_path):
    spec_path, _ = reference
    target = str(tmp_path / "bad.zarr")
    cases = ((["--shard", "5/4"], "1 <= I <= N"), (["--shard", "1/2", "--time-left", "soon"], "not a duration"),
             (["--shard", "1/2", "--workers", "2"], "drop --workers"), (["--time-left", "60"], "needs --shard"))
    for args, message in cases:
        result = runner.invoke(app, ["run", str(spec_path), "--store", target, *args])
        assert result.exit_code == 2 and message in result.output, (args, result.output)
    assert not Path(target).exists()  # nothing was written


def test_adaptive_sweeps_are_refused_as_shards(tmp_path, spec_file):
    spec = spec_file(BODY.replace("[time]", '[run.adaptive]\nstatistic = "mean"\nspecies = "A"\ntime = "last"\n'
                                            "precision = 0.05\nmax_replicates = 480\n\n[time]"), model=MODEL)
    target = str(tmp_path / "adaptive.zarr")
    result = runner.invoke(app, ["run", str(spec), "--store", target, "--shard", "1/2"])
    assert result.exit_code == 2, result.output
    assert "run.adaptive" in result.output and "cannot run in shards" in result.output
    result = runner.invoke(app, ["submit", str(spec), "--store", target, "--dry-run", "--tasks-per-element", "4"])
    assert result.exit_code == 2 and "cannot run in shards" in result.output, result.output
    assert not Path(target).exists()


MUTEX_PROBE = """
import os, sys, time
from pathlib import Path
from sweep.store import claims
folder = Path(sys.argv[1])
for _ in range(15):
    with claims.holding_lock(folder):
        fd = os.open(folder / "inside", os.O_CREAT | os.O_EXCL | os.O_WRONLY)  # fails if another holder is inside
        time.sleep(0.005)
        os.close(fd)
        os.unlink(folder / "inside")
"""


def test_the_store_lock_admits_one_holder_among_many_racing_processes(tmp_path):
    """Eight processes take and give back the lock 15 times each; no two are ever inside at once
    (a lock file visible before its content was written once let two shards create one store)."""
    procs = [subprocess.Popen([sys.executable, "-c", MUTEX_PROBE, str(tmp_path)], stderr=subprocess.PIPE, text=True)
             for _ in range(8)]
    for p in procs:
        _, err = p.communicate(timeout=120)
        assert p.returncode == 0, err
    assert sorted(p.name for p in tmp_path.iterdir()) == []
