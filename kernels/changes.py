"""Interventions during a run: timed changes and state-triggered events, for every method.

A ``Schedule`` (``kernels.interventions``, no numba) is plain arrays for one parameter point
(``sweep.model.schedule`` builds it from a spec): the sorted instants of the timed changes, each
with a slice of a small program of operations, and the state-triggered events (a species compared
with a threshold), each with its own slice of the same program.

How a method runs with a schedule (``segments``): it simulates from one change instant to the
next as an ordinary run whose sample times are shifted to start at 0, plus one extra sample at the
next instant (the state just before it); the operations of that instant are applied to that
state, the rates are rebuilt if a parameter changed, and the next segment starts from there. The
store's sample at a change instant is therefore the state just after the change. A
state-triggered event stops the loop (``watch_hit``, status ``STATUS_STOPPED``) right after the
reaction event (exact methods) or the step (tau-leaping, Langevin) that made its condition true;
its operations are applied to that state and a new segment starts at that time.

Why this is exact for the exact methods: between changes the propensities are constant functions
of the state, and a Markov jump process restarted at a fixed time, or at the time of one of its
own jumps (a stopping time), from its state there has the same law as the process run on (the
strong Markov property); so discarding the waiting time that crossed the instant and drawing fresh
ones after the change gives the right law. The next reaction method's kept times are redrawn for
the same reason. The draws all come from the replicate's own generator, so a run is reproducible
and identical on resume, whatever the packing of replicates into tasks.

Operations, applied in program order (the order the spec lists them):

- ``SET`` a species to a value; ``ADD`` to it; ``SUB`` from it (clamped at 0);
- ``KEEP``: each molecule of the species survives independently with probability f (binomial
  thinning: dilution, the partition at cell division), drawn from the replicate's generator; a real
  state (``cle``) draws a Gaussian with the binomial's mean and variance, clipped at 0, and the
  deterministic ``ode`` multiplies by f;
- ``RATE``: ``rates[target] = value`` (an entry of the kernel's rate vector: the reaction
  constants, then the parameters the rate laws read).
"""

from __future__ import annotations

from typing import Callable

import numba
import numpy as np

from kernels.interventions import (  # noqa: F401  (the data; re-exported for the kernels and tests)
    ADD, COMPARISONS, GE, GT, KEEP, LE, LT, OPERATIONS, RATE, SET, SUB, Operation, Schedule, Watch, no_watch,
    schedule, watch_of)
from kernels.network import STATUS_NUMERICAL, STATUS_STOPPED
from kernels.rng import next_u64, to_open0, to_unit


@numba.njit(cache=True, nogil=True, _nrt=False)
def holds(v, op, threshold):
    if op == GE:
        return v >= threshold
    if op == GT:
        return v > threshold
    if op == LE:
        return v <= threshold
    return v < threshold


@numba.njit(cache=True, nogil=True, _nrt=False)
def watch_hit(w_species, w_op, w_value, w_repeat, armed, x):
    """After an event or step: re-arm each repeating event whose condition is false, and say
    whether an armed event's condition holds (the loop then stops; ``fire`` applies it)."""
    hit = False
    for w in range(w_species.shape[0]):
        if holds(x[w_species[w]], w_op[w], w_value[w]):
            if armed[w] != 0:
                hit = True
        elif w_repeat[w] != 0:
            armed[w] = 1
    return hit


@numba.njit(cache=True)
def binomial(n, p, state):
    """Binomial(n, p) from the generator ``state`` (uint64[4], advanced in place).

    Exact: one uniform per molecule compared with p, O(n); no pmf to round or underflow.
    """
    kept = 0
    for _ in range(n):
        if to_unit(next_u64(state)) < p:
            kept += 1
    return kept


@numba.njit(cache=True)
def normal(state):
    """One standard normal (Box-Muller, one value of the pair) from ``state``."""
    u1 = to_open0(next_u64(state))
    u2 = to_unit(next_u64(state))
    return np.sqrt(-2.0 * np.log(u1)) * np.cos(2.0 * np.pi * u2)


