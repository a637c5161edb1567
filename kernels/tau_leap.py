"""Explicit tau-leaping with the step-size selection of Cao, Gillespie & Petzold (2006).

Cao, Gillespie & Petzold, "Efficient step size selection for the tau-leaping simulation method",
J. Chem. Phys. 124:044109 (2006), with the critical reactions of Cao, Gillespie & Petzold,
"Avoiding negative populations in explicit Poisson tau-leaping", J. Chem. Phys. 123:054104 (2005).
One step from state x at time t:

1. Propensities a_j (mass-action combinations, ``kernels.propensity.propensity``); a0 = sum a_j. If
   a0 = 0 the state holds to the end.
2. Critical reactions: those with a_j > 0 that could exhaust a reactant within ``N_CRITICAL`` = 10
   firings, L_j = min over species i with net change v_ij < 0 of floor(x_i / |v_ij|) < 10.
3. Leap size from the non-critical reactions J_nc, over every reactant species i:
   tau' = min_i { max(eps x_i / g_i, 1) / |mu_i|, max(eps x_i / g_i, 1)^2 / sigma2_i },
   mu_i = sum_{j in J_nc} v_ij a_j, sigma2_i = sum_{j in J_nc} v_ij^2 a_j, which bounds the relative
   change of every propensity by about eps (``DEFAULT_EPSILON`` = 0.03). g_i comes from the highest
   order of reaction HOR(i) in which species i is a reactant (``_g``): 1, 2 or 3, and for reactions
   needing two or three molecules of i, 2 + 1/(x_i - 1), (3/2)(2 + 1/(x_i - 1)) or
   3 + 1/(x_i - 1) + 2/(x_i - 2).
4. If tau' < ``SSA_FACTOR`` / a0 (10 / a0), leaping would gain little: take up to ``SSA_STEPS`` = 100
   exact direct-method steps (Gillespie 1977) instead, then go back to 1. When every reaction that
   can fire is critical (tau' = inf), one exact step is taken: this is what the leap of step 5 does
   in that case, since it fires exactly one critical reaction.
5. tau'' ~ Exp(a0c), a0c the critical propensities' sum. The leap is tau = min(tau', tau'', time to the
   next sample); every non-critical reaction fires Poisson(a_j tau) times, and one critical reaction
   (chosen with probability a_j / a0c) fires once if tau = tau''. At most one critical firing per leap.
6. If a count would go negative, the leap is rejected, tau' is halved and the step goes back to 4
   (new tau'', new Poisson numbers). No count is ever negative.

Leaps end at sample times (the state at a sample time is the state after the last step at or before
it, as for the exact methods); this shortens at most one leap per sample and keeps the time course right.

Poisson numbers come from each replicate's own xoshiro256+ stream: inversion by sequential search
for means below 10 and Hörmann's PTRS transformed rejection above (W. Hörmann, "The transformed
rejection method for generating Poisson random variables", Insurance: Mathematics and Economics
12:39-45, 1993).

``events`` counts **steps**: accepted leaps plus exact steps (rejected leaps are not counted), and
``max_events`` caps them. Status 1 means the step cap was reached (later samples -1); status 2 a count
beyond int32 or a total propensity that is infinite or NaN (all samples -1). The error-control parameter eps cannot come through the shared
``simulate`` signature: it is the keyword ``epsilon`` (default ``DEFAULT_EPSILON``).

Tau-leaping is approximate: see tests/kernels/test_tau_leap.py for the measured accuracy. Means are
within 1 % at high copy numbers. The stationary variance of a species whose own decay limits the leap
is inflated by about 1 / (1 - g tau / 2), the forward-Euler factor: for immigration-death at mean
1000, +29 % predicted and +26 % measured at eps = 0.03, +2.8 % at eps = 0.01. At low copy numbers the
method takes exact steps (no measurable bias, no speed-up).
"""

from __future__ import annotations

from math import lgamma
from typing import TYPE_CHECKING

