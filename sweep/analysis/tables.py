"""CSV tables of an analysis, written a block of points at a time (tidy: one row per observation).

=============================  ==============================================================
``statistics.csv``             point, parameters, time, species, n, mean, var, sd, cv, fano,
                               min, max, quantiles (q0.05, ...), standard errors (se_*)
``thresholds.csv``             point, parameters, threshold, time, fraction meeting it
``passage.csv``                point, parameters, threshold, replicates, passed, never, mean,
                               sd, median first-passage time (on the sample grid)
``passage_distribution.csv``   point, parameters, threshold, time, pmf, cdf
``histograms.csv``             point, parameters, species, time, bin_low, bin_high, fraction
``stationary.csv``             point, parameters, species, bin_low, bin_high, fraction
``sensitivity.csv``            output (statistic, species, threshold, time), method, condition,
                               parameter, index, value, conf_low, conf_high, p_value, points
``adequacy.csv``               output, point, parameters, value, se, relative_se, replicates,
                               target_se, meets, replicates_needed
``modes.csv``                  point, parameters, time, species, replicates, low_share,
                               high_share, split, low_mean, high_mean, low_peak, high_peak,
                               ashman_d: every clearly bimodal distribution (``modes``)
=============================  ==============================================================

Parameter columns carry the parameter's name, unless that name is one of the tables' own
column names (``RESERVED``: a parameter called ``n``, ``mean`` or ``time``); such a column is
written ``param.<name>`` (``param.n``). Parameter names hold no dots, so that name is free.

Each file is written beside its place under a temporary name and moved in when complete, so a
table is never half-written, and an earlier analysis's tables stay until the new ones are done.
"""

from __future__ import annotations

from pathlib import Path
from typing import Sequence

import os

import numpy as np
import pandas as pd
import xarray as xr

from sweep.analysis import statistics
from sweep.errors import StoreError

POINTS_PER_BLOCK = 256
TABLES = ("statistics.csv", "thresholds.csv", "passage.csv", "passage_distribution.csv", "histograms.csv",
          "stationary.csv", "sensitivity.csv", "adequacy.csv", "modes.csv")
_STATISTICS = statistics.names("column", "species")  # statistics.csv's columns, in table order
_ERRORS = tuple(f"se_{v}" for v in statistics.with_standard_errors())
_PASSAGE = {"passage_n": "replicates", "passage_crossed": "passed", "never": "never", "passage_mean": "mean",
            "passage_sd": "sd", "passage_median": "median"}
#: every column name a table uses besides the parameters' (quantile columns, q0.05, hold a dot)
RESERVED = frozenset({
    "point", "time", "species", "threshold", *_STATISTICS, *_ERRORS,
    "fraction", *_PASSAGE.values(), "pmf", "cdf", "bin_low", "bin_high", "output", "statistic", "method",
    "condition", "parameter", "index", "value", "conf_low", "conf_high", "p_value", "points", "note", "se",
    "relative_se", "replicates", "target_se", "meets", "replicates_needed", "low_share", "high_share", "split",
    "low_mean", "high_mean", "low_peak", "high_peak", "ashman_d",
})


def param_column(name: str) -> str:
    """The column of parameter ``name``: its name, or ``param.<name>`` where a table uses that name.

    Example
    -------
    >>> param_column("k_tx"), param_column("n")
    ('k_tx', 'param.n')
    """
    return f"param.{name}" if name in RESERVED else name


def write(results: xr.Dataset, sensitivity: pd.DataFrame, adequacy: pd.DataFrame, folder: Path,
          modes: pd.DataFrame | None = None) -> list[Path]:
    """Write every table that has data into ``folder``; return their paths.

    Raises
    ------
    StoreError
        ``folder`` cannot be created or written.
    """
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise StoreError(f"{folder}: cannot create the tables folder: {exc.strerror or exc}") from exc
    results = results.assign_coords(point=np.arange(results.sizes["point"]))
    names = [str(p) for p in results["param"].values]
    try:
        written = _write_all(results, sensitivity, adequacy, folder, modes, names)
    except BaseException:
        for name in TABLES:
            _temporary(folder / name).unlink(missing_ok=True)
        raise
    for target in written:
        os.replace(_temporary(target), target)
    for stale in set(TABLES) - {p.name for p in written}:
        (folder / stale).unlink(missing_ok=True)  # an earlier analysis's table this one did not redo
    return written


