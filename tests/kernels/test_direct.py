"""Gillespie's direct method: the shared conformance tests plus exact-distribution checks.

Every statistical check uses fixed seeds, so it gives the same answer on every run, and
states its significance level. With ALPHA = 0.001 per check, a correct kernel whose random
stream changes (e.g. draws reordered by an optimisation) fails a given check with
probability 0.001; the p-values of these checks were seen to be uniform over 300 roots.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.special
import scipy.stats
from support.kernel_conformance import KernelConformance, build, immigration_death, mixed_network, seeds
from support.exact import fsp, marginal, mass_action, pooled_chisquare

ALPHA = 0.001  # significance level of every goodness-of-fit check below
POWER_P = 1e-6  # a deliberately wrong reference must be rejected at least this strongly
N_REP = 4000
CAP = 20_000  # >= 50x the events any check needs; bounds the runtime of a broken kernel

# 2A <-> B. At the stationary mean (A ~ 4, B ~ 3) both directions fire at rate ~3. A0 = 10
# rather than 20 because the wrong factor A^2/2 differs from A(A-1)/2 by 1/(A-1): at A0 = 20
# the power check would reject it at p < 1e-6 for only ~80% of seeds, here for essentially all.
DIMER_A0, DIMER_C1, DIMER_C2 = 10, 0.4, 1.0
DIMER_TIMES = np.array([0.0, 0.3, 2.0])


def _simulate(kernel, case, times, root, n=N_REP):
    res = kernel.simulate(case.net, case.rates, case.x0, np.asarray(times, dtype=float),
                          seeds(n, root=root), CAP)
    assert (res.status == 0).all()
    return res


def _first_events(kernel, case, n, root):
    """Time and reaction of the first event of ``n`` replicates, from ``trace``."""
    taus, first = np.empty(n), np.empty(n, dtype=np.int64)
    for r, seed in enumerate(seeds(n, root=root)):
        tr = kernel.trace(case.net, case.rates, case.x0, np.array([0.0, 1e3]), seed, 1)
        assert tr.times.shape[0] == 1
        taus[r], first[r] = tr.times[0], tr.reactions[0]
    return taus, first


def _dimer_reference(forward):
    """pmf of A at DIMER_TIMES[1:] for 2A -> B with propensity ``forward``, B -> 2A (c2 B)."""
    split = (mass_action(DIMER_C2, {1: 1}), (2, -1))
    return [marginal(*fsp((DIMER_A0, 0), [(forward, (-2, 1)), split], t), 0) for t in DIMER_TIMES[1:]]


class TestDirect(KernelConformance):
    method = "direct"

    def test_cap_reached_by_absorbing_path_is_not_a_stop(self, kernel):
        # A -> 0 from 3 needs exactly 3 events; with max_events = 3 nothing is cut short
        case = build({"A": 3}, {"decay": ("A -> 0", 1.0)})
        res = self.run(kernel, case, np.linspace(0.0, 50.0, 11), seeds(20), max_events=3)
        assert (res.status == 0).all() and (res.events == 3).all()
        assert (res.counts[:, -1, 0] == 0).all()

    # --- exact distributions of linear (monomolecular) networks ---------------------------

    @pytest.mark.parametrize("t", [1.0, 30.0])
    def test_immigration_death_is_poisson(self, kernel, t):
        """0 -> A (k), A -> 0 (g) from A = 0: A(t) ~ Poisson((k/g)(1 - exp(-g t))).

        Gardiner, Handbook of Stochastic Methods, 3rd ed., Springer 2004, birth-death master equation;
        Jahnke & Huisinga (2007), J. Math. Biol. 54:1-26, "Solving the chemical master
        equation for monomolecular reaction systems analytically" (Poisson from a zero
        start). t = 1 is transient (mean 3.93), t = 30 stationary (mean 10).
        Chi-square, alpha = 0.001.
        """
        k, g = 5.0, 0.5
        res = _simulate(kernel, immigration_death(), [0.0, t], root=11)
        mean = k / g * (1.0 - np.exp(-g * t))
        pmf = scipy.stats.poisson.pmf(np.arange(60), mean)  # the tail mass joins the last bin
        assert pooled_chisquare(res.counts[:, 1, 0], pmf).pvalue > ALPHA

    def test_isomerisation_is_binomial(self, kernel):
        """A -> B (k1), B -> A (k2) from A = N: A(t) ~ Binomial(N, p(t)) with
        p(t) = k2/(k1+k2) + k1/(k1+k2) exp(-(k1+k2) t), from the one-molecule two-state ODE.

        Jahnke & Huisinga (2007), J. Math. Biol. 54:1-26 (multinomial solution of closed
        monomolecular systems). t = 0.2 is transient, t = 10 stationary (p = k2/(k1+k2)).
        Chi-square, alpha = 0.001 at each time.
        """
        n_mol, k1, k2 = 30, 1.0, 2.0
        case = build({"A": n_mol, "B": 0}, {"fwd": ("A -> B", k1), "back": ("B -> A", k2)})
        times = np.array([0.0, 0.2, 10.0])
        res = _simulate(kernel, case, times, root=12)
        np.testing.assert_array_equal(res.counts.sum(axis=2), n_mol)
        for i, t in enumerate(times[1:], start=1):
            p = k2 / (k1 + k2) + k1 / (k1 + k2) * np.exp(-(k1 + k2) * t)
            pmf = scipy.stats.binom.pmf(np.arange(n_mol + 1), n_mol, p)
            assert pooled_chisquare(res.counts[:, i, 0], pmf).pvalue > ALPHA, f"t = {t}"

    # --- bimolecular and trimolecular propensities against finite state projection ---------

    @pytest.fixture(scope="class")
    def dimer_samples(self, kernel):
        case = build({"A": DIMER_A0, "B": 0},
                     {"dimerise": ("2 A -> B", DIMER_C1), "split": ("B -> 2 A", DIMER_C2)})
        return _simulate(kernel, case, DIMER_TIMES, root=13).counts[:, :, 0]

    def test_dimerisation_matches_fsp(self, dimer_samples):
        """2A -> B (c1 A(A-1)/2), B -> 2A (c2 B) from A = 10: the distribution of A at t = 0.3
        (transient, mean 5.3) and t = 2 (stationary, mean 4.0) equals the exact CME solution
        on the finite state space B = 0..5.

        Propensity c1 A(A-1)/2 counts distinct pairs: Gillespie (1977), J. Phys. Chem. 81:2340.
        Reference by finite state projection: Munsky & Khammash (2006), J. Chem. Phys.
        124:044104 (exact here, the state space being closed). Chi-square, alpha = 0.001
        at each time.
        """
        a = dimer_samples
        assert (a % 2 == 0).all() and (a >= 0).all() and (a <= DIMER_A0).all()
        for i, pmf in enumerate(_dimer_reference(mass_action(DIMER_C1, {0: 2})), start=1):
            assert pooled_chisquare(a[:, i], pmf).pvalue > ALPHA, f"t = {DIMER_TIMES[i]}"

    @pytest.mark.parametrize("wrong", [lambda x: DIMER_C1 * x[0] ** 2 / 2,         # pairs a molecule with itself
                                       lambda x: DIMER_C1 * x[0] * (x[0] - 1.0)],  # ordered pairs
                             ids=["A^2/2", "A(A-1)"])
    def test_dimerisation_check_has_power(self, dimer_samples, wrong):
        """The same samples reject a reference built with a wrong combinatorial factor with
        p < 1e-6 at both times, so the check above catches that bug (Gillespie 1977's C(A, 2)
        matters). The chi-square noncentrality against A^2/2 is ~170 at t = 0.3 (5 df): the
        rejection holds for essentially any seed, not just this one.
        """
        for i, pmf in enumerate(_dimer_reference(wrong), start=1):
            assert pooled_chisquare(dimer_samples[:, i], pmf).pvalue < POWER_P, f"t = {DIMER_TIMES[i]}"

    @pytest.mark.parametrize("name", ["trimer", "binding"])
    def test_closed_networks_match_fsp(self, kernel, name):
        """3A <-> B (c1 C(A,3), c2 B) from A = 9, and A + B <-> C (c1 A B, c2 C) from A = 12,
        B = 7: the distribution of A at t = 0.5 equals the exact finite state projection.

        Propensities: Gillespie (1977). Reference: Munsky & Khammash (2006).
        Chi-square, alpha = 0.001.
        """
        if name == "trimer":
            species, x0 = {"A": 9, "B": 0}, (9, 0)
            reactions = {"tri": ("3 A -> B", 0.05), "untri": ("B -> 3 A", 1.0)}
            ref = [(mass_action(0.05, {0: 3}), (-3, 1)), (mass_action(1.0, {1: 1}), (3, -1))]
        else:
            species, x0 = {"A": 12, "B": 7, "C": 0}, (12, 7, 0)
            reactions = {"bind": ("A + B -> C", 0.1), "unbind": ("C -> A + B", 1.0)}
            ref = [(mass_action(0.1, {0: 1, 1: 1}), (-1, -1, 1)), (mass_action(1.0, {2: 1}), (1, 1, -1))]
        res = _simulate(kernel, build(species, reactions), [0.0, 0.5], root=14)
        pmf = marginal(*fsp(x0, ref, 0.5), 0)
        assert pooled_chisquare(res.counts[:, 1, 0], pmf).pvalue > ALPHA

    # --- the two random choices of one step ------------------------------------------------

    def test_trimolecular_first_wait_is_exponential(self, kernel):
        """3A -> B from A = 5: the first event waits Exp(c C(5, 3)) = Exp(10 c), and a wrong
        factor A^3/6 (rate 20.8 c) is rejected. Propensity: Gillespie (1977).
        KS test, alpha = 0.001; power threshold p < 1e-6.
        """
        c = 0.3
        case = build({"A": 5, "B": 0}, {"tri": ("3 A -> B", c)})
        taus, _ = _first_events(kernel, case, 3000, root=15)
        assert scipy.stats.kstest(taus, scipy.stats.expon(scale=1.0 / (10.0 * c)).cdf).pvalue > ALPHA
        assert scipy.stats.kstest(taus, scipy.stats.expon(scale=6.0 / (125.0 * c)).cdf).pvalue < POWER_P

    def test_first_step_wait_and_choice(self, kernel):
        """One step of the direct method (Gillespie 1976, J. Comput. Phys. 22:403; Gillespie
        1977): the wait is Exp(a0), reaction j is chosen with probability a_j/a0, and the two
        are independent.

        The mixed network's initial propensities cover every order: 0 -> A, A -> 0, 2A -> B,
        A + B -> C, C -> A + B (zero, C = 0), 3B -> 0, B -> 0. KS test on the wait,
        chi-square on the choice, Kruskal-Wallis of the wait across choices; alpha = 0.001 each.
        """
        case = mixed_network()
        a_, b_, c_ = case.x0
        comb = scipy.special.comb
        a = case.rates * np.array([1, a_, comb(a_, 2), a_ * b_, c_, comb(b_, 3), b_])
        a0 = a.sum()
        n = 4000
        taus, first = _first_events(kernel, case, n, root=16)
        assert scipy.stats.kstest(taus, scipy.stats.expon(scale=1.0 / a0).cdf).pvalue > ALPHA
        observed = np.bincount(first, minlength=len(a))
        can_fire = a > 0
        assert (observed[~can_fire] == 0).all()
        assert scipy.stats.chisquare(observed[can_fire], n * a[can_fire] / a0).pvalue > ALPHA
        groups = [taus[first == j] for j in np.flatnonzero(can_fire)]
        assert scipy.stats.kruskal(*groups).pvalue > ALPHA

    # --- trace reproduces simulate ---------------------------------------------------------

    @pytest.mark.parametrize("max_events", [CAP, 25], ids=["finished", "capped"])
    def test_trace_reproduces_simulate(self, kernel, max_events):
        """``trace(seed).result`` is ``simulate``'s row for that seed bit for bit, its event log
        is consistent with the network, and replaying the log on the time grid gives the counts
        (the state at t is the state after the last event at or before t)."""
        case = mixed_network()
        times = np.linspace(0.0, 5.0, 51)
        seed_list = seeds(6, root=17)
        res = kernel.simulate(case.net, case.rates, case.x0, times, seed_list, max_events)
        changes = np.zeros((case.net.n_reactions, len(case.x0)), dtype=np.int64)
        for j in range(case.net.n_reactions):
            for s, v in zip(case.net.change_idx[j], case.net.change_val[j]):
                if s >= 0:
                    changes[j, s] = v
        for i, seed in enumerate(seed_list):
            tr = kernel.trace(case.net, case.rates, case.x0, times, seed, max_events)
            assert tr.result.counts.dtype == np.int32 and tr.result.counts.shape == (1, 51, 3)
            np.testing.assert_array_equal(tr.result.counts[0], res.counts[i])
            assert tr.result.status[0] == res.status[i] and tr.result.events[0] == res.events[i]
            assert len(tr.times) == len(tr.reactions) == len(tr.states) == res.events[i]
            assert tr.times[0] > 0.0 and (np.diff(tr.times) >= 0).all()
            before = np.vstack([case.x0, tr.states[:-1]])
            np.testing.assert_array_equal(tr.states - before, changes[tr.reactions])
            last = np.searchsorted(tr.times, times, side="right") - 1
            replay = np.where(last[:, None] >= 0, tr.states[np.maximum(last, 0)], case.x0)
            valid = res.counts[i, :, 0] >= 0
            np.testing.assert_array_equal(res.counts[i][valid], replay[valid])
            if max_events == CAP:
                assert res.status[i] == 0 and valid.all()
            else:
                assert res.status[i] == 1 and not valid[-1]
