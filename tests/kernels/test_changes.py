"""Interventions in the kernels (``kernels.changes``): timed changes and state-triggered events.

Distribution checks against exact references computed here from the master equation:
- immigration-death with the immigration rate switched at t0 stays Poisson with the piecewise
  solution of the linear moment equation as its mean (Jahnke & Huisinga 2007: monomolecular
  networks keep Poisson laws under time-dependent rates);
- binomial thinning at fixed times (dilution, repeated halving at division) against a finite state
  projection with the thinning applied as a linear map on the distribution (Munsky & Khammash 2006);
- a state-triggered event against an FSP whose state space carries whether the event has fired.
Each chi-square is tested at alpha = 0.001 with fixed seeds, so none flakes.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats
from scipy.linalg import expm

import kernels
from kernels import changes
from kernels.changes import ADD, GE, KEEP, RATE, SET, SUB, schedule
from kernels.rng import Streams
from support.exact import pooled_chisquare
from support.kernel_conformance import build

ALPHA = 1e-3
EXACT = ("direct", "nrm", "cr")
N = 3000
ROOT = 20_261_203


def _case(k=10.0, g=0.5, x0=0):
    return build({"A": x0}, {"birth": ("0 -> A", k), "death": ("A -> 0", g)})


def _run(method, case, times, sched, n=N, start=0, **options):
    return kernels.get(method).simulate(case.net, case.rates, case.x0, np.asarray(times, float),
                                        Streams(ROOT, 0, start, start + n), 10**7, sched, **options)


def _birth_death_generator(k: float, g: float, n_max: int) -> np.ndarray:
    """dp/dt = Q p on 0..n_max for immigration k, death g per molecule (births leave the top cut)."""
    q = np.zeros((n_max + 1, n_max + 1))
    for n in range(n_max + 1):
        q[n, n] -= k + g * n
        if n < n_max:
            q[n + 1, n] += k
        if n > 0:
            q[n - 1, n] += g * n
    return q


def _thin(p: np.ndarray, f: float) -> np.ndarray:
    """The distribution after each molecule survives with probability f (a linear map on p)."""
    n = np.arange(p.shape[0])
    return scipy.stats.binom.pmf(n[:, None], n[None, :], f) @ p


@pytest.mark.parametrize("method", EXACT)
def test_switched_immigration_stays_poisson(method):
    """Rate 10 -> 40 at t0 = 3 (g = 0.5): Poisson with m(t) from the moment equation dm/dt = k(t) - g m."""
    k1, k2, g, t0 = 10.0, 40.0, 0.5, 3.0
    times = [2.0, 3.0, 4.5, 8.0]
    res = _run(method, _case(k1, g), times, schedule([(t0, [(RATE, 0, k2)])]))
    assert (res.status == 0).all()
    m_t0 = k1 / g * (1 - np.exp(-g * t0))
    for i, t in enumerate(times):
        if t < t0:
            mean = k1 / g * (1 - np.exp(-g * t))
        else:
            mean = m_t0 * np.exp(-g * (t - t0)) + k2 / g * (1 - np.exp(-g * (t - t0)))
        pmf = scipy.stats.poisson.pmf(np.arange(200), mean)
        assert pooled_chisquare(res.counts[:, i, 0], pmf).pvalue > ALPHA, (method, t)


def test_ode_follows_the_piecewise_moment_equation():
    """The rate equation of a linear network is the CME's mean (Jahnke & Huisinga 2007)."""
    k1, k2, g, t0 = 10.0, 40.0, 0.5, 3.0
    times = np.array([1.0, 3.0, 4.0, 10.0])
    res = _run("ode", _case(k1, g), times, schedule([(t0, [(RATE, 0, k2)])]), n=1)
    m_t0 = k1 / g * (1 - np.exp(-g * t0))
    want = np.where(times < t0, k1 / g * (1 - np.exp(-g * times)),
                    m_t0 * np.exp(-g * (times - t0)) + k2 / g * (1 - np.exp(-g * (times - t0))))
    np.testing.assert_allclose(res.counts[0, :, 0], want, rtol=1e-6)


