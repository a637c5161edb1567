"""Next reaction method: the shared conformance tests plus exact-distribution checks.

Gibson & Bruck (2000), "Efficient exact stochastic simulation of chemical systems with many
species and many channels", J. Phys. Chem. A 104:1876. The method is exact, so every check below
compares against an exact reference: a finite state projection of the chemical master equation
(Munsky & Khammash 2006, J. Chem. Phys. 124:044104; ``reference.fsp``), a closed-form stationary
distribution, or an exact moment. Seeds are fixed, so each check gives the same answer on every
run; each states its significance level (ALPHA = 0.001 for goodness of fit, i.e. a correct kernel
whose random stream changes fails a given check with probability 0.001).
"""

from __future__ import annotations

import numba
import numpy as np
import pytest
import scipy.special
import scipy.stats
from support.kernel_conformance import KernelConformance, build, mixed_network, seeds
from support.exact import fsp, marginal, mass_action, pooled_chisquare

import kernels.nrm

ALPHA = 0.001
Z_ALPHA = scipy.stats.norm.isf(ALPHA / 2)  # 3.29: two-sided z tolerance at ALPHA
N_REP = 4000
CAP = 100_000  # >= 10x the events any check needs; bounds the runtime of a broken kernel


def _simulate(kernel, case, times, root, n=N_REP):
    res = kernel.simulate(case.net, case.rates, case.x0, np.asarray(times, dtype=float), seeds(n, root=root), CAP)
    assert (res.status == 0).all()
    return res


def _capped(rate, reactants, species, cap):
    """``mass_action`` that is zero once ``species`` reaches ``cap``: truncates an open network for
    FSP. The caps below sit where the exact stationary mass beyond them is < 1e-40."""
    base = mass_action(rate, reactants)
    return lambda x: base(x) if x[species] < cap else 0.0


# --- telegraph model: a gene switching on and off, mRNA made while on -------------------------
K_ON, K_OFF, NU, DELTA = 0.3, 0.3, 10.0, 1.0  # slow switching: bimodal mRNA, far from Poisson
TELEGRAPH_TIMES = np.array([0.0, 1.5, 30.0])  # transient; stationary (relaxation rates 1 and 0.6)


def _telegraph_case():
    return build({"Goff": 1, "Gon": 0, "M": 0},
                 {"on": ("Goff -> Gon", K_ON), "off": ("Gon -> Goff", K_OFF),
                  "tx": ("Gon -> Gon + M", NU), "decay": ("M -> 0", DELTA)})


def _telegraph_fsp(t):
    reactions = [(mass_action(K_ON, {0: 1}), (-1, 1, 0)), (mass_action(K_OFF, {1: 1}), (1, -1, 0)),
                 (_capped(NU, {1: 1}, 2, 80), (0, 0, 1)), (mass_action(DELTA, {2: 1}), (0, 0, -1))]
    return marginal(*fsp((1, 0, 0), reactions, t), 2)


def _peccoud_ycart(n_max):
    """Stationary mRNA pmf of the telegraph model, Peccoud & Ycart (1995), Theor. Popul. Biol.
    48:222: with a = k_on/delta, b = k_off/delta, s = nu/delta,
    P(n) = s^n/n! * (a)_n/(a+b)_n * 1F1(a+n; a+b+n; -s), (x)_n the rising factorial."""
    a, b, s = K_ON / DELTA, K_OFF / DELTA, NU / DELTA
    n = np.arange(n_max)
    gl = scipy.special.gammaln
    log_w = n * np.log(s) - gl(n + 1) + gl(a + n) - gl(a) + gl(a + b) - gl(a + b + n)
    return np.exp(log_w) * scipy.special.hyp1f1(a + n, a + b + n, -s)


# --- Michaelis-Menten enzyme with a handful of molecules ---------------------------------------
E0, S0, C_BIND, C_UNBIND, C_CAT = 3, 15, 0.5, 1.0, 0.8
ENZYME_TIMES = np.array([0.0, 1.0, 4.0])


def _enzyme_case():
    return build({"E": E0, "S": S0, "C": 0, "P": 0},
                 {"bind": ("E + S -> C", C_BIND), "unbind": ("C -> E + S", C_UNBIND),
                  "cat": ("C -> E + P", C_CAT)})


def _enzyme_fsp(t):
    reactions = [(mass_action(C_BIND, {0: 1, 1: 1}), (-1, -1, 1, 0)),
                 (mass_action(C_UNBIND, {2: 1}), (1, 1, -1, 0)),
                 (mass_action(C_CAT, {2: 1}), (1, 0, -1, 1))]
    return fsp((E0, S0, 0, 0), reactions, t)


@numba.njit(cache=True)
def _exponentials(n, seed):
    s0, s1, s2, s3 = np.uint64(seed), np.uint64(0x9E3779B97F4A7C15), np.uint64(7), np.uint64(11)
    out = np.empty(n)
    for i in range(n):
        out[i], s0, s1, s2, s3 = kernels.nrm._exponential(s0, s1, s2, s3)
    return out


