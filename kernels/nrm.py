"""Gibson & Bruck's next reaction method (J. Phys. Chem. A 104:1876, 2000), compiled with numba.

Every reaction j keeps a putative absolute firing time tau_j in an indexed binary min-heap, so
the next event is the heap's root and costs O(log R) to maintain instead of the direct method's
O(R) search. After reaction mu fires at time t, only the reactions in mu's row of the dependency
graph (``network.dep_ptr``/``dep_idx``) change propensity, and their random numbers are reused as
published (Gibson & Bruck 2000):

- the fired reaction draws a fresh exponential: tau_mu = t + E / a_mu_new, E ~ Exp(1);
- a dependent j != mu with a_j_old > 0 and a_j_new > 0 is rescaled:
  tau_j = (a_j_old / a_j_new)(tau_j - t) + t;
- a dependent whose propensity drops to 0 gets tau_j = +inf and keeps its unused unit-rate time
  E_j = a_j_old (tau_j - t) (the paper keeps a_j_old and tau_j - t, the same information);
- when it becomes positive again at a later time t', tau_j = t' + E_j / a_j_new. By memorylessness
  E_j is Exp(1) and independent of everything seen so far, so no new draw is needed.

A reaction whose propensity is zero at t = 0 draws its E_j at the start like every other reaction,
so the random stream is: R unit exponentials (in reaction order) at t = 0, then exactly one per
event. Each replicate draws only from its own xoshiro256+ stream (``kernels.rng``).

Sampling and stopping follow ``kernels.direct`` exactly: the state recorded at sample time t is the
state after the last event at or before t; a replicate whose propensities are all zero (every
tau_j = +inf) holds its state to the end; a replicate reaching ``max_events`` before the end stops
with status 1 and later samples -1; a negative count (or one beyond int32) is status 2 with every
sample -1, and so is an infinite or NaN propensity: a reaction whose propensity is infinite gets the
current time as its firing time, so it fires next, and the propensity of the reaction that fires is
checked once per event. Propensities are recomputed from the state (never accumulated), so nothing drifts.

Propensities are the mass-action combinations of ``kernels.propensity.propensity``, read from the same
packed program (``kernels.propensity.program``), built from a dependency graph without self-loops: the
fired reaction is always updated on its own path, so the dependents' loop needs no ``d == mu`` test.

Speed (see ``sweep.plan.bench``; 100-reaction chain): the time per event is a serial chain of a few
dependent heap updates and one sift from the root, so the heap holds firing times as the int64 bit
patterns of the doubles (an integer compare is shorter on that chain), picks the smaller child
without a branch, and the unit exponential is drawn by a ziggurat one event ahead of its use.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numba
import numpy as np

from kernels import blocks
from kernels.changes import watch_hit
from kernels.network import KernelResult, Network, STATUS_EVENT_CAP, STATUS_NUMERICAL, STATUS_STOPPED, Trace
from kernels.propensity import bits_float as _float, float_bits as _bits, program, propensity
from kernels.rng import next_words, to_open0, to_unit

if TYPE_CHECKING:
    from kernels.blocks import Seeds
    from kernels.changes import Schedule

_INT32_MAX = 2**31 - 1
_INF = np.inf

# Unsigned indices and typed constants for the same reason as in kernels.propensity: numba then
# skips the negative-index wraparound on every heap access.
_U0 = np.uint64(0)
_U1 = np.uint64(1)
_U2 = np.uint64(2)
_U3 = np.uint64(3)
_U4 = np.uint64(4)

# The heap holds firing times as the int64 bit patterns of the doubles. For non-negative doubles,
# +inf included, IEEE 754 makes the integer order the numeric order. Every firing time is >= +0.0:
# t starts at 0 and only adds non-negative terms, and the exponential sampler never returns -0.0.
_INF_BITS = np.int64(0x7FF0000000000000)  # +inf


# --- unit exponentials: the ziggurat of Marsaglia & Tsang (2000) ---------------------------------

def _ziggurat_layers(n: int = 256) -> tuple[float, np.ndarray, np.ndarray, np.ndarray]:
    """Layers of the ziggurat for f(x) = exp(-x), x >= 0 (Marsaglia & Tsang 2000, J. Stat. Softw. 5(8)).

    n layers of equal area v: the base layer is the box [0, r] x [0, f(r)] plus the tail beyond r
    (v = r f(r) + f(r), drawn as a box of width x_0 = v / f(r) = r + 1), and layer i >= 1 is the box
    [0, x_i] x [f(x_i), f(x_{i+1})] with x_1 = r and x_{i+1} = f^-1(v / x_i + f(x_i)). r is the root
    that makes the top layer close at x_n = 0, found here by bisection (r = 7.69711747... for n = 256,
    the published value).

    Returns r, the integer thresholds k_i = floor(2^53 x_{i+1} / x_i) (a 53-bit uniform j with
    j < k_i lies under the curve for sure), the widths x_i 2^-53, and f(x_i) for i = 0..n.
    """
    def build(r):
        v = (r + 1.0) * np.exp(-r)
        xs = [r + 1.0, r]
        for _ in range(n - 2):
            arg = v / xs[-1] + np.exp(-xs[-1])
            if arg >= 1.0:
                return xs, 1.0  # the layers reach f = 1 too early: r is too small
            xs.append(-np.log(arg))
        return xs, v / xs[-1] + np.exp(-xs[-1]) - 1.0
    lo, hi = 5.0, 10.0
    for _ in range(100):
        mid = 0.5 * (lo + hi)
        if build(mid)[1] > 0.0:
            lo = mid
        else:
            hi = mid
    xs, _ = build(hi)
    x = np.array(xs + [0.0])
    k = np.floor(x[1:] / x[:-1] * 2.0**53).astype(np.int64)
    return hi, k, x[:-1] * 2.0**-53, np.exp(-x)


# numba freezes global arrays into the compiled code as constants
_ZIG_R, _ZIG_K, _ZIG_W, _ZIG_F = _ziggurat_layers()
_MASK53 = np.uint64(2**53 - 1)
_U56 = np.uint64(56)


@numba.njit(inline="always", cache=True, error_model="numpy")
def _exponential(s0, s1, s2, s3):
    """One Exp(1) variate by the ziggurat; returns ``(value, s0, s1, s2, s3)``.

    One 64-bit word gives the layer (its top 8 bits, the generator's strongest) and a 53-bit uniform
    (bits 3..55; xoshiro256+'s three weak low bits are dropped). About 98.9 % of draws are accepted
    at once with no ``log``; the rest take a tail (r + Exp(1), memoryless) or wedge test and may
    draw again. The value is exact up to floating point; never -0.0.
    """
    while True:
        r, s0, s1, s2, s3 = next_words(s0, s1, s2, s3)
        i = r >> _U56
        j = np.int64((r >> _U3) & _MASK53)
        if j < _ZIG_K[i]:
            return np.float64(j) * _ZIG_W[i], s0, s1, s2, s3
        if i == _U0:
            r, s0, s1, s2, s3 = next_words(s0, s1, s2, s3)
            return _ZIG_R - np.log(to_open0(r)), s0, s1, s2, s3
        x = np.float64(j) * _ZIG_W[i]
        r, s0, s1, s2, s3 = next_words(s0, s1, s2, s3)
        f0 = _ZIG_F[i]
        if f0 + to_unit(r) * (_ZIG_F[i + _U1] - f0) < np.exp(-x):
            return x, s0, s1, s2, s3


# --- the indexed binary min-heap ----------------------------------------------------------------
# ht[i]: firing time (bits) at heap position i; hr[i]: its reaction; pos[j]: position of reaction j.

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


# --- the event loop -----------------------------------------------------------------------------

@numba.njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def _run_one(prog, n_r, rates, law, x0, times, state, max_events, out, log_t, log_r, log_x,
             x, a, unused, ht, hr, pos, w_species, w_op, w_value, w_repeat, armed, stop):
    """Simulate one replicate into ``out`` (T, S); return (status, events).

    ``state`` (uint64[4]) is this replicate's generator; it is advanced in place. ``prog`` must be
    built from a dependency graph without self-loops. The ``log_*`` arrays are None (``simulate``:
    numba then compiles the logging away) or receive event times, reactions and post-event states.
    ``x``, ``a``, ``unused``, ``ht``, ``hr``, ``pos`` are scratch (``run``); compiled without
    reference counting for the reason given in ``kernels.direct._run_one``.
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
    for j in range(n_r):
        unused[j] = 0.0  # E_j, the unit-rate time kept while a_j = 0
    for i in range(ht.shape[0]):  # 2 R + 2: padded with +inf so that every position < R has two children
        ht[i] = _INF_BITS
        hr[i] = 0
    for j in range(n_r):
        e = np.uint64(n_r + 3 * j)
        a[j] = propensity(prog[e], rates[j], np.uint64(prog[e + _U1]), np.uint64(prog[e + _U2]), x, prog,
                          law, rates)
        draw, s0, s1, s2, s3 = _exponential(s0, s1, s2, s3)
        if a[j] > 0.0:
            ht[j] = _bits(draw / a[j])
        else:
            unused[j] = draw
        hr[j] = j
        pos[j] = j
    for i in range(n_r // 2 - 1, -1, -1):  # heapify bottom-up (Floyd)
        u = np.uint64(i)
        _sift_down(ht, hr, pos, u, ht[u], hr[u])
    # The exponential of event n is drawn during event n - 1: the stream order is unchanged (one
    # draw per event, in event order) and its latency leaves the event's serial chain.
    nxt, s0, s1, s2, s3 = _exponential(s0, s1, s2, s3)
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
        fired = a[mu]  # the propensity mu fires with; infinite or NaN is a failure, checked below
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
        while q < end:  # the dependents d != mu: rescale, park or revive (Gibson & Bruck 2000)
            d = np.uint64(prog[q])
            new = propensity(prog[q + _U1], rates[d], np.uint64(prog[q + _U2]), np.uint64(prog[q + _U3]),
                             x, prog, law, rates)
            old = a[d]
            a[d] = new
            q += _U4
            if new == old:
                continue  # an unchanged propensity keeps its firing time
            if old > 0.0:
                tau = _float(ht[pos[d]])
                if new > 0.0:
                    key = (old / new) * (tau - t) + t
                else:
                    unused[d] = old * (tau - t)
                    key = np.inf
            else:
                key = t + unused[d] / new
            _update(ht, hr, pos, d, _bits(key))
        draw = nxt
        nxt, s0, s1, s2, s3 = _exponential(s0, s1, s2, s3)
        e = np.uint64(n_r) + _U3 * mu
        am = propensity(prog[e], rates[mu], np.uint64(prog[e + _U1]), np.uint64(prog[e + _U2]), x, prog,
                          law, rates)
        a[mu] = am
        if am > 0.0:
            key = t + draw / am
        else:
            unused[mu] = draw
            key = np.inf
        # mu is still the root: a dependent's new time is >= t and moves up only past a strictly
        # larger one
        _sift_down(ht, hr, pos, _U0, _bits(key), mu)
        if not fired < _INF:
            status = STATUS_NUMERICAL  # infinitely fast (or NaN): its firing time means nothing
        if log_t is not None and n_ev < log_cap:
            log_t[n_ev] = t
            log_r[n_ev] = mu
            for s in range(n_s):
                log_x[n_ev, s] = x[s]
        n_ev += 1
        if status != 0:
            break
        if n_w > 0 and watch_hit(w_species, w_op, w_value, w_repeat, armed, x):
            status = STATUS_STOPPED
            stop[0] = t
            break
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
    unused = np.empty(n_r)
    ht = np.empty(2 * n_r + 2, np.int64)
    hr = np.empty(2 * n_r + 2, np.uint64)
    pos = np.empty(n_r, np.uint64)
    for i in range(states.shape[0]):
        st, ev = _run_one(prog, n_r, rates, law, x0, times, states[i], max_events, counts[i], log_t, log_r,
                          log_x, x, a, unused, ht, hr, pos, w_species, w_op, w_value, w_repeat, armed, stop)
        status[i] = st
        events[i] = ev


# the functions between ``run`` and ``law_value``, compiled again with a model's laws inline
LAW_PATH = (propensity, _run_one, run)


def prepare(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray) -> tuple:
    """The packed program of the network without self-loops in its dependency graph, and R."""
    return program(*_without_self_loops(network).arrays), network.n_reactions


def _without_self_loops(network: Network) -> Network:
    """The network with each reaction removed from its own row of the dependency graph."""
    ptr = np.asarray(network.dep_ptr, dtype=np.int64)
    idx = np.asarray(network.dep_idx, dtype=np.int64)
    rows = np.repeat(np.arange(len(ptr) - 1), np.diff(ptr))
    keep = idx != rows
    counts = np.bincount(rows[keep], minlength=len(ptr) - 1)
    new_ptr = np.concatenate([[0], np.cumsum(counts)]).astype(np.int32)
    return network._replace(dep_ptr=new_ptr, dep_idx=idx[keep].astype(np.int32))


def simulate(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray,
             seeds: Seeds, max_events: int, changes: Schedule | None = None) -> KernelResult:
    """Simulate one replicate per seed with the next reaction method.

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
    return blocks.simulate("nrm", network, rates, x0, times, seeds, max_events, changes)


def trace(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray,
          seed: np.random.SeedSequence, max_events: int, changes: Schedule | None = None) -> Trace:
    """Recompute one replicate with its full event log.

    Consumes the random stream exactly as ``simulate`` does, so ``result`` equals the
    replicate's row of ``simulate`` bit for bit.
    """
    return blocks.trace("nrm", network, rates, x0, times, seed, max_events, changes)
