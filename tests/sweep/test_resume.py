"""Interrupted sweeps: real processes, real signals, real files.

Every test compares against one undisturbed run of the same spec: after any fault and a
rerun, ``counts``, ``status`` and ``events`` must be bit-identical.
"""

from __future__ import annotations

import json
import logging
import os
import shlex
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import psutil
import pytest
import zarr
from distributed import LocalCluster
from typer.testing import CliRunner

import sweep
from sweep.cli import app
from sweep.store.lock import LOCK_NAME
from support.models import DIMERISING
from support.stores import assert_identical

# 48 tasks of a few tenths of a second each: several seconds on 2 workers
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
# the same sweep with ten times the work per task (48 tasks of ~0.3 s): long enough that a
# signal sent after the first completions always lands mid-run
SLOW_BODY = BODY.replace("replicates = 240", "replicates = 2400").replace("replicates_per_task = 20",
                                                                          "replicates_per_task = 200")
DATA = ("counts", "status", "events")
runner = CliRunner()


@pytest.fixture(scope="module")
def reference(reference_run):
    """The spec file and the arrays of one undisturbed run."""
    return reference_run(BODY, MODEL)


@pytest.fixture(scope="module")
def slow_reference(reference_run):
    """Like ``reference``, for the tests that signal a running sweep (on 2 workers: ten times the work)."""
    return reference_run(SLOW_BODY, MODEL, workers=2)


def _done_count(store: Path) -> int:
    try:
        return int(zarr.open_group(store, mode="r")["done"][:].sum())
    except Exception:  # not created yet
        return 0


SIGNAL_AFTER = Path(__file__).resolve().parents[1] / "support" / "signal_after.py"


def _signalled(spec_path: Path, store: Path, after: int, sig: str) -> subprocess.CompletedProcess:
    """`sweep run` in its own session, signalled (its whole process group) after its ``after``-th
    completed task: a fault at a known moment, never racing the sweep's end."""
    cmd = [sys.executable, str(SIGNAL_AFTER), str(after), sig, "run", str(spec_path), "--store", str(store),
           "--workers", "2"]
    return subprocess.run(cmd, capture_output=True, text=True, start_new_session=True, timeout=300,
                          env={**os.environ, "COLUMNS": "200"})


def _rerun(spec_path: Path, store: Path) -> subprocess.CompletedProcess:
    cmd = [sys.executable, "-m", "sweep.cli", "run", str(spec_path), "--store", str(store), "--workers", "2"]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=300, env={**os.environ, "COLUMNS": "200"})


def test_sigkill_of_the_whole_run_then_resume(slow_reference, tmp_path):
    spec_path, expected = slow_reference
    store = tmp_path / "killed.zarr"
    killed = _signalled(spec_path, store, after=30, sig="SIGKILL")
    assert killed.returncode == -signal.SIGKILL, killed.stdout + killed.stderr
    done_before = _done_count(store)
    assert done_before < 30, done_before  # what was flushed before the kill (about once a second)
    assert (store / LOCK_NAME).exists()  # left behind by the dead run: stale, taken over below
    result = _rerun(spec_path, store)
    assert result.returncode == 0, result.stdout + result.stderr
    assert f"resuming: {48 - done_before} of 48 tasks left" in result.stdout
    assert_identical(store, expected, DATA)
    assert not (store / LOCK_NAME).exists() and not list(store.rglob("*.partial"))


def test_ctrl_c_stops_cleanly_and_prints_the_resume_command(slow_reference, tmp_path):
    spec_path, expected = slow_reference
    store = tmp_path / "interrupted.zarr"
    # as a terminal's Ctrl-C does: SIGINT to the whole process group, here after the 4th task
    proc = _signalled(spec_path, store, after=4, sig="SIGINT")
    out, err = proc.stdout, proc.stderr
    assert proc.returncode == 130, out + err
    last = out.strip().splitlines()[-1]
    assert last.startswith("resume with: "), out
    assert not (store / LOCK_NAME).exists()
    done = zarr.open_group(store, mode="r")["done"][:]
    assert 4 <= done.sum() < 48
    # nothing half-written is marked done: every chunk marked done is complete and readable
    assert sweep.verify(store, repair=False).sound
    command = shlex.split(last.removeprefix("resume with: "))
    assert command[:2] == ["sweep", "run"]
    result = subprocess.run([sys.executable, "-m", "sweep.cli", *command[1:]], capture_output=True, text=True,
                            timeout=300)
    assert result.returncode == 0, result.stdout + result.stderr
    assert_identical(store, expected, DATA)


