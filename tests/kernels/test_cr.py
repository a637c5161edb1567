"""Composition-rejection: the shared conformance tests plus exact-distribution checks.

Slepoy, Thompson & Plimpton (2008), "A constant-time kinetic Monte Carlo algorithm for simulation
of large biochemical reaction networks", J. Chem. Phys. 128:205101. The method is exact, so every
check compares against an exact reference: a closed-form distribution, a finite state projection
(Munsky & Khammash 2006; ``reference.fsp``) or the exact mean of a linear network. Seeds are fixed,
so each check gives the same answer on every run; each states its significance level (ALPHA =
0.001 per goodness-of-fit check, Bonferroni-divided where one check makes many comparisons).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg
import scipy.special
import scipy.stats
from support.kernel_conformance import Case, KernelConformance, build, immigration_death, mixed_network, seeds
from support.exact import fsp, marginal, mass_action, pooled_chisquare

import kernels.cr
from sweep.model import compile_network, initial_counts, parse_model, rate_constants

ALPHA = 0.001
N_REP = 4000
CAP = 10_000_000  # bounds the runtime of a broken kernel


def _simulate(kernel, case, times, root, n=N_REP, cap=CAP):
    res = kernel.simulate(case.net, case.rates, case.x0, np.asarray(times, dtype=float), seeds(n, root=root), cap)
    assert (res.status == 0).all()
    return res


def _table_case(table):
    model = parse_model(table, "<test>")
    values = model.parameter_values
    return Case(compile_network(model), rate_constants(model, values), initial_counts(model, values))


class TestCompositionRejection(KernelConformance):
    method = "cr"

    def test_cap_reached_by_absorbing_path_is_not_a_stop(self, kernel):
        case = build({"A": 3}, {"decay": ("A -> 0", 1.0)})
        res = self.run(kernel, case, np.linspace(0.0, 50.0, 11), seeds(20), max_events=3)
        assert (res.status == 0).all() and (res.events == 3).all()

    def test_first_event_wait_and_choice(self, kernel):
        """The first event waits Exp(a0) and is reaction j with probability a_j/a0 (Gillespie 1977,
        J. Phys. Chem. 81:2340), whatever group j's propensity falls in. On the mixed network (every
        reaction order; C -> A + B starts at zero): KS on the wait, chi-square on the choice,
        alpha = 0.001 each."""
        case = mixed_network()
        a_, b_, c_ = case.x0
        comb = scipy.special.comb
        a = case.rates * np.array([1, a_, comb(a_, 2), a_ * b_, c_, comb(b_, 3), b_])
        n = 4000
        taus, first = np.empty(n), np.empty(n, dtype=np.int64)
        for r, seed in enumerate(seeds(n, root=31)):
            tr = kernel.trace(case.net, case.rates, case.x0, np.array([0.0, 1e3]), seed, 1)
            taus[r], first[r] = tr.times[0], tr.reactions[0]
        assert scipy.stats.kstest(taus, scipy.stats.expon(scale=1.0 / a.sum()).cdf).pvalue > ALPHA
        observed = np.bincount(first, minlength=len(a))
        assert (observed[a == 0] == 0).all()
        assert scipy.stats.chisquare(observed[a > 0], n * a[a > 0] / a.sum()).pvalue > ALPHA

    def test_choice_across_many_groups(self, kernel):
        """Twelve independent decays whose propensities span 2^-60 .. 2^+40 (far more than one
        group, and the smallest below the window of 64 exponents, so they share slot 1): the
        first reaction is j with probability a_j/a0 (Gillespie 1977). Chi-square over the
        reactions expected to fire at least 5 times; the rest must be (nearly) never chosen.
        Alpha = 0.001."""
        exps = np.array([40, 39, 38, 38, 37, 36, 30, 20, 0, -20, -40, -60], dtype=float)
        reactions = {f"d{i}": (f"X{i} -> 0", 2.0 ** e) for i, e in enumerate(exps)}
        case = build({f"X{i}": 1 for i in range(len(exps))}, reactions)
        a = 2.0 ** exps
        n = 20_000
        first = np.empty(n, dtype=np.int64)
        for r, seed in enumerate(seeds(n, root=32)):
            first[r] = kernel.trace(case.net, case.rates, case.x0, np.array([0.0, 1.0]), seed, 1).reactions[0]
        expected = n * a / a.sum()
        observed = np.bincount(first, minlength=len(a))
        big = expected >= 5
        assert observed[~big].sum() <= 5
        rest = expected[big] * observed[big].sum() / expected[big].sum()
        assert scipy.stats.chisquare(observed[big], rest).pvalue > ALPHA

    def test_immigration_death_is_poisson(self, kernel):
        """0 -> A at k = 5, A -> 0 at g = 0.5: stationary A ~ Poisson(k/g = 10) (common practice; the
        M/M/infinity queue). Sampled at t = 30 (15 relaxation times from A = 0). Chi-square,
        alpha = 0.001."""
        res = _simulate(kernel, immigration_death(), [0.0, 30.0], root=33)
        pmf = scipy.stats.poisson.pmf(np.arange(40), 10.0)
        assert pooled_chisquare(res.counts[:, 1, 0], pmf).pvalue > ALPHA

    def test_enzyme_matches_fsp(self, kernel):
        """E + S <-> C -> E + P with E0 = 3, S0 = 15: S and P at t = 1 and 4 equal the exact FSP
        solution (Munsky & Khammash 2006; closed state space, so exact). Chi-square, alpha = 0.001
        for each species and time."""
        e0, s0, c1, c2, c3 = 3, 15, 0.5, 1.0, 0.8
        case = build({"E": e0, "S": s0, "C": 0, "P": 0},
                     {"bind": ("E + S -> C", c1), "unbind": ("C -> E + S", c2), "cat": ("C -> E + P", c3)})
        times = np.array([0.0, 1.0, 4.0])
        res = _simulate(kernel, case, times, root=34)
        reactions = [(mass_action(c1, {0: 1, 1: 1}), (-1, -1, 1, 0)), (mass_action(c2, {2: 1}), (1, 1, -1, 0)),
                     (mass_action(c3, {2: 1}), (1, 0, -1, 1))]
        for i, t in enumerate(times[1:], start=1):
            states, probs = fsp((e0, s0, 0, 0), reactions, t)
            for species in (1, 3):
                pmf = marginal(states, probs, species)
                assert pooled_chisquare(res.counts[:, i, species], pmf).pvalue > ALPHA, (species, t)

    def test_yule_growth_regroups(self, kernel):
        """A -> 2A at rate 1 from one molecule (the Yule process, Yule 1925): A(t) is geometric,
        P(A = n) = p (1 - p)^(n - 1) with p = exp(-t). At t = log(3000) the propensity has grown by
        a factor ~3000 > 2^10, past the headroom the groups were laid out with, so every replicate
        rebuilds its layout on the way; the law must still hold. Chi-square, alpha = 0.001."""
        t = np.log(3000.0)
        case = build({"A": 1}, {"split": ("A -> 2 A", 1.0)})
        res = _simulate(kernel, case, [0.0, t], root=35, n=3000)
        p = np.exp(-t)
        # ten bins of about equal probability: k_m = the smallest k with P(A <= k) >= m/10
        inner = np.unique(np.ceil(np.log1p(-np.arange(1, 10) / 10) / np.log1p(-p)).astype(np.int64))
        cdf = 1.0 - (1.0 - p) ** np.concatenate([[0], inner])  # P(A <= k)
        probs = np.diff(np.concatenate([cdf, [1.0]]))
        observed = np.bincount(np.searchsorted(inner, res.counts[:, 1, 0], side="left"), minlength=len(probs))
        assert scipy.stats.chisquare(observed, probs * observed.sum()).pvalue > ALPHA

    def test_many_isomerisations_are_binomial(self, kernel):
        """50 independent pairs X_i <-> Y_i (100 reactions), 10 molecules each, rates log-uniform in
        [0.5, 5]: propensities spread over about eight groups. At t = 15 (>= 15 relaxation times)
        X_i ~ Binomial(10, k_b/(k_f + k_b)) (common practice: independent molecules). One chi-square
        per pair at alpha = 0.001 / 50 (Bonferroni), and one over all pairs' means."""
        rng = np.random.default_rng(36)
        kf, kb = np.exp(rng.uniform(np.log(0.5), np.log(5.0), (2, 50)))
        reactions = {}
        for i in range(50):
            reactions[f"f{i}"] = (f"X{i} -> Y{i}", kf[i])
            reactions[f"b{i}"] = (f"Y{i} -> X{i}", kb[i])
        species = {**{f"X{i}": 10 for i in range(50)}, **{f"Y{i}": 0 for i in range(50)}}
        case = build(species, reactions)
        res = _simulate(kernel, case, [0.0, 15.0], root=37, n=2000)
        p = kb / (kf + kb)
        x = res.counts[:, 1, :50]
        for i in range(50):
            pmf = scipy.stats.binom.pmf(np.arange(11), 10, p[i])
            assert pooled_chisquare(x[:, i], pmf).pvalue > ALPHA / 50, i
        z = (x.mean(axis=0) - 10 * p) / np.sqrt(10 * p * (1 - p) / x.shape[0])
        assert scipy.stats.chi2.sf((z ** 2).sum(), 50) > ALPHA

    def test_large_ring_reaches_uniform_occupation(self, kernel):
        """A ring of 500 sites with a reversible hop between neighbours at rate 1 each way (1000
        reactions), 40 molecules on every even site and none on the odd ones. The hops are
        first-order, so the mean follows the rate equations exactly (common practice), dm/dt = Q m
        with Q the ring's generator; the alternating start is its fastest mode (rate 4), so at
        t = 5 every site's mean is N/sites = 20 to within 40 exp(-20) (checked on expm(Q t)): the
        uniform stationary occupation of detailed balance. 400 replicates; per site a z-test with
        the exact variance sum_i x0_i P_ij (1 - P_ij) (independent molecules), alpha = 0.001 / 500
        each (Bonferroni), and the sum of squared z-scores against chi-square(500) at alpha = 0.001
        (conservative: the total is conserved, so the z-scores are negatively correlated)."""
        sites = 500
        reactions = {}
        for i in range(sites):
            reactions[f"f{i}"] = {"reaction": f"S{i} -> S{(i + 1) % sites}", "rate": 1.0}
            reactions[f"b{i}"] = {"reaction": f"S{(i + 1) % sites} -> S{i}", "rate": 1.0}
        x0 = {f"S{i}": (40 if i % 2 == 0 else 0) for i in range(sites)}
        case = _table_case({"species": x0, "reactions": reactions})
        t = 5.0
        q = -2.0 * np.eye(sites) + np.roll(np.eye(sites), 1, axis=1) + np.roll(np.eye(sites), -1, axis=1)
        prob = scipy.linalg.expm(q * t)  # prob[i, j]: a molecule from site i is at j at time t
        start = np.array(list(x0.values()), dtype=float)
        mean = start @ prob
        var = start @ (prob * (1 - prob))
        np.testing.assert_allclose(mean, 20.0, rtol=0, atol=1e-6)  # the ODE mean is the stationary one
        res = _simulate(kernel, case, [0.0, t], root=38, n=400)
        x = res.counts[:, 1, :].astype(float)
        assert (x.sum(axis=1) == 20 * sites).all()
        z = (x.mean(axis=0) - mean) / np.sqrt(var / x.shape[0])
        assert np.abs(z).max() < scipy.stats.norm.isf(ALPHA / (2 * sites))
        assert scipy.stats.chi2.sf((z ** 2).sum(), sites) > ALPHA

    @pytest.mark.parametrize("max_events", [100_000, 25], ids=["finished", "capped"])
    def test_trace_reproduces_simulate(self, kernel, max_events):
        """``trace(seed).result`` is ``simulate``'s row for that seed bit for bit, and the event log
        is consistent with the network."""
        case = mixed_network()
        times = np.linspace(0.0, 5.0, 51)
        seed_list = seeds(6, root=39)
        res = kernel.simulate(case.net, case.rates, case.x0, times, seed_list, max_events)
        for i, seed in enumerate(seed_list):
            tr = kernel.trace(case.net, case.rates, case.x0, times, seed, max_events)
            np.testing.assert_array_equal(tr.result.counts[0], res.counts[i])
            assert tr.result.events[0] == res.events[i] and len(tr.reactions) == res.events[i]
            assert (np.diff(tr.times) >= 0).all()

    def test_a_law_model_gives_the_mass_action_bits(self, kernel):
        """The same network written with expression propensities (``"kp * M"``) gives the same
        bits as in mass action: the law specialisation path (``LAW_PATH``) works for this method."""
        rates = {"km": 10.0, "gm": 1.0, "kp": 10.0, "gp": 0.1}
        laws = {"tx": ("0 -> M", "km"), "dm": ("M -> 0", "gm * M"), "tl": ("M -> M + P", "kp * M"),
                "dp": ("P -> 0", "gp * P")}
        law = _table_case({"species": {"M": 0, "P": 0}, "parameters": rates,
                           "reactions": {n: {"reaction": eq, "propensity": e} for n, (eq, e) in laws.items()}})
        mass = _table_case({"species": {"M": 0, "P": 0}, "parameters": rates,
                            "reactions": {n: {"reaction": eq, "rate": n2}
                                          for (n, (eq, _)), n2 in zip(laws.items(), ("km", "gm", "kp", "gp"))}})
        times = np.linspace(0.0, 50.0, 11)
        a = kernel.simulate(law.net, law.rates, law.x0, times, seeds(20, root=40), CAP)
        b = kernel.simulate(mass.net, mass.rates, mass.x0, times, seeds(20, root=40), CAP)
        np.testing.assert_array_equal(a.counts, b.counts)
        np.testing.assert_array_equal(a.events, b.events)


def test_window_constants():
    """The layout's window covers 64 exponents with 10 of headroom (module docstring)."""
    assert kernels.cr.WINDOW == 64 and kernels.cr.HEADROOM == 10
