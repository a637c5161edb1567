"""Gibson & Bruck's next reaction method (J. Phys. Chem. A 104:1876, 2000), compiled with numba.

Every reaction j keeps a putative absolute firing time tau_j in an indexed binary min-heap, so
the next event is the heap's root and costs O(log R) to maintain instead of the direct method's
O(R) search. After reaction mu fires at time t, only the reactions in mu's row of the dependency
graph (``network.dep_ptr``/``dep_idx``) change propensity, and their random numbers are reused as
published (Gibson & Bruck 2000):

- the fired reaction draws a fresh exponential: tau_mu = t + E / a_mu_new, E ~ Exp(1);
- a dependent j != mu with a_j_old > 0 and a_j_new > 0 is rescaled:
  tau_j = (a_j_old / a_j_new)(tau_j - t) + t;
- a dependent whose propensity drops to 0 gets tau_j = +inf, and keeps its unused unit-rate time
  E_j = a_j_old (tau_j - t) (the paper keeps a_j_old and tau_j - t, which is the same information);
- when it becomes positive again at time t', tau_j = t' + E_j / a_j_new. By memorylessness E_j
  is Exp(1) and independent of everything else seen so far, so this is exact.

A reaction whose propensity is zero at t = 0 gets its E_j drawn at the start like every other
reaction, so the random stream is: R unit exponentials (reaction order) at t = 0, then exactly one
per event. Each replicate draws only from its own xoshiro256+ stream (``kernels.rng``).

Sampling and stopping follow ``kernels.direct`` exactly: the state recorded at sample time t is the
state after the last event at or before t; a replicate whose propensities are all zero (every
tau_j = inf) holds its state to the end; a replicate reaching ``max_events`` before the end stops
with status 1 and later samples -1; a negative count (or one beyond int32) is status 2 with every
sample -1. Propensities are recomputed from the state for every dependent (never accumulated), so
there is no rounding drift to correct.

Propensities are the mass-action combinations counted by ``kernels.direct.propensity``, read from
the same packed program (``kernels.direct._program``).
"""

from __future__ import annotations

from typing import Sequence

import numba
import numpy as np
from llvmlite import ir
from numba import types
from numba.extending import intrinsic

from kernels.direct import _program, _prepare, propensity
from kernels.network import STATUS_EVENT_CAP, STATUS_NUMERICAL, KernelResult, Network, Trace
from kernels.rng import next_words, seed_states, to_open0

_INT32_MAX = 2**31 - 1

# Unsigned indices and typed constants for the same reason as in kernels.direct: numba then
# skips the negative-index wraparound on every heap access.
_U0 = np.uint64(0)
_U1 = np.uint64(1)
_U2 = np.uint64(2)
_U3 = np.uint64(3)
_U4 = np.uint64(4)

# The heap holds firing times as the int64 bit patterns of the doubles. For non-negative doubles,
# +inf included, IEEE 754 makes the integer order the numeric order, and an integer compare on the
# sift's serial chain (load, compare, pick the child) is several cycles shorter than a float one.
# Every firing time is >= 0: t starts at 0 and only ever adds non-negative terms.
_INF_BITS = np.int64(0x7FF0000000000000)  # +inf


@intrinsic
def _bits(typingctx, value):
    """The bit pattern of a float64 as an int64 (a register move; no memory round trip)."""
    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], ir.IntType(64))
    return types.int64(types.float64), codegen


@intrinsic
def _float(typingctx, value):
    """The float64 whose bit pattern is the given int64 (inverse of ``_bits``)."""
    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], ir.DoubleType())
    return types.float64(types.int64), codegen


@numba.njit(inline="always", cache=True, error_model="numpy")
def _sift_up(ht, hr, pos, i, key, r):
    """Move the hole at heap position ``i`` up until ``key`` fits; put (key, r) there."""
    while i > _U0:
        p = (i - _U1) >> _U1
        if not key < ht[p]:
            break
        ht[i] = ht[p]
        q = hr[p]
        hr[i] = q
        pos[q] = i
        i = p
    ht[i] = key
    hr[i] = r
    pos[r] = i


@numba.njit(inline="always", cache=True, error_model="numpy")
def _sift_down(ht, hr, pos, i, key, r):
    """Move the hole at heap position ``i`` down until ``key`` fits; put (key, r) there.

    The heap arrays are padded with +inf past the last reaction, so every position < R has two
    children and no bound test is needed: a +inf child never compares below a key.
    """
    while True:
        c = _U2 * i + _U1
        left = ht[c]
        right = ht[c + _U1]
        smaller = right < left
        c += np.uint64(smaller)  # the smaller child, without a branch to mispredict
        v = right if smaller else left
        if not v < key:
            break
        ht[i] = v
        q = hr[c]
        hr[i] = q
        pos[q] = i
        i = c
    ht[i] = key
    hr[i] = r
    pos[r] = i