def apply(s: Schedule, lo: int, hi: int, x: np.ndarray, rates: np.ndarray, state: np.ndarray | None,
          mode: str) -> bool:
    """Apply operations ``lo:hi`` to ``x`` and ``rates`` in place; True if a rate changed.

    ``mode`` is "count" (integer state, binomial thinning), "langevin" (real state, Gaussian
    thinning) or "mean" (real state, x * f).
    """
    changed = False
    for q in range(lo, hi):
        kind, i, v = int(s.kind[q]), int(s.target[q]), float(s.value[q])
        if kind == RATE:
            changed = changed or rates[i] != v
            rates[i] = v
        elif kind == SET:
            x[i] = v
        elif kind == ADD:
            x[i] = x[i] + v
        elif kind == SUB:
            x[i] = max(x[i] - v, 0)
        elif mode == "count":
            x[i] = binomial(int(x[i]), v, state)
        elif mode == "langevin":
            n = max(float(x[i]), 0.0)
            x[i] = max(n * v + np.sqrt(n * v * (1.0 - v)) * normal(state), 0.0)
        else:
            x[i] = x[i] * v
    return changed


def fire(s: Schedule, armed: np.ndarray, x: np.ndarray, rates: np.ndarray, state: np.ndarray | None,
         mode: str) -> bool:
    """Fire, in order, every armed event whose condition holds at ``x``; True if a rate changed.

    An event fires at most once per instant; after a firing the conditions are checked again,
    since its operations may make another event's condition true. A repeating event whose
    condition is false is re-armed.
    """
    changed = False
    fired = np.zeros(s.n_watch, dtype=bool)
    again = True
    while again:
        again = False
        for w in range(s.n_watch):
            if holds(x[s.w_species[w]], s.w_op[w], s.w_value[w]):
                if armed[w] and not fired[w]:
                    armed[w] = 0
                    fired[w] = True
                    changed |= apply(s, int(s.w_ptr[w]), int(s.w_ptr[w + 1]), x, rates, state, mode)
                    again = True
                    break
            elif s.w_repeat[w]:
                armed[w] = 1
    return changed


# run_segment(x, rates, seg_times, budget, watch, rates_changed, t0) -> (out (T', S), status, events, aux):
# simulate from state x over the relative sample times seg_times with at most budget events; on
# STATUS_STOPPED, watch[5][0] holds the relative time of the stop and out[k:] the state there for
# every sample k at or after it. t0 is the segment's absolute start (for event logs).
Segment = Callable[..., tuple]


def segments(run_segment: Segment, s: Schedule, x0: np.ndarray, rates: np.ndarray, times: np.ndarray,
             max_events: int, state: np.ndarray | None, row: np.ndarray, mode: str) -> tuple[int, int, int]:
    """Run one replicate through its schedule into ``row`` (T, S); return (status, events, aux).

    Statuses follow the kernels: after the event cap (1) the later samples are -1, after a
    numerical failure (2) every sample is -1.
    """
    x = x0.copy()
    r = rates.copy()
    armed = np.ones(s.n_watch, dtype=np.int64)
    watch = watch_of(s, armed)
    n_t, n_c = times.shape[0], s.times.shape[0]
    t, k, c, events, aux, changed = 0.0, 0, 0, 0, 0, True
    while True:
        while c < n_c and s.times[c] <= t:
            changed |= apply(s, int(s.ptr[c]), int(s.ptr[c + 1]), x, r, state, mode)
            c += 1
        if s.n_watch:
            changed |= fire(s, armed, x, r, state, mode)
        t_next = float(s.times[c]) if c < n_c else np.inf
        k2 = int(np.searchsorted(times, t_next, side="left"))
        if k == n_t:  # every sample is taken: later changes cannot show
            return 0, events, aux
        seg = times[k:k2] - t
        if t_next < np.inf:
            seg = np.append(seg, t_next - t)
        watch[5][0] = np.nan
        out, status, ev, ax = run_segment(x, r, seg, max(max_events - events, 0), watch, changed, t)
        changed = False
        events += ev
        aux += ax
        if status == STATUS_NUMERICAL:
            row[:] = -1
            return status, events, aux
        if status == STATUS_STOPPED:
            t_stop = float(watch[5][0])
            got = int(np.searchsorted(seg, t_stop, side="left"))  # samples before the stopping event
            row[k:k + min(got, k2 - k)] = out[:min(got, k2 - k)]
            x = out[got].astype(x0.dtype)
            k += min(got, k2 - k)
            t = t + t_stop
            if t >= t_next:  # the stop fell on the change instant (never before it in exact arithmetic)
                t = t_next
            continue
        n_real = k2 - k
        row[k:k2] = out[:n_real]
        if status != 0:
            row[k2:] = -1
            return status, events, aux
        if t_next == np.inf:
            return 0, events, aux
        x = out[n_real].astype(x0.dtype)
        t, k = t_next, k2
