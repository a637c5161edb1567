"""Tasks that keep failing, and stores whose disk fails: the sweep goes on or stops cleanly."""

from __future__ import annotations

import logging
import subprocess
from pathlib import Path

import numpy as np
import pytest
import zarr
from distributed import LocalCluster
from typer.testing import CliRunner

import kernels
import sweep
from sweep.cli import app

runner = CliRunner()

MODEL = """
[model.species]
A = 0
[model.parameters]
k = 100.0
g = 1.0
[model.reactions]
make = { reaction = "0 -> A", rate = "k" }
loss = { reaction = "A -> 0", rate = "g" }
"""
BODY = """
[run]
method = "{method}"
replicates = 40
replicates_per_task = 10
seed = 5
[time]
end = 5.0
samples = 6
[design.vary]
k = [100.0, 200.0, 400.0, 800.0]
"""


@pytest.fixture
def threaded_cluster():
    """A real Dask cluster whose workers are threads of this process, so they see the
    test-only kernel registered below."""
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=":0",
                      silence_logs=logging.CRITICAL) as cluster:
        yield cluster.scheduler_address


def test_a_failing_task_does_not_sink_the_sweep(spec_file, tmp_path, monkeypatch, threaded_cluster):
    monkeypatch.setitem(kernels.METHODS, "faulty", "faulty_kernel")
    path = spec_file(BODY.replace("{method}", "faulty"), model=MODEL)
    store = tmp_path / "f.zarr"
    result = runner.invoke(app, ["run", str(path), "--store", str(store), "--scheduler", threaded_cluster])
    assert result.exit_code == 1, result.output
    assert "8 failed" in result.output and "FloatingPointError: step size underflow" in result.output
    done = zarr.open_group(store, mode="r")["done"][:]
    np.testing.assert_array_equal(done, [[True] * 4, [True] * 4, [False] * 4, [False] * 4])
    status = runner.invoke(app, ["status", str(store)])
    assert status.exit_code == 0, status.output
    assert "Failed tasks" in status.output and "8 failed" in status.output
    assert "400" in status.output and "800" in status.output and "step size underflow" in status.output
    # the healthy points hold exactly what the direct method gives
    direct = sweep.load(spec_file(BODY.replace("{method}", "direct"), model=MODEL, name="d.toml"),
                        store=tmp_path / "d.zarr")
    sweep.run(direct, scheduler=threaded_cluster)
    got, want = zarr.open_group(store, mode="r"), zarr.open_group(direct.store, mode="r")
    np.testing.assert_array_equal(got["counts"][:2], want["counts"][:2])


def _mount_tmpfs(folder: Path, size: str) -> None:
    folder.mkdir()
    try:
        subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={size}", "tmpfs", str(folder)], check=True,
                       capture_output=True)
    except (subprocess.CalledProcessError, FileNotFoundError, PermissionError):
        pytest.skip("needs permission to mount a tmpfs (root)")


@pytest.fixture
def small_disk(tmp_path):
    folder = tmp_path / "disk"
    _mount_tmpfs(folder, "160k")
    yield folder
    subprocess.run(["umount", "-l", str(folder)], check=False)


def test_full_disk_stops_the_sweep_and_a_rerun_finishes_it(spec_file, tmp_path, small_disk):
    body = BODY.replace("{method}", "direct").replace("replicates_per_task = 10", "replicates_per_task = 2")
    path = spec_file(body, model=MODEL)
    store = small_disk / "full.zarr"
    result = runner.invoke(app, ["run", str(path), "--store", str(store), "--workers", "2"])
    assert result.exit_code == 1, result.output
    assert "No space left on device" in result.output and "resume with:" in result.output
    done = zarr.open_group(store, mode="r")["done"][:]
    assert done.sum() < done.size  # (how many got recorded before the disk filled depends on timing)
    assert sweep.verify(store, repair=False).sound  # what is marked done is all there
    subprocess.run(["mount", "-o", "remount,size=64m", str(small_disk)], check=True)
    result = runner.invoke(app, ["run", str(path), "--store", str(store), "--workers", "2"])
    assert result.exit_code == 0, result.output
    reference = sweep.load(path, store=tmp_path / "ref.zarr")
    sweep.run(reference, workers=2)
    for name in ("counts", "status", "events"):
        np.testing.assert_array_equal(zarr.open_group(store, mode="r")[name][:],
                                      zarr.open_group(reference.store, mode="r")[name][:])


def test_read_only_store_is_refused_and_left_unchanged(spec_file, tmp_path):
    folder = tmp_path / "ro"
    _mount_tmpfs(folder, "64m")
    try:
        path = spec_file(BODY.replace("{method}", "direct"), model=MODEL)
        store = folder / "s.zarr"
        spec = sweep.load(path, store=store)
        sweep.run(spec, workers=1)
        g = zarr.open_group(store, mode="r+")
        done = g["done"][:]
        done[1, :] = False
        g["done"][:] = done
        before = {p: p.read_bytes() for p in store.rglob("*") if p.is_file()}
        subprocess.run(["mount", "-o", "remount,ro", str(folder)], check=True)
        result = runner.invoke(app, ["run", str(path), "--store", str(store), "--workers", "1"])
        assert result.exit_code == 2, result.output
        assert "Read-only file system" in result.output
        assert {p: p.read_bytes() for p in store.rglob("*") if p.is_file()} == before
    finally:
        subprocess.run(["umount", "-l", str(folder)], check=False)