import numba
import numpy as np

from kernels import blocks
from kernels.changes import watch_hit
from kernels.network import KernelResult, Network, STATUS_EVENT_CAP, STATUS_NUMERICAL, STATUS_STOPPED
from kernels.propensity import program, propensity
from kernels.rng import uniform, uniform_open0

if TYPE_CHECKING:
    from kernels.blocks import Seeds
    from kernels.changes import Schedule

DEFAULT_EPSILON = 0.03
N_CRITICAL = 10  # n_c of Cao, Gillespie & Petzold (2005)
SSA_FACTOR = 10.0  # leap only if tau' >= SSA_FACTOR / a0
SSA_STEPS = 100  # exact steps taken when leaping does not pay

_INT32_MAX = 2**31 - 1
_PTRS_MIN = 10.0  # PTRS is valid for means >= 10 (Hörmann 1993)
_NO_LIMIT = 2**62  # L_j of a reaction that consumes nothing


# --- Poisson random numbers ---------------------------------------------------------------------

@numba.njit(cache=True, nogil=True, error_model="numpy")
def _poisson_inversion(mean, st):
    """Poisson(mean), mean < 10: inversion by sequential search of the cdf (one uniform)."""
    u = uniform(st)
    p = np.exp(-mean)
    cdf = p
    k = 0
    while u > cdf and p > 0.0:  # p underflows only deep in the tail: stop there, never loop forever
        k += 1
        p *= mean / k
        cdf += p
    return k


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _poisson_ptrs(mean, st):
    """Poisson(mean), mean >= 10: PTRS, transformed rejection with squeeze (Hörmann 1993).

    A hat built from the transformed density of k = floor((2a/us + b) U + mean + 0.43), U uniform on
    (-1/2, 1/2), us = 1/2 - |U|; the constants a, b, alpha, v_r are the paper's. The expected number
    of uniform pairs per variate is about 1.15 for every mean >= 10.
    """
    smu = np.sqrt(mean)
    b = 0.931 + 2.53 * smu
    a = -0.059 + 0.02483 * b
    inv_alpha = 1.1239 + 1.1328 / (b - 3.4)
    v_r = 0.9277 - 3.6224 / (b - 2.0)
    log_mean = np.log(mean)
    while True:
        u = uniform(st) - 0.5
        v = uniform_open0(st)
        us = 0.5 - abs(u)
        k = np.floor((2.0 * a / us + b) * u + mean + 0.43)
        if us >= 0.07 and v <= v_r:
            return np.int64(k)
        if k < 0.0 or (us < 0.013 and v > us):
            continue
        if np.log(v) + np.log(inv_alpha) - np.log(a / (us * us) + b) <= -mean + k * log_mean - lgamma(k + 1.0):
            return np.int64(k)


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _poisson(mean, st):
    """Poisson(mean) from the xoshiro256+ state ``st``; 0 without a draw when mean <= 0."""
    if mean <= 0.0:
        return 0
    if mean < _PTRS_MIN:
        return _poisson_inversion(mean, st)
    return _poisson_ptrs(mean, st)


# --- Cao, Gillespie & Petzold's step size -------------------------------------------------------

