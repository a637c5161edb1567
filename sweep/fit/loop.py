"""The ABC-SMC round loop: batches of candidates until a round has its particles, then the stop rules.

The loop owns no files and runs no simulations itself. An *evaluator* turns a batch of
candidates into distances (``sweep.fit.engine`` runs each batch as a sweep; tests plug in an
exact sampler), and a *records* object keeps each batch's and each round's results
(``sweep.fit.records`` in the fit's folder; a dict in tests). On a rerun every batch and round
already recorded is read back instead of recomputed, and everything else is a deterministic
function of what was recorded, the spec and the root seed: so a fit killed at any point and run
again ends with the same bytes as one never interrupted.

A round proposes candidates in batches. The first batch's size is the particles wanted divided
by the acceptance expected (the last round's rate times the tolerance quantile), times a
margin; each further batch is sized from the rate seen so far in the round, and holds at least a
quarter of the particles (``MIN_BATCH``). Accepted candidates
are taken in candidate order until the round has its particles; the surplus of the last batch is
simulated but not used (it is recorded, and counted in the budget).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Protocol

import numpy as np

from sweep.errors import StoreError
from sweep.fit import smc
from sweep.fit.priors import Prior

MARGIN = 1.2  # batches propose this much more than the expected acceptance needs
MIN_RATE = 1e-3  # the acceptance assumed at worst when sizing a batch
# a further batch proposes at least this share of the particles: sized from the shortfall alone, a
# round's batches shrank geometrically (105, 40, 24, 7, 5, 5, 3, 2, 2 candidates in the demo's second
# round), and each costs a sweep's set-up, a barrier and a read-back (~0.5 s here) whatever its size
MIN_BATCH = 0.25


@dataclass(frozen=True)
class Settings:
    """How the procedure runs and when it stops (``[fit]`` of a fit spec)."""

    particles: int = 200
    quantile: float = 0.5
    tolerance: float | None = None  # stop once eps_t is at most this
    max_rounds: int = 10
    min_acceptance: float | None = 0.01  # stop once a round's acceptance falls below this
    max_simulations: int | None = None  # trajectories, all rounds together
    max_batch: int | None = None  # candidates per batch at most (default 20 x particles)
    seed: int = 0


@dataclass(frozen=True)
class Batch:
    round: int
    index: int
    first: int  # index of its first candidate within the round
    theta: np.ndarray
    ancestor: np.ndarray
    inside: np.ndarray


@dataclass(frozen=True)
class Evaluated:
    """Distances of a batch's candidates (inf where not simulated or rejected for unfinished replicates)."""

    distance: np.ndarray
    components: np.ndarray  # (candidate, component)
    unfinished: np.ndarray  # replicates stopped early (event cap, numerical failure), per candidate


class Evaluator(Protocol):
    per_candidate: int  # trajectories one simulated candidate costs

    def evaluate(self, batch: Batch) -> Evaluated: ...


class Records(Protocol):
    def batch(self, round_: int, index: int) -> Evaluated | None: ...

    def save_batch(self, batch: Batch, evaluated: Evaluated) -> None: ...

    def population(self, round_: int) -> smc.Population | None: ...

    def save_population(self, population: smc.Population) -> None: ...


@dataclass(frozen=True)
class Outcome:
    populations: tuple[smc.Population, ...]
    stopped: str  # "tolerance", "rounds", "acceptance", "budget"
    simulations: int  # trajectories simulated, all rounds
    unfinished: int  # replicates stopped early, all rounds

    @property
    def posterior(self) -> smc.Population:
        return self.populations[-1]


def fit(settings: Settings, prior: Prior, evaluator: Evaluator, records: Records,
        on_round: Callable[[smc.Population], None] | None = None) -> Outcome:
    """Run (or resume) ABC-SMC to a stop rule and return every complete round."""
    populations: list[smc.Population] = []
    used = unfinished = 0
    stopped = ""
    while not stopped:
        t = len(populations)
        previous = populations[-1] if populations else None
        population, spent, lost, why = _round(settings, prior, evaluator, records, t, previous, used)
        used += spent
        unfinished += lost
        if population is None:
            stopped = why
            break
        populations.append(population)
        if on_round:
            on_round(population)
        stopped = _stop_after(settings, population, used, evaluator.per_candidate)
    if not populations:
        raise RuntimeError("the budget does not cover the prior round; raise max_simulations")
    return Outcome(tuple(populations), stopped, used, unfinished)


def _stop_after(settings: Settings, population: smc.Population, used: int, per: int) -> str:
    if settings.tolerance is not None and population.tolerance <= settings.tolerance:
        return "tolerance"
    if population.round + 1 >= settings.max_rounds:
        return "rounds"
    if population.round > 0 and settings.min_acceptance is not None and population.acceptance < settings.min_acceptance:
        return "acceptance"
    if settings.max_simulations is not None and used + per > settings.max_simulations:
        return "budget"
    return ""


def _round(settings, prior, evaluator, records, t, previous, used):
    """One round: (population or None, trajectories spent, unfinished replicates, why it stopped early)."""
    n = settings.particles
    eps = smc.tolerance(previous, settings.quantile, settings.tolerance)
    recorded = records.population(t)
    if recorded is not None:
        return recorded, recorded.simulated * evaluator.per_candidate, recorded.unfinished, ""
    taken: list[tuple[np.ndarray, float, np.ndarray]] = []
    spent = lost = simulated = proposed = accepted = b = 0
    rate = 1.0 if previous is None else max(previous.acceptance * settings.quantile, MIN_RATE)
    most = settings.max_batch or 20 * n
    while len(taken) < n:
        if previous is None:
            size = n
        else:
            wanted = math.ceil(MARGIN * (n - len(taken)) / max(rate, MIN_RATE))
            size = min(most, wanted if b == 0 else max(wanted, math.ceil(MIN_BATCH * n)))
        if settings.max_simulations is not None:
            size = min(size, (settings.max_simulations - used - spent) // evaluator.per_candidate)
            if size < 1:
                return None, spent, lost, "budget"
        if previous is not None and settings.min_acceptance is not None and simulated and \
                simulated >= n / settings.min_acceptance:
            return None, spent, lost, "acceptance"
        theta, ancestor, inside = smc.propose(prior, previous, settings.seed, t, proposed, size)
        batch = Batch(t, b, proposed, theta, ancestor, inside)
        evaluated = records.batch(t, b)
        if evaluated is not None and evaluated.distance.shape[0] != size:
            raise StoreError(f"round {t} batch {b} was recorded with {evaluated.distance.shape[0]} candidates, "
                             f"this version proposes {size} (its batch sizing changed): finish the fit with the "
                             "version that began it, or run with --fresh")
        if evaluated is None:
            evaluated = evaluator.evaluate(batch)
            records.save_batch(batch, evaluated)
        ok = inside & np.isfinite(evaluated.distance) & (evaluated.distance <= eps)
        spent += int(inside.sum()) * evaluator.per_candidate
        lost += int(evaluated.unfinished.sum())
        simulated += int(inside.sum())
        proposed += size
        accepted += int(ok.sum())
        for i in np.flatnonzero(ok)[: n - len(taken)]:
            taken.append((theta[i], float(evaluated.distance[i]), evaluated.components[i]))
        rate = accepted / simulated if simulated else rate
        b += 1
    values = np.array([x[0] for x in taken])
    population = smc.Population(t, values, smc.weights(prior, values, previous), np.array([x[1] for x in taken]),
                                eps, proposed, simulated, accepted, b, np.array([x[2] for x in taken]), lost)
    records.save_population(population)
    return population, spent, lost, ""
