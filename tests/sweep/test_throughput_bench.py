"""The sweep benchmark's specs are what `sweep bench --sweep` says they are (the run itself is a benchmark)."""

from __future__ import annotations

from pathlib import Path

import sweep
from sweep.execute.tasks import make_tasks
from sweep.plan import throughput

ROOT = Path(__file__).resolve().parents[2]


def _tasks(spec) -> int:
    return len(make_tasks(spec.points().shape[0], spec.replicates, spec.replicates_per_task))


def test_the_benchmark_sweeps_have_the_documented_sizes(tmp_path):
    paths = throughput.specs(tmp_path, ROOT / "configs" / "reporter.toml")
    specs = {name: sweep.load(path, store=tmp_path / f"{name}.zarr") for name, path in paths.items()}
    assert _tasks(specs["demo"]) == 32
    assert _tasks(specs["grid"]) == 1024 and specs["grid"].points().shape[0] == 256
    assert _tasks(specs["tiny"]) == 1000 and specs["tiny"].replicates == 10


def test_the_kernel_alone_runs_the_same_replicates(tmp_path):
    spec = sweep.load(throughput.specs(tmp_path, None)["tiny"], store=tmp_path / "t.zarr")
    assert throughput.kernel_alone(spec) > 0
