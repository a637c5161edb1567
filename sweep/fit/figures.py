"""Figures of a fit (matplotlib, Agg): pairwise posterior marginals, the rounds, the predictive check."""

from __future__ import annotations

from pathlib import Path

import numpy as np


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def pairs(theta: np.ndarray, weight: np.ndarray, names, path: Path, truth: dict | None = None) -> Path:
    """Weighted histograms on the diagonal, particle clouds (size by weight) below it."""
    plt = _plt()
    d = len(names)
    fig, axes = plt.subplots(d, d, figsize=(2.6 * d + 1, 2.6 * d + 1), squeeze=False)
    for i in range(d):
        for j in range(d):
            ax = axes[i, j]
            if j > i:
                ax.axis("off")
                continue
            if i == j:
                ax.hist(theta[:, i], bins=30, weights=weight, color="tab:blue", alpha=0.7)
                if truth and names[i] in truth:
                    ax.axvline(truth[names[i]], color="k", ls="--", lw=1)
            else:
                ax.scatter(theta[:, j], theta[:, i], s=4 + 400 * weight, alpha=0.5, color="tab:blue")
                if truth and names[i] in truth and names[j] in truth:
                    ax.plot(truth[names[j]], truth[names[i]], "k+", ms=12)
            if i == d - 1:
                ax.set_xlabel(names[j])
            if j == 0 and i > 0:
                ax.set_ylabel(names[i])
    fig.suptitle("posterior (last round); dashed / +: true values" if truth else "posterior (last round)")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path


def rounds(ds, path: Path) -> Path:
    """Tolerance (log scale) and acceptance rate per round."""
    plt = _plt()
    r = ds["round"].values
    fig, (a, b) = plt.subplots(1, 2, figsize=(9, 3.4))
    tol = ds["tolerance"].values.astype(float)
    a.semilogy(r[1:], tol[1:], "o-")
    a.set(xlabel="round", ylabel="tolerance eps_t")
    b.semilogy(r, ds["acceptance"].values, "o-", color="tab:orange")
    b.set(xlabel="round", ylabel="acceptance (accepted / simulated)")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path


def predictive(observed, simulated: dict, path: Path) -> Path:
    """Observed histogram per (condition, time, species) with the posterior predictive over it.

    ``simulated`` maps a component's index to the pooled replicate values of particles drawn
    from the posterior.
    """
    plt = _plt()
    k = len(observed)
    cols = min(k, 3)
    rows = -(-k // cols)
    fig, axes = plt.subplots(rows, cols, figsize=(3.6 * cols, 2.8 * rows), squeeze=False)
    for i, comp in enumerate(observed):
        ax = axes[i // cols, i % cols]
        sim = simulated.get(i, np.array([]))
        both = np.concatenate([comp.values, sim]) if sim.size else comp.values
        bins = np.histogram_bin_edges(both, bins=30)
        ax.hist(comp.values, bins=bins, density=True, color="0.6", label="observed")
        if sim.size:
            ax.hist(sim, bins=bins, density=True, histtype="step", lw=1.6, color="tab:red", label="posterior predictive")
        ax.set_title(f"{comp.condition}, t={comp.time:g}, {comp.species}", fontsize=9)
    for j in range(k, rows * cols):
        axes[j // cols, j % cols].axis("off")
    axes[0, 0].legend(fontsize=7)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path
