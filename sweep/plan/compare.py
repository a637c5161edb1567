"""Check an approximate method against an exact one before a sweep: ``sweep plan --compare-methods``.

Tau-leaping, the chemical Langevin equation and the rate equations are fast because they
assume high copy numbers (``sweep.analysis.validity``). Whether that holds for a model is a
question for the model, so it is answered by simulating: at a few of the design's points the
exact direct method (Gillespie 1977) and the spec's method each run a short batch of
replicates, and the mean and variance of every species at the last sample time are compared,
each difference with its standard error (the two batches are independent: se of a difference
= sqrt(se1^2 + se2^2); the variance's se by the delta method, as in ``sweep.analysis.adequacy``).
A difference of more than ``Z`` = 3.29 standard errors (two-sided level 0.1 %) is flagged.
The time of the largest standardized difference of the mean over the whole grid is reported too.

Seeds: comparison replicate r of point p draws from ``SeedSequence(root, spawn_key=(p, r, 2))``
(exact) and ``(p, r, 3)`` (the spec's method): streams the sweep itself never uses.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from sweep.model import compile_network, initial_counts, rate_constants

if TYPE_CHECKING:
    from sweep.spec import Spec

EXACT = "direct"
Z = 3.29
KEYS = {"exact": 2, "approx": 3}
MAX_REPLICATES = 2000
MIN_REPLICATES = 20


@dataclass(frozen=True)
class Moments:
    """Mean and variance of one species at one time, with standard errors, from n replicates."""

    n: int
    mean: float
    se_mean: float
    var: float
    se_var: float


@dataclass(frozen=True)
class SpeciesComparison:
    species: str
    exact: Moments
    approx: Moments
    worst_time: float  # sample time of the largest |z| of the mean difference
    worst_z: float

    @property
    def mean_difference(self) -> tuple[float, float]:
        return self.approx.mean - self.exact.mean, float(np.hypot(self.exact.se_mean, self.approx.se_mean))

    @property
    def var_difference(self) -> tuple[float, float]:
        return self.approx.var - self.exact.var, float(np.hypot(self.exact.se_var, self.approx.se_var))

    @property
    def differs(self) -> bool:
        """The mean or the variance differs by more than ``Z`` standard errors (or the worst time's mean does)."""
        out = abs(self.worst_z) > Z
        for diff, se in (self.mean_difference, self.var_difference):
            out |= bool(np.isfinite(diff) and (abs(diff) > Z * se if se > 0 else diff != 0))
        return out


@dataclass(frozen=True)
class PointComparison:
    point: int
    values: tuple[tuple[str, float], ...]
    species: tuple[SpeciesComparison, ...]
    exact_seconds: float    # per replicate
    approx_seconds: float


@dataclass(frozen=True)
class Comparison:
    method: str
    exact: str
    time: float
    points: tuple[PointComparison, ...]

    @property
    def speedup(self) -> float:
        """How many times faster the spec's method ran than the exact one (per replicate, summed over points)."""
        approx = sum(p.approx_seconds for p in self.points)
        return sum(p.exact_seconds for p in self.points) / approx if approx > 0 else float("inf")


def compare(spec: Spec, seconds: float = 4.0, points: int = 3) -> Comparison:
    """Run the exact method beside ``spec.method`` at ``points`` points of the design, within ``seconds``.

    Parameters
    ----------
    spec : the loaded spec (its method is normally approximate: tau_leap, cle or ode).
    seconds : time budget, shared evenly between the points and the two methods (compilation excluded).
    points : how many of the design's points (the first, the last and evenly between).

    Example
    -------
    >>> result = compare(load("configs/reporter.toml").with_method("cle"))  # doctest: +SKIP
    """
    import kernels

    grid = spec.points()
    chosen = sorted({int(round(v)) for v in np.linspace(0, grid.shape[0] - 1, min(points, grid.shape[0]))})
    network = compile_network(spec.model)
    times = np.asarray(spec.times)
    exact, approx = kernels.get(EXACT).simulate, kernels.get(spec.method).simulate
    options = dict(spec.options)
    deterministic = spec.method in kernels.DETERMINISTIC
    values0 = spec.values_at(grid[chosen[0]])
    args0 = (network, rate_constants(spec.model, values0), initial_counts(spec.model, values0), times)
    exact(*args0, [np.random.SeedSequence(0)], 1)  # compile (or load numba's cache) outside the clock
    approx(*args0, [np.random.SeedSequence(0)], 1, **options)
    budget = seconds / (2 * len(chosen))
    out = []
    for p in chosen:
        values = spec.values_at(grid[p])
        args = (network, rate_constants(spec.model, values), initial_counts(spec.model, values), times)
        ex, ex_s = _batch(lambda seeds: exact(*args, seeds, spec.max_events), spec.seed, p, "exact", budget)
        limit = 1 if deterministic else MAX_REPLICATES
        ap, ap_s = _batch(lambda seeds: approx(*args, seeds, spec.max_events, **options), spec.seed, p, "approx",
                          budget, limit)
        rows = tuple(_species(name, ex[:, :, s], ap[:, :, s], times) for s, name in enumerate(spec.model.species))
        out.append(PointComparison(p, tuple(zip(spec.param_names, map(float, grid[p]))), rows, ex_s, ap_s))
    return Comparison(spec.method, EXACT, float(times[-1]), tuple(out))


def _batch(simulate, root: int, point: int, which: str, budget: float, limit: int = MAX_REPLICATES):
    """Replicates in doubling batches until the budget is spent: (finished counts (r, t, s), seconds per replicate)."""
    parts, spent, done, n = [], 0.0, 0, min(MIN_REPLICATES, limit)
    while done < limit:
        seeds = [np.random.SeedSequence(root, spawn_key=(point, r, KEYS[which])) for r in range(done, done + n)]
        began = time.perf_counter()
        result = simulate(seeds)
        spent += time.perf_counter() - began
        parts.append(result.counts[result.status == 0].astype(np.float64))
        done += n
        if spent >= budget:
            break
        n = int(min(limit - done, max(n, n * min(2.0, (budget - spent) / max(spent, 1e-9)))))
        if n <= 0:
            break
    return np.concatenate(parts), spent / max(done, 1)


def _moments(x: np.ndarray) -> Moments:
    n = x.size
    if n == 0:
        return Moments(0, np.nan, np.nan, np.nan, np.nan)
    mean = float(x.mean())
    if n < 2:
        return Moments(n, mean, 0.0, 0.0, 0.0)
    var = float(x.var(ddof=1))
    m4 = float(((x - mean) ** 4).mean())
    se_var = float(np.sqrt(max((m4 - (n - 3) / (n - 1) * var ** 2) / n, 0.0)))  # as sweep.analysis.adequacy
    return Moments(n, mean, float(np.sqrt(var / n)), var, se_var)


def _species(name: str, exact: np.ndarray, approx: np.ndarray, times: np.ndarray) -> SpeciesComparison:
    """Compare one species: moments at the last time, and the worst standardized mean difference over time."""
    with np.errstate(divide="ignore", invalid="ignore"):
        se = np.hypot(exact.std(axis=0, ddof=1) / np.sqrt(exact.shape[0]),
                      approx.std(axis=0, ddof=1) / np.sqrt(approx.shape[0]) if approx.shape[0] > 1 else 0.0)
        z = (approx.mean(axis=0) - exact.mean(axis=0)) / se
    z = np.where(np.isfinite(z), z, 0.0)
    worst = int(np.argmax(np.abs(z)))
    return SpeciesComparison(name, _moments(exact[:, -1]), _moments(approx[:, -1]), float(times[worst]),
                             float(z[worst]))
