"""Is the distribution of a count at one time clearly bimodal? And if so, where are its two modes?

A bistable point (a toggle switch, a positive-feedback gene) splits its replicates into two
states; the mean and a 5-95 % band then describe neither. ``bimodal`` answers for one sample
of counts (one point, one time, one species), by three tests that must all pass:

1. Separation. A mixture of two normal distributions is fitted by maximum likelihood (the EM
   algorithm, Dempster, Laird & Rubin 1977), and Ashman's D = sqrt(2) |mu1 - mu2| /
   sqrt(s1^2 + s2^2) must exceed 2, the separation Ashman, Bird & Zepf (1994), Astron. J.
   108:2348, give for a clean split into two populations. Each variance is kept at least
   1/12, the variance of rounding to whole molecules, so a state sitting on one count (an OFF
   state at 0) stays a normal of finite width.
2. Each mode is a real share: the smaller holds at least ``MIN_SHARE`` (5 %) of the replicates.
3. A valley in the data, not only in the fit: counts are discrete and often skewed, and a
   mixture fit alone calls a Poisson count of mean 0.5 (mostly 0, sometimes 1) "two states".
   In a histogram of the counts (whole-number bins, 2 n^(1/3) of them by the Rice rule,
   common practice, at most ``BINS``), some bin between the two peaks must hold at most
   ``VALLEY`` (half) of the lower peak, and fall short of it by more than ``Z`` = 3.29 Poisson
   standard deviations, sqrt(peak + valley) (a one-sided level of 0.05 %), so that sampling
   noise in a flat or skewed histogram does not make a valley.

Tests 2 and 3 and their levels are our own choice (no published source); the tests in
tests/sweep/test_modes.py hold them against unimodal Poisson, negative binomial (bursty
expression), gamma and log-normal samples and against two-state mixtures, with fixed seeds.

The split between the modes is the emptiest bin of that valley; ``low_share`` is the fraction
of replicates below it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

MIN_SHARE = 0.05
VALLEY = 0.5
ASHMAN_D = 2.0
BINS = 40
Z = 3.29
MIN_REPLICATES = 20
_ITERATIONS = 200


@dataclass(frozen=True)
class Modes:
    """Two modes of one sample: where the split falls and what lies on each side."""

    split: float        # counts <= split are the low mode
    low_share: float    # fraction of the replicates in the low mode
    low_mean: float
    high_mean: float
    low_peak: float     # the most populated count (bin centre) of each mode
    high_peak: float
    ashman_d: float

    @property
    def high_share(self) -> float:
        return 1.0 - self.low_share


def bimodal(values: np.ndarray) -> Modes | None:
    """The two modes of ``values`` (counts of the finished replicates; NaN ignored), or None.

    Example
    -------
    >>> rng = np.random.default_rng(0)
    >>> both = np.concatenate([rng.poisson(5, 600), rng.poisson(80, 400)])
    >>> m = bimodal(both)
    >>> round(m.low_share, 2), bimodal(rng.poisson(30, 1000)) is None
    (0.6, True)
    """
    x = np.asarray(values, dtype=np.float64)
    x = x[np.isfinite(x)]
    if x.size < MIN_REPLICATES or np.ptp(x) < 2:
        return None
    counts, _, _ = _histogram(x)
    if not _any_valley(counts):
        return None  # most samples end here, before the (costlier) mixture fit
    fit = _mixture(x)
    if fit is None:
        return None
    (w1, m1, v1), (w2, m2, v2) = fit
    d = float(np.sqrt(2.0) * abs(m2 - m1) / np.sqrt(v1 + v2))
    if d <= ASHMAN_D or min(w1, w2) < MIN_SHARE:
        return None
    valley = _valley(x, m1, m2)
    if valley is None:
        return None
    split, low_peak, high_peak = valley
    low = x <= split
    share = float(low.mean())
    if min(share, 1 - share) < MIN_SHARE:
        return None
    return Modes(split, share, float(x[low].mean()), float(x[~low].mean()), low_peak, high_peak, d)


def _mixture(x: np.ndarray) -> tuple[tuple[float, float, float], tuple[float, float, float]] | None:
    """Maximum-likelihood two-normal mixture by EM, started from three splits; components by mean."""
    floor = 1.0 / 12.0
    best, best_ll = None, -np.inf
    for q in (0.25, 0.5, 0.75):
        cut = np.quantile(x, q)
        low, high = x[x <= cut], x[x > cut]
        if not low.size or not high.size:
            continue
        params = np.array([[low.size / x.size, low.mean(), max(low.var(), floor)],
                           [high.size / x.size, high.mean(), max(high.var(), floor)]])
        ll_old = -np.inf
        for _ in range(_ITERATIONS):
            dens = params[:, 0, None] * np.exp(-0.5 * (x - params[:, 1, None]) ** 2 / params[:, 2, None]) \
                / np.sqrt(2 * np.pi * params[:, 2, None])
            total = dens.sum(axis=0)
            total = np.where(total > 0, total, 1e-300)
            ll = float(np.log(total).sum())
            resp = dens / total
            mass = resp.sum(axis=1)
            if np.any(mass <= 0):
                break
            means = (resp * x).sum(axis=1) / mass
            var = np.maximum((resp * (x - means[:, None]) ** 2).sum(axis=1) / mass, floor)
            params = np.column_stack([mass / x.size, means, var])
            if ll - ll_old < 1e-8 * abs(ll):
                break
            ll_old = ll
        if ll > best_ll:
            best_ll, best = ll, params
    if best is None:
        return None
    order = np.argsort(best[:, 1])
    a, b = best[order[0]], best[order[1]]
    return (float(a[0]), float(a[1]), float(a[2])), (float(b[0]), float(b[1]), float(b[2]))


def _histogram(x: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
    """Counts per whole-number bin (Rice rule: 2 n^(1/3) bins), the bins' first values, their width."""
    low, high = int(np.floor(x.min())), int(np.ceil(x.max()))
    bins = min(BINS, max(3, int(np.ceil(2 * x.size ** (1 / 3)))))
    width = max(1, int(np.ceil((high - low + 1) / bins)))
    edges = low + width * np.arange((high - low) // width + 2)
    return np.histogram(x, bins=edges - 0.5)[0].astype(float), edges, width


def _deep(valley: np.ndarray, peak: np.ndarray) -> np.ndarray:
    """Whether a bin of ``valley`` counts is a real dip below a lower peak of ``peak`` counts."""
    return (valley <= VALLEY * peak) & (peak - valley > Z * np.sqrt(peak + valley))


def _any_valley(counts: np.ndarray) -> bool:
    """Some bin lies deep below the highest bins on both of its sides."""
    if counts.size < 3:
        return False
    left = np.maximum.accumulate(counts)[:-2]
    right = np.maximum.accumulate(counts[::-1])[::-1][2:]
    return bool(np.any(_deep(counts[1:-1], np.minimum(left, right))))


def _valley(x: np.ndarray, m1: float, m2: float) -> tuple[float, float, float] | None:
    """(split, low peak, high peak) when the histogram dips between the two fitted means."""
    counts, edges, width = _histogram(x)
    centres = edges[:-1] + (width - 1) / 2
    left = counts[centres <= (m1 + m2) / 2]
    right = counts[centres > (m1 + m2) / 2]
    if not left.size or not right.size:
        return None
    i = int(np.argmax(left))
    j = left.size + int(np.argmax(right))
    if j - i < 2:
        return None  # the two peaks are neighbours: no bin between them
    between = counts[i + 1:j]
    k = i + 1 + int(np.argmin(between))
    if not _deep(counts[k], min(counts[i], counts[j])):
        return None
    return float(edges[k] + width - 1), float(centres[i]), float(centres[j])


#: columns of ``table`` (and of modes.csv, after the point's parameters)
COLUMNS = ("point", "time", "species", "replicates", "low_share", "high_share", "split", "low_mean", "high_mean",
           "low_peak", "high_peak", "ashman_d")


def table(ds, species, times, points_per_block: int = 256):
    """Every clearly bimodal (point, time, species) of a store, one row each (``COLUMNS``).

    ``ds`` is the store's Dataset; only finished replicates (status 0) count. Reads the counts
    of ``species`` at ``times`` a block of points at a time.
    """
    import pandas as pd

    rows = []
    grid = ds["time"].values
    t_idx = [int(np.flatnonzero(grid == t)[0]) for t in times]
    names = [str(s) for s in ds["species"].values]
    s_idx = [names.index(s) for s in species]
    for start in range(0, ds.sizes["point"], points_per_block):
        stop = min(start + points_per_block, ds.sizes["point"])
        status = ds["status"].isel(point=slice(start, stop)).values
        counts = ds["counts"].isel(point=slice(start, stop), time=t_idx, species=s_idx).values
        for i in range(stop - start):
            ok = status[i] == 0
            for a, t in enumerate(times):
                for b, name in enumerate(species):
                    x = counts[i, ok, a, b].astype(np.float64)
                    found = bimodal(x[x >= 0])
                    if found is not None:
                        rows.append((start + i, float(t), name, int(ok.sum()), found.low_share, found.high_share,
                                     found.split, found.low_mean, found.high_mean, found.low_peak, found.high_peak,
                                     found.ashman_d))
    return pd.DataFrame(rows, columns=list(COLUMNS))
