"""Write a fit's tables and figures next to its posterior: what ``sweep fit`` leaves for the user."""

from __future__ import annotations

from pathlib import Path

import xarray as xr

from sweep.fit import figures, summary
from sweep.fit.driver import FitSummary
from sweep.fit.spec import FitSpec


def write(fit: FitSpec, result: FitSummary, truth: dict | None = None) -> dict[str, Path]:
    """``posterior.csv``, ``rounds.csv`` and the three figures in the fit's folder; their paths."""
    folder = result.folder
    ds = xr.open_zarr(result.posterior_path, consolidated=False).load()
    theta, weight = ds["theta"].values, ds["weight"].values
    names = list(ds["param"].values)
    out = {"posterior.csv": folder / "posterior.csv", "rounds.csv": folder / "rounds.csv"}
    out["posterior.csv"].write_text(summary.to_csv(summary.posterior_table(theta, weight, names)), encoding="utf-8")
    out["rounds.csv"].write_text(summary.to_csv(summary.rounds_table(ds)), encoding="utf-8")
    out["pairs.png"] = figures.pairs(theta, weight, names, folder / "pairs.png", truth)
    out["rounds.png"] = figures.rounds(ds, folder / "rounds.png")
    if result.predictive is not None:
        out["predictive.png"] = figures.predictive(fit.observed.components, result.predictive, folder / "predictive.png")
    return out
