"""The client holds what is in flight, not what has been submitted: its memory stays flat with the task count.

distributed keeps a log of the batches each connection sent (1,000 by default), and a client's
batch carries every submitted task's pickled input. Unbounded by us, a 100,000-task sweep's
client grew by ~150 MB (measured, docs/notes/throughput.md); here the live task inputs are
counted in the middle of a real run of 300 one-block tasks.
"""

from __future__ import annotations

import gc

import sweep
from sweep.execute.execution import Execution
from sweep.execute.worker import TaskInput
from sweep.plan.throughput import BIRTH_DEATH

SPEC = BIRTH_DEATH + """
[run]
replicates = 4
replicates_per_task = 4
seed = 5
[time]
end = 1.0
samples = 3
[design]
kind = "lhs"
points = 300
[design.vary]
k = { low = 1.0, high = 10.0 }
"""


def test_submitted_task_inputs_are_not_kept_once_they_finish(tmp_path):
    path = tmp_path / "spec.toml"
    path.write_text(SPEC)
    spec = sweep.load(path, store=tmp_path / "s.zarr")
    live: list[int] = []

    def on_progress(progress) -> None:
        if progress.done in (150, 250):
            gc.collect()
            live.append(sum(1 for o in gc.get_objects() if type(o) is TaskInput))  # type(): a dead weak proxy raises on isinstance

    summary = sweep.run(spec, Execution("local", workers=1, pack=1), on_progress=on_progress)
    assert summary.complete and summary.tasks_run == 300
    # in flight at most max(4 x 1 slot, 16) = 16, the bounded log 10 more; 150 or more if kept
    assert len(live) == 2 and max(live) <= 40, live