@numba.njit(cache=True, nogil=True)
def _reactant_orders(reactant_idx, reactant_mult, n_s):
    """Per species: HOR(i), the highest total order of the reactions it is a reactant of (0 if
    none), and the most molecules of i that any reaction of that order needs."""
    hor = np.zeros(n_s, np.int64)
    need = np.zeros(n_s, np.int64)
    for j in range(reactant_idx.shape[0]):
        order = 0
        for k in range(reactant_idx.shape[1]):
            if reactant_idx[j, k] >= 0:
                order += reactant_mult[j, k]
        for k in range(reactant_idx.shape[1]):
            s = reactant_idx[j, k]
            if s < 0:
                continue
            m = reactant_mult[j, k]
            if order > hor[s]:
                hor[s] = order
                need[s] = m
            elif order == hor[s] and m > need[s]:
                need[s] = m
    return hor, need


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _g(hor, need, x):
    """g_i of Cao, Gillespie & Petzold (2006): the factor by which a relative change eps/g_i of x_i
    bounds the relative change of the propensities of HOR(i).

    The general form (n/m)(m + sum_{k=1}^{m-1} k/(x - k)), n = HOR(i), m = molecules of i needed, is
    the paper's table for orders 1 to 3: 1; 2 or 2 + 1/(x-1); 3, (3/2)(2 + 1/(x-1)) or
    3 + 1/(x-1) + 2/(x-2); and extends it to higher orders the same way. With x < m the reaction
    cannot fire and the bound is taken as 1 molecule (g = inf), as the table's poles give.
    """
    if x < need:
        return np.inf
    total = np.float64(need)
    for k in range(1, need):
        total += k / (x - k)
    return hor / np.float64(need) * total


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _leap_size(x, a, critical, change_idx, change_val, hor, need, eps, mu, sigma2):
    """tau' over the non-critical reactions; +inf when none of them can fire."""
    mu[:] = 0.0
    sigma2[:] = 0.0
    any_active = False
    for j in range(a.shape[0]):
        if a[j] <= 0.0 or critical[j]:
            continue
        any_active = True
        for l in range(change_idx.shape[1]):
            s = change_idx[j, l]
            if s < 0:
                break
            v = np.float64(change_val[j, l])
            mu[s] += v * a[j]
            sigma2[s] += v * v * a[j]
    if not any_active:
        return np.inf
    tau = np.inf
    for s in range(x.shape[0]):
        if hor[s] == 0:
            continue  # not a reactant: no propensity depends on it
        bound = max(eps * x[s] / _g(hor[s], need[s], x[s]), 1.0)
        if mu[s] != 0.0:
            tau = min(tau, bound / abs(mu[s]))
        if sigma2[s] > 0.0:
            tau = min(tau, bound * bound / sigma2[s])
    return tau


# --- the step loop ------------------------------------------------------------------------------

