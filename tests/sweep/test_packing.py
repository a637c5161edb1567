"""Small points are packed into tasks; a sweep's bytes do not depend on the packing.

Each block (point, replicate block) is simulated from its own seeds and written into the chunks
it alone owns, whichever task carries it; these tests hold that for fixed packings, the learned
one, and the in-process shard route, against a run of one block per task.
"""

from __future__ import annotations

import logging

import numpy as np
import pytest
import zarr
from distributed import LocalCluster

import sweep
from sweep.execute.execution import Execution
from sweep.execute.tasks import Packer
from support.stores import arrays

BODY = """
[run]
replicates = 60
replicates_per_task = 10
seed = 7
[time]
end = 6.0
samples = 7
[design.vary]
k = [100.0, 200.0, 300.0, 400.0, 500.0]
h = [0.01, 0.02]
"""
MODEL = """
[model.species]
A = 0
B = 0
[model.parameters]
k = 400.0
g = 1.0
h = 0.01
[model.reactions]
make = { reaction = "0 -> A", rate = "k" }
loss = { reaction = "A -> 0", rate = "g" }
pair = { reaction = "2 A -> B", rate = "h" }
"""
DATA = ("counts", "status", "events", "done", "checksums")


@pytest.fixture(scope="module")
def scheduler():
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=":0",
                      silence_logs=logging.CRITICAL) as cluster:
        yield cluster.scheduler_address


@pytest.fixture(scope="module")
def one_block_per_task(tmp_path_factory, spec_writer, scheduler):
    folder = tmp_path_factory.mktemp("packing")
    path = spec_writer(folder, BODY, model=MODEL)
    spec = sweep.load(path, store=folder / "one.zarr")
    assert sweep.run(spec, Execution("scheduler", address=scheduler, pack=1)).complete
    return path, arrays(spec.store, DATA)


@pytest.mark.parametrize("pack", [2, 7, 60, None])
def test_any_packing_writes_the_same_bytes(pack, one_block_per_task, tmp_path, scheduler):
    path, expected = one_block_per_task
    spec = sweep.load(path, store=tmp_path / "packed.zarr")
    # pack=None: learned from the tasks so far, at a target small enough that packs really form
    execution = Execution("scheduler", address=scheduler, pack=pack, pack_seconds=0.05)
    summary = sweep.run(spec, execution)
    assert summary.complete and summary.tasks_run == 60
    got = arrays(spec.store, DATA)
    for name in DATA:
        np.testing.assert_array_equal(got[name], expected[name], err_msg=name)


def test_shards_pack_too_and_write_the_same_bytes(one_block_per_task, tmp_path):
    path, expected = one_block_per_task
    spec = sweep.load(path, store=tmp_path / "shards.zarr")
    for index in (1, 2, 3):
        summary = sweep.run(spec, Execution("shard", shard=(index, 3), pack=4))
        assert summary.complete and summary.tasks_in_scope == 20
    got = arrays(spec.store, DATA)
    for name in ("counts", "status", "events", "done", "checksums"):
        np.testing.assert_array_equal(got[name], expected[name], err_msg=name)


def test_the_packer_aims_at_its_target_and_stays_within_bounds():
    packer = Packer(target=0.2, most=50)
    assert packer.size() == 1  # nothing learned yet: one block a task
    packer.learn(0.004, 2)  # 2 ms a block
    assert packer.size() == 50  # 100 wanted, bounded by `most`
    packer = Packer(target=0.2, most=500)
    packer.learn(0.004, 2)
    assert packer.size() == 100
    packer.learn(1.996, 2)  # now a second a block on average: one block a task
    assert packer.size() == 1
    assert Packer(target=0.2, most=500, fixed=9).size() == 9


def test_the_task_list_is_the_point_major_order_made_on_demand():
    from sweep.execute.session import select
    from sweep.execute.tasks import Task, make_tasks

    n_points, replicates, per_task = 7, 25, 10  # 3 blocks a point, the last one short
    tasks = make_tasks(n_points, replicates, per_task)
    expected = [Task(p, b, b * per_task, min((b + 1) * per_task, replicates))
                for p in range(n_points) for b in range(3)]
    assert len(tasks) == 21 and list(tasks) == expected and tasks[-1] == expected[-1]
    assert list(tasks[2:9]) == expected[2:9]
    for index in (1, 2, 3):  # shards: every 3rd place from index - 1
        assert list(select(tasks, index, 3)) == expected[index - 1::3]
    done = np.zeros((n_points, 3), dtype=bool)
    done[0, :] = done[4, 1] = done[6, 2] = True
    left = [t for t in expected if not done[t.point, t.block]]
    assert list(tasks.not_done(done)) == left and len(tasks.not_done(done)) == 16
    shard = select(tasks, 2, 3)
    assert list(shard.not_done(done)) == [t for t in expected[1::3] if not done[t.point, t.block]]
    assert shard.count_done(done) == sum(done[t.point, t.block] for t in expected[1::3])
    assert isinstance(tasks.not_done(done).places, np.ndarray)  # 8 bytes a task, no Task objects
