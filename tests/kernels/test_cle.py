"""Chemical Langevin equation: the shared conformance tests (adapted where a real-valued state
differs) plus moment checks against exact results at high copy numbers.

For a linear (first-order) network the CLE's mean and variance obey the same equations as the
master equation's, so at high copy numbers they equal the exact Poisson / binomial values
(Gillespie 2000, J. Chem. Phys. 113:297: the CLE is accurate when every propensity is large).
Euler–Maruyama adds an O(h) bias, computed exactly below where it matters.

Every statistical check uses fixed seeds and a tolerance of 4 standard errors (a false alarm
per check has probability ~6e-5 for a correct kernel whose random stream changes).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats
from support.kernel_conformance import KernelConformance, build, mixed_network, seeds

from kernels import cle

ALPHA = 0.001  # significance level of the goodness-of-fit check of the normal draws
Z = 4.0  # tolerance in standard errors of every moment check
CAP = 1_000_000


def _run(case, times, root, n, **kwargs):
    res, clips = cle.simulate_with_clips(case.net, case.rates, case.x0, np.asarray(times, dtype=float),
                                         seeds(n, root=root), CAP, **kwargs)
    assert (res.status == 0).all()
    return res, clips


def _se_var(samples):
    """Standard error of the sample variance of near-Gaussian samples: s^2 sqrt(2 / (n - 1))."""
    return samples.var(ddof=1) * np.sqrt(2.0 / (samples.size - 1))


class TestCle(KernelConformance):
    method = "cle"

    # --- conformance tests overridden, each with its reason ----------------------------------

    def test_shapes_and_dtypes(self, kernel):
        """As the base test, but counts are float64: the CLE state is real-valued
        (``cle.COUNTS_DTYPE``), which the store must honour instead of int32."""
        res = self.run(kernel, mixed_network(), np.linspace(0.0, 5.0, 7), seeds(3))
        assert cle.COUNTS_DTYPE == np.float64
        assert res.counts.shape == (3, 7, 3) and res.counts.dtype == np.float64
        assert res.status.shape == (3,) and res.status.dtype == np.int8
        assert res.events.shape == (3,) and res.events.dtype == np.int64

    def test_absorbing_state_holds(self, kernel):
        """A -> 0 (c = 1) from A = 3, C = 7 inert. Replaces the base test (integer paths, exactly
        3 events): here A moves in real steps and can rise (noise), but once a step is clipped to
        0 every propensity is 0, so the state is held to the end without further steps."""
        case = build({"A": 3, "C": 7}, {"decay": ("A -> 0", 1.0)})
        times = np.linspace(0.0, 50.0, 101)  # default dt 0.025: 2000 steps if never absorbed
        res = self.run(kernel, case, times, seeds(100))
        a = res.counts[:, :, 0]
        assert (res.status == 0).all()
        assert (a[:, -1] == 0.0).all()
        for row in a:
            assert (row[np.argmax(row == 0.0):] == 0.0).all()
        assert (res.events > 0).all() and (res.events < 2000).all()
        assert (res.counts[:, :, 1] == 7.0).all()

    def test_event_cap(self, kernel):
        """``max_events`` caps the steps. Replaces the base test only in that a CLE path of pure
        birth is not monotone (the noise can move it down)."""
        case = build({"A": 0}, {"birth": ("0 -> A", 1.0)})
        times = np.linspace(0.0, 1000.0, 2001)
        res = self.run(kernel, case, times, seeds(50), max_events=10)
        assert (res.status == 1).all() and (res.events == 10).all()
        a = res.counts[:, :, 0]
        assert (a[:, 0] == 0.0).all() and (a[:, -100:] == -1.0).all()
        for row in a:
            stopped = np.flatnonzero(row == -1.0)
            assert stopped.size and (stopped == np.arange(stopped[0], len(row))).all()  # -1 is a suffix
            assert (row[: stopped[0]] >= 0.0).all()

    # --- the Gaussian draws --------------------------------------------------------------------

    def test_normal_draws(self):
        """The polar method (Marsaglia & Bray 1964, SIAM Review 6:260) on xoshiro256+ gives
        N(0, 1): KS test at alpha = 0.001 on 200 000 draws; the two draws of a pair are
        uncorrelated (|r| < 4/sqrt(n)); the same seed gives the same draws."""
        z = cle.normal_draws(np.random.SeedSequence(2024, spawn_key=(0, 0)), 200_000)
        assert scipy.stats.kstest(z, "norm").pvalue > ALPHA
        assert abs(np.corrcoef(z[0::2], z[1::2])[0, 1]) < Z / np.sqrt(100_000)
        np.testing.assert_array_equal(z[:100], cle.normal_draws(np.random.SeedSequence(2024, spawn_key=(0, 0)), 100))

    # --- high copy numbers: exact moments -------------------------------------------------------

    def test_immigration_death_high_copy_is_poisson(self):
        """0 -> A (k = 100), A -> 0 (g = 0.1) from the mean, A = 1000: stationary A is
        Poisson(k/g), mean = variance = 1000 (Gardiner, Handbook of Stochastic Methods, 3rd ed., Springer 2004; the CLE
        of a linear network has these exact first two moments). At t = 60 (6 relaxation times)
        over 10 000 replicates, the mean is within 4 SE of 1000 (Euler–Maruyama keeps the mean
        of a linear drift exact) and the variance within 4 SE of 1000 plus the scheme's
        stationary bias (k/g) g h / (2 - g h) = 2.5 at the default h = 0.05.
        """
        k, g = 100.0, 0.1
        case = build({"A": 1000}, {"birth": ("0 -> A", k), "death": ("A -> 0", g)})
        res, clips = _run(case, np.linspace(0.0, 60.0, 61), root=51, n=10_000)  # default dt = 0.05
        assert (clips == 0).all()
        x = res.counts[:, -1, 0]
        h = 0.05
        assert abs(x.mean() - k / g) < Z * x.std(ddof=1) / np.sqrt(x.size)
        assert abs(x.var(ddof=1) - k / g / (1.0 - g * h / 2.0)) < Z * _se_var(x)

    @pytest.fixture(scope="class")
    def isomerisation(self):
        """A -> B (k1 = 1), B -> A (k2 = 2) from A = N = 10^4, 10 000 replicates, dt = 0.005."""
        n_mol, k1, k2 = 10_000, 1.0, 2.0
        case = build({"A": n_mol, "B": 0}, {"fwd": ("A -> B", k1), "back": ("B -> A", k2)})
        times = np.linspace(0.0, 5.0, 51)  # default dt = 0.1 / 20 = 0.005
        res, clips = _run(case, times, root=52, n=10_000)
        assert (clips == 0).all()
        return n_mol, k1, k2, times, res.counts

    def test_isomerisation_conserves_total(self, isomerisation):
        """Each reaction's increment moves A and B by opposite amounts, so A + B = N on every
        path up to rounding (no clipping happens at these numbers)."""
        n_mol, _, _, _, counts = isomerisation
        np.testing.assert_allclose(counts.sum(axis=2), n_mol, rtol=1e-12)

    def test_isomerisation_high_copy_is_binomial(self, isomerisation):
        """At t = 5 (15 relaxation times) A is Binomial(N, p), p = k2/(k1+k2) (Jahnke & Huisinga
        2007, J. Math. Biol. 54:1): mean N p, variance N p (1-p) = 2222. Mean within 4 SE; variance
        within 4 SE of N p (1-p) / (1 - lambda h / 2) (lambda = k1 + k2; the Euler–Maruyama
        stationary bias, +0.75% at h = 0.005)."""
        n_mol, k1, k2, _, counts = isomerisation
        lam, h = k1 + k2, 0.005
        p = k2 / lam
        x = counts[:, -1, 0]
        assert abs(x.mean() - n_mol * p) < Z * x.std(ddof=1) / np.sqrt(x.size)
        assert abs(x.var(ddof=1) - n_mol * p * (1 - p) / (1.0 - lam * h / 2.0)) < Z * _se_var(x)

    def test_isomerisation_transient_follows_euler_maruyama(self, isomerisation):
        """At t = 0.2 (40 steps): for a linear network the Euler–Maruyama moments follow exact
        recursions (Kloeden & Platen 1992, the scheme applied to the CLE of Gillespie 2000)::

            m' = m + h (k2 N - lambda m),   V' = (1 - lambda h)^2 V + h (k1 m + k2 (N - m))

        The sample mean and variance are within 4 SE of them. Against the exact binomial
        N p(t) = 8496.0 the scheme's mean is 8.2 molecules (0.1%) low at this step: the O(h)
        weak error, which the recursion accounts for.
        """
        n_mol, k1, k2, times, counts = isomerisation
        lam, h = k1 + k2, 0.005
        m, v = float(n_mol), 0.0
        for _ in range(40):
            m, v = m + h * (k2 * n_mol - lam * m), (1.0 - lam * h) ** 2 * v + h * (k1 * m + k2 * (n_mol - m))
        x = counts[:, np.searchsorted(times, 0.2), 0]
        assert abs(x.mean() - m) < Z * x.std(ddof=1) / np.sqrt(x.size)
        assert abs(x.var(ddof=1) - v) < Z * _se_var(x)

    # --- low copy numbers: a documented bias ------------------------------------------------------

    def test_low_copy_bias(self):
        """0 -> A (k = 1), A -> 0 (g = 1) from 0: the exact law at t = 20 is Poisson(1), mean =
        variance = 1, P(0) = 0.37. The CLE is not meant for this (Gillespie 2000: it needs large
        propensities), and with the clip at 0 it overestimates the mean. Measured with these seeds
        (4000 replicates, default dt = 0.005): mean 1.18 (SE 0.014), variance 0.81, 87 clips per
        replicate over 4000 steps. The bias is the CLE's, not the step's: mean 1.18 at dt = 0.001
        as well. The check pins the bias to 1.10..1.26 so a change of policy is noticed.
        """
        case = build({"A": 0}, {"birth": ("0 -> A", 1.0), "death": ("A -> 0", 1.0)})
        res, clips = _run(case, np.linspace(0.0, 20.0, 201), root=41, n=4000)
        x = res.counts[:, -1, 0]
        assert 1.10 < x.mean() < 1.26
        assert x.var(ddof=1) < 0.9
        assert (clips > 0).all()

    # --- step size and failures -----------------------------------------------------------------

    def test_steps_follow_dt(self):
        """Each sample interval is cut into ceil(span / dt) equal steps: [0, 1] and [1, 2.5] at
        dt = 0.1 take 10 + 15 steps; the default dt is the mean spacing / 20 (20 steps each)."""
        case = build({"A": 50}, {"birth": ("0 -> A", 5.0), "death": ("A -> 0", 0.1)})
        res = cle.simulate(case.net, case.rates, case.x0, np.array([0.0, 1.0, 2.5]), seeds(4), CAP, dt=0.1)
        assert (res.status == 0).all() and (res.events == 25).all()
        res = cle.simulate(case.net, case.rates, case.x0, np.linspace(0.0, 20.0, 41), seeds(4), CAP)
        assert cle.default_dt(np.linspace(0.0, 20.0, 41)) == pytest.approx(0.025)
        assert (res.events == 40 * 20).all()
        fine = cle.simulate(case.net, case.rates, case.x0, np.linspace(0.0, 20.0, 41), seeds(4), CAP, dt=0.01)
        assert (fine.events == 40 * 50).all() and not np.array_equal(fine.counts, res.counts)

    @pytest.mark.parametrize("dt", [0.0, -1.0, np.nan, np.inf])
    def test_bad_dt_raises(self, dt):
        case = build({"A": 5}, {"death": ("A -> 0", 1.0)})
        with pytest.raises(ValueError, match="dt"):
            cle.simulate(case.net, case.rates, case.x0, np.array([0.0, 1.0]), seeds(1), CAP, dt=dt)

    def test_overflow_is_status_2(self):
        """2A -> 3A (c = 1) from 10^6 with dt = 1 overflows within a few steps: status 2 and every
        sample -1, as the direct method reports a numerical failure."""
        case = build({"A": 1_000_000}, {"auto": ("2 A -> 3 A", 1.0)})
        res = cle.simulate(case.net, case.rates, case.x0, np.linspace(0.0, 50.0, 51), seeds(3), CAP, dt=1.0)
        assert (res.status == 2).all()
        assert (res.counts == -1.0).all()
        assert (res.events < 50).all()

    def test_propensities_extend_combinations_to_reals(self):
        """A 3A -> 0 reaction cannot fire at A <= 2: each factor (A - i) of C(A, 3) is clipped at 0.
        From A = 0.5 the raw cubic A(A-1)(A-2)/6 = 0.0625 would be positive; it must not fire
        there either. From A = 3 it fires."""
        case = build({"A": 2}, {"trimer_loss": ("3 A -> 0", 1.0)})
        for a0 in (0.5, 1.5, 2.0):
            res = cle.simulate(case.net, case.rates, np.array([a0]), np.linspace(0.0, 5.0, 6), seeds(3), CAP)
            assert (res.events == 0).all() and (res.counts == a0).all(), a0
        case = build({"A": 3}, {"trimer_loss": ("3 A -> 0", 1.0)})
        res = cle.simulate(case.net, case.rates, case.x0, np.linspace(0.0, 5.0, 6), seeds(3), CAP)
        assert (res.events > 0).all() and (res.counts[:, -1, 0] < 3.0).all()
