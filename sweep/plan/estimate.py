"""Plan a sweep before running it: its size, its store's footprint, and a run-time estimate.

The estimate comes from a short calibration run in this process: the spec's registered
kernel simulates a few replicates at a few of the design's points, for about ``seconds`` in
all. Calibration replicate r of point p uses ``SeedSequence(root, spawn_key=(p, r, 1))``,
a stream the sweep itself never uses. A replicate is first run with a small event cap,
raised tenfold while the time allows, so one explosive point cannot eat the budget; a
replicate still stopped by that cap has its events extrapolated from the simulated time
it reached. Then

    run time ~ start-up + max(total events / (events per second x workers) + per-task costs,
                              the longest single task)

where total events = mean events per replicate over the calibrated points x points x
replicates, and the per-task cost includes writing one task's chunk: a trial chunk
simulated at the median-cost point is written with the workers' own ``store.write_block``
into a scratch store beside the planned one (same file system, same codec, same fsyncs),
which also gives the compressed store size. The scratch store is deleted afterwards.

A model whose kernel is not in numba's disk cache yet (``kernels.compiled``: a model with custom
rate laws never run on this machine) pays a compilation on its first call; the plan's own warm-up
call is that first call, so its seconds are added to the estimate (``Plan.compile_seconds``).
"""

from __future__ import annotations

import tempfile
import time
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Callable

import numpy as np

from kernels.network import STATUS_EVENT_CAP, STATUS_NUMERICAL, KernelResult
from sweep.model import compile_network, initial_counts, rate_constants
from sweep.execute.tasks import n_blocks

if TYPE_CHECKING:
    from sweep.spec import Spec

MAX_TASKS = 1_000_000
MAX_BYTES = 10**12
# Start-up and shut-down of a local run (store creation, cluster start, kernel warm-up in
# every worker, cluster close): 4.0-5.3 s on 2 idle cores, up to 10 s on busy ones
# (docs/design-notes.md, "Planning").
STARTUP_SECONDS = 5.0
# Scheduling, completion record and progress per task, besides the chunk write (which is
# measured): 2-3 ms with a bounded window of tasks in flight.
TASK_OVERHEAD_SECONDS = 0.003
OUTLIER_FACTOR = 20.0
FIRST_CAP = 10_000
CALIBRATION_KEY = 1  # third element of the calibration seeds' spawn key (p, r, 1)
MAX_CALIBRATION_REPLICATES = 8
_CALIBRATION_SHARE = 0.6  # of the time budget; the rest simulates the trial chunk


@dataclass(frozen=True)
class Size:
    """What a spec asks for, known without simulating."""

    points: int
    replicates: int
    replicates_per_task: int
    tasks: int
    samples: int
    species: int
    raw_bytes: int
    itemsize: int = 4  # bytes per count (int32; float64 for real-valued methods)

    @property
    def counts_bytes(self) -> int:
        return self.points * self.replicates * self.samples * self.species * self.itemsize


@dataclass(frozen=True)
class PointCost:
    """Calibration at one point. ``extrapolated`` counts replicates whose events were estimated."""

    point: int
    values: tuple[tuple[str, float], ...]
    replicates: int
    events_per_replicate: float
    seconds_per_replicate: float
    extrapolated: int = 0
    at_event_cap: int = 0
    failed: int = 0


@dataclass(frozen=True)
class Plan:
    """A sweep's size, store footprint and estimated run time on ``workers`` workers."""

    size: Size
    workers: int
    costs: tuple[PointCost, ...]
    events_per_second: float
    events_total: float
    compressed_bytes: float
    trial_replicates: int
    seconds: float
    longest_task_seconds: float
    calibration_seconds: float
    warnings: tuple[str, ...]
    write_seconds: float = 0.0  # writing one task's chunk, measured on the trial chunk
    compile_seconds: float = 0.0  # compiling the model's kernel: 0 when it was in the disk cache

    @property
    def compression_ratio(self) -> float:
        return self.compressed_bytes / self.size.raw_bytes if self.size.raw_bytes else 1.0


