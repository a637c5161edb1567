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

from typing import Sequence

import numba
import numpy as np

from kernels.network import KernelResult, Network, STATUS_EVENT_CAP, STATUS_NUMERICAL, Trace, empty_result
from kernels.ratelaw import addresses, call_law
from kernels.rng import next_words, seed_states, to_open0, to_unit

_INT32_MAX = 2**31 - 1
_INF = np.inf
_RESUM_MASK = 1023  # a0 is re-summed when the event count is a multiple of 1024

# Propensity kinds of mass-action reactions. The common shapes get a branch of their own;
# anything else (3A, A + 2B, A + B + C, ...) goes through the general product.
_K_ZERO = 0  # 0 -> ...       a = c
_K_UNI = 1  # A -> ...        a = c A
_K_BI = 2  # A + B -> ...     a = c A B
_K_DIMER = 3  # 2A -> ...     a = c A(A-1)/2
_K_GEN = 4  # general         a = c prod_s C(X_s, m_s)
_K_LAW = 5  # custom law      a = law(j, x, p) (``kernels.ratelaw``), p1 = j

# Every index into the kernel's arrays is made unsigned: numba then skips the negative-index
# wraparound (a compare and a select per access) that it adds for signed indices, and the
# hot loop has one fewer live array length per indexed array. Mixing uint64 with a plain int
# literal gives float64 in numba, hence these typed constants.
_U0 = np.uint64(0)
_U1 = np.uint64(1)
_U2 = np.uint64(2)
_U3 = np.uint64(3)
_U4 = np.uint64(4)


@numba.njit(inline="always", cache=True, error_model="numpy")
def propensity(kind, c, p1, p2, x, prog, law, rates):
    """Mass-action propensity counting distinct combinations: c * prod C(x_s, m_s).

    C(A, 2) = A(A-1)/2 and C(A, 3) = A(A-1)(A-2)/6 (Gillespie 1977). ``kind`` is one of the
    ``_K_*`` codes; ``p1``, ``p2`` (uint64) are the reactant species, or for ``_K_GEN`` ``p1`` is
    the offset in ``prog`` of the reactant list (count, then (species, multiplicity) pairs).
    The closed forms need no ``x < m`` test: with counts >= 0 they are 0 exactly then.
    A ``_K_LAW`` reaction calls the model's compiled law (``law`` is its address) with its index ``p1``.
    """
    if kind == _K_UNI:
        return c * np.float64(x[p1])
    if kind == _K_BI:
        return c * np.float64(x[p1]) * np.float64(x[p2])
    if kind == _K_DIMER:
        n = np.float64(x[p1])
        return c * (0.5 * n * (n - 1.0))
    if kind == _K_ZERO:
        return c
    if kind == _K_LAW:
        if law is None:  # a mass-action model: numba prunes the call (``kernels.ratelaw.addresses``)
            return 0.0
        return call_law(law, p1, x, rates)
    a = c
    q = p1 + _U1
    end = q + _U2 * np.uint64(prog[p1])
    while q < end:
        n = np.float64(x[np.uint64(prog[q])])
        m = prog[q + _U1]
        if n < m:
            return 0.0
        for i in range(m):
            a *= (n - i) / (i + 1.0)
        q += _U2
    return a


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _program(reactant_idx, reactant_mult, change_idx, change_val, dep_ptr, dep_idx, law_mask):
    """Pack the network into one flat int64 array read by the event loop.

    Layout (R reactions):

    - ``prog[j]``, j < R: offset of reaction j's firing block.
    - ``prog[R + 3j : R + 3j + 3]``: (kind, p1, p2) of reaction j's own propensity.
    - per reaction, its reactant list: count, then (species, multiplicity) pairs
      (read only for ``_K_GEN``).
    - per reaction, its firing block: n_change, n_dep, then n_change (species, net change)
      pairs, then n_dep (reaction, kind, p1, p2) quadruples of the reactions whose
      propensity depends on a species it changes (Gibson & Bruck 2000).

    One array instead of a dozen keeps the hot loop's live pointers few enough to stay in
    registers, and copying each dependent's propensity description into the firing block
    saves one dependent load per update on the event's serial chain.
    """
    n_r = reactant_idx.shape[0]
    kind = np.empty(n_r, np.int64)
    p1 = np.zeros(n_r, np.int64)
    p2 = np.zeros(n_r, np.int64)
    n_react = np.zeros(n_r, np.int64)
    n_change = np.zeros(n_r, np.int64)
    for j in range(n_r):
        for k in range(reactant_idx.shape[1]):
            if reactant_idx[j, k] < 0:
                break
            n_react[j] += 1
        for l in range(change_idx.shape[1]):
            if change_idx[j, l] < 0:
                break
            n_change[j] += 1
    size = 4 * n_r
    for j in range(n_r):
        size += 1 + 2 * n_react[j] + 2 + 2 * n_change[j] + 4 * (dep_ptr[j + 1] - dep_ptr[j])
    prog = np.zeros(size, np.int64)
    q = 4 * n_r
    for j in range(n_r):
        gen = q
        prog[q] = n_react[j]
        q += 1
        for k in range(n_react[j]):
            prog[q] = reactant_idx[j, k]
            prog[q + 1] = reactant_mult[j, k]
            q += 2
        nk = n_react[j]
        m0 = reactant_mult[j, 0] if nk > 0 else 0
        if law_mask[j]:
            kind[j] = _K_LAW
            p1[j] = j
        elif nk == 0:
            kind[j] = _K_ZERO
        elif nk == 1 and m0 == 1:
            kind[j] = _K_UNI
            p1[j] = reactant_idx[j, 0]
        elif nk == 1 and m0 == 2:
            kind[j] = _K_DIMER
            p1[j] = reactant_idx[j, 0]
        elif nk == 2 and m0 == 1 and reactant_mult[j, 1] == 1:
            kind[j] = _K_BI
            p1[j] = reactant_idx[j, 0]
            p2[j] = reactant_idx[j, 1]
        else:
            kind[j] = _K_GEN
            p1[j] = gen
        prog[n_r + 3 * j] = kind[j]
        prog[n_r + 3 * j + 1] = p1[j]
        prog[n_r + 3 * j + 2] = p2[j]
    for j in range(n_r):
        prog[j] = q
        prog[q] = n_change[j]
        prog[q + 1] = dep_ptr[j + 1] - dep_ptr[j]
        q += 2
        for l in range(n_change[j]):
            prog[q] = change_idx[j, l]
            prog[q + 1] = change_val[j, l]
            q += 2
        for d in range(dep_ptr[j], dep_ptr[j + 1]):
            r = dep_idx[d]
            prog[q] = r
            prog[q + 1] = kind[r]
            prog[q + 2] = p1[r]
            prog[q + 3] = p2[r]
            q += 4
    return prog


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _run_one(prog, n_r, rates, law, x0, times, state, max_events, out, log_t, log_r, log_x):
    """Simulate one replicate into ``out`` (T, S); return (status, events).

    ``state`` (uint64[4]) is this replicate's generator; it is advanced in place. When
    ``log_t`` has room, event times, reactions and post-event states are logged.
    """
    n_s = x0.shape[0]
    n_t = times.shape[0]
    log_cap = log_t.shape[0]
    # the generator lives in locals for the whole run and is written back once at the end
    s0 = state[0]
    s1 = state[1]
    s2 = state[2]
    s3 = state[3]
    x = x0.copy()
    # a[n_r] = NaN ends the reaction search without a bound test per step: NaN compares
    # false, so the running sum stops there whatever the target (even inf or NaN)
    a = np.empty(n_r + 1)
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
        if n_ev < log_cap:
            log_t[n_ev] = t
            log_r[n_ev] = j
            for s in range(n_s):
                log_x[n_ev, s] = x[s]
        n_ev += 1
        if status != 0:
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
    fill = -1 if status != 0 else 0
    if status == STATUS_NUMERICAL:
        k = 0
    while k < n_t:
        for s in range(n_s):
            out[k, s] = fill if status != 0 else x[s]
        k += 1
    return status, n_ev


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _run_block(reactant_idx, reactant_mult, change_idx, change_val, dep_ptr, dep_idx, law_mask,
               rates, law, x0, times, states, max_events, counts, status, events, log_t, log_r, log_x):
    """Run replicate i from ``states[i]`` into ``counts[i]``; logs go to ``log_*`` if they have room."""
    prog = _program(reactant_idx, reactant_mult, change_idx, change_val, dep_ptr, dep_idx, law_mask)
    n_r = reactant_idx.shape[0]
    for i in range(states.shape[0]):
        st, ev = _run_one(prog, n_r, rates, law, x0, times, states[i], max_events, counts[i], log_t, log_r,
                          log_x)
        status[i] = st
        events[i] = ev