def test_a_worker_killed_mid_sweep_is_survived(reference, tmp_path):
    spec_path, expected = reference
    spec = sweep.load(spec_path, store=tmp_path / "worker.zarr")
    with LocalCluster(n_workers=2, threads_per_worker=1, host="127.0.0.1", dashboard_address=":0",
                      silence_logs=logging.CRITICAL) as cluster:
        pids = _worker_pids(cluster.scheduler_address)
        killed = []

        def kill_one(progress):
            if progress.done >= 5 and not killed:
                os.kill(pids[0], signal.SIGKILL)
                killed.append(pids[0])

        summary = sweep.run(spec, scheduler=cluster.scheduler_address, on_progress=kill_one)
    assert killed and summary.complete, summary
    assert not psutil.pid_exists(killed[0]) or psutil.Process(killed[0]).status() == psutil.STATUS_ZOMBIE
    assert_identical(spec.store, expected, DATA)


def _worker_pids(address: str) -> list[int]:
    from distributed import Client

    with Client(address) as client:
        return list(client.run(os.getpid).values())


def test_changed_spec_is_refused_with_what_changed(reference, tmp_path):
    spec_path, _ = reference
    store = tmp_path / "s.zarr"
    spec = sweep.load(spec_path, store=store)
    sweep.run(spec, workers=1)
    changed = tmp_path / "changed.toml"
    changed.write_text(spec_path.read_text().replace("replicates = 240", "replicates = 480")
                       .replace("h = [0.01, 0.02]", "h = [0.01, 0.03]"))
    result = runner.invoke(app, ["run", str(changed), "--store", str(store)])
    assert result.exit_code == 2, result.output
    assert "run.replicates: 240 -> 480" in result.output
    assert "design.vary.h: [0.01, 0.02] -> [0.01, 0.03]" in result.output
    # comments, spacing and the store's location are safe to change
    cosmetic = tmp_path / "cosmetic.toml"
    cosmetic.write_text("# a new comment\n" + spec_path.read_text().replace("seed = 99", "seed   =   99  # same"))
    result = runner.invoke(app, ["run", str(cosmetic), "--store", str(store)])
    assert result.exit_code == 0 and "nothing to do" in result.output, result.output


def _write_lock(store: Path, host: str, pid: int, process_started: float) -> None:
    store.mkdir(parents=True, exist_ok=True)
    (store / LOCK_NAME).write_text(json.dumps({"host": host, "pid": pid, "process_started": process_started,
                                               "started": "2026-01-01T00:00:00+00:00"}))


def test_lock_held_by_a_live_run_is_refused(reference, tmp_path):
    spec_path, _ = reference
    store = tmp_path / "locked.zarr"
    me = psutil.Process()
    _write_lock(store, socket.gethostname(), me.pid, me.create_time())
    result = runner.invoke(app, ["run", str(spec_path), "--store", str(store), "--workers", "1"])
    assert result.exit_code == 2, result.output
    assert "another `sweep run` is writing this store" in result.output and f"pid {me.pid}" in result.output


def test_stale_lock_on_this_host_is_taken_over(reference, tmp_path):
    spec_path, expected = reference
    store = tmp_path / "stale.zarr"
    gone = subprocess.Popen([sys.executable, "-c", "pass"])
    gone.wait()
    _write_lock(store, socket.gethostname(), gone.pid, time.time() - 5)
    spec = sweep.load(spec_path, store=store)
    assert sweep.run(spec, workers=2).complete
    assert_identical(store, expected, DATA)


def test_lock_from_another_host_needs_break_lock(reference, tmp_path):
    spec_path, _ = reference
    store = tmp_path / "remote.zarr"
    _write_lock(store, "some-other-node", 4242, 0.0)
    result = runner.invoke(app, ["run", str(spec_path), "--store", str(store), "--workers", "1"])
    assert result.exit_code == 2 and "--break-lock" in result.output, result.output
    result = runner.invoke(app, ["run", str(spec_path), "--store", str(store), "--workers", "1", "--break-lock"])
    assert result.exit_code == 0, result.output


def test_verify_finds_a_deleted_chunk_and_a_rerun_restores_it(reference, tmp_path):
    spec_path, expected = reference
    spec = sweep.load(spec_path, store=tmp_path / "v.zarr")
    sweep.run(spec, workers=2)
    victim = spec.store / "counts" / "c" / "2" / "5" / "0" / "0"
    victim.unlink()
    result = runner.invoke(app, ["status", str(spec.store), "--verify"])
    assert result.exit_code == 1, result.output
    assert "point 2 block 5: counts chunk missing" in result.output
    assert not zarr.open_group(spec.store, mode="r")["done"][2, 5]
    result = runner.invoke(app, ["run", str(spec_path), "--store", str(spec.store), "--workers", "1"])
    assert result.exit_code == 0 and "resuming: 1 of 48 tasks left" in result.output, result.output
    assert_identical(spec.store, expected, DATA)
    assert runner.invoke(app, ["status", str(spec.store), "--verify"]).exit_code == 0