def size(spec: Spec) -> Size:
    """Points, tasks and the raw (uncompressed) store size of a spec.

    Example
    -------
    >>> size(load("configs/reporter.toml")).tasks
    32
    """
    import kernels

    n_p, n_r, n_t, n_s = spec.points().shape[0], spec.replicates, len(spec.times), len(spec.model.species)
    blocks = n_blocks(n_r, spec.replicates_per_task)
    # int32 counts, unless the kernel module declares another dtype (a real-valued state)
    itemsize = np.dtype(getattr(kernels.get(spec.method), "COUNTS_DTYPE", np.int32)).itemsize
    # counts, status int8, events int64, done bool, params float64
    raw = n_p * n_r * (n_t * n_s * itemsize + 1 + 8) + n_p * blocks + n_p * len(spec.param_names) * 8
    return Size(n_p, n_r, spec.replicates_per_task, n_p * blocks, n_t, n_s, raw, itemsize)


def limits(sized: Size) -> list[str]:
    """Why a design is beyond the sane limits (empty when it is not); ``--yes`` overrides."""
    reasons = []
    if sized.tasks > MAX_TASKS:
        reasons.append(f"{sized.tasks:,} tasks is more than {MAX_TASKS:,}")
    if sized.raw_bytes > MAX_BYTES:
        reasons.append(f"{sized.raw_bytes / 1e12:.1f} TB of raw results is more than {MAX_BYTES / 1e12:g} TB")
    return reasons


def plan(spec: Spec, workers: int, calibration_points: int = 256, seconds: float = 2.0) -> Plan:
    """Size a sweep and estimate its run time from a short calibration run.

    Parameters
    ----------
    spec : Spec
        The loaded spec.
    workers : int
        Workers to estimate for (each assumed to have a core of its own).
    calibration_points : int
        At most this many of the design's points are simulated: evenly spread through the
        point order and visited so that every prefix is spread too, until the budget is spent.
    seconds : float
        Time budget for calibration plus the trial chunk, not counting kernel compilation.

    Returns
    -------
    Plan

    Example
    -------
    >>> p = plan(load("configs/reporter_lhs.toml"), workers=2)
    >>> p.seconds > 0
    True
    """
    import kernels

    began = time.perf_counter()
    sized = size(spec)
    points = spec.points()
    chosen = _spread(sized.points, calibration_points)
    bench = _Bench(spec, kernels.get(spec.method).simulate)
    cached = kernels.compiled(spec.method, bench.network)
    warm = time.perf_counter()
    bench.warm_up(spec.values_at(points[chosen[0]]))
    compile_seconds = 0.0 if cached else time.perf_counter() - warm
    budget = seconds * _CALIBRATION_SHARE
    costs, blocks = [], {}
    for i, p in enumerate(chosen):
        left = budget - bench.seconds
        if costs and left <= 0:
            break
        cost, counts = bench.point(p, spec.values_at(points[p]), left / (len(chosen) - i), spec.param_names, points[p])
        costs.append(cost)
        blocks[p] = counts
    compressed, trial, write_seconds = _trial_chunk(bench, spec, points, costs, blocks, max(0.0, seconds - bench.seconds))
    write_seconds *= max(1.0, min(spec.replicates_per_task, spec.replicates) / trial)
    eps = bench.events / bench.seconds if bench.seconds > 0 else 0.0
    per_rep = np.array([c.events_per_replicate for c in costs])
    total = float(per_rep.mean()) * sized.points * sized.replicates
    ratio = compressed / max(trial * sized.samples * sized.species * sized.itemsize, 1)
    compressed_bytes = sized.counts_bytes * ratio + (sized.raw_bytes - sized.counts_bytes)
    if eps > 0:
        compute, longest = total / eps, float(per_rep.max()) * sized.replicates_per_task / eps
    else:  # a method that fires no events (e.g. an ODE solver): time per replicate instead
        per_second = np.array([c.seconds_per_replicate for c in costs])
        compute = float(per_second.mean()) * sized.points * sized.replicates
        longest = float(per_second.max()) * sized.replicates_per_task
    work = compute + sized.tasks * (TASK_OVERHEAD_SECONDS + write_seconds)
    estimate = STARTUP_SECONDS + compile_seconds + max(work / max(1, min(workers, sized.tasks)), longest)
    warnings = _warnings(costs, spec.max_events) + method_advice(spec.method, bench.network.n_reactions)
    return Plan(sized, workers, tuple(costs), eps, total, compressed_bytes, trial, estimate, longest,
                time.perf_counter() - began, tuple(warnings), write_seconds, compile_seconds)


def method_advice(method: str, n_reactions: int) -> list[str]:
    """``kernels.advice`` as a list of warnings (empty when the method fits the network).

    Example
    -------
    >>> method_advice("direct", 10_000)[0].startswith("method 'direct' on 10,000 reactions")
    True
    """
    import kernels

    note = kernels.advice(method, n_reactions)
    return [note] if note else []


