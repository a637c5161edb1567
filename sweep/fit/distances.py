"""Distances between simulated and observed distributions, one per (time, condition, species).

Each *component* compares the R simulated replicates of one particle with the n observed cells
at one time, condition and species. The particle's distance is the root mean square of its
components, so a tolerance means the same whatever the number of components.

- ``wasserstein``: the 1-D Wasserstein (earth mover's) distance between the two empirical
  distributions, divided by the observed standard deviation. It sees the whole shape (modes,
  tails, bimodality from promoter switching), and needs no summary chosen in advance.
- ``moments``: mean and variance, each as a z-score by its standard error under the observed
  data, sqrt((z_mean^2 + z_var^2) / 2). Cheaper in replicates and easier to read; blind to shape
  beyond the second moment.
- ``mean``: |z_mean| alone. For a model whose data's sufficient statistic is the mean (Poisson
  counts: the conjugate test), where it gives the exact posterior as the tolerance shrinks.

The scales come from the observed data only (fixed numbers for the whole fit): a scale that moved
with each simulation would change which particles a tolerance accepts. Standard errors:
s/sqrt(n) for the mean; sqrt((m4 - s^4 (n-3)/(n-1)) / n) for the variance (the sampling variance
of s^2, from memory; see e.g. any text on moments of the sample variance), with m4 the fourth
central moment. A zero scale (all cells equal) is replaced by 1/sqrt(n).

Unfinished replicates (stopped at the event cap, or a numerical failure) are ``reject``ed by
default: a candidate with any of them gets an infinite distance (never accepted; counted).
``drop`` compares the finished ones only (still counted), and rejects a candidate left with
fewer than two finished replicates in a component.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

KINDS = ("wasserstein", "moments", "mean")
UNFINISHED = ("reject", "drop")


@dataclass(frozen=True)
class Component:
    """The observed cells at one (time, condition, species), with their fixed scales."""

    time: float
    condition: str
    species: str
    values: np.ndarray  # sorted

    @property
    def n(self) -> int:
        return int(self.values.size)

    @property
    def scale(self) -> float:
        s = float(np.std(self.values, ddof=1)) if self.n > 1 else 0.0
        return s if s > 0 else 1.0 / np.sqrt(self.n)

    @property
    def se_mean(self) -> float:
        s = float(np.std(self.values, ddof=1)) if self.n > 1 else 0.0
        return s / np.sqrt(self.n) if s > 0 else 1.0 / np.sqrt(self.n)

    @property
    def se_var(self) -> float:
        n = self.n
        if n < 4:
            return 1.0 / np.sqrt(n)
        centred = self.values - self.values.mean()
        s2 = float(np.var(self.values, ddof=1))
        m4 = float(np.mean(centred ** 4))
        var = (m4 - s2 * s2 * (n - 3) / (n - 1)) / n
        return float(np.sqrt(var)) if var > 0 else 1.0 / np.sqrt(n)


def wasserstein(simulated: np.ndarray, observed: np.ndarray) -> np.ndarray:
    """W1 between each row of ``simulated`` (P, R) and ``observed`` (n,), both unweighted.

    W1 = integral over q in (0, 1) of |F_sim^-1(q) - F_obs^-1(q)|: both quantile functions are
    steps at multiples of 1/R and 1/n, so the integral is a sum over their merged breakpoints,
    the same for every row (Villani 2009; checked against ``scipy.stats.wasserstein_distance``).
    """
    sim = np.sort(np.asarray(simulated, dtype=np.float64), axis=1)
    obs = np.sort(np.asarray(observed, dtype=np.float64))
    r, n = sim.shape[1], obs.size
    q = np.union1d(np.arange(1, r + 1) / r, np.arange(1, n + 1) / n)
    widths = np.diff(np.concatenate(([0.0], q)))
    middle = q - widths / 2
    i = np.minimum(np.ceil(middle * r).astype(np.int64) - 1, r - 1)
    j = np.minimum(np.ceil(middle * n).astype(np.int64) - 1, n - 1)
    return np.abs(sim[:, i] - obs[j][None, :]) @ widths


def component(kind: str, simulated: np.ndarray, observed: Component) -> np.ndarray:
    """One component's distance for each row of ``simulated`` (P, R) (all replicates finished)."""
    if kind == "wasserstein":
        return wasserstein(simulated, observed.values) / observed.scale
    sim = np.asarray(simulated, dtype=np.float64)
    z_mean = (sim.mean(axis=1) - observed.values.mean()) / observed.se_mean
    if kind == "mean":
        return np.abs(z_mean)
    var_obs = float(np.var(observed.values, ddof=1)) if observed.n > 1 else 0.0
    z_var = (sim.var(axis=1, ddof=1) - var_obs) / observed.se_var
    return np.sqrt((z_mean ** 2 + z_var ** 2) / 2)


def distances(kind: str, unfinished: str, simulated: list[np.ndarray], finished: list[np.ndarray],
              observed: tuple[Component, ...]) -> tuple[np.ndarray, np.ndarray]:
    """(distance (P,), components (P, K)) from each component's simulated (P, R) values and finished mask."""
    p = simulated[0].shape[0]
    out = np.full((p, len(observed)), np.inf)
    for k, (sim, ok, obs) in enumerate(zip(simulated, finished, observed)):
        complete = ok.all(axis=1)
        if complete.any():
            out[complete, k] = component(kind, sim[complete], obs)
        if unfinished == "drop":
            for row in np.flatnonzero(~complete):
                if ok[row].sum() >= 2:
                    out[row, k] = component(kind, sim[row, ok[row]][None, :], obs)[0]
    total = np.sqrt(np.mean(out ** 2, axis=1))
    return np.where(np.isfinite(total), total, np.inf), out
