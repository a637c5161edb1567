"""Whether a store's results can be trusted as they stand: replicates lost, and approximate
methods used where their assumptions fail.

*Lost replicates.* A replicate stopped at the event cap (status 1) or by a numerical failure
(status 2) is left out of every statistic. If the cap stops the busiest replicates, what is
left is biased towards quiet ones, and a point with few finished replicates gives statistics
(and sensitivity indices) that look exact and are not. ``lost_replicates`` lists the points.

*Low copy numbers.* Tau-leaping assumes each propensity changes little over a leap (Gillespie
2001; Cao, Gillespie & Petzold 2006), the chemical Langevin equation that every reaction
fires many times in a step, so that its count of firings is near normal (Gillespie 2000), and
the rate equations that fluctuations are negligible against the counts. All three fail for a
species present in a few copies: a single-copy promoter switching on and off, or mRNA at a
few molecules. ``low_copy`` flags, per point, each species that spent a share of at least
``LOW_SHARE`` (5 %) of its samples (finished replicates, sample times after the first)
below ``LOW_COPY`` = 10 molecules. Ten molecules is common practice as the edge of "low copy
number", not a published bound; the share is our choice. A species whose count never
changes at a point (nothing makes or uses it there) is not flagged.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # imported where used: a run asks APPROXIMATE after every sweep, and pandas costs 0.5 s
    import pandas as pd
    import xarray as xr

LOW_COPY = 10
LOW_SHARE = 0.05
#: methods whose results are approximations that need high copy numbers
APPROXIMATE = {"tau_leap": "tau-leaping assumes propensities change little within a leap",
               "cle": "the chemical Langevin equation assumes every reaction fires many times per step",
               "ode": "the rate equations ignore fluctuations, which dominate at a few molecules"}


def lost_replicates(ds: xr.Dataset) -> pd.DataFrame:
    """Points with replicates stopped at the event cap or by a numerical failure.

    Columns: point, run (replicates with any result), finished, capped (status 1), numerical (status 2).
    """
    import pandas as pd

    status = ds["status"].values
    run = (status >= 0).sum(axis=1)
    capped = (status == 1).sum(axis=1)
    numerical = (status == 2).sum(axis=1)
    rows = np.flatnonzero(capped + numerical)
    return pd.DataFrame({"point": rows, "run": run[rows], "finished": (status == 0).sum(axis=1)[rows],
                         "capped": capped[rows], "numerical": numerical[rows]})


def low_copy(ds: xr.Dataset, threshold: float = LOW_COPY, share: float = LOW_SHARE) -> dict:
    """Per point, the species that spent at least ``share`` of their samples below ``threshold``.

    Returns
    -------
    dict
        ``{"threshold", "share", "method", "species": [names], "points": [[point, [share or None per
        species]], ...]}``: only flagged points are listed; a share is None for a species not flagged.
        Stored as is in the store's attributes (``attrs["low_copy"]``).
    """
    from sweep.analysis import source

    x = source.valid_counts(ds)
    if ds.sizes["time"] > 1:
        x = x.isel(time=slice(1, None))  # the first sample is the initial state, set by the spec
    dims = ["replicate", "time"]
    below = (x < threshold).where(x.notnull()).mean(dims)
    moves = x.max(dims) > x.min(dims)
    import dask

    below, moves = dask.compute(below, moves)
    flagged = (below.values >= share) & moves.values
    names = [str(s) for s in ds["species"].values]
    points = []
    for p in np.flatnonzero(flagged.any(axis=1)):
        points.append([int(p), [round(float(v), 4) if f else None for v, f in zip(below.values[p], flagged[p])]])
    return {"threshold": threshold, "share": share, "method": str(ds.attrs.get("method", "")), "species": names,
            "points": points}


def describe_low_copy(record: dict, limit: int = 10) -> list[str]:
    """Lines for a person: the method's assumption, then 'point 3: G_on (100 % of samples below 10), ...'."""
    if not record or not record.get("points"):
        return []
    method = record.get("method", "")
    lines = [f"{len(record['points']):,} point(s) where species spent time below {record['threshold']:g} molecules "
             f"(at least {record['share']:.0%} of samples, common practice): {APPROXIMATE.get(method, 'the method')}, "
             "which does not hold there; check with `sweep plan SPEC --compare-methods`, or use method "
             "\"direct\""]
    for point, shares in record["points"][:limit]:
        parts = [f"{name} ({v:.0%} of samples)" for name, v in zip(record["species"], shares) if v is not None]
        lines.append(f"point {point}: {', '.join(parts)}")
    if len(record["points"]) > limit:
        lines.append(f"... and {len(record['points']) - limit:,} more points (store attribute low_copy)")
    return lines


def record_low_copy(path) -> dict | None:
    """Check the copy numbers of a store run by an approximate method and keep the report in its
    attributes (``attrs["low_copy"]``); None for an exact method. The caller holds the store's lock."""
    from sweep import store

    method = str(store.attributes(path).get("method", ""))
    if method not in APPROXIMATE:
        return None
    record = low_copy(store.open_dataset(path))
    store.finish_run(path, low_copy=record)
    return record