class TestNextReactionMethod(KernelConformance):
    method = "nrm"

    def test_cap_reached_by_absorbing_path_is_not_a_stop(self, kernel):
        # A -> 0 from 3 needs exactly 3 events; with max_events = 3 nothing is cut short
        case = build({"A": 3}, {"decay": ("A -> 0", 1.0)})
        res = self.run(kernel, case, np.linspace(0.0, 50.0, 11), seeds(20), max_events=3)
        assert (res.status == 0).all() and (res.events == 3).all()
        assert (res.counts[:, -1, 0] == 0).all()

    # --- the random numbers --------------------------------------------------------------------

    def test_ziggurat_exponential(self):
        """The unit exponentials (Marsaglia & Tsang 2000 ziggurat, 256 layers): the layer root is
        the published r = 7.69711747013104972, 10^6 draws pass a KS test against Exp(1), and the
        tail beyond r (drawn by its own branch) has probability exp(-r). Alpha = 0.001 each (the
        tail count is a binomial z-test)."""
        assert kernels.nrm._ZIG_R == pytest.approx(7.69711747013104972, rel=1e-14)
        x = _exponentials(1_000_000, 2024)
        assert x.min() >= 0.0 and not np.signbit(x).any()
        assert scipy.stats.kstest(x, "expon").pvalue > ALPHA
        p_tail = np.exp(-kernels.nrm._ZIG_R)
        z = ((x > kernels.nrm._ZIG_R).sum() - x.size * p_tail) / np.sqrt(x.size * p_tail * (1 - p_tail))
        assert abs(z) < Z_ALPHA

    def test_first_event_wait_and_choice(self, kernel):
        """The first event is the minimum of independent Exp(a_j) firing times, so it waits
        Exp(a0) and is reaction j with probability a_j/a0 (Gibson & Bruck 2000, section 2;
        Gillespie 1977, J. Phys. Chem. 81:2340). On the mixed network (every reaction order; C -> A + B
        starts at zero propensity): KS on the wait, chi-square on the choice, alpha = 0.001 each."""
        case = mixed_network()
        a_, b_, c_ = case.x0
        comb = scipy.special.comb
        a = case.rates * np.array([1, a_, comb(a_, 2), a_ * b_, c_, comb(b_, 3), b_])
        n = 4000
        taus, first = np.empty(n), np.empty(n, dtype=np.int64)
        for r, seed in enumerate(seeds(n, root=21)):
            tr = kernel.trace(case.net, case.rates, case.x0, np.array([0.0, 1e3]), seed, 1)
            taus[r], first[r] = tr.times[0], tr.reactions[0]
        assert scipy.stats.kstest(taus, scipy.stats.expon(scale=1.0 / a.sum()).cdf).pvalue > ALPHA
        observed = np.bincount(first, minlength=len(a))
        assert (observed[a == 0] == 0).all()
        assert scipy.stats.chisquare(observed[a > 0], n * a[a > 0] / a.sum()).pvalue > ALPHA

    # --- exact distributions: propensities that switch off and on again -----------------------

    def test_single_molecule_isomerisation(self, kernel):
        """A <-> B with one or two molecules: every event parks one reaction (a_j = 0, its unused
        unit-rate time kept) and revives another with it (Gibson & Bruck 2000's handling of
        a_j = 0). A(t) ~ Binomial(N, p(t)), p = k2/(k1+k2) + k1/(k1+k2) exp(-(k1+k2) t) (Jahnke &
        Huisinga 2007, J. Math. Biol. 54:1). Chi-square at a transient and a stationary time,
        alpha = 0.001 each."""
        k1, k2 = 1.0, 0.5
        times = np.array([0.0, 0.4, 8.0])
        for n_mol, root in ((1, 22), (2, 23)):
            case = build({"A": n_mol, "B": 0}, {"f": ("A -> B", k1), "b": ("B -> A", k2)})
            res = _simulate(kernel, case, times, root)
            for i, t in enumerate(times[1:], start=1):
                p = k2 / (k1 + k2) + k1 / (k1 + k2) * np.exp(-(k1 + k2) * t)
                pmf = scipy.stats.binom.pmf(np.arange(n_mol + 1), n_mol, p)
                assert pooled_chisquare(res.counts[:, i, 0], pmf).pvalue > ALPHA, (n_mol, t)

    def test_peccoud_ycart_matches_fsp(self):
        """The reference itself: the stationary FSP of the telegraph model equals Peccoud & Ycart's
        closed form (1995) to round-off, so the two exact references agree."""
        pmf = _telegraph_fsp(60.0)
        np.testing.assert_allclose(pmf, _peccoud_ycart(len(pmf)), rtol=0, atol=1e-12)

    def test_telegraph_matches_fsp(self, kernel):
        """Telegraph model (gene off <-> on at k_on = k_off = 0.3, mRNA made at nu = 10 while on,
        degraded at 1; Peccoud & Ycart 1995) from off with no mRNA: the mRNA distribution at
        t = 1.5 (transient) equals the FSP solution and at t = 30 the stationary Peccoud-Ycart
        distribution (bimodal: P(0) = 0.26, mean 5). Transcription is switched off and on with the
        gene, so its kept unit-rate time is reused many times per replicate. Chi-square,
        alpha = 0.001 at each time."""
        res = _simulate(kernel, _telegraph_case(), TELEGRAPH_TIMES, root=24)
        m = res.counts[:, :, 2]
        assert pooled_chisquare(m[:, 1], _telegraph_fsp(TELEGRAPH_TIMES[1])).pvalue > ALPHA
        assert pooled_chisquare(m[:, 2], _peccoud_ycart(60)).pvalue > ALPHA

    def test_enzyme_matches_fsp(self, kernel):
        """E + S <-> C -> E + P with E0 = 3, S0 = 15 (binding stops whenever all enzyme is bound):
        the distributions of S and P at t = 1 and t = 4 equal the exact FSP solution (closed state
        space, so exact). Conservation E + C = E0, S + C + P = S0 holds in every sample.
        Chi-square, alpha = 0.001 for each species and time."""
        res = _simulate(kernel, _enzyme_case(), ENZYME_TIMES, root=25)
        e, s, c, p = (res.counts[:, :, i] for i in range(4))
        assert (e + c == E0).all() and (s + c + p == S0).all()
        for i, t in enumerate(ENZYME_TIMES[1:], start=1):
            states, probs = _enzyme_fsp(t)
            for species, samples in ((1, s), (3, p)):
                pmf = marginal(states, probs, species)
                assert pooled_chisquare(samples[:, i], pmf).pvalue > ALPHA, (species, t)

    def test_two_stage_gene_expression_fano_factor(self, kernel):
        """0 -> M (k_m), M -> 0 (g_m), M -> M + P (k_p), P -> 0 (g_p): at steady state the protein
        mean is k_m k_p / (g_m g_p) = 50 and its Fano factor 1 + k_p/(g_m + g_p) = 5.545 (Thattai &
        van Oudenaarden 2001, PNAS 98:8614).

        2000 replicates sampled at t = 100, 150, ..., 400 (14000 samples; the protein relaxes at
        g_p = 0.1, so t = 100 is 10 relaxation times in and samples 50 apart correlate by
        exp(-5) < 0.01). Tolerance: |estimate - exact| < 3.29 standard errors (alpha = 0.001,
        two-sided), the standard error from the delta method (influence function of var/mean),
        summed within each replicate so that residual correlation is accounted for. It comes to
        about 2.5 % of the Fano factor.
        """
        k_m, g_m, k_p, g_p = 1.0, 1.0, 5.0, 0.1
        case = build({"M": 0, "P": 0}, {"tx": ("0 -> M", k_m), "dm": ("M -> 0", g_m),
                                        "tl": ("M -> M + P", k_p), "dp": ("P -> 0", g_p)})
        times = np.concatenate([[0.0], np.arange(100.0, 401.0, 50.0)])
        p = _simulate(kernel, case, times, root=26, n=2000).counts[:, 1:, 1].astype(float)
        n = p.size
        mean, var = p.mean(), p.var()
        fano = var / mean
        influence_mean = (p - mean).sum(axis=1)
        influence_fano = (((p - mean) ** 2 - var) / mean - var * (p - mean) / mean**2).sum(axis=1)
        se_mean = np.sqrt((influence_mean**2).sum()) / n
        se_fano = np.sqrt((influence_fano**2).sum()) / n
        assert abs(mean - k_m * k_p / (g_m * g_p)) < Z_ALPHA * se_mean
        assert abs(fano - (1.0 + k_p / (g_m + g_p))) < Z_ALPHA * se_fano
        assert se_fano < 0.03 * fano  # the check is sharp enough to mean something

    # --- trace reproduces simulate ---------------------------------------------------------

    @pytest.mark.parametrize("max_events", [CAP, 25], ids=["finished", "capped"])
    def test_trace_reproduces_simulate(self, kernel, max_events):
        """``trace(seed).result`` is ``simulate``'s row for that seed bit for bit, the event log is
        consistent with the network, and replaying it on the time grid gives the counts."""
        case = mixed_network()
        times = np.linspace(0.0, 5.0, 51)
        seed_list = seeds(6, root=27)
        res = kernel.simulate(case.net, case.rates, case.x0, times, seed_list, max_events)
        changes = np.zeros((case.net.n_reactions, len(case.x0)), dtype=np.int64)
        for j in range(case.net.n_reactions):
            for s, v in zip(case.net.change_idx[j], case.net.change_val[j]):
                if s >= 0:
                    changes[j, s] = v
        for i, seed in enumerate(seed_list):
            tr = kernel.trace(case.net, case.rates, case.x0, times, seed, max_events)
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
            assert (res.status[i] == 0) if max_events == CAP else (res.status[i] == 1 and not valid[-1])