def _spread(n_points: int, k: int) -> list[int]:
    """Up to ``k`` point indices evenly spread over ``range(n_points)``, in van der Corput order
    (0, 1/2, 1/4, 3/4, ... of the way through), so that any prefix is spread as well."""
    chosen = np.unique(np.linspace(0, n_points - 1, max(1, min(k, n_points))).round().astype(int))
    bits = max(1, int(len(chosen) - 1).bit_length())
    order = sorted(range(len(chosen)), key=lambda i: int(f"{i:0{bits}b}"[::-1], 2))
    return [int(chosen[i]) for i in order]


class _Bench:
    """Runs calibration replicates of one spec and keeps the totals (events, kernel seconds)."""

    def __init__(self, spec: Spec, simulate: Callable):
        self.spec, self.simulate = spec, simulate
        self.network = compile_network(spec.model)
        self.times = np.asarray(spec.times)
        self.events = 0
        self.seconds = 0.0
        self.next_replicate: dict[int, int] = {}

    def warm_up(self, values) -> None:
        """Compile (or load from numba's cache) outside the clock."""
        self.simulate(self.network, rate_constants(self.spec.model, values), initial_counts(self.spec.model, values),
                      self.times, [np.random.SeedSequence(0)], 1)

    def run(self, p: int, values, n: int, cap: int):
        """Simulate the next ``n`` calibration replicates of point ``p`` with an event cap."""
        start = self.next_replicate.get(p, 0)
        seeds = [np.random.SeedSequence(self.spec.seed, spawn_key=(p, r, CALIBRATION_KEY)) for r in range(start, start + n)]
        self.next_replicate[p] = start + n
        args = (self.network, rate_constants(self.spec.model, values), initial_counts(self.spec.model, values), self.times)
        began = time.perf_counter()
        result = self.simulate(*args, seeds, cap)
        elapsed = time.perf_counter() - began
        self.events += int(result.events.sum())
        self.seconds += elapsed
        return result, elapsed

    def point(self, p: int, values, budget: float, names, row) -> tuple[PointCost, KernelResult]:
        """Calibrate one point within ``budget`` seconds."""
        max_events, limit = self.spec.max_events, min(self.spec.replicates, MAX_CALIBRATION_REPLICATES)
        cap, spent = min(max_events, FIRST_CAP), 0.0
        while True:  # one replicate, raising the cap tenfold while the budget allows
            result, elapsed = self.run(p, values, 1, cap)
            spent += elapsed
            if result.status[0] != STATUS_EVENT_CAP or cap >= max_events or spent * 10 > budget:
                break
            cap = min(max_events, cap * 10)
        batches = [(result, cap)]
        if result.status[0] != STATUS_EVENT_CAP:
            # room for replicates up to 10x as long as the first; longer ones are extrapolated
            cap = min(max_events, max(cap, 10 * int(result.events[0])))
        done, per_rep = 1, max(elapsed, 1e-6)
        while done < limit and spent < budget:
            n = int(min(limit - done, max(1, (budget - spent) / per_rep)))
            result, elapsed = self.run(p, values, n, cap)
            batches.append((result, cap))
            spent, done, per_rep = spent + elapsed, done + n, max(elapsed / n, 1e-6)
        cost = _cost(p, tuple(zip(names, map(float, row))), batches, self.times, max_events, spent)
        return cost, _join([b for b, _ in batches])


def _cost(p, values, batches, times, max_events, spent) -> PointCost:
    estimates, extrapolated, at_cap, failed = [], 0, 0, 0
    for result, cap in batches:
        for i, events in enumerate(result.events):
            status = result.status[i]
            failed += int(status == STATUS_NUMERICAL)
            if status != STATUS_EVENT_CAP:
                estimates.append(float(events))
            elif cap >= max_events:
                at_cap += 1  # the sweep stops these at the same cap, so this is their true cost
                estimates.append(float(events))
            else:
                extrapolated += 1
                estimates.append(float(events) * times[-1] / _time_reached(result.counts[i], times))
    n = len(estimates)
    return PointCost(p, values, n, float(np.mean(estimates)), spent / n, extrapolated, at_cap, failed)


def _time_reached(counts: np.ndarray, times: np.ndarray) -> float:
    """Last sample time with a known state; at least the first sample after zero."""
    known = np.flatnonzero(counts[:, 0] != -1)
    last = float(times[known[-1]]) if known.size else 0.0
    return max(last, float(times[1]) if times.size > 1 else float(times[-1]), 1e-12)


