"""Gillespie's direct method (Gillespie 1976, 1977), compiled with numba.

Per event: tau = ln(1/r1)/a0 with r1 in (0, 1]; reaction j chosen with probability
a_j/a0 by a linear search over the running sum; only the propensities that depend on
the fired reaction's species are recomputed (dependency graph, Gibson & Bruck 2000);
a0 is kept incrementally and re-summed every 1024 events to stop rounding drift.

The state recorded at sample time t is the state after the last event at or before t.
A replicate whose total propensity reaches zero holds its state to the end. A replicate
that reaches ``max_events`` before the end stops with status 1 and samples after the
stop are -1 (unknown), as are all samples of a replicate that failed (status 2): a count
that went negative or beyond int32, or a total propensity a0 that is infinite or NaN (a
huge rate constant times large counts, a law dividing by zero or overflowing), checked
once per event on a0.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numba
import numpy as np

from kernels import blocks
from kernels.changes import watch_hit
from kernels.network import KernelResult, Network, STATUS_EVENT_CAP, STATUS_NUMERICAL, STATUS_STOPPED, Trace
from kernels.propensity import _U0, _U1, _U2, _U3, _U4, program, propensity
from kernels.rng import next_words, to_open0, to_unit

if TYPE_CHECKING:
    from kernels.blocks import Seeds
    from kernels.changes import Schedule

_INT32_MAX = 2**31 - 1
_INF = np.inf
_RESUM_MASK = 1023  # a0 is re-summed when the event count is a multiple of 1024


@numba.njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def _run_one(prog, n_r, rates, law, x0, times, state, max_events, out, log_t, log_r, log_x, x, a,
             w_species, w_op, w_value, w_repeat, armed, stop):
    """Simulate one replicate into ``out`` (T, S); return (status, events).

    The ``w_*`` arrays, ``armed`` and ``stop`` are the state-triggered events (``kernels.changes``):
    empty for a run without them; else the loop stops right after the event that makes an armed
    condition true, with status ``STATUS_STOPPED``, its time in ``stop[0]`` and the state there in
    every later sample.

    ``state`` (uint64[4]) is this replicate's generator; it is advanced in place. The ``log_*``
    arrays are None (numba then compiles the logging away) or receive event times, reactions and
    post-event states. ``x`` (S,) and ``a`` (R + 1,) are scratch for the state and propensities.

    Compiled without numba's reference counting (``_nrt=False``), hence the scratch arrays: it
    allocates nothing, and every array it sees lives at least as long as the call. With reference
    counting, each inlined ``propensity`` increfs and decrefs the arrays it is passed, and numba's
    pruning of those calls fails once a custom law's branch is in the function: two opaque calls
    per array per propensity, which cost more than the law itself.
    """
    n_s = x0.shape[0]
    n_t = times.shape[0]
    n_w = w_species.shape[0]
    log_cap = log_t.shape[0] if log_t is not None else 0
    # the generator lives in locals for the whole run and is written back once at the end
    s0 = state[0]
    s1 = state[1]
    s2 = state[2]
    s3 = state[3]
    for s in range(n_s):
        x[s] = x0[s]
    # a[n_r] = NaN ends the reaction search without a bound test per step: NaN compares
    # false, so the running sum stops there whatever the target (even inf or NaN)
    a[n_r] = np.nan
    a0 = 0.0
    for j in range(n_r):
        e = np.uint64(n_r + 3 * j)
        a[j] = propensity(prog[e], rates[j], np.uint64(prog[e + _U1]), np.uint64(prog[e + _U2]), x, prog,
                          law, rates)
        a0 += a[j]
    t = 0.0
    k = 0
    t_sample = times[0] if n_t > 0 else np.inf  # next sample time, cached out of the array
    n_ev = 0
    status = 0
    while True:
        if not (a0 > 0.0 and a0 < _INF):
            # the incremental sum may be off by rounding (<= 0), or a propensity is infinite or
            # NaN: decide on the exact sum
            a0 = 0.0
            for j in range(n_r):
                a0 += a[j]
            if not a0 < _INF:
                status = STATUS_NUMERICAL  # infinite or NaN: no time step can be drawn
                break
            if a0 <= 0.0:
                break  # nothing can fire: hold the state to the end
        r, s0, s1, s2, s3 = next_words(s0, s1, s2, s3)
        t_new = t - np.log(to_open0(r)) / a0
        while t_sample < t_new:
            for s in range(n_s):
                v = x[s]
                if v > _INT32_MAX:
                    status = STATUS_NUMERICAL
                out[k, s] = v
            k += 1
            t_sample = times[k] if k < n_t else np.inf
        if k == n_t or status != 0:
            break
        if n_ev >= max_events:
            status = STATUS_EVENT_CAP
            break
        r, s0, s1, s2, s3 = next_words(s0, s1, s2, s3)
        target = to_unit(r) * a0
        # first j whose running sum exceeds the target (linear search, Gillespie 1977)
        j = _U0
        acc = a[0]
        while acc <= target:
            j += _U1
            acc += a[j]
        if j >= np.uint64(n_r):
            # a0 drifted above the true sum: take the last reaction that can fire
            last = n_r - 1
            while last >= 0 and a[last] <= 0.0:
                last -= 1
            if last < 0:
                break  # none can: absorbing state, hold it to the end
            j = np.uint64(last)
        b = np.uint64(prog[j])
        q = b + _U2
        end = q + _U2 * np.uint64(prog[b])
        while q < end:
            s = np.uint64(prog[q])
            v = x[s] + prog[q + _U1]
            x[s] = v
            if v < 0:
                status = STATUS_NUMERICAL
            q += _U2
        end = q + _U4 * np.uint64(prog[b + _U1])
        while q < end:
            d = np.uint64(prog[q])
            new = propensity(prog[q + _U1], rates[d], np.uint64(prog[q + _U2]), np.uint64(prog[q + _U3]),
                             x, prog, law, rates)
            a0 += new - a[d]
            a[d] = new
            q += _U4
        t = t_new
        if log_t is not None and n_ev < log_cap:
            log_t[n_ev] = t
            log_r[n_ev] = j
            for s in range(n_s):
                log_x[n_ev, s] = x[s]
        n_ev += 1
        if status != 0:
            break
        if n_w > 0 and watch_hit(w_species, w_op, w_value, w_repeat, armed, x):
            status = STATUS_STOPPED
            stop[0] = t
            break
        if (n_ev & _RESUM_MASK) == 0:
            # bound the rounding drift of the incremental a0
            a0 = 0.0
            for d in range(n_r):
                a0 += a[d]
    state[0] = s0
    state[1] = s1
    state[2] = s2
    state[3] = s3
    held = status == 0 or status == STATUS_STOPPED  # later samples hold the state; else they are unknown
    if status == STATUS_NUMERICAL:
        k = 0
    while k < n_t:
        for s in range(n_s):
            out[k, s] = x[s] if held else -1
        k += 1
    return status, n_ev


@numba.njit(cache=True, nogil=True, error_model="numpy")
def run(model, rates, law, x0, times, states, max_events, counts, status, events, aux, log_t, log_r, log_x):
    """Run replicate i from ``states[i]`` into ``counts[i]`` (``kernels.blocks``'s loop protocol)."""
    prog, n_r, watch = model
    w_species, w_op, w_value, w_repeat, armed, stop = watch
    x = np.empty_like(x0)
    a = np.empty(n_r + 1)
    for i in range(states.shape[0]):
        st, ev = _run_one(prog, n_r, rates, law, x0, times, states[i], max_events, counts[i], log_t, log_r,
                          log_x, x, a, w_species, w_op, w_value, w_repeat, armed, stop)
        status[i] = st
        events[i] = ev


# the functions between ``run`` and ``law_value``, compiled again with a model's laws inline
LAW_PATH = (propensity, _run_one, run)


def prepare(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray) -> tuple:
    """The packed program (``kernels.propensity.program``) and the number of reactions."""
    return program(*network.arrays), network.n_reactions


def simulate(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray,
             seeds: Seeds, max_events: int, changes: Schedule | None = None) -> KernelResult:
    """Simulate one replicate per seed with the direct method.

    Parameters
    ----------
    network : Network
        The compiled reaction network.
    rates : float64 (R,) or (R + P,)
        Stochastic rate constants c_j (per-molecule-combination), followed by the parameters
        the custom rate laws read when ``network.law`` is set.
    x0 : int (S,)
        Initial molecule counts.
    times : float64 (T,)
        Non-decreasing sample times, all >= 0.
    seeds : sequence of SeedSequence, or Streams
        One seed per replicate; replicate i draws only from ``seeds[i]``.
    max_events : int
        Event cap per replicate.

    Returns
    -------
    KernelResult
        counts (n, T, S) int32, status (n,) int8, events (n,) int64.

    Example
    -------
    >>> res = simulate(net, np.array([1.0]), np.array([10]), np.linspace(0, 5, 6),
    ...                [np.random.SeedSequence(1, spawn_key=(0, 0))], 10_000)
    """
    return blocks.simulate("direct", network, rates, x0, times, seeds, max_events, changes)


def trace(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray,
          seed: np.random.SeedSequence, max_events: int, changes: Schedule | None = None) -> Trace:
    """Recompute one replicate with its full event log.

    Consumes the random stream exactly as ``simulate`` does, so ``result`` equals the
    replicate's row of ``simulate`` bit for bit.
    """
    return blocks.trace("direct", network, rates, x0, times, seed, max_events, changes)
