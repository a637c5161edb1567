"""Composition-rejection: an exact method whose cost per event does not grow with the network.

Slepoy, Thompson & Plimpton, "A constant-time kinetic Monte Carlo algorithm for simulation of large
biochemical reaction networks", J. Chem. Phys. 128:205101 (2008). The waiting time is the direct
method's, tau = ln(1/r1)/a0 (Gillespie 1976, 1977); the reaction is chosen in two steps:

1. **Composition.** Reactions are grouped by the binary exponent of their propensity: group e holds
   every reaction with 2^(e-1) <= a_j < 2^e. A group is chosen with probability G_e / a0, G_e the sum
   of its propensities, by a search over the groups from the largest exponent down; there are a
   few dozen groups whatever the number of reactions, and most of the mass is in the first few.
2. **Rejection.** Within the group a member is drawn uniformly and accepted with probability
   a_j / 2^e (>= 1/2, so fewer than two trials on average); a rejected draw is repeated. Together,
   reaction j is chosen with probability (G_e / a0)(a_j / G_e) = a_j / a0 exactly.

After an event only the dependents of the fired reaction (the dependency graph of Gibson & Bruck
2000, as in ``kernels.direct``) are recomputed; one whose exponent changed moves to its new group.

Layout (the paper keeps one resizable array per group; here one array holds them all). ``slots``
lists the reactions group by group, slot 0 first (propensity 0: cannot fire), then slots 1..W for
the exponents lo..hi = lo + W - 1; ``start[k]`` is where slot k begins. Each position holds two
words, the propensity's bits and (reaction | firing-block offset << 32), so a rejection trial and
the firing that follows read one record and then the block. ``rec`` holds two words per reaction,
its propensity's bits and its position: a dependent's update touches ``rec[d]`` and its position,
two lines of memory (at 10,000 reactions the event's working set is past a core's L2 cache, and
what costs is the number of distinct lines touched). Indices are unsigned, so numba adds no
negative-index wraparound (as in ``kernels.propensity``). A reaction moves from slot k to slot m by
|m - k| swaps, one across each boundary between them; a propensity changes by a small factor per
event, so that is usually one swap. The
window of W = 64 exponents (a factor 2^64 between the largest and smallest propensity it resolves)
is placed HEADROOM = 10 exponents above the largest propensity when the layout is built; a
propensity above the window rebuilds the layout (O(R), rare), one below it joins slot 1, whose
bound still holds (its acceptance is then lower, the choice still exact).

Rounding: the group sums and a0 are kept incrementally, as in ``kernels.direct``, and re-summed
exactly every max(1024, R) events (so the re-sum costs at most one addition per event); a group that
empties gets the sum 0 exactly. Uniform member indices use Lemire's multiply-and-reject (Lemire,
"Fast random integer generation in an interval", ACM TOMACS 29:3, 2019), exact for any group size.

Sampling, stopping and statuses are those of ``kernels.direct``: the state at sample time t is the
state after the last event at or before t; all propensities zero holds the state to the end; the
event cap gives status 1 and later samples -1; a negative count, a count beyond int32, or an
infinite or NaN propensity (checked whenever one is computed) gives status 2 and every sample -1.

Random stream per event: one word for the waiting time, one for the group, two per rejection trial
(plus, rarely, redraws of Lemire's index). The method is exact, so its paths differ from the
direct method's for the same seed, but its distributions do not (tests/kernels/test_cr.py).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numba
import numpy as np

from kernels import blocks
from kernels.changes import watch_hit
from kernels.network import KernelResult, Network, STATUS_EVENT_CAP, STATUS_NUMERICAL, STATUS_STOPPED, Trace
from kernels.propensity import _K_BI, _K_ZERO, _U1, _U2, _U3, bits_float, float_bits, program, propensity
from kernels.rng import next_words, to_open0, to_unit

if TYPE_CHECKING:
    from kernels.blocks import Seeds
    from kernels.changes import Schedule

WINDOW = 64  # exponents resolved by the groups (slots 1..WINDOW)
HEADROOM = 10  # exponents of room above the largest propensity when the layout is built
RESUM_MIN = 1024  # the group sums are re-summed every max(RESUM_MIN, R) events

_INT32_MAX = 2**31 - 1
_INF = np.inf
_MAX_EXPONENT = 2045  # the window's top: its bound 2^(e + 1 - 1023) must stay finite
_MASK32 = np.uint64(0xFFFFFFFF)
_U32 = np.uint64(32)
_U52 = np.uint64(52)


@numba.njit(inline="always", cache=True, error_model="numpy")
def _slot(v, lo, hi):
    """Slot of a propensity ``v``: 0 if v <= 0, else 1 + (its biased exponent - lo), at least 1;
    -1 if the exponent is above ``hi`` (the layout must be rebuilt)."""
    if not v > 0.0:
        return 0
    e = float_bits(v) >> 52
    if e > hi:
        return -1
    if e < lo:
        return 1
    return e - lo + 1


@numba.njit(inline="always", cache=True, error_model="numpy")
def _move(slots, rec, start, i, k, m):
    """Move the reaction at position ``i`` (uint64) from slot ``k`` to slot ``m``, swapping it across
    one boundary at a time; its record is written once, at its final place."""
    v = slots[_U2 * i]
    w = slots[_U2 * i + _U1]
    while k < m:  # to the last place of slot k, which then becomes the first of slot k + 1
        last = start[np.uint64(k + 1)] - _U1
        if last != i:  # (equal when slot k holds only the mover: an empty slot is crossed for free)
            _put(slots, rec, i, slots[_U2 * last], slots[_U2 * last + _U1])
        start[np.uint64(k + 1)] = last
        i = last
        k += 1
    while k > m:  # to the first place of slot k, which then becomes the last of slot k - 1
        first = start[np.uint64(k)]
        if first != i:
            _put(slots, rec, i, slots[_U2 * first], slots[_U2 * first + _U1])
        start[np.uint64(k)] = first + _U1
        i = first
        k -= 1
    _put(slots, rec, i, v, w)


@numba.njit(inline="always", cache=True, error_model="numpy")
def _put(slots, rec, i, v, w):
    """Place the reaction of slot word ``w`` (propensity bits ``v``) at position ``i``."""
    slots[_U2 * i] = v
    slots[_U2 * i + _U1] = w
    rec[_U2 * (np.uint64(w) & _MASK32) + _U1] = np.int64(i)


@numba.njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def _layout(a, prog, rec, slots, start, gsum, fill):
    """Group every reaction by its propensity ``a`` (by reaction; module docstring): fill ``rec``,
    ``slots`` and ``start``; return (lo, hi, top).

    ``top`` is the highest non-empty slot (0 if every propensity is 0).
    """
    n_r = a.shape[0]
    w = gsum.shape[0] - 1
    emax = -1
    for j in range(n_r):
        if a[j] > 0.0 and a[j] < _INF:
            emax = max(emax, float_bits(a[j]) >> 52)
    if emax < 0:
        emax = 1023  # nothing can fire: any window will do
    hi = min(emax + HEADROOM, _MAX_EXPONENT)
    lo = hi - w + 1
    for k in range(w + 1):
        fill[k] = 0
    for j in range(n_r):
        fill[max(_slot(a[j], lo, hi), 0)] += 1  # -1 (above the window) only for an infinite one: failed anyway
    start[0] = 0
    for k in range(w + 1):
        start[k + 1] = start[k] + np.uint64(fill[k])
        fill[k] = np.int64(start[k])
    for j in range(n_r):
        k = max(_slot(a[j], lo, hi), 0)
        i = fill[k]
        rec[2 * j] = float_bits(a[j])
        _put(slots, rec, np.uint64(i), float_bits(a[j]), j | (prog[j] << 32))
        fill[k] = i + 1
    top = w
    while top > 0 and start[top + 1] == start[top]:
        top -= 1
    return lo, hi, top


@numba.njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def _resum(slots, start, gsum):
    """Exact group sums from the propensities; return their total, a0."""
    a0 = 0.0
    gsum[0] = 0.0
    for k in range(1, gsum.shape[0]):
        g = 0.0
        for i in range(start[k], start[k + 1]):
            g += bits_float(slots[_U2 * i])
        gsum[k] = g
        a0 += g
    return a0


@numba.njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def _run_one(prog, n_r, rates, law, x0, times, state, max_events, out, log_t, log_r, log_x,
             x, a, rec, slots, start, gsum, fill, w_species, w_op, w_value, w_repeat, armed, stop):
    """Simulate one replicate into ``out`` (T, S); return (status, events).

    ``state`` (uint64[4]) is this replicate's generator, advanced in place; the ``log_*`` arrays are
    None or receive each event's time, reaction and post-event state. The other arrays are scratch
    (``run``); compiled without reference counting for the reason in ``kernels.direct._run_one``.
    ``a`` holds the propensities by reaction only while the layout is built; in the loop they are
    kept twice, in ``rec`` by reaction (a dependent's update reads its old value, its slot and its
    position from one record) and in ``slots`` by position (a rejection trial reads one record, which
    also names the reaction's firing block).
    """
    n_s = x0.shape[0]
    n_t = times.shape[0]
    n_w = w_species.shape[0]
    log_cap = log_t.shape[0] if log_t is not None else 0
    s0 = state[0]
    s1 = state[1]
    s2 = state[2]
    s3 = state[3]
    for s in range(n_s):
        x[s] = x0[s]
    status = 0
    for j in range(n_r):
        e = np.uint64(n_r + 3 * j)
        a[j] = propensity(prog[e], rates[j], np.uint64(prog[e + _U1]), np.uint64(prog[e + _U2]), x, prog,
                          law, rates)
        if not a[j] < _INF:
            status = STATUS_NUMERICAL  # infinite or NaN from the start
    lo, hi, top = _layout(a, prog, rec, slots, start, gsum, fill)
    a0 = _resum(slots, start, gsum)
    resum_every = max(RESUM_MIN, n_r)
    since = 0
    t = 0.0
    k = 0
    t_sample = times[0] if n_t > 0 else np.inf
    n_ev = 0
    while status == 0:
        if not (a0 > 0.0 and a0 < _INF) or top == 0:
            a0 = _resum(slots, start, gsum)  # decide on the exact sums
            if not a0 < _INF:
                status = STATUS_NUMERICAL
                break
            if a0 <= 0.0 or top == 0:
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
        # composition: the group, from the largest exponent down
        while True:
            r, s0, s1, s2, s3 = next_words(s0, s1, s2, s3)
            target = to_unit(r) * a0
            g = np.uint64(top)
            acc = gsum[g]
            while acc <= target and g > _U1:
                g -= _U1
                acc += gsum[g]
            if acc > target:
                break
            # the running a0 drifted above the groups' sum: re-sum exactly and draw again (falling
            # to slot 1 instead could pick far-too-small propensities and stall the rejection)
            a0 = _resum(slots, start, gsum)
            since = 0
        while start[g + _U1] == start[g]:
            g += _U1  # rounding left the search on an empty slot: the next one up is not (top is not)
        # rejection: a uniform member, accepted with probability a_j / 2^e (Slepoy et al. 2008)
        first = start[g]
        size = start[g + _U1] - first
        bound = bits_float((lo + np.int64(g)) << 52)  # 2^e for the slot's exponent e = lo + g - 1
        while True:
            r, s0, s1, s2, s3 = next_words(s0, s1, s2, s3)
            m = (r >> _U32) * size  # Lemire (2019): an exact uniform index in 0..size-1
            if (m & _MASK32) < size:
                floor = (np.uint64(2**32) - size) % size
                while (m & _MASK32) < floor:
                    r, s0, s1, s2, s3 = next_words(s0, s1, s2, s3)
                    m = (r >> _U32) * size
            i = first + (m >> _U32)
            r, s0, s1, s2, s3 = next_words(s0, s1, s2, s3)
            if to_unit(r) * bound < bits_float(slots[_U2 * i]):
                break
        w = np.uint64(slots[_U2 * i + _U1])
        j = np.int64(w & _MASK32)
        # fire j (its block: module docstring), then update its dependents' propensities and groups
        b = w >> _U32
        head = np.uint64(prog[b])
        q = b + _U1
        end = q + (head & _MASK32)
        while q < end:
            c = prog[q]
            s = np.uint64(c) & _MASK32
            v = x[s] + (c >> 32)
            x[s] = v
            if v < 0:
                status = STATUS_NUMERICAL
            q += _U1
        end = q + _U3 * (head >> _U32)
        rebuild = False
        while q < end:
            dk = prog[q]
            kind = dk >> 32
            pp = np.uint64(prog[q + _U1])
            c = bits_float(prog[q + _U2])
            if kind <= _K_BI:
                # 0 -> ..., A -> ... and A + B -> ... as one product c * x_p1 * x_p2 with a factor 1.0 for
                # a missing reactant (exact): no branch on the kind, which a network mixing them mispredicts
                f1 = np.float64(x[pp & _MASK32])
                f2 = np.float64(x[pp >> _U32])
                new = c * (f1 if kind != _K_ZERO else 1.0) * (f2 if kind == _K_BI else 1.0)
            else:
                new = propensity(kind, c, pp & _MASK32, pp >> _U32, x, prog, law, rates)
            q += _U3
            e = _U2 * (np.uint64(dk) & _MASK32)
            old = bits_float(rec[e])
            if new == old:
                continue
            if not new < _INF:
                status = STATUS_NUMERICAL
                break
            rec[e] = float_bits(new)
            pos = np.uint64(rec[e + _U1])
            slots[_U2 * pos] = float_bits(new)
            a0 += new - old
            if rebuild:
                continue
            m_new = _slot(new, lo, hi)
            if m_new < 0:
                rebuild = True  # above the window: regroup everything after this event
                continue
            k_old = _slot(old, lo, hi)  # the slot a propensity is kept in is a function of its value
            if k_old > 0:
                gsum[np.uint64(k_old)] -= old
            if m_new > 0:
                gsum[np.uint64(m_new)] += new
            if m_new != k_old:
                _move(slots, rec, start, pos, k_old, m_new)
                if k_old > 0 and start[np.uint64(k_old + 1)] == start[np.uint64(k_old)]:
                    gsum[np.uint64(k_old)] = 0.0  # an empty group weighs nothing, whatever the rounding
                if m_new > top:
                    top = m_new
                while top > 0 and start[np.uint64(top + 1)] == start[np.uint64(top)]:
                    top -= 1
        t = t_new
        if log_t is not None and n_ev < log_cap:
            log_t[n_ev] = t
            log_r[n_ev] = j
            for s in range(n_s):
                log_x[n_ev, s] = x[s]
        n_ev += 1
        since += 1
        if status != 0:
            break
        if n_w > 0 and watch_hit(w_species, w_op, w_value, w_repeat, armed, x):
            status = STATUS_STOPPED
            stop[0] = t
            break
        if rebuild:
            for d in range(n_r):
                a[d] = bits_float(rec[2 * d])
            lo, hi, top = _layout(a, prog, rec, slots, start, gsum, fill)
            a0 = _resum(slots, start, gsum)
            since = 0
        elif since >= resum_every:
            a0 = _resum(slots, start, gsum)  # bound the rounding drift of the running sums
            since = 0
    state[0] = s0
    state[1] = s1
    state[2] = s2
    state[3] = s3
    if status == STATUS_NUMERICAL:
        k = 0
    while k < n_t:
        for s in range(n_s):
            out[k, s] = x[s] if status == 0 or status == STATUS_STOPPED else -1
        k += 1
    return status, n_ev


@numba.njit(cache=True, nogil=True, error_model="numpy")
def run(model, rates, law, x0, times, states, max_events, counts, status, events, aux, log_t, log_r, log_x):
    """Run replicate i from ``states[i]`` into ``counts[i]`` (``kernels.blocks``'s loop protocol)."""
    prog, n_r, watch = model
    w_species, w_op, w_value, w_repeat, armed, stop = watch
    x = np.empty_like(x0)
    a = np.empty(n_r)
    rec = np.empty(2 * n_r, np.int64)
    slots = np.empty(2 * n_r, np.int64)
    start = np.empty(WINDOW + 2, np.uint64)
    gsum = np.empty(WINDOW + 1)
    fill = np.empty(WINDOW + 1, np.int64)
    for i in range(states.shape[0]):
        st, ev = _run_one(prog, n_r, rates, law, x0, times, states[i], max_events, counts[i], log_t, log_r,
                          log_x, x, a, rec, slots, start, gsum, fill, w_species, w_op, w_value, w_repeat,
                          armed, stop)
        status[i] = st
        events[i] = ev


# the functions between ``run`` and ``law_value``, compiled again with a model's laws inline
LAW_PATH = (propensity, _run_one, run)


def prepare(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray) -> tuple:
    """The packed program with cr's firing blocks (``_firing_blocks``) and the number of reactions."""
    prog = program(*network.arrays)
    if prog.shape[0] >= 2**31:
        raise ValueError("the network is too large for composition-rejection's 32-bit fields")
    return _firing_blocks(prog, network.n_reactions, rates), network.n_reactions


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _firing_blocks(prog, n_r, rates):
    """``kernels.propensity.program``'s array with every firing block packed for cr.

    The head (block offsets, own propensities, reactant lists) is kept; the blocks are rewritten
    after it, 32-bit fields in pairs: (n_change | n_dep << 32), n_change (species | change << 32),
    then per dependent (reaction | kind << 32), (p1 | p2 << 32) and its rate constant's bits. With the
    rate beside its dependent and two fields to a word, an update reads three sequential words where
    it read four and a separate ``rates[d]``.
    """
    head = prog[0] if n_r > 0 else 0
    size = head
    for j in range(n_r):
        b = prog[j]
        size += 1 + prog[b] + 3 * prog[b + 1]
    out = np.empty(size, np.int64)
    out[:head] = prog[:head]
    q = head
    for j in range(n_r):
        b = prog[j]
        n_change = prog[b]
        n_dep = prog[b + 1]
        out[j] = q
        out[q] = n_change | (n_dep << 32)
        q += 1
        p = b + 2
        for _ in range(n_change):
            out[q] = prog[p] | (prog[p + 1] << 32)
            q += 1
            p += 2
        for _ in range(n_dep):
            d = prog[p]
            out[q] = d | (prog[p + 1] << 32)
            out[q + 1] = prog[p + 2] | (prog[p + 3] << 32)
            out[q + 2] = float_bits(rates[d])
            q += 3
            p += 4
    return out


def simulate(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray,
             seeds: Seeds, max_events: int, changes: Schedule | None = None) -> KernelResult:
    """Simulate one replicate per seed by composition-rejection (Slepoy, Thompson & Plimpton 2008).

    Parameters
    ----------
    network : Network
        The compiled reaction network.
    rates : float64 (R,) or (R + P,)
        Stochastic rate constants c_j, followed by the parameters the custom laws read.
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
    return blocks.simulate("cr", network, rates, x0, times, seeds, max_events, changes)


def trace(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray,
          seed: np.random.SeedSequence, max_events: int, changes: Schedule | None = None) -> Trace:
    """Recompute one replicate with its full event log (the same stream as ``simulate``)."""
    return blocks.trace("cr", network, rates, x0, times, seed, max_events, changes)
