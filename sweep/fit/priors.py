"""Priors of the fitted parameters: the design margins (``sweep.design.margins``) as densities.

A fit's ``[fit.priors]`` entries are the sampled designs' ``[design.vary]`` entries (uniform,
log-uniform, normal, lognormal, truncated by ``low``/``high``), parsed by the same function.
ABC-SMC perturbs particles in a *working space*: ln k for log-uniform and lognormal priors (rate
constants span decades, and a normal step in ln k never leaves k > 0), k itself otherwise. The
importance weights need the prior density in that same space, so ``log_density`` gives it
there: the density of z = ln k is the density of k times k (the Jacobian of k = e^z).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from sweep.design.margins import Margin

_LOG = ("log-uniform", "lognormal")


@dataclass(frozen=True)
class Prior:
    """The independent priors of the fitted parameters, in ``[fit.priors]`` order."""

    margins: tuple[Margin, ...]

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(m.name for m in self.margins)

    def sample(self, u: np.ndarray) -> np.ndarray:
        """Parameter values from unit-cube draws ``u`` of shape (n, d) (inverse distribution functions)."""
        u = np.atleast_2d(u)
        return np.column_stack([m.values(u[:, q]) for q, m in enumerate(self.margins)])

    def to_work(self, theta: np.ndarray) -> np.ndarray:
        """Parameter values -> working space (ln for log-scaled priors)."""
        theta = np.atleast_2d(np.asarray(theta, dtype=np.float64))
        out = theta.copy()
        for q, m in enumerate(self.margins):
            if m.distribution in _LOG:
                with np.errstate(divide="ignore", invalid="ignore"):
                    out[:, q] = np.log(theta[:, q])
        return out

    def from_work(self, z: np.ndarray) -> np.ndarray:
        z = np.atleast_2d(np.asarray(z, dtype=np.float64))
        out = z.copy()
        for q, m in enumerate(self.margins):
            if m.distribution in _LOG:
                out[:, q] = np.exp(z[:, q])
        return out

    def log_density(self, z: np.ndarray) -> np.ndarray:
        """Log prior density in working space at points ``z`` (n, d); -inf outside the support."""
        z = np.atleast_2d(np.asarray(z, dtype=np.float64))
        total = np.zeros(z.shape[0])
        for q, m in enumerate(self.margins):
            total += _log_density(m, z[:, q])
        return total

    def inside(self, theta: np.ndarray) -> np.ndarray:
        """True where every coordinate of ``theta`` has positive prior density."""
        return np.isfinite(self.log_density(self.to_work(theta)))


def _bounds_work(m: Margin) -> tuple[float, float]:
    low = -np.inf if m.low is None else m.low
    high = np.inf if m.high is None else m.high
    if m.distribution in _LOG:
        low = -np.inf if low <= 0 else float(np.log(low))
        high = float(np.log(high)) if np.isfinite(high) else np.inf
    return low, high


def _log_density(m: Margin, z: np.ndarray) -> np.ndarray:
    low, high = _bounds_work(m)
    inside = (z >= low) & (z <= high) & np.isfinite(z)
    if m.distribution in ("uniform", "log-uniform"):
        value = np.full(z.shape, -np.log(high - low))
    else:  # normal in k, or normal in ln k (lognormal), truncated to [low, high]
        loc, scale = (m.mean, m.sd) if m.distribution == "normal" else (np.log(m.median), m.sigma)
        a, b = (low - loc) / scale, (high - loc) / scale
        value = stats.truncnorm.logpdf(np.where(inside, z, loc), a, b, loc=loc, scale=scale)
    return np.where(inside, value, -np.inf)
