"""`sweep bench --sweep`: how much of the kernel's speed a whole sweep delivers, end to end.

Three sweeps run on a fresh local cluster each, into a temporary store:

- ``demo``: the README's demo (``configs/reporter.toml``): 32 large tasks;
- ``grid``: a 16 x 16 grid of a two-stage gene-expression model (Thattai & van Oudenaarden 2001),
  2,000 replicates per point in tasks of 500: 1,024 tasks of a few ms of kernel work each;
- ``tiny``: 1,000 points of a birth-death process x 10 short replicates, one task per point
  before packing.

The same replicates then run through the kernel alone on one core, seeding included (the
kernel's ``simulate`` with each replicate's own stream), which is the bar: a sweep on W workers
should approach W times it. Printed per sweep: events per wall-second (start-up included), the
ratio to W x kernel-alone, tasks per second and the wall time.

The module runs as a script too (``python sweep/plan/throughput.py``) and then uses only the
public API (``sweep.load``, ``sweep.run``) and ``kernels.get(method).simulate``, so the same
file measures an older checkout (``PYTHONPATH=old-checkout``) for a before/after table.
"""

from __future__ import annotations

import json
import sys
import tempfile
import textwrap
import time
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

GENE_EXPRESSION = """
[model.species]
M = 0
P = 0
[model.parameters]
k_m = 2.0
g_m = 0.5
k_p = 2.0
g_p = 0.1
[model.reactions]
transcribe = { reaction = "0 -> M", rate = "k_m" }
translate = { reaction = "M -> M + P", rate = "k_p" }
mrna_decay = { reaction = "M -> 0", rate = "g_m" }
protein_decay = { reaction = "P -> 0", rate = "g_p" }
"""

BIRTH_DEATH = """
[model.species]
A = 0
[model.parameters]
k = 5.0
g = 0.5
[model.reactions]
birth = { reaction = "0 -> A", rate = "k" }
death = { reaction = "A -> 0", rate = "g" }
"""


@dataclass(frozen=True)
class SweepFigures:
    name: str
    tasks: int
    events: int
    wall_seconds: float
    kernel_seconds: float  # the same replicates through the kernel alone, one core
    workers: int

    @property
    def events_per_second(self) -> float:
        return self.events / self.wall_seconds

    @property
    def of_kernel(self) -> float:
        """Events per wall-second over ``workers`` x the kernel-alone rate."""
        return self.events_per_second / (self.workers * self.events / self.kernel_seconds)

    @property
    def tasks_per_second(self) -> float:
        return self.tasks / self.wall_seconds


def _values(start: float, stop: float, n: int) -> str:
    return "[" + ", ".join(f"{v:.4g}" for v in np.linspace(start, stop, n)) + "]"


def specs(folder: Path, demo: Path | None, scale: float = 1.0) -> dict[str, Path]:
    """Write the benchmark's specs into ``folder``; ``scale`` < 1 shrinks the grid's replicates."""
    grid_reps = max(500, int(2000 * scale) // 500 * 500)
    texts = {
        "grid": GENE_EXPRESSION + textwrap.dedent(f"""
            [run]
            replicates = {grid_reps}
            replicates_per_task = 500
            seed = 7
            [time]
            end = 20.0
            samples = 101
            [design]
            kind = "grid"
            [design.vary]
            k_m = {_values(1.0, 4.0, 16)}
            k_p = {_values(1.0, 4.0, 16)}
            """),
        "tiny": BIRTH_DEATH + textwrap.dedent(f"""
            [run]
            replicates = 10
            replicates_per_task = 10
            seed = 11
            [time]
            end = 2.0
            samples = 5
            [design]
            kind = "grid"
            [design.vary]
            k = {_values(1.0, 10.0, 40)}
            g = {_values(0.2, 1.0, 25)}
            """),
    }
    paths = {}
    if demo is not None and demo.exists():
        text = demo.read_text().split("\n[plot]")[0]  # figure defaults: not known to older checkouts
        model = demo.parent / "reporter_model.toml"
        (folder / "reporter_model.toml").write_text(model.read_text()) if model.exists() else None
        paths["demo"] = folder / "demo.toml"
        paths["demo"].write_text(text)
    for name, text in texts.items():
        paths[name] = folder / f"{name}.toml"
        paths[name].write_text(text)
    return paths


def kernel_alone(spec) -> float:
    """CPU seconds of the spec's replicates through its kernel on this core, seeding included."""
    import kernels
    from sweep.model import compile_network, initial_counts, rate_constants

    kernel = kernels.get(spec.method)
    network = compile_network(spec.model)
    times = np.asarray(spec.times, dtype=np.float64)
    try:
        from kernels.rng import Streams
    except ImportError:  # before compiled seeding
        Streams = None
    per_task = spec.replicates_per_task
    jobs = []
    for p, row in enumerate(spec.points()):
        values = spec.values_at(row)
        rates, x0 = rate_constants(spec.model, values), initial_counts(spec.model, values)
        for start in range(0, spec.replicates, per_task):
            stop = min(start + per_task, spec.replicates)
            jobs.append((p, start, stop, rates, x0))
    warm = jobs[0]
    kernel.simulate(network, warm[3], warm[4], times, [np.random.SeedSequence(0)], 10)  # compile or load
    began = time.process_time()
    for p, start, stop, rates, x0 in jobs:
        seeds = (Streams(spec.seed, p, start, stop) if Streams is not None else
                 [np.random.SeedSequence(spec.seed, spawn_key=(p, r)) for r in range(start, stop)])
        kernel.simulate(network, rates, x0, times, seeds, spec.max_events)
    return time.process_time() - began


def measure(workers: int = 2, demo: Path | None = Path("configs/reporter.toml"), scale: float = 1.0,
            only: tuple[str, ...] = ()) -> list[SweepFigures]:
    """Run each benchmark sweep on a fresh local cluster of ``workers``, then its kernel alone."""
    import sweep

    out = []
    with tempfile.TemporaryDirectory(prefix="sweep-bench-") as tmp:
        folder = Path(tmp)
        for name, path in specs(folder, demo, scale).items():
            if only and name not in only:
                continue
            spec = sweep.load(path, store=folder / f"{name}.zarr")
            began = time.perf_counter()
            summary = sweep.run(spec, workers=workers)
            wall = time.perf_counter() - began
            out.append(SweepFigures(name, summary.tasks_total, summary.events, wall, kernel_alone(spec), workers))
    return out


def main(argv: list[str]) -> None:
    """Script entry: print the figures as JSON lines (for a before/after table)."""
    scale = float(argv[0]) if argv else 1.0
    for f in measure(scale=scale):
        print(json.dumps({**asdict(f), "events_per_second": f.events_per_second, "of_kernel": f.of_kernel,
                          "tasks_per_second": f.tasks_per_second}))


if __name__ == "__main__":
    main(sys.argv[1:])