def _temporary(target: Path) -> Path:
    return target.with_name(f".{target.name}.partial")


def _write_all(results, sensitivity, adequacy, folder, modes, names) -> list[Path]:
    written = [_stream(results, folder / "statistics.csv", names, _statistics)]
    if "fraction" in results:
        written.append(_stream(results, folder / "thresholds.csv", names,
                               lambda b: _frame(b[["fraction"]], ["point", "threshold", "time"])))
    if "passage_mean" in results:
        written.append(_stream(results, folder / "passage.csv", names,
                               lambda b: _frame(b[list(_PASSAGE)], ["point", "threshold"]).rename(columns=_PASSAGE)))
        written.append(_stream(results, folder / "passage_distribution.csv", names,
                               lambda b: _frame(b[["passage_pmf", "passage_cdf"]], ["point", "threshold", "time"])
                               .rename(columns={"passage_pmf": "pmf", "passage_cdf": "cdf"})))
    if "histogram" in results:
        written.append(_stream(results, folder / "histograms.csv", names, lambda b: _bins(b, "histogram")))
    if "stationary" in results:
        written.append(_stream(results, folder / "stationary.csv", names, lambda b: _bins(b, "stationary")))
    for name, table in (("sensitivity", sensitivity), ("adequacy", adequacy)):
        target = folder / f"{name}.csv"
        _to_csv(table, _temporary(target), header=True)
        written.append(target)
    if modes is not None and len(modes):
        target = folder / "modes.csv"
        table = modes.copy()
        params = results["params"].values
        for q, name in enumerate(names):
            table.insert(1 + q, param_column(name), params[table["point"].to_numpy(), q])
        _to_csv(table, _temporary(target), header=True)
        written.append(target)
    return written


def _stream(results: xr.Dataset, target: Path, names: Sequence[str], rows) -> Path:
    params = results["params"].values
    first = True
    for start in range(0, results.sizes["point"], POINTS_PER_BLOCK):
        block = results.isel(point=slice(start, start + POINTS_PER_BLOCK)).compute()
        table = rows(block)
        points = table["point"].to_numpy()
        for q, name in enumerate(names):
            table.insert(1 + q, param_column(name), params[points, q])
        _to_csv(table, _temporary(target), header=first, mode="w" if first else "a")
        first = False
    return target


def _to_csv(table: pd.DataFrame, target: Path, header: bool, mode: str = "w") -> None:
    try:
        table.to_csv(target, index=False, header=header, mode=mode)
    except OSError as exc:
        raise StoreError(f"{target}: cannot write: {exc.strerror or exc}") from exc


def _frame(block: xr.Dataset, order: list[str]) -> pd.DataFrame:
    keep = [v for v in block.data_vars]
    table = block[keep].drop_vars(["params", "param"], errors="ignore").to_dataframe().reset_index()
    extra = [c for c in table.columns if c not in order and c not in keep]
    return table.drop(columns=extra)[order + keep]


def _statistics(block: xr.Dataset) -> pd.DataFrame:
    order = ["point", "time", "species"]
    errors = [name for name in _ERRORS if name in block]
    table = _frame(block[list(_STATISTICS) + errors], order)
    if "quantiles" in block:
        for i, q in enumerate(block["quantile"].values):
            column = _frame(block["quantiles"].sel(quantile=q, drop=True).to_dataset(name="q"), order)
            table.insert(len(order) + len(_STATISTICS) + i, f"q{q:g}", column["q"].to_numpy())
    return table


def _bins(block: xr.Dataset, name: str) -> pd.DataFrame:
    dims = ["point", "hist_time", "hist_species", "bin"] if name == "histogram" else ["point", "hist_species", "bin"]
    data = block[[name]].assign_coords(bin_low=block["bin_low"], bin_high=block["bin_high"])
    table = data.drop_vars(["params", "param"], errors="ignore").to_dataframe().reset_index()
    table = table[table["bin_low"].notna()].rename(columns={"hist_time": "time", "hist_species": "species", name: "fraction"})
    columns = ["point"] + (["time"] if name == "histogram" else []) + ["species", "bin_low", "bin_high", "fraction"]
    return table[columns].astype({"bin_low": np.int64, "bin_high": np.int64})