@numba.njit(inline="always", cache=True, error_model="numpy")
def _update(ht, hr, pos, r, key):
    """Give reaction ``r`` the new firing time ``key`` and restore the heap order."""
    i = pos[r]
    if i > _U0 and key < ht[(i - _U1) >> _U1]:
        _sift_up(ht, hr, pos, i, key, r)
    else:
        _sift_down(ht, hr, pos, i, key, r)


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _run_one(prog, rates, x0, times, state, max_events, out, log_t, log_r, log_x):
    """Simulate one replicate into ``out`` (T, S); return (status, events).

    ``state`` (uint64[4]) is this replicate's generator; it is advanced in place. When
    ``log_t`` has room, event times, reactions and post-event states are logged.
    """
    n_r = rates.shape[0]
    n_s = x0.shape[0]
    n_t = times.shape[0]
    log_cap = log_t.shape[0]
    s0 = state[0]
    s1 = state[1]
    s2 = state[2]
    s3 = state[3]
    x = x0.copy()
    a = np.empty(n_r)
    unused = np.zeros(n_r)  # E_j, the unit-rate time kept by a reaction whose propensity is 0
    # heap of (time, reaction) pairs; padded with +inf so that every node has two children
    size = 2 * n_r + 2
    ht = np.full(size, _INF_BITS)
    hr = np.zeros(size, np.uint64)
    pos = np.empty(n_r, np.uint64)
    for j in range(n_r):
        e = np.uint64(n_r + 3 * j)
        a[j] = propensity(prog[e], rates[j], np.uint64(prog[e + _U1]), np.uint64(prog[e + _U2]), x, prog)
        r, s0, s1, s2, s3 = next_words(s0, s1, s2, s3)
        draw = -np.log(to_open0(r))
        if a[j] > 0.0:
            ht[j] = _bits(draw / a[j])
        else:
            unused[j] = draw
        hr[j] = j
        pos[j] = j
    for i in range(n_r // 2 - 1, -1, -1):  # heapify bottom-up (Floyd)
        u = np.uint64(i)
        _sift_down(ht, hr, pos, u, ht[u], hr[u])
    t_sample = times[0] if n_t > 0 else np.inf
    k = 0
    n_ev = 0
    status = 0
    while True:
        t = _float(ht[0])  # +inf once every propensity is zero: the state then holds to the end
        while t_sample < t:
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
        mu = hr[0]
        b = np.uint64(prog[mu])
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
                             x, prog)
            old = a[d]
            a[d] = new
            q += _U4
            if d == mu or new == old:
                continue  # the fired reaction is redrawn below; an unchanged rate keeps its time
            if old > 0.0:
                tau = _float(ht[pos[d]])
                if new > 0.0:
                    key = (old / new) * (tau - t) + t  # rescaled, not redrawn (Gibson & Bruck 2000)
                else:
                    unused[d] = old * (tau - t)
                    key = np.inf
            else:
                key = t + unused[d] / new  # was 0, now positive: spend the kept unit-rate time
            _update(ht, hr, pos, d, _bits(key))
        r, s0, s1, s2, s3 = next_words(s0, s1, s2, s3)
        draw = -np.log(to_open0(r))
        am = a[mu]
        if am > 0.0:
            key = t + draw / am
        else:
            unused[mu] = draw
            key = np.inf
        _update(ht, hr, pos, mu, _bits(key))
        if n_ev < log_cap:
            log_t[n_ev] = t
            log_r[n_ev] = mu
            for s in range(n_s):
                log_x[n_ev, s] = x[s]
        n_ev += 1
        if status != 0:
            break
    state[0] = s0
    state[1] = s1
    state[2] = s2
    state[3] = s3
    if status == STATUS_NUMERICAL:
        k = 0
    while k < n_t:
        for s in range(n_s):
            out[k, s] = -1 if status != 0 else x[s]
        k += 1
    return status, n_ev


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _run_block(reactant_idx, reactant_mult, change_idx, change_val, dep_ptr, dep_idx,
               rates, x0, times, states, max_events, counts, status, events, log_t, log_r, log_x):
    """Run replicate i from ``states[i]`` into ``counts[i]``; logs go to ``log_*`` if they have room."""
    prog = _program(reactant_idx, reactant_mult, change_idx, change_val, dep_ptr, dep_idx)
    for i in range(states.shape[0]):
        st, ev = _run_one(prog, rates, x0, times, states[i], max_events, counts[i], log_t, log_r, log_x)
        status[i] = st
        events[i] = ev


def simulate(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray,
             seeds: Sequence[np.random.SeedSequence], max_events: int) -> KernelResult:
    """Simulate one replicate per seed with the next reaction method.

    Parameters
    ----------
    network : Network
        The compiled reaction network.
    rates : float64 (R,)
        Stochastic rate constants c_j (per-molecule-combination).
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
    counts = np.empty((n, times.shape[0], x0.shape[0]), dtype=np.int32)
    status = np.empty(n, dtype=np.int8)
    events = np.empty(n, dtype=np.int64)
    _run_block(*network, rates, x0, times, states, int(max_events), counts, status, events,
               np.empty(0), np.empty(0, dtype=np.int32), np.empty((0, x0.shape[0]), dtype=np.int64))
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
    _run_block(*network, rates, x0, times, seed_states([seed]), int(max_events), counts, status, events,
               log_t, log_r, log_x)
    return Trace(log_t, log_r, log_x, KernelResult(counts, status, events))
