"""Fast exact samplers and in-memory records for the ABC-SMC core (sweep.fit.loop) in tests.

Immigration-death 0 -> X (rate k), X -> 0 (rate g per molecule), started from X(0) = 0: X(t)
is exactly Poisson with mean (k/g)(1 - exp(-g t)) at every t (a monomolecular network started
from zero molecules stays Poisson: Jahnke & Huisinga 2007), so replicates are drawn directly.
"""

from __future__ import annotations

import numpy as np

from sweep.fit import smc
from sweep.fit.distances import Component, distances
from sweep.fit.loop import Evaluated


def poisson_mean(k, g, t):
    return k / g * (1.0 - np.exp(-g * t))


class MemoryRecords:
    def __init__(self):
        self.batches, self.populations = {}, {}

    def batch(self, t, b):
        return self.batches.get((t, b))

    def save_batch(self, batch, evaluated):
        self.batches[(batch.round, batch.index)] = evaluated

    def population(self, t):
        return self.populations.get(t)

    def save_population(self, p):
        self.populations[p.round] = p


class PoissonEvaluator:
    """Candidates (k,) with g fixed, or (k, g): R cells at each observed time, drawn exactly."""

    def __init__(self, observed: tuple[Component, ...], replicates: int, seed: int, kind: str = "mean", g: float = 1.0):
        self.observed, self.replicates, self.seed, self.kind, self.g = observed, replicates, seed, kind, g
        self.per_candidate = replicates

    def evaluate(self, batch):
        m = batch.theta.shape[0]
        sims = [np.zeros((m, self.replicates)) for _ in self.observed]
        for i in np.flatnonzero(batch.inside):  # outside the prior: never simulated
            rng = smc.stream(self.seed, 7, batch.round, batch.first + i)
            k = batch.theta[i, 0]
            g = batch.theta[i, 1] if batch.theta.shape[1] > 1 else self.g
            for j, comp in enumerate(self.observed):
                sims[j][i] = rng.poisson(poisson_mean(k, g, comp.time), self.replicates)
        ok = [np.ones((m, self.replicates), dtype=bool) for _ in self.observed]
        d, parts = distances(self.kind, "reject", sims, ok, self.observed)
        d[~batch.inside] = np.inf
        parts[~batch.inside] = np.inf
        return Evaluated(d, parts, np.zeros(m, dtype=np.int64))


def observed_data(k, g, times, cells, seed) -> tuple[Component, ...]:
    rng = np.random.default_rng(seed)
    return tuple(Component(t, "only", "X", np.sort(rng.poisson(poisson_mean(k, g, t), cells).astype(float)))
                 for t in times)
