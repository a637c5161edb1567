"""The ABC-SMC procedure (sweep.fit.smc, sweep.fit.loop) against exact answers, with exact fast samplers.

Every test has fixed seeds, so each outcome is a fixed number: a statistical check below either
always passes or always fails (no flakes); the significance levels say how strict each one is.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from sweep.design.margins import Margin
from sweep.fit import distances, smc
from sweep.fit.loop import Settings, fit
from sweep.fit.priors import Prior
from sweep.fit.summary import weighted_quantile
from support.fit import MemoryRecords, PoissonEvaluator, observed_data

T_STATIONARY = 8.0  # 8 relaxation times of g = 1: the data are Poisson((k/g)(1 - e^-8))


def test_wasserstein_matches_scipy():
    # reference: scipy.stats.wasserstein_distance (the 1-D W1 between empirical distributions, Villani 2009)
    rng = np.random.default_rng(0)
    for r, n in ((30, 30), (17, 40), (200, 63)):
        sims = rng.poisson(8.0, (5, r)).astype(float)
        obs = rng.normal(8.0, 3.0, n)
        ours = distances.wasserstein(sims, obs)
        ref = [stats.wasserstein_distance(row, obs) for row in sims]
        np.testing.assert_allclose(ours, ref, rtol=1e-12, atol=1e-12)


def test_prior_density_matches_scipy():
    # reference: scipy.stats (loguniform, truncnorm, lognorm); working-space density = density x Jacobian
    prior = Prior((Margin("a", "log-uniform", 0.1, 10.0), Margin("b", "normal", 0.0, None, mean=1.0, sd=2.0),
                   Margin("c", "lognormal", None, None, median=3.0, sigma=0.5)))
    theta = np.array([[0.5, 0.3, 2.0], [7.0, 4.0, 5.0]])
    z = prior.to_work(theta)
    expected = (stats.loguniform(0.1, 10.0).logpdf(theta[:, 0]) + np.log(theta[:, 0])
                + stats.truncnorm((0 - 1.0) / 2.0, np.inf, loc=1.0, scale=2.0).logpdf(theta[:, 1])
                + stats.lognorm(0.5, scale=3.0).logpdf(theta[:, 2]) + np.log(theta[:, 2]))
    np.testing.assert_allclose(prior.log_density(z), expected, rtol=1e-10)
    assert not prior.inside(np.array([[20.0, 1.0, 1.0]]))[0]


def _conjugate_fit(k_true, cells, data_seed, fit_seed, particles, tolerance_counts, quantile=0.5):
    """ABC-SMC on stationary immigration-death data, summary = sample mean ("mean" distance).

    The mean distance is |S_sim - S_obs| / (n se); a tolerance of ``tolerance_counts`` molecules
    of the total S, divided by n se, accepts |S_sim - S_obs| <= tolerance_counts.
    """
    observed = observed_data(k_true, 1.0, (T_STATIONARY,), cells, data_seed)
    comp = observed[0]
    tol = (tolerance_counts + 0.5) / (cells * comp.se_mean)
    prior = Prior((Margin("k", "uniform", 1.0, 30.0),))
    out = fit(Settings(particles=particles, quantile=quantile, tolerance=tol, max_rounds=20, min_acceptance=0.005,
                       seed=fit_seed), prior, PoissonEvaluator(observed, cells, fit_seed), MemoryRecords())
    # exact posterior under the flat prior: Gamma(S + 1, rate n (1 - e^-gT) / g) (Poisson-gamma conjugacy,
    # Gelman et al. 2013, BDA3 sec. 2.6; the flat prior's truncation to [1, 30] is > 10 sd away)
    exact = stats.gamma(a=comp.values.sum() + 1, scale=1.0 / (cells * (1.0 - np.exp(-T_STATIONARY))))
    return out, exact


def test_conjugate_immigration_death_posterior_is_gamma():
    out, exact = _conjugate_fit(10.0, 30, data_seed=5, fit_seed=3, particles=400, tolerance_counts=2)
    assert out.stopped == "tolerance"
    p = out.posterior
    theta, w = p.theta[:, 0], p.weight
    mean = np.sum(w * theta)
    sd = np.sqrt(np.sum(w * (theta - mean) ** 2))
    # KS test of the weighted particles against the exact CDF, n = Kish ESS, alpha = 0.01
    order = np.argsort(theta)
    d = np.max(np.abs(np.cumsum(w[order]) - exact.cdf(theta[order])))
    assert stats.kstwo.sf(d, int(p.ess)) > 0.01
    # mean within 0.25 exact sd (about 5 Monte Carlo standard errors at ESS ~ 390); sd within 15 %
    assert abs(mean - exact.mean()) < 0.25 * exact.std()
    assert 0.85 < sd / exact.std() < 1.15


def test_credible_intervals_are_calibrated():
    """Coverage of central 90 % intervals over 40 data sets with k drawn from the prior.

    With the truth drawn from the prior, an exact posterior's 90 % interval covers it with
    probability 0.9 (Cook, Gelman & Rubin 2006). Binomial(40, 0.9): 31 <= covered <= 39 holds with
    probability 0.98 (scipy.stats.binom), the stated tolerance; the seeds are fixed.
    """
    rng = np.random.default_rng(2026)
    truths = rng.uniform(2.0, 20.0, 40)
    covered = 0
    for i, k in enumerate(truths):
        observed = observed_data(k, 1.0, (T_STATIONARY,), 20, 1000 + i)
        comp = observed[0]
        prior = Prior((Margin("k", "uniform", 1.0, 30.0),))
        tol = 2.5 / (20 * comp.se_mean)
        out = fit(Settings(particles=120, quantile=0.3, tolerance=tol, max_rounds=12, min_acceptance=0.005, seed=i),
                  prior, PoissonEvaluator(observed, 20, i), MemoryRecords())
        lo, hi = weighted_quantile(out.posterior.theta[:, 0], out.posterior.weight, [0.05, 0.95])
        covered += lo <= k <= hi
    assert stats.binom(40, 0.9).cdf(39) - stats.binom(40, 0.9).cdf(30) > 0.97  # the tolerance, checked
    assert 31 <= covered <= 39, covered


@pytest.mark.parametrize("cells", [(30, 300)])
def test_two_parameter_recovery_and_shrinking_intervals(cells):
    """k and g of immigration-death from its transient (Poisson at each time, Jahnke & Huisinga 2007)."""
    k_true, g_true = 12.0, 0.5
    widths = []
    for n in cells:
        observed = observed_data(k_true, g_true, (0.5, 2.0, 8.0), n, 17)
        prior = Prior((Margin("k", "log-uniform", 1.0, 100.0), Margin("g", "log-uniform", 0.05, 5.0)))
        # moments distance: z-scores by the data's standard errors, so a fixed tolerance of 1 is
        # tighter in counts as the cells grow (sweep.fit.distances)
        out = fit(Settings(particles=200, quantile=0.5, tolerance=1.0, max_rounds=10, min_acceptance=0.01, seed=4),
                  prior, PoissonEvaluator(observed, n, 4, kind="moments"), MemoryRecords())
        p = out.posterior
        width = []
        for q, truth in enumerate((k_true, g_true)):
            lo, hi = weighted_quantile(p.theta[:, q], p.weight, [0.025, 0.975])
            assert lo <= truth <= hi, (n, q, lo, hi)
            width.append(hi - lo)
        widths.append(width)
    assert widths[1][0] < widths[0][0] and widths[1][1] < widths[0][1], widths


def test_every_choice_derives_from_seed_and_indices():
    prior = Prior((Margin("k", "uniform", 1.0, 30.0),))
    a, _, _ = smc.propose(prior, None, 7, 0, 0, 10)
    b, _, _ = smc.propose(prior, None, 7, 0, 4, 3)  # candidates 4..6 on their own
    np.testing.assert_array_equal(a[4:7], b)
    assert smc.batch_seed(7, 1, 0) != smc.batch_seed(7, 0, 1)


def test_later_batches_have_a_floor_and_a_changed_rule_is_refused(monkeypatch):
    """Sized from the shortfall alone, a round's later batches shrank to a few candidates, each a
    whole sweep (set-up, barrier, read-back). Every batch after a round's first proposes at least
    MIN_BATCH x particles; and records written under another sizing rule are refused on resume,
    naming the batch, instead of pairing recorded distances with other candidates."""
    from sweep.errors import StoreError
    from sweep.fit import loop

    observed = observed_data(10.0, 1.0, (T_STATIONARY,), 50, 3)
    prior = Prior((Margin("k", "uniform", 1.0, 30.0),))
    settings = Settings(particles=40, quantile=0.3, max_rounds=4, seed=11)
    records = MemoryRecords()
    fit(settings, prior, PoissonEvaluator(observed, 50, 11), records)
    later = [(t, b) for (t, b) in records.batches if t > 0 and b > 0]
    assert later, "the check needs a round with more than one batch"
    assert all(records.batches[key].distance.shape[0] >= loop.MIN_BATCH * 40 for key in later)

    monkeypatch.setattr(loop, "MIN_BATCH", 5.0)  # a floor of 200 candidates: above every recorded later batch
    assert all(records.batches[key].distance.shape[0] < 200 for key in later)
    floored = MemoryRecords()
    fit(settings, prior, PoissonEvaluator(observed, 50, 11), floored)
    floored_later = [ev.distance.shape[0] for (t, b), ev in floored.batches.items() if t > 0 and b > 0]
    assert floored_later and min(floored_later) >= 200

    resumed = MemoryRecords()
    resumed.batches = dict(records.batches)  # the batches only: every round is recomputed from them
    with pytest.raises(StoreError, match=r"round \d+ batch \d+ was recorded with \d+ candidates"):
        fit(settings, prior, PoissonEvaluator(observed, 50, 11), resumed)
