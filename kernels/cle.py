"""Chemical Langevin equation by Euler–Maruyama, compiled with numba.

The chemical Langevin equation (Gillespie 2000, "The chemical Langevin equation",
J. Chem. Phys. 113:297) approximates the jump process when every propensity is large::

    dX = sum_j nu_j a_j(X) dt + sum_j nu_j sqrt(a_j(X)) dW_j

with one independent Wiener process per reaction. It is integrated with the Euler–Maruyama
scheme (Kloeden & Platen 1992, "Numerical Solution of Stochastic Differential Equations",
Springer; weak order 1 in the step h)::

    X <- X + sum_j nu_j (a_j(X) h + sqrt(a_j(X) h) Z_j),    Z_j ~ N(0, 1) independent

Choices, in the order a user meets them:

- **State.** Real-valued, so ``counts`` are float64 (the registry's ``counts``). A sample at time t is
  the state after the step that ends exactly at t.
- **Step.** Each interval between consecutive sample times (the first starts at t = 0) is cut
  into ``ceil(span / dt)`` equal steps, so the step is at most ``dt`` and every sample falls on
  a step. ``dt=None`` uses the mean positive sample spacing divided by
  ``DEFAULT_STEPS_PER_INTERVAL``. That default knows nothing about the network: the step must be
  small against the fastest reaction time scale (h * |d a_j / d x| << 1) for the scheme to be
  accurate and stable, so pass ``dt`` explicitly when the samples are coarse.
- **Propensities on real states.** The mass-action forms counting combinations
  (Gillespie 1977), c * prod_s C(x_s, m_s) with C(x, m) = prod_{i<m} (x - i) / (i + 1), are
  extended to reals with every factor (x - i) clipped at 0. So a_j >= 0 always; a_j = 0
  whenever x_s <= m_s - 1 for a reactant (no 3A reaction with less than two molecules of A,
  where the raw cubic would be positive again); at whole numbers a_j is the exact propensity.
  For m <= 2 this is max(polynomial, 0), e.g. max(c A(A-1)/2, 0).
- **Negative excursions: clipped.** After each step, every component that went below 0 is set
  to 0, and each such (step, species) clip is counted (``simulate_with_clips`` returns the
  counts; ``simulate`` drops them). Clipping adds probability mass at 0 and biases the mean
  upwards at low copy numbers: the CLE is an approximation for large propensities
  (Gillespie 2000), not a method for molecules counted in ones. Measured: immigration–death
  with exact law Poisson(1) gives mean 1.18 and variance 0.81, at dt = 0.005 and 0.001 alike
  (``tests/kernels/test_cle.py::test_low_copy_bias``); at mean 1000 there is no clip at all.
- **Absorbing states.** When every propensity is 0 the drift and the noise both vanish, so the
  state can never change: it is held to the end without further steps (as the direct method
  does when a0 = 0). With all rates 0 a replicate takes no step at all.
- **Gaussian draws.** The polar method (Marsaglia & Bray 1964, "A convenient method for
  generating normal variables", SIAM Review 6:260) on the replicate's own xoshiro256+ stream
  (``kernels.rng``): each accepted pair of uniforms gives two independent N(0, 1) draws. Each
  step draws one normal per reaction whether or not it can fire, so the draws a replicate
  consumes depend only on its own path, never on the other replicates of its block.
- **Outputs.** ``events`` is the number of steps taken. ``max_events`` caps the steps: a
  replicate that needs more stops with status 1 and its later samples are -1. A state that
  becomes non-finite (overflow, NaN), or a total propensity that is infinite, gives status 2
  and all its samples -1, as in the direct method.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numba
import numpy as np

from kernels import METHODS, blocks
from kernels.changes import watch_hit
from kernels.network import STATUS_EVENT_CAP, STATUS_NUMERICAL, STATUS_STOPPED, KernelResult, Network
from kernels.propensity import law_value
from kernels.rng import next_words, seed_states, to_unit

if TYPE_CHECKING:
    from kernels.blocks import Seeds
    from kernels.changes import Schedule

# the registry's dtype, as the attribute sweep.store and sweep.plan read until they read the record
COUNTS_DTYPE = METHODS["cle"].counts_dtype
DEFAULT_STEPS_PER_INTERVAL = 20  # default dt = mean positive sample spacing / 20

_CEIL_SLACK = 1.0 - 1e-12  # 0.5 / 0.025 = 20.000000000000004 must give 20 steps, not 21


@numba.njit(inline="always", cache=True)
def _normal_pair(s0, s1, s2, s3):
    """Two independent N(0, 1) draws by the polar method (Marsaglia & Bray 1964).

    (u, v) uniform on [-1, 1)^2 is accepted inside the unit disc minus its centre (probability
    pi/4); then u f and v f with f = sqrt(-2 ln q / q), q = u^2 + v^2, are independent standard
    normals. No sine or cosine: about half the cost of Box–Muller here.
    Returns ``(z1, z2, s0, s1, s2, s3)``.
    """
    while True:
        r, s0, s1, s2, s3 = next_words(s0, s1, s2, s3)
        u = 2.0 * to_unit(r) - 1.0
        r, s0, s1, s2, s3 = next_words(s0, s1, s2, s3)
        v = 2.0 * to_unit(r) - 1.0
        q = u * u + v * v
        if q < 1.0 and q > 0.0:
            break
    f = np.sqrt(-2.0 * np.log(q) / q)
    return u * f, v * f, s0, s1, s2, s3


@numba.njit(cache=True, nogil=True)
def _fill_normals(state, out):
    """Fill ``out`` with N(0, 1) draws from ``state`` (uint64[4], advanced in place); for tests."""
    s0, s1, s2, s3 = state[0], state[1], state[2], state[3]
    i = 0
    while i < out.shape[0]:
        z1, z2, s0, s1, s2, s3 = _normal_pair(s0, s1, s2, s3)
        out[i] = z1
        if i + 1 < out.shape[0]:
            out[i + 1] = z2
        i += 2
    state[0], state[1], state[2], state[3] = s0, s1, s2, s3


@numba.njit(inline="always", cache=True, error_model="numpy")
def _propensity(j, scaled, reactant_idx, reactant_mult, x):
    """c * prod_s C(x_s, m_s) on a real state, every factor (x_s - i) clipped at 0.

    ``scaled`` is c / prod_s m_s! (``_scaled_rates``), so the step's serial chain has no division.
    """
    a = scaled
    for k in range(reactant_idx.shape[1]):
        s = reactant_idx[j, k]
        if s < 0:
            break
        n = x[s]
        for i in range(reactant_mult[j, k]):
            f = n - i
            if not f > 0.0:  # also stops a NaN state from giving a NaN propensity here
                return 0.0
            a *= f
    return a


def _scaled_rates(network: Network, rates: np.ndarray) -> np.ndarray:
    """c_j / prod_s m_s! for each reaction j (m_s its reactant multiplicities)."""
    factorials = np.array([math.prod(math.factorial(int(m)) for m in row) for row in network.reactant_mult],
                          dtype=np.float64)
    return np.ascontiguousarray(rates, dtype=np.float64) / factorials


@numba.njit(inline="always", cache=True, error_model="numpy")
def _step(reactant_idx, reactant_mult, change_idx, change_val, scaled, x, a, h, s0, s1, s2, s3,
          spare, have_spare):
    """One Euler–Maruyama step of the CLE (Gillespie 2000) on ``x`` in place.

    ``a`` holds the propensities at the start of the step. Normals come in polar-method pairs;
    the second of a pair is carried in ``spare`` to the next reaction (or step).
    Returns ``(s0, s1, s2, s3, spare, have_spare)``.
    """
    for j in range(scaled.shape[0]):
        if have_spare:
            z = spare
            have_spare = False
        else:
            z, spare, s0, s1, s2, s3 = _normal_pair(s0, s1, s2, s3)
            have_spare = True
        mean = a[j] * h
        w = mean + np.sqrt(mean) * z
        for l in range(change_idx.shape[1]):
            s = change_idx[j, l]
            if s < 0:
                break
            x[s] += change_val[j, l] * w
    return s0, s1, s2, s3, spare, have_spare


@numba.njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def _run_one(reactant_idx, reactant_mult, change_idx, change_val, scaled, law_mask, rates, law, x0, times,
             dt, state, max_events, out, x, a, w_species, w_op, w_value, w_repeat, armed, stop):
    """Simulate one replicate into ``out`` (T, S); return (status, steps, clips).

    ``w_species`` ... ``stop``: the state-triggered events, as in ``kernels.direct._run_one``, checked
    after every step.

    ``x`` (S,) and ``a`` (R,) are scratch; compiled without reference counting for the reason given
    in ``kernels.direct._run_one``.
    """
    n_r = scaled.shape[0]
    n_s = x0.shape[0]
    n_t = times.shape[0]
    s0, s1, s2, s3 = state[0], state[1], state[2], state[3]
    spare = 0.0
    have_spare = False
    for s in range(n_s):
        x[s] = x0[s]
    t = 0.0
    n_ev = 0
    clips = 0
    status = 0
    absorbed = False
    k = 0
    while k < n_t:
        span = times[k] - t
        n_steps = 0
        if span > 0.0 and not absorbed:
            n_steps = max(1, int(np.ceil(span / dt * _CEIL_SLACK)))
        h = span / n_steps if n_steps > 0 else 0.0
        for i_step in range(n_steps):
            a0 = 0.0
            for j in range(n_r):
                if law is not None and law_mask[j]:
                    a[j] = law_value(law, j, x, rates)
                else:
                    a[j] = _propensity(j, scaled[j], reactant_idx, reactant_mult, x)
                a0 += a[j]
            if a0 == 0.0:
                absorbed = True  # no drift and no noise: the state can never change again
                break
            if not a0 < np.inf:
                status = STATUS_NUMERICAL  # an infinite propensity: the step means nothing
                break
            if n_ev >= max_events:
                status = STATUS_EVENT_CAP
                break
            s0, s1, s2, s3, spare, have_spare = _step(reactant_idx, reactant_mult, change_idx, change_val,
                                                      scaled, x, a, h, s0, s1, s2, s3, spare, have_spare)
            n_ev += 1
            for s in range(n_s):
                v = x[s]
                if not np.isfinite(v):
                    status = STATUS_NUMERICAL  # checked first: -inf must not be clipped away
                elif v < 0.0:
                    x[s] = 0.0  # the clipping policy of the module docstring
                    clips += 1
            if status != 0:
                break
            if w_species.shape[0] > 0 and watch_hit(w_species, w_op, w_value, w_repeat, armed, x):
                status = STATUS_STOPPED
                stop[0] = t + (i_step + 1) * h
                break
        if status != 0:
            break
        t = times[k]
        for s in range(n_s):
            out[k, s] = x[s]
        k += 1
    state[0], state[1], state[2], state[3] = s0, s1, s2, s3
    if status == STATUS_NUMERICAL:
        k = 0
    while k < n_t:
        for s in range(n_s):
            out[k, s] = x[s] if status == STATUS_STOPPED else -1.0
        k += 1
    return status, n_ev, clips


@numba.njit(cache=True, nogil=True, error_model="numpy")
def run(model, rates, law, x0, times, states, max_events, counts, status, events, aux, log_t, log_r, log_x):
    """Run replicate i from ``states[i]`` into ``counts[i]``, its clips into ``aux[i]`` (no logs)."""
    reactant_idx, reactant_mult, change_idx, change_val, scaled, law_mask, dt, watch = model
    w_species, w_op, w_value, w_repeat, armed, stop = watch
    x = np.empty_like(x0)
    a = np.empty(scaled.shape[0])
    for i in range(states.shape[0]):
        st, ev, cl = _run_one(reactant_idx, reactant_mult, change_idx, change_val, scaled, law_mask, rates, law,
                              x0, times, dt, states[i], max_events, counts[i], x, a, w_species, w_op, w_value,
                              w_repeat, armed, stop)
        status[i] = st
        events[i] = ev
        aux[i] = cl


# the functions between ``run`` and ``law_value``, compiled again with a model's laws inline
LAW_PATH = (_run_one, run)


def prepare(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray, *,
            dt: float | None = None) -> tuple:
    """The network's arrays, the scaled rate constants and the step.

    Raises
    ------
    ValueError
        If ``dt`` is given and is not a finite number > 0.
    """
    if dt is None:
        dt = default_dt(times)
    elif not (np.isfinite(dt) and dt > 0.0):
        raise ValueError(f"dt must be a finite number > 0, got {dt!r}")
    return (network.reactant_idx, network.reactant_mult, network.change_idx, network.change_val,
            _scaled_rates(network, rates[:network.n_reactions]), network.law_mask, float(dt))


def default_dt(times: np.ndarray) -> float:
    """Mean positive sample spacing (the first interval starts at 0) / ``DEFAULT_STEPS_PER_INTERVAL``.

    Returns 1.0 when no interval is positive (then no step is taken anyway).
    """
    times = np.asarray(times, dtype=np.float64)
    spans = np.diff(times, prepend=0.0)
    n_pos = int(np.count_nonzero(spans > 0.0))
    if n_pos == 0:
        return 1.0
    return float(times[-1]) / (DEFAULT_STEPS_PER_INTERVAL * n_pos)


def simulate_with_clips(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray,
                        seeds: Seeds, max_events: int, changes: Schedule | None = None, *,
                        dt: float | None = None) -> tuple[KernelResult, np.ndarray]:
    """``simulate``, plus the number of negative components clipped to 0 per replicate (int64 (n,)).

    Raises
    ------
    ValueError
        If ``dt`` is given and is not a finite number > 0.
    """
    return blocks.run("cle", network, rates, x0, times, seeds, max_events, changes=changes, dt=dt)


def simulate(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray,
             seeds: Seeds, max_events: int, changes: Schedule | None = None, *,
             dt: float | None = None) -> KernelResult:
    """Simulate one chemical Langevin path per seed (Euler–Maruyama, Gillespie 2000).

    Parameters
    ----------
    network : Network
        The compiled reaction network.
    rates : float64 (R,)
        Stochastic rate constants c_j (per molecule combination, as for the direct method).
    x0 : (S,)
        Initial state (molecule numbers; converted to float64).
    times : float64 (T,)
        Non-decreasing sample times, all >= 0.
    seeds : sequence of SeedSequence, or Streams
        One seed per replicate; replicate i draws only from ``seeds[i]``.
    max_events : int
        Cap on the number of time steps per replicate.
    dt : float, optional
        Largest time step; default ``default_dt(times)``.

    Returns
    -------
    KernelResult
        counts (n, T, S) float64, status (n,) int8, events (n,) int64 = steps taken.

    Example
    -------
    >>> res = simulate(net, np.array([100.0, 0.1]), np.array([1000]), np.linspace(0, 60, 61),
    ...                [np.random.SeedSequence(1, spawn_key=(0, 0))], 10_000)
    """
    return simulate_with_clips(network, rates, x0, times, seeds, max_events, changes, dt=dt)[0]


def normal_draws(seed: np.random.SeedSequence, n: int) -> np.ndarray:
    """The first ``n`` normals of the stream a replicate with ``seed`` would use (for tests)."""
    out = np.empty(int(n))
    _fill_normals(seed_states([seed])[0], out)
    return out