def _prepare(rates, x0, times):
    return (np.ascontiguousarray(rates, dtype=np.float64),
            np.ascontiguousarray(x0, dtype=np.int64),
            np.ascontiguousarray(times, dtype=np.float64))


def simulate(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray,
             seeds: Sequence[np.random.SeedSequence], max_events: int) -> KernelResult:
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
    seeds : sequence of SeedSequence
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
    rates, x0, times = _prepare(rates, x0, times)
    states = seed_states(seeds)
    n = states.shape[0]
    counts, status, events = empty_result(n, times.shape[0], x0.shape[0])
    _run_block(*network.arrays, rates, addresses(network)[0], x0, times, states, int(max_events),
               counts, status, events, np.empty(0), np.empty(0, dtype=np.int32), np.empty((0, x0.shape[0]), dtype=np.int64))
    return KernelResult(counts, status, events)


def trace(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray,
          seed: np.random.SeedSequence, max_events: int) -> Trace:
    """Recompute one replicate with its full event log.

    Consumes the random stream exactly as ``simulate`` does, so ``result`` equals the
    replicate's row of ``simulate`` bit for bit.
    """
    rates, x0, times = _prepare(rates, x0, times)
    first = simulate(network, rates, x0, times, [seed], max_events)
    n_ev = int(first.events[0])
    log_t = np.empty(n_ev)
    log_r = np.empty(n_ev, dtype=np.int32)
    log_x = np.empty((n_ev, x0.shape[0]), dtype=np.int64)
    counts = np.empty((1, times.shape[0], x0.shape[0]), dtype=np.int32)
    status = np.empty(1, dtype=np.int8)
    events = np.empty(1, dtype=np.int64)
    _run_block(*network.arrays, rates, addresses(network)[0], x0, times, seed_states([seed]),
               int(max_events), counts, status, events, log_t, log_r, log_x)
    return Trace(log_t, log_r, log_x, KernelResult(counts, status, events))
