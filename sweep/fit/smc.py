"""The arithmetic of ABC-SMC: proposals, importance weights, tolerances, effective sample size.

Toni et al. (2009) give the scheme: round 0 samples the prior; round t draws an ancestor from
the weighted population of round t-1, perturbs it with a kernel K_t and keeps the candidate if
its simulated data lie within tolerance eps_t of the observed data. The weight of an accepted
particle is (Beaumont et al. 2009)

    w_i  proportional to  pi(theta_i) / sum_j w_j K_t(theta_i | theta_j).

K_t is a multivariate normal with twice the weighted covariance of the last population
(Beaumont et al. 2009; Filippi et al. 2013 discuss this choice), in the prior's working space
(``sweep.fit.priors``). A candidate the kernel puts outside the prior's support is not redrawn:
it is rejected without a simulation, so the proposal density is the untruncated mixture and the
weights above are exact importance weights (redrawing would truncate each kernel by an unknown
mass). The tolerance eps_t is a quantile of round t-1's distances (Drovandi & Pettitt 2011;
Del Moral et al. 2012), never below the stated final tolerance.

Randomness: candidate j of round t draws only from ``SeedSequence(root, spawn_key=(0xF17, 0, t, j))``,
so proposals do not depend on how candidates are split into batches, on workers or on resume.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import logsumexp

from sweep.fit.priors import Prior

FIT_KEY = 0xF17  # "FIT"; 4-tuple spawn keys never meet the sweep's 1-, 2- and 3-tuples
PROPOSAL, BATCH_SEED = 0, 1


def stream(root: int, *key: int) -> np.random.Generator:
    """The generator of one random choice of a fit, e.g. ``stream(root, PROPOSAL, t, j)``."""
    return np.random.default_rng(np.random.SeedSequence(root, spawn_key=(FIT_KEY, *key)))


def batch_seed(root: int, round_: int, batch: int) -> int:
    """The root seed of one batch's sweep: its replicate r of point p draws from (this seed, p, r)."""
    return int(np.random.SeedSequence(root, spawn_key=(FIT_KEY, BATCH_SEED, round_, batch)).generate_state(
        1, np.uint64)[0] >> np.uint64(1))


@dataclass(frozen=True)
class Population:
    """One round's accepted particles (parameter values), normalised weights and distances."""

    round: int
    theta: np.ndarray
    weight: np.ndarray
    distance: np.ndarray
    tolerance: float
    candidates: int  # proposed this round
    simulated: int  # of them simulated (inside the prior's support)
    accepted: int  # of them within tolerance (this population keeps the first ``len(theta)``)
    batches: int
    components: np.ndarray | None = None  # (particle, component) distances
    unfinished: int = 0  # replicates stopped early in this round's simulations

    @property
    def ess(self) -> float:
        return effective_size(self.weight)

    @property
    def acceptance(self) -> float:
        """Accepted per simulated candidate."""
        return self.accepted / self.simulated if self.simulated else 0.0


def effective_size(weight: np.ndarray) -> float:
    """Kish's effective sample size 1 / sum(w^2) of normalised weights (Kish 1965)."""
    w = np.asarray(weight, dtype=np.float64)
    w = w / w.sum()
    return float(1.0 / np.sum(w * w))


@dataclass(frozen=True)
class Kernel:
    """A normal perturbation kernel in working space: its Cholesky factor."""

    chol: np.ndarray

    @classmethod
    def fit(cls, z: np.ndarray, weight: np.ndarray) -> "Kernel":
        """Twice the weighted covariance of the population (Beaumont et al. 2009)."""
        w = weight / weight.sum()
        centred = z - w @ z
        cov = 2.0 * (centred * w[:, None]).T @ centred
        d = cov.shape[0]
        jitter = max(1e-12 * float(np.trace(cov)) / d, 1e-300)
        for _ in range(8):  # a degenerate population (all particles equal) still gives a kernel
            try:
                return cls(np.linalg.cholesky(cov + jitter * np.eye(d)))
            except np.linalg.LinAlgError:
                jitter *= 1e3
        return cls(np.eye(d) * 1e-6)

    def log_mixture(self, z_new: np.ndarray, z_old: np.ndarray, weight: np.ndarray) -> np.ndarray:
        """log sum_j w_j K(z_new_i | z_old_j), up to the kernel's constant, for each row of ``z_new``."""
        inv = np.linalg.inv(self.chol)
        a, b = z_new @ inv.T, z_old @ inv.T
        logw = np.log(weight / weight.sum())
        out = np.empty(z_new.shape[0])
        for s in range(0, z_new.shape[0], 256):  # rows in slices: N x N x d stays small
            diff = a[s:s + 256, None, :] - b[None, :, :]
            out[s:s + 256] = logsumexp(logw[None, :] - 0.5 * np.sum(diff * diff, axis=2), axis=1)
        return out


def propose(prior: Prior, previous: Population | None, root: int, round_: int, first: int,
            count: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Candidates ``first .. first+count-1`` of a round: values, ancestors (-1: the prior) and support mask."""
    d = len(prior.margins)
    theta = np.empty((count, d))
    ancestor = np.full(count, -1, dtype=np.int64)
    if previous is None:
        for i in range(count):
            theta[i] = prior.sample(stream(root, PROPOSAL, round_, first + i).random((1, d)))[0]
        return theta, ancestor, np.ones(count, dtype=bool)
    z_old = prior.to_work(previous.theta)
    kernel = Kernel.fit(z_old, previous.weight)
    cumulative = np.cumsum(previous.weight / previous.weight.sum())
    for i in range(count):
        rng = stream(root, PROPOSAL, round_, first + i)
        a = min(int(np.searchsorted(cumulative, rng.random(), side="right")), len(cumulative) - 1)
        ancestor[i] = a
        theta[i] = prior.from_work(z_old[a] + kernel.chol @ rng.standard_normal(d))[0]
    return theta, ancestor, prior.inside(theta)


def weights(prior: Prior, theta: np.ndarray, previous: Population | None) -> np.ndarray:
    """Normalised importance weights of accepted particles (Beaumont et al. 2009)."""
    if previous is None:
        return np.full(theta.shape[0], 1.0 / theta.shape[0])
    z_old, z_new = prior.to_work(previous.theta), prior.to_work(theta)
    kernel = Kernel.fit(z_old, previous.weight)
    logw = prior.log_density(z_new) - kernel.log_mixture(z_new, z_old, previous.weight)
    w = np.exp(logw - logw.max())
    return w / w.sum()


def tolerance(previous: Population | None, quantile: float, final: float | None) -> float:
    """eps_t: the ``quantile`` of round t-1's distances, not below ``final`` (infinite in round 0)."""
    if previous is None:
        return float("inf")
    eps = float(np.quantile(previous.distance, quantile))
    return max(eps, final) if final is not None else eps