def _join(results: list[KernelResult]) -> KernelResult:
    return KernelResult(*(np.concatenate(parts) for parts in zip(*results)))


def _trial_chunk(bench: _Bench, spec: Spec, points, costs, blocks, budget: float) -> tuple[int, int, float]:
    """Simulate one task's chunk at the median-cost point (topping up its calibration
    replicates within ``budget``) and write it; bytes of its counts, replicates, seconds."""
    median = sorted(costs, key=lambda c: c.events_per_replicate)[len(costs) // 2]
    block = blocks[median.point]
    want = min(spec.replicates_per_task, spec.replicates) - block.counts.shape[0]
    if want > 0 and budget > 0 and not median.extrapolated:
        n = int(min(want, max(1, budget / max(median.seconds_per_replicate, 1e-6))))
        result, _ = bench.run(median.point, spec.values_at(points[median.point]), n, spec.max_events)
        block = _join([block, result])
    # a task's chunk holds at most replicates_per_task: calibration may have run more replicates
    block = KernelResult(*(part[:min(spec.replicates_per_task, spec.replicates)] for part in block))
    stored, seconds = write_trial(block, spec, points, _scratch_parent(spec.store))
    return stored, block.counts.shape[0], seconds


def _scratch_parent(store: Path) -> Path:
    """The nearest existing folder of the planned store (so the trial write meets its file system)."""
    folder = Path(store).resolve().parent
    while not folder.is_dir():
        folder = folder.parent
    return folder


def write_trial(block: KernelResult, spec: Spec, points: np.ndarray, folder: Path,
                repeats: int = 3) -> tuple[int, float]:
    """Write ``block`` as a task's chunk, the way a worker does, into a scratch store.

    The scratch store in ``folder`` has the real layout (``store.create`` with the first few
    points) and ``block`` goes to ``repeats`` distinct points with ``store.write_block``, so
    every write makes its chunk's folders and pays the store's fsyncs as a real task does.

    Returns
    -------
    tuple of int and float
        Bytes of one ``counts`` chunk on disk, and the median seconds of one write.
    """
    from sweep import store

    n = block.counts.shape[0]
    repeats = max(1, min(repeats, points.shape[0]))
    with tempfile.TemporaryDirectory(prefix=".sweep-plan-", dir=folder) as scratch:
        path = Path(scratch) / "trial.zarr"
        store.create(path, spec, points[:repeats], n_blocks(spec.replicates, spec.replicates_per_task))
        ident = store.store_id(store.attributes(path))
        # a model's observables are a fourth chunk a real task writes too (NaN here: their cost is the write)
        observed = np.full(block.counts.shape[:2] + (len(spec.observables),), np.nan) if spec.observables else None
        seconds = []
        for p in range(repeats):
            began = time.perf_counter()
            store.write_block(path, p, 0, n, block, ident, observed)
            seconds.append(time.perf_counter() - began)
        stored = sum(f.stat().st_size for f in (path / "counts").rglob("*") if f.is_file() and f.name != "zarr.json")
    return stored // repeats, float(np.median(seconds))


def _warnings(costs: list[PointCost], max_events: int) -> list[str]:
    out = []
    median = float(np.median([c.events_per_replicate for c in costs]))
    costly = sorted((c for c in costs if median > 0 and c.events_per_replicate > OUTLIER_FACTOR * median),
                    key=lambda c: -c.events_per_replicate)
    if costly:
        worst = "; ".join(f"{_where(c)}: {c.events_per_replicate / median:.0f}x" for c in costly[:3])
        out.append(f"{len(costly)} of {len(costs)} calibrated points cost over {OUTLIER_FACTOR:g}x the median "
                   f"events per replicate ({median:,.0f}), a stiff or explosive region? {worst}")
    for c in costs:
        if c.at_event_cap:
            out.append(f"{_where(c)}: {c.at_event_cap} of {c.replicates} calibration replicates reached the event "
                       f"cap (max_events = {max_events:,}); the sweep will stop such replicates with status 1")
        elif c.extrapolated:
            out.append(f"{_where(c)}: {c.extrapolated} of {c.replicates} calibration replicates were cut short; "
                       "their events are extrapolated from the simulated time they reached")
        if c.failed:
            out.append(f"{_where(c)}: {c.failed} of {c.replicates} calibration replicates failed numerically")
    return out


def _where(cost: PointCost) -> str:
    return f"point {cost.point} ({', '.join(f'{n} = {v:.4g}' for n, v in cost.values) or 'the only point'})"
