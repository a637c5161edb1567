"""The bimodality rule (sweep.analysis.modes): two-normal mixture with Ashman's D > 2 (Ashman,
Bird & Zepf 1994, Astron. J. 108:2348), each mode >= 5 % and a histogram valley of at most half
the lower peak and more than 3.29 Poisson sd below it (our own guards). Fixed seeds throughout.

Unimodal laws a gene circuit produces: Poisson (immigration-death, common practice), negative
binomial (bursty expression; Shahrezaei & Swain 2008, PNAS 105:17256, protein number is negative
binomial when bursts are geometric) and gamma (its continuous limit, Friedman, Cai & Xie 2006,
Phys. Rev. Lett. 97:168302; volumes and pages from memory); none may be called bimodal.
"""

from __future__ import annotations

import numpy as np
import pytest

from sweep.analysis.modes import bimodal


def _unimodal(rng, n):
    samples = [rng.poisson(m, n) for m in (0.3, 1, 5, 30, 1000)]
    for mean, fano in ((5, 3), (100, 50), (500, 200), (10, 30)):
        samples.append(rng.negative_binomial(mean / (fano - 1), 1 / fano, n))
    samples += [np.round(rng.gamma(k, 100 / k, n)) for k in (0.5, 2, 5)]
    samples += [rng.binomial(20, 0.5, n), rng.integers(0, 50, n)]
    return samples


@pytest.mark.parametrize("n", [50, 300, 2000])
def test_unimodal_counts_are_never_called_bimodal(n):
    rng = np.random.default_rng(20261202 + n)
    for _ in range(5):
        for i, x in enumerate(_unimodal(rng, n)):
            assert bimodal(x) is None, (n, i)


def test_two_states_are_found_with_their_shares():
    rng = np.random.default_rng(7)
    n = 1000
    off = rng.random(n) < 0.3
    x = np.where(off, 0, rng.poisson(50, n))  # an OFF state at 0 and an ON state near 50
    m = bimodal(x)
    assert m is not None and m.low_share == pytest.approx(off.mean(), abs=1e-12)
    assert m.low_peak < 5 and 40 < m.high_peak < 60 and m.ashman_d > 2
    low, high = rng.poisson(5, n), rng.negative_binomial(20, 20 / 520, n)  # two bursty states
    both = np.where(rng.random(n) < 0.2, low, high)
    found = bimodal(both)
    assert found is not None and 0.15 < found.low_share < 0.25


def test_too_few_replicates_or_a_constant_count_give_no_answer():
    assert bimodal(np.array([0, 0, 50, 50] * 4)) is None  # 16 replicates: below MIN_REPLICATES
    assert bimodal(np.full(500, 7)) is None
    assert bimodal(np.array([np.nan] * 100)) is None
