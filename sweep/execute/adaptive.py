"""Adaptive replicates: more replicate blocks only where a statistic is not yet precise enough.

The target comes from the spec's ``[run.adaptive]`` (``sweep.spec.adaptive``)::

    [run]
    replicates = 200                   # every point gets these first
    replicates_per_task = 100
    [run.adaptive]
    statistic = "fano"                 # mean | var | sd | cv | fano (as in `sweep analyze`)
    species = "protein"                # optional with a single species
    time = "last"                      # or a sample time (the nearest sample is used)
    precision = 0.05                   # target standard error: 5 % of the value ...
    relative = true                    # ... or, with false, in the statistic's own units
    max_replicates = 5000              # never more than this per point (the store's size)

The store is made for ``max_replicates`` per point; the ``done`` record covers every block.
Rounds: the first runs the blocks holding ``replicates`` at every point; then each point whose
statistic has not met the target gets more blocks, and so on until every point has met it, hit
``max_replicates``, or has an undefined statistic. Replicates never run stay "not run" in the
store (status -1, counts -1, ``done`` false), so every analysis leaves them out.

The statistic and its standard error are ``sweep.analysis``'s (``stats.moments`` and
``adequacy.standard_errors``, the delta method), over the finished replicates (status 0) of
the point's first n replicates, and a point meets the target when se <= precision x |value|
(relative) or se <= precision, as ``sweep analyze --precision`` judges it. A point that has
not met it next gets the replicates its standard error asks for (adequacy's
``replicates_needed``: n (se / target)^2, since se falls as 1 / sqrt(n)) plus ``MARGIN``,
in whole blocks: at least one block more and at most ``MAX_GROWTH`` times as many as so far,
so one noisy early estimate cannot commit a point to ``max_replicates``.

Each decision is a pure function of one point's first n replicates, which are themselves
fixed by their seeds; so the rounds are the same however often a run is stopped and resumed,
and the finished store is bit-identical to an uninterrupted run's. Nothing about the rounds is
kept but the data: a rerun replays the decisions from the store. A summary (points that met
the target, reached the maximum, ...) goes into the store's attributes (``adaptive``) for
``sweep status``.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import TYPE_CHECKING, Any, Mapping

import numpy as np

from sweep.execute.tasks import Task, n_blocks
from sweep.spec.adaptive import Adaptive

if TYPE_CHECKING:
    from sweep.spec import Spec

#: the replicates a standard error predicts are raised by this factor, so that a point whose
#: prediction came out a little low does not need one more round for the last few replicates
MARGIN = 1.1
#: at most this many times the replicates so far in one round
MAX_GROWTH = 4

# what each point's rounds ended in
ADDING = "adding"  # not decided yet: blocks are scheduled (or pending) for it
MET = "met"  # the standard error met the target
MAX = "max"  # max_replicates ran without meeting it
UNDEFINED = "undefined"  # no finished replicate, or a statistic undefined there (a Fano factor at mean 0)
FAILED = "failed"  # a task it needs failed in this run; a rerun tries again
STATES = (MET, MAX, UNDEFINED, ADDING, FAILED)


def next_replicates(n: int, se: float, target: float, per_task: int, most: int) -> int:
    """Replicates a point should have after its next round: what its standard error predicts.

    n (se / target)^2 (adequacy's ``replicates_needed``, scaled from the finished replicates
    to all n, since capped ones are not used) times ``MARGIN``, in whole blocks: at least one
    block more, at most ``MAX_GROWTH`` x n, never more than ``most``.

    Example
    -------
    >>> next_replicates(100, se=0.15, target=0.1, per_task=50, most=10_000)  # 100 x 2.25 x 1.1 = 248
    250
    >>> next_replicates(100, se=1.0, target=0.1, per_task=50, most=10_000)  # at most 4 x 100
    400
    """
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        wanted = float(n * (se / target) ** 2 * MARGIN) if target > 0 else math.inf
    low, high = n + per_task, min(MAX_GROWTH * n, most)
    wanted = high if not math.isfinite(wanted) else min(max(wanted, low), high)
    return min(int(math.ceil(wanted / per_task)) * per_task, most)


@dataclass
class Outcome:
    """Where each point's rounds stand: its state (``STATES``) and the replicates it has (or will)."""

    target: Adaptive
    state: list[str]
    replicates: list[int]
    values: list[float]
    errors: list[float]
    tasks_total: int
    tasks_needed: int = 0

    def summary(self) -> dict[str, Any]:
        """JSON-ready: the target, points per state, replicates per point (range), tasks needed."""
        reps = np.asarray(self.replicates)
        return {"target": asdict(self.target), "description": self.target.description,
                "points": {s: self.state.count(s) for s in STATES},
                "replicates": {"min": int(reps.min()), "median": float(np.median(reps)), "max": int(reps.max()),
                               "total": int(reps.sum())} if reps.size else {},
                "tasks_total": self.tasks_total, "tasks_needed": self.tasks_needed,
                "tasks_not_needed": self.tasks_total - self.tasks_needed}


