"""Tables of a fit: posterior summaries per parameter, and the rounds (tolerance, acceptance, ESS)."""

from __future__ import annotations

import numpy as np


def weighted_quantile(x: np.ndarray, w: np.ndarray, q) -> np.ndarray:
    """Quantiles of the weighted sample (x, w): the inverse of its step CDF (lower value at ties)."""
    order = np.argsort(x, kind="stable")
    x, w = x[order], w[order] / w.sum()
    cdf = np.cumsum(w)
    idx = np.searchsorted(cdf, np.atleast_1d(q), side="left")
    return x[np.minimum(idx, x.size - 1)]


def posterior_table(theta: np.ndarray, weight: np.ndarray, names) -> list[dict]:
    """Per parameter: weighted mean, sd, median, and the central 50 % and 95 % credible intervals."""
    rows = []
    for q, name in enumerate(names):
        x = theta[:, q]
        mean = float(np.sum(weight * x) / weight.sum())
        sd = float(np.sqrt(np.sum(weight * (x - mean) ** 2) / weight.sum()))
        lo95, lo50, med, hi50, hi95 = weighted_quantile(x, weight, [0.025, 0.25, 0.5, 0.75, 0.975])
        rows.append({"parameter": name, "mean": mean, "sd": sd, "median": float(med), "ci50_low": float(lo50),
                     "ci50_high": float(hi50), "ci95_low": float(lo95), "ci95_high": float(hi95)})
    return rows


def rounds_table(ds) -> list[dict]:
    """Per round: tolerance, candidates, simulated, acceptance, ESS (from ``posterior.zarr``)."""
    return [{"round": int(r), "tolerance": float(ds["tolerance"].values[i]), "candidates": int(ds["candidates"].values[i]),
             "simulated": int(ds["simulated"].values[i]), "acceptance": float(ds["acceptance"].values[i]),
             "ess": float(ds["ess"].values[i]), "unfinished": int(ds["unfinished"].values[i])}
            for i, r in enumerate(ds["round"].values)]


def to_csv(rows: list[dict]) -> str:
    keys = list(rows[0])
    out = [",".join(keys)]
    out += [",".join(f"{r[k]:.6g}" if isinstance(r[k], float) else str(r[k]) for k in keys) for r in rows]
    return "\n".join(out) + "\n"
