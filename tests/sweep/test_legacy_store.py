"""A store written before chunk checksums, fingerprints and compiled seeding still works.

``tests/data/legacy_store.zarr`` was written by stochsweep 0.1.0 (commit cfa97b9) from
``tests/data/legacy_spec.toml``, with two of its four tasks then marked not done. Today's code
must trace its replicates bit for bit (same seeds), resume it to the bytes a fresh run gives now,
and verify it, saying what it can check.
"""

from __future__ import annotations

import logging
import shutil
from pathlib import Path

import numpy as np
import pytest
import zarr
from distributed import LocalCluster
from typer.testing import CliRunner

import sweep
from sweep.cli import app

DATA = Path(__file__).resolve().parents[1] / "data"
cli = CliRunner()


@pytest.fixture
def legacy(tmp_path) -> Path:
    target = tmp_path / "legacy.zarr"
    shutil.copytree(DATA / "legacy_store.zarr", target)
    return target


@pytest.fixture(scope="module")
def scheduler():
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=":0",
                      silence_logs=logging.CRITICAL) as cluster:
        yield cluster.scheduler_address


def test_its_replicates_trace_bit_for_bit(legacy):
    for point, replicate in ((0, 14), (1, 3), (0, 19)):
        traced = sweep.trace(legacy, point, replicate)
        assert traced.matches_store is True, (point, replicate)


def test_it_resumes_to_the_bytes_a_fresh_run_gives(legacy, tmp_path, scheduler, monkeypatch):
    monkeypatch.setenv("COLUMNS", "250")
    spec = DATA / "legacy_spec.toml"
    result = cli.invoke(app, ["run", str(spec), "--store", str(legacy), "--scheduler", scheduler])
    assert result.exit_code == 0 and "resuming: 2 of 4 tasks left" in result.output, result.output
    fresh = tmp_path / "fresh.zarr"
    assert sweep.run(sweep.load(spec, store=fresh), scheduler=scheduler).complete
    old, new = zarr.open_group(legacy, mode="r"), zarr.open_group(fresh, mode="r")
    for name in ("counts", "status", "events", "done", "params", "time"):
        np.testing.assert_array_equal(old[name][:], new[name][:], err_msg=name)
    # each store keeps the codec its metadata names: the old one's level 3 byte shuffle, today's bit shuffle
    assert [c.shuffle.value for c in old["counts"].compressors if hasattr(c, "shuffle")] == ["shuffle"]
    assert [c.shuffle.value for c in new["counts"].compressors if hasattr(c, "shuffle")] == ["bitshuffle"]


def test_it_verifies_and_says_what_verify_can_check(legacy, monkeypatch):
    monkeypatch.setenv("COLUMNS", "250")
    result = cli.invoke(app, ["status", str(legacy), "--verify"])
    assert result.exit_code == 0, result.output
    assert "2 done" in result.output and "written before chunks carried checksums" in result.output, result.output