@numba.njit(cache=True, nogil=True, error_model="numpy")
def _propensities(prog, rates, law, x, a):
    n_r = a.shape[0]
    a0 = 0.0
    for j in range(n_r):
        e = n_r + 3 * j
        a[j] = propensity(prog[e], rates[j], np.uint64(prog[e + 1]), np.uint64(prog[e + 2]), x, prog, law,
                          rates)
        a0 += a[j]
    return a0


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _record(x, out, k, upto_t, times, strict):
    """Write x into every sample time before ``upto_t`` (at or before it unless ``strict``)."""
    n_t = times.shape[0]
    status = 0
    while k < n_t and (times[k] < upto_t or (not strict and times[k] == upto_t)):
        for s in range(x.shape[0]):
            v = x[s]
            if v > _INT32_MAX:
                status = STATUS_NUMERICAL
            out[k, s] = v
        k += 1
    return k, status


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _fire(x, j, n, change_idx, change_val):
    for l in range(change_idx.shape[1]):
        s = change_idx[j, l]
        if s < 0:
            break
        x[s] += n * change_val[j, l]


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _exact_steps(prog, rates, law, change_idx, change_val, x, a, times, st, out, t, k, steps, max_steps, n_steps,
                 w_species, w_op, w_value, w_repeat, armed, stop):
    """Up to ``n_steps`` direct-method steps (Gillespie 1977); the same sampling as kernels.direct.

    Returns (t, k, steps, status, finished): finished when every sample is written or the state is
    absorbing (then the caller fills the rest).
    """
    n_t = times.shape[0]
    for _ in range(n_steps):
        a0 = _propensities(prog, rates, law, x, a)
        if not a0 < np.inf:
            return t, k, steps, STATUS_NUMERICAL, True  # infinite or NaN: no step can be drawn
        if a0 <= 0.0:
            return t, k, steps, 0, True
        t_new = t - np.log(uniform_open0(st)) / a0
        k, status = _record(x, out, k, t_new, times, True)
        if status != 0 or k == n_t:
            return t, k, steps, status, True
        if steps >= max_steps:
            return t, k, steps, STATUS_EVENT_CAP, True
        target = uniform(st) * a0
        j = 0
        acc = a[0]
        while acc <= target and j < a.shape[0] - 1:
            j += 1
            acc += a[j]
        while a[j] <= 0.0:  # rounding put the target past the last reaction that can fire
            j -= 1
        _fire(x, j, 1, change_idx, change_val)
        t = t_new
        steps += 1
        if w_species.shape[0] > 0 and watch_hit(w_species, w_op, w_value, w_repeat, armed, x):
            stop[0] = t
            return t, k, steps, STATUS_STOPPED, True
    return t, k, steps, 0, False


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _critical(x, a, change_idx, change_val, n_c, critical):
    """Mark the critical reactions; return (sum of critical a_j, sum of non-critical a_j)."""
    a0c = 0.0
    a0n = 0.0
    for j in range(a.shape[0]):
        critical[j] = False
        if a[j] <= 0.0:
            continue
        firings = _NO_LIMIT
        for l in range(change_idx.shape[1]):
            s = change_idx[j, l]
            if s < 0:
                break
            v = change_val[j, l]
            if v < 0:
                firings = min(firings, x[s] // (-v))
        if firings < n_c:
            critical[j] = True
            a0c += a[j]
        else:
            a0n += a[j]
    return a0c, a0n


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _run_one(prog, rates, law, change_idx, change_val, hor, need, x0, times, st, max_steps, eps, out,
             w_species, w_op, w_value, w_repeat, armed, stop):
    """Simulate one replicate into ``out`` (T, S); return (status, steps).

    ``w_species`` ... ``stop``: the state-triggered events, as in ``kernels.direct._run_one``, checked
    after every leap and every exact step.
    """
    n_r = change_idx.shape[0]
    n_s = x0.shape[0]
    n_t = times.shape[0]
    x = x0.copy()
    trial = np.empty(n_s, np.int64)
    a = np.empty(n_r)
    critical = np.zeros(n_r, np.bool_)
    mu = np.empty(n_s)
    sigma2 = np.empty(n_s)
    t = 0.0
    k = 0
    steps = 0
    status = 0
    while True:
        k, status = _record(x, out, k, t, times, False)
        if status != 0 or k == n_t:
            break
        a0 = _propensities(prog, rates, law, x, a)
        if not a0 < np.inf:
            status = STATUS_NUMERICAL  # infinite or NaN: no leap (and no Poisson number) means anything
            break
        if a0 <= 0.0:
            break  # absorbing: hold the state to the end
        a0c, a0n = _critical(x, a, change_idx, change_val, N_CRITICAL, critical)
        if a0n <= 0.0:
            n_exact = 1  # only critical reactions can fire: the leap would be one exact step
        else:
            n_exact = 0
            tau1 = _leap_size(x, a, critical, change_idx, change_val, hor, need, eps, mu, sigma2)
            while True:  # leap attempts from this state (Cao, Gillespie & Petzold 2006, steps 3-6)
                if tau1 < SSA_FACTOR / a0:
                    n_exact = SSA_STEPS
                    break
                if steps >= max_steps:
                    status = STATUS_EVENT_CAP
                    break
                tau2 = -np.log(uniform_open0(st)) / a0c if a0c > 0.0 else np.inf
                horizon = times[k] - t
                tau = min(tau1, tau2, horizon)
                trial[:] = x
                for j in range(n_r):
                    if a[j] > 0.0 and not critical[j]:
                        _fire(trial, j, _poisson(a[j] * tau, st), change_idx, change_val)
                if tau2 < tau1 and tau2 < horizon:  # tau = tau'': one critical reaction fires
                    target = uniform(st) * a0c
                    jc = -1
                    acc = 0.0
                    for j in range(n_r):
                        if critical[j]:
                            jc = j
                            acc += a[j]
                            if acc > target:
                                break
                    _fire(trial, jc, 1, change_idx, change_val)
                if trial.min() < 0:
                    tau1 = tau / 2.0  # rejected: halve and try again (never a negative count)
                    continue
                x[:] = trial
                t = times[k] if tau == horizon else t + tau  # end exactly on the sample time
                steps += 1
                if w_species.shape[0] > 0 and watch_hit(w_species, w_op, w_value, w_repeat, armed, x):
                    status = STATUS_STOPPED
                    stop[0] = t
                break
            if status != 0:
                break
        if n_exact > 0:
            t, k, steps, status, finished = _exact_steps(prog, rates, law, change_idx, change_val, x, a, times, st,
                                                         out, t, k, steps, max_steps, n_exact, w_species, w_op,
                                                         w_value, w_repeat, armed, stop)
            if finished:
                break
    if status == STATUS_NUMERICAL:
        k = 0
    while k < n_t:
        for s in range(n_s):
            out[k, s] = x[s] if status == 0 or status == STATUS_STOPPED else -1
        k += 1
    return status, steps


@numba.njit(cache=True, nogil=True, error_model="numpy")
def run(model, rates, law, x0, times, states, max_events, counts, status, events, aux, log_t, log_r, log_x):
    """Run replicate i from ``states[i]`` into ``counts[i]`` (``kernels.blocks``'s loop protocol; no logs)."""
    prog, change_idx, change_val, hor, need, eps, watch = model
    w_species, w_op, w_value, w_repeat, armed, stop = watch
    for i in range(states.shape[0]):
        st, ev = _run_one(prog, rates, law, change_idx, change_val, hor, need, x0, times, states[i], max_events, eps,
                          counts[i], w_species, w_op, w_value, w_repeat, armed, stop)
        status[i] = st
        events[i] = ev


# the functions between ``run`` and ``law_value``, compiled again with a model's laws inline
LAW_PATH = (propensity, _propensities, _exact_steps, _run_one, run)


def prepare(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray, *,
            epsilon: float = DEFAULT_EPSILON) -> tuple:
    """The packed program, the net changes, HOR(i) and the molecules it needs, and epsilon.

    Raises
    ------
    ValueError
        If ``epsilon`` is not positive and finite.
    """
    if not (np.isfinite(epsilon) and epsilon > 0.0):
        raise ValueError(f"epsilon = {epsilon!r}: must be a positive number (typically 0.01 to 0.05)")
    hor, need = _reactant_orders(network.reactant_idx, network.reactant_mult, x0.shape[0])
    return program(*network.arrays), network.change_idx, network.change_val, hor, need, float(epsilon)


def simulate(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray,
             seeds: Seeds, max_events: int, changes: Schedule | None = None, *,
             epsilon: float = DEFAULT_EPSILON) -> KernelResult:
    """Simulate one replicate per seed by tau-leaping (Cao, Gillespie & Petzold 2006).

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
        Cap on steps (leaps plus exact steps) per replicate.
    epsilon : float
        Error-control parameter: the bound on the relative change of any propensity in one leap.

    Returns
    -------
    KernelResult
        counts (n, T, S) int32, status (n,) int8, events (n,) int64: steps taken, not reactions fired.

    Raises
    ------
    ValueError
        If ``epsilon`` is not positive and finite.

    Example
    -------
    >>> res = simulate(net, np.array([1000.0, 1.0]), np.array([0]), np.linspace(0, 10, 11),
    ...                [np.random.SeedSequence(1, spawn_key=(0, 0))], 10_000, epsilon=0.03)
    """
    return blocks.simulate("tau_leap", network, rates, x0, times, seeds, max_events, changes, epsilon=epsilon)