@pytest.mark.parametrize("method", EXACT)
def test_repeated_halving_matches_fsp(method):
    """Division every 4 time units from t = 4 (each molecule kept with probability 1/2), sampled at
    the division instants (the state just after) and between them; FSP with the binomial map."""
    k, g, f = 20.0, 0.1, 0.5
    times = [4.0, 6.0, 8.0, 11.0]
    sched = schedule([(t, [(KEEP, 0, f)]) for t in (4.0, 8.0, 12.0)])
    res = _run(method, _case(k, g), times, sched)
    q = _birth_death_generator(k, g, 250)
    p = np.zeros(251)
    p[0] = 1.0
    t_prev = 0.0
    for i, t in enumerate(times):
        p = expm(q * (t - t_prev)) @ p
        if t in (4.0, 8.0):
            p = _thin(p, f)
        t_prev = t
        assert pooled_chisquare(res.counts[:, i, 0], p).pvalue > ALPHA, (method, t)


@pytest.mark.parametrize("method", EXACT)
@pytest.mark.parametrize("repeat", [False, True])
def test_state_triggered_event_matches_fsp(method, repeat):
    """When A >= 15: once, switch immigration off; each time, remove 10 molecules.

    FSP: once, the state is (count, fired) and a birth from 14 enters the fired copy with no
    births; each time, a birth from 14 lands on 5 (the event applies at the jump, and its
    condition is false again at once, so it re-arms)."""
    k, g, thr, t = 8.0, 0.2, 15, 6.0
    ops = [(SUB, 0, 10.0)] if repeat else [(RATE, 0, 0.0)]
    sched = schedule(watches=[(0, GE, float(thr), repeat, ops)])
    res = _run(method, _case(k, g), [1.0, t], sched)
    assert (res.status == 0).all()
    n_max = 60
    size = 2 * (n_max + 1)
    q = np.zeros((size, size))  # index n (not fired) and n_max + 1 + n (fired)
    for n in range(n_max + 1):
        for fired in (0, 1):
            i = n + fired * (n_max + 1)
            birth = k if not fired else 0.0
            if birth and n < n_max:
                if n + 1 >= thr and not fired:
                    j = (n + 1 - 10) if repeat else (n + 1) + (n_max + 1)
                else:
                    j = n + 1 + fired * (n_max + 1)
                q[j, i] += birth
                q[i, i] -= birth
            if n > 0:
                q[i - 1, i] += g * n
                q[i, i] -= g * n
    p0 = np.zeros(size)
    p0[0] = 1.0
    p = expm(q * t) @ p0
    pmf = p[:n_max + 1] + p[n_max + 1:]
    assert pooled_chisquare(res.counts[:, 1, 0], pmf).pvalue > ALPHA
    if repeat:
        assert res.counts[:, :, 0].max() < thr


@pytest.mark.parametrize("method", EXACT + ("tau_leap", "cle"))
def test_operations_at_an_instant(method):
    """A model nothing changes: the sample at the instant is the state just after the change."""
    case = build({"A": 7, "B": 0}, {"b_decay": ("B -> 0", 0.0)})
    sched = schedule([(2.0, [(SET, 0, 100.0), (ADD, 1, 5.0), (SUB, 0, 30.0)]), (3.0, [(SUB, 1, 9.0)])])
    res = _run(method, case, [0.0, 1.999, 2.0, 2.5, 3.0], sched, n=4)
    want = [[7, 0], [7, 0], [70, 5], [70, 5], [70, 0]]
    np.testing.assert_array_equal(res.counts[0], np.array(want, dtype=res.counts.dtype))
    assert (res.counts == res.counts[:1]).all()


