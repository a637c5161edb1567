"""Exact reference distributions and goodness-of-fit helpers for the kernel tests.

Pure numpy/scipy, written from the chemical master equation and independent of any
kernel code, so a bug in a kernel cannot leak into its own reference.
"""

from __future__ import annotations

from collections import deque
from math import comb
from typing import Callable, Sequence

import numpy as np
import scipy.sparse
import scipy.stats
from scipy.sparse.linalg import expm_multiply

Propensity = Callable[[tuple[int, ...]], float]


def mass_action(rate: float, reactants: dict[int, int]) -> Propensity:
    """Propensity counting distinct molecule combinations, c * prod C(x_s, m_s) (Gillespie 1977)."""
    def a(x: tuple[int, ...]) -> float:
        value = rate
        for s, m in reactants.items():
            value *= comb(x[s], m)
        return float(value)
    return a


def fsp(x0: Sequence[int], reactions: Sequence[tuple[Propensity, Sequence[int]]], t: float,
        max_states: int = 20_000) -> tuple[np.ndarray, np.ndarray]:
    """Probability of every reachable state at time ``t`` by finite state projection.

    Munsky & Khammash (2006), "The finite state projection algorithm for the solution of
    the chemical master equation", J. Chem. Phys. 124, 044104. The reachable set is
    enumerated breadth-first from ``x0``; for a closed network it is finite and the
    projection is the full master equation, so the answer is exact up to ``expm``
    round-off. An open network whose reachable set exceeds ``max_states`` raises.

    Parameters
    ----------
    x0 : initial counts.
    reactions : (propensity function of a state tuple, net change vector) pairs.
    t : time.

    Returns
    -------
    states : int (M, S) and probs : float (M,).
    """
    start = tuple(int(v) for v in x0)
    index = {start: 0}
    states = [start]
    rows, cols, vals = [], [], []
    queue = deque([start])
    while queue:
        x = queue.popleft()
        i = index[x]
        for propensity, change in reactions:
            a = propensity(x)
            if a <= 0.0:
                continue
            y = tuple(xs + int(d) for xs, d in zip(x, change))
            if min(y) < 0:
                raise ValueError(f"propensity {a} > 0 leads from {x} to negative state {y}")
            if y not in index:
                if len(states) >= max_states:
                    raise ValueError("reachable state space exceeds max_states; the network is open")
                index[y] = len(states)
                states.append(y)
                queue.append(y)
            # generator A with dp/dt = A p: flow out of i on the diagonal, into j off it
            rows += [index[y], i]
            cols += [i, i]
            vals += [a, -a]
    n = len(states)
    generator = scipy.sparse.csc_matrix((vals, (rows, cols)), shape=(n, n))
    p0 = np.zeros(n)
    p0[0] = 1.0
    p = expm_multiply(generator * t, p0)
    return np.array(states, dtype=np.int64), np.clip(p, 0.0, None)


def marginal(states: np.ndarray, probs: np.ndarray, species: int) -> np.ndarray:
    """pmf of one species' count over 0..max, from an FSP result."""
    return np.bincount(states[:, species], weights=probs)


def pooled_chisquare(samples: np.ndarray, pmf: np.ndarray, min_expected: float = 5.0):
    """Pearson chi-square of integer ``samples`` against ``pmf`` over 0..len(pmf)-1.

    Any probability mass beyond the array (e.g. a Poisson tail) is added to the last
    category, and samples at or above it fall there too. Neighbouring categories are
    pooled left to right until each expects at least ``min_expected`` counts (Cochran's
    rule); a short remainder joins the last full bin. Returns ``scipy.stats.chisquare``'s
    result with no fitted parameters.
    """
    samples = np.asarray(samples).ravel()
    n = samples.size
    pmf = np.asarray(pmf, dtype=float).copy()
    pmf[-1] += max(0.0, 1.0 - pmf.sum())
    pmf /= pmf.sum()
    if samples.min() < 0:
        raise ValueError("negative samples")
    observed = np.bincount(np.minimum(samples, len(pmf) - 1), minlength=len(pmf)).astype(float)
    expected = n * pmf
    obs_bins, exp_bins = [], []
    acc_o = acc_e = 0.0
    for o, e in zip(observed, expected):
        acc_o += o
        acc_e += e
        if acc_e >= min_expected:
            obs_bins.append(acc_o)
            exp_bins.append(acc_e)
            acc_o = acc_e = 0.0
    if acc_e > 0.0 or acc_o > 0.0:
        obs_bins[-1] += acc_o
        exp_bins[-1] += acc_e
    if len(exp_bins) < 2:
        raise ValueError("fewer than two bins after pooling: use more samples")
    return scipy.stats.chisquare(obs_bins, exp_bins)

