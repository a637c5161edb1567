"""The base every execution route's tests derive from (``BackendConformance``).

A route is a way one ``sweep run`` gets its tasks done: a local Dask cluster, an existing
scheduler, shards in this process, Dask workers as Slurm jobs. Whatever the route, each replicate
draws from ``numpy.random.SeedSequence(root, spawn_key=(point, replicate))``, so every route must
write the bytes the others write, leave the same completion record, and resume a partial store
to those bytes (common practice: one reference run, every other route compared with it bit for bit).
"""

from __future__ import annotations

import shutil

import numpy as np
import pytest
import zarr

import sweep
from sweep import store
from sweep.store import records
from sweep.store.lock import LOCK_NAME
from support.models import PAIRING
from support.stores import DATA, arrays

MODEL = PAIRING
BODY = """
[run]
replicates = 24
replicates_per_task = {per_task}
seed = 7
[time]
end = 4.0
samples = 9
[design.vary]
c1 = [0.01, 0.05]
c2 = [0.2, 1.0]
"""
TASKS = 12  # 4 points x 3 blocks of 8 replicates
WRITTEN = (*DATA, "params")
FORGOTTEN = ((1, 2), (3, 0), (0, 1))  # (point, block) a killed run had not recorded


def load(folder, spec_writer, per_task: int = 8, name: str = "spec.toml") -> sweep.Spec:
    path = spec_writer(folder, BODY.format(per_task=per_task), name=name, model=MODEL)
    return sweep.load(path, store=folder / (path.stem + ".zarr"))


def assert_complete_and_tidy(path) -> None:
    """The completion record says every task is done, and nothing of the run is left behind:
    no lock, no shard records, no half-written chunk."""
    assert zarr.open_group(path, mode="r")["done"][:].all()
    assert store.read_done(path).all()
    left = sorted(p.name for p in records.folder(path).iterdir()) if records.folder(path).is_dir() else []
    assert left == [], left
    assert not (path / LOCK_NAME).exists() and not list(path.rglob("*.partial"))


class BackendConformance:
    """What every execution route must do. Subclasses give a class-scoped fixture ``route``: a
    function of a ``Spec`` that runs it the route's way and returns the ``RunSummary`` of each
    process it ran (one, or one per shard)."""

    @pytest.fixture(scope="class")
    def route(self):
        raise NotImplementedError("a subclass gives the route")

    @pytest.fixture(scope="class")
    def reference(self, reference_run):
        """The arrays of the sweep run in this process, one shard of one, with 5 replicates a task
        (the route's runs use 8): the bytes may depend on neither the route nor the task size."""
        return reference_run(BODY.format(per_task=5), MODEL, WRITTEN)[1]

    @pytest.fixture(scope="class")
    def ran(self, route, tmp_path_factory, spec_writer):
        """The spec and the summaries of one whole run through the route."""
        spec = load(tmp_path_factory.mktemp("backend-run"), spec_writer)
        return spec, route(spec)

    def test_same_bytes_as_the_reference(self, ran, reference):
        spec, summaries = ran
        assert summaries[-1].complete and sum(s.tasks_run for s in summaries) == TASKS
        got = arrays(spec.store, WRITTEN)
        for name in WRITTEN:
            np.testing.assert_array_equal(got[name], reference[name], err_msg=name)
        counts = got["counts"]
        assert (counts[..., 0] + 2 * counts[..., 1] == 30).all()

    def test_completion_record(self, ran):
        spec, summaries = ran
        assert_complete_and_tidy(spec.store)
        assert not any(s.failed for s in summaries)
        assert store.attributes(spec.store).get("failed_tasks", []) == []

    def test_resume_after_a_partial_run(self, ran, route, reference, tmp_path):
        """A store with three tasks not recorded (one of them half overwritten, as a kill mid-write
        leaves it) is resumed by running exactly those three, to the reference's bytes."""
        spec, _ = ran
        target = tmp_path / "partial.zarr"
        shutil.copytree(spec.store, target)
        g = zarr.open_group(target, mode="r+")
        done = g["done"][:]
        for point, block in FORGOTTEN:
            done[point, block] = False
        g["done"][:] = done
        g["counts"][1, 16:20] = -1
        summaries = route(sweep.load(spec.path, store=target))
        assert summaries[-1].complete
        assert sum(s.tasks_run for s in summaries) == len(FORGOTTEN)
        assert sum(s.tasks_skipped for s in summaries) == TASKS - len(FORGOTTEN)
        got = arrays(target, WRITTEN)
        for name in WRITTEN:
            np.testing.assert_array_equal(got[name], reference[name], err_msg=name)
        assert_complete_and_tidy(target)