@pytest.mark.parametrize("method", EXACT + ("tau_leap", "cle"))
def test_bytes_do_not_depend_on_the_block(method):
    """Replicate r's stream is its own: splitting a block changes nothing, with changes and events."""
    case = _case(6.0, 0.3)
    sched = schedule([(2.0, [(KEEP, 0, 0.5)]), (5.0, [(RATE, 0, 12.0)])],
                     watches=[(0, GE, 25.0, True, [(SUB, 0, 5.0)])])
    times = np.linspace(0, 8, 9)
    whole = _run(method, case, times, sched, n=40)
    parts = [_run(method, case, times, sched, n=20, start=s) for s in (0, 20)]
    for field in ("counts", "status", "events"):
        np.testing.assert_array_equal(getattr(whole, field), np.concatenate([getattr(p, field) for p in parts]))


@pytest.mark.parametrize("method", EXACT)
def test_trace_reproduces_simulate_with_changes(method):
    case = _case(6.0, 0.3)
    sched = schedule([(2.0, [(KEEP, 0, 0.5)])], watches=[(0, GE, 20.0, False, [(RATE, 0, 1.0)])])
    times = np.linspace(0, 8, 9)
    row = _run(method, case, times, sched, n=1)
    trace = kernels.get(method).trace(case.net, case.rates, case.x0, times,
                                      np.random.SeedSequence(ROOT, spawn_key=(0, 0)), 10**7, sched)
    np.testing.assert_array_equal(trace.result.counts, row.counts)
    assert np.all(np.diff(trace.times) >= 0) and trace.times[-1] <= times[-1]


def test_ode_state_event_is_located():
    """dA/dt = k - g A from 0 crosses A = 15 at t* = -ln(1 - 15 g / k) / g; there k -> 0, so A decays
    as 15 exp(-g (t - t*)) (the rate equation, solved by hand)."""
    k, g = 8.0, 0.2
    sched = schedule(watches=[(0, GE, 15.0, False, [(RATE, 0, 0.0)])])
    times = np.array([1.0, 6.0, 10.0])
    res = _run("ode", _case(k, g), times, sched, n=1)
    t_star = -np.log(1 - 15 * g / k) / g
    want = np.where(times < t_star, k / g * (1 - np.exp(-g * times)), 15 * np.exp(-g * (times - t_star)))
    np.testing.assert_allclose(res.counts[0, :, 0], want, rtol=1e-5)


def test_event_cap_counts_across_segments():
    """The cap is on the whole run: a run that reaches it after a change stops with status 1."""
    res = _run("direct", _case(50.0, 0.1), [1.0, 5.0, 9.0], schedule([(2.0, [(RATE, 0, 60.0)])]), n=3)
    capped = kernels.get("direct").simulate(_case(50.0, 0.1).net, _case(50.0, 0.1).rates, _case().x0,
                                            np.array([1.0, 5.0, 9.0]), Streams(ROOT, 0, 0, 3), 200,
                                            schedule([(2.0, [(RATE, 0, 60.0)])]))
    assert (res.status == 0).all() and (capped.status == 1).all()
    assert (capped.events == 200).all() and (capped.counts[:, -1] == -1).all()


def test_schedule_merges_equal_times_in_order():
    s = schedule([(5.0, [(SET, 0, 1.0)]), (1.0, [(ADD, 0, 2.0)]), (5.0, [(SUB, 0, 3.0)])])
    assert s.times.tolist() == [1.0, 5.0] and s.ptr.tolist() == [0, 1, 3]
    assert s.kind.tolist() == [ADD, SET, SUB]
    assert changes.schedule().n_watch == 0


def test_ode_event_before_the_first_sample():
    """Two events fire before the first positive sample time: A = t up to 1, then 2 (t - 1) + 1 up to
    3 (at t = 2), then 0.5 (t - 2) + 3 (the rate equation dA/dt = k, solved by hand)."""
    case = build({"A": 0}, {"make": ("0 -> A", 1.0)})
    sched = schedule(watches=[(0, GE, 1.0, False, [(RATE, 0, 2.0)]), (0, GE, 3.0, False, [(RATE, 0, 0.5)])])
    res = _run("ode", case, [0.0, 10.0], sched, n=1)
    assert res.status[0] == 0
    np.testing.assert_allclose(res.counts[0, :, 0], [0.0, 3.0 + 0.5 * 8.0], rtol=1e-6)