class Planner:
    """The rounds: ``planner(done, failed)`` gives the tasks to run next (the schedule of
    ``sweep.execute.loop.drive``).

    It replays every point's decisions from the store's data as far as the ``done`` record
    allows, so a fresh planner on a half-finished store picks up exactly where the rounds were.
    """

    def __init__(self, spec: Spec):
        self.spec, self.target = spec, spec.adaptive
        self.per_task, self.most = spec.replicates_per_task, spec.store_replicates
        self.max_blocks = n_blocks(self.most, self.per_task)
        n_points = spec.points().shape[0]
        first = n_blocks(spec.replicates, self.per_task)
        self.blocks = np.full(n_points, first, dtype=np.int64)  # each point's current stage
        self.state = [ADDING] * n_points
        self.values = np.full(n_points, np.nan)
        self.errors = np.full(n_points, np.nan)
        self.data: list[np.ndarray] = [np.empty(0) for _ in range(n_points)]  # the sample, NaN where not used

    def __call__(self, done: np.ndarray, failed: set[tuple[int, int]]) -> list[Task]:
        """Decide every point whose current round is done; return the blocks still to run."""
        while True:
            ready = self._advance(done, failed)
            if not ready:
                break
            self._decide(ready)
        tasks = [Task(p, b, b * self.per_task, min((b + 1) * self.per_task, self.most))
                 for p, state in enumerate(self.state) if state == ADDING
                 for b in range(int(self.blocks[p])) if not done[p, b]]
        self._record(done, tasks)
        return tasks

    def finish(self, path) -> Outcome:
        """The rounds' outcome once the run has ended: each point's state, and the tasks still wanted."""
        from sweep import store

        done = store.read_done(path)
        pending = sum(1 for p, s in enumerate(self.state) if s in (ADDING, FAILED)
                      for b in range(int(self.blocks[p])) if not done[p, b])
        return self.outcome(done, pending)

    def outcome(self, done: np.ndarray, pending: int = 0) -> Outcome:
        """Each point's state and replicates now; ``pending`` tasks asked for and not yet done."""
        reps = [self._replicates(p) for p in range(len(self.state))]
        return Outcome(self.target, list(self.state), reps, self.values.tolist(), self.errors.tolist(),
                       int(done.size), int(done.sum()) + pending)

    def _replicates(self, p: int) -> int:
        return min(int(self.blocks[p]) * self.per_task, self.most)

    def _advance(self, done: np.ndarray, failed: set[tuple[int, int]]) -> list[int]:
        """Points whose current round is complete and not yet judged; mark the blocked ones."""
        ready = []
        for p, state in enumerate(self.state):
            if state not in (ADDING, FAILED):
                continue
            needed = range(int(self.blocks[p]))
            if all(done[p, b] for b in needed):
                self.state[p] = ADDING
                ready.append(p)  # judged at an earlier round, it got more blocks: its data is short
            elif any((p, b) in failed for b in needed if not done[p, b]):
                self.state[p] = FAILED
            else:
                self.state[p] = ADDING
        return ready

    def _decide(self, points: list[int]) -> None:
        """Read the points' new replicates, judge their statistic, set their next round."""
        self._read(points)
        by_size: dict[int, list[int]] = {}
        for p in points:
            by_size.setdefault(self.data[p].size, []).append(p)
        for n, group in sorted(by_size.items()):
            value, se = _statistic(np.stack([self.data[p] for p in group]), self.target.statistic)
            for p, v, s in zip(group, value, se):
                self.values[p], self.errors[p] = v, s
                self._judge(p, n, float(v), float(s))

    def _judge(self, p: int, n: int, value: float, se: float) -> None:
        target = self.target.precision * abs(value) if self.target.relative else self.target.precision
        if not (math.isfinite(value) and math.isfinite(se)):
            self.state[p] = UNDEFINED
        elif se <= target:
            self.state[p] = MET
        elif n >= self.most:
            self.state[p] = MAX
        else:
            more = next_replicates(n, se, target, self.per_task, self.most)
            self.blocks[p] = n_blocks(more, self.per_task)
            return
        self.data[p] = np.empty(0)  # decided for good: only points still adding keep their sample

    def _read(self, points: list[int]) -> None:
        """Append each point's replicates up to its current round: the statistic's species at its time."""
        import zarr

        g = zarr.open_group(self.spec.store, mode="r")
        t = list(self.spec.times).index(self.target.time)
        counts, status = g["counts"], g["status"]
        observed = self.target.species not in self.spec.model.species
        if not observed:
            s = list(self.spec.model.species).index(self.target.species)
        else:  # an observable (sweep.model.observables): its column, NaN where the replicate did not finish
            counts, s = g["observables"], [n for n, _ in self.spec.observables].index(self.target.species)
        spans: dict[tuple[int, int], list[int]] = {}
        for p in points:
            spans.setdefault((self.data[p].size, self._replicates(p)), []).append(p)
        for (have, want), group in spans.items():
            # one selection per span: zarr reads (and decompresses) the chunks concurrently
            rows = np.asarray(group)
            x = counts.get_orthogonal_selection((rows, slice(have, want), t, s)).astype(np.float64)
            codes = status.get_orthogonal_selection((rows, slice(have, want)))
            x[(codes != 0) | ((x < 0) & (not observed))] = np.nan  # as sweep.analysis.source masks them
            for p, new in zip(group, x):
                self.data[p] = np.concatenate([self.data[p], new])

    def _record(self, done: np.ndarray, tasks: list[Task]) -> None:
        from sweep import store

        try:
            store.finish_run(self.spec.store, adaptive=self.outcome(done, len(tasks)).summary())
        except OSError:
            pass  # the summary is for `sweep status` only; the next round or run writes it again


def _statistic(x: np.ndarray, statistic: str) -> tuple[np.ndarray, np.ndarray]:
    """(value, standard error) of each row of ``x`` (NaN = not used).

    Rows are reduced independently (numpy reduces each row of a C-ordered array along its last
    axis on its own), so a point's numbers do not depend on which others share its batch.
    """
    import xarray as xr

    from sweep.analysis import adequacy, stats

    moments = stats.moments(xr.DataArray(np.ascontiguousarray(x), dims=("point", "replicate")))
    errors = adequacy.standard_errors(moments)
    return moments[statistic].values, errors[f"se_{statistic}"].values


def describe_states(counts: Mapping[str, int], most: int) -> list[str]:
    """Readable lines for ``sweep run`` and ``sweep status``: why points stopped adding replicates."""
    words = {MET: "met the target", MAX: f"reached max_replicates ({most:,}) without meeting it",
             UNDEFINED: "stopped: statistic undefined (no finished replicate, or a mean of 0)",
             ADDING: "still adding replicates", FAILED: "waiting for a failed task (rerun to retry)"}
    return [f"{counts[s]:,} point{'s' if counts[s] != 1 else ''} {words[s]}" for s in STATES if counts.get(s)]
