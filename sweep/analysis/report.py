"""``sweep.analyze``: statistics, distributions, sensitivity and adequacy of a store, into the store.

Results go into the store's own group ``analysis`` (replaced by each analysis) and its
subgroups ``analysis/sensitivity``, ``analysis/adequacy`` and ``analysis/modes`` (tidy tables),
all readable with ``xarray.open_zarr(store, group=...)``; and into CSV tables in a folder. The
data arrays, ``done`` and the lock are never touched, and the root still opens with a plain
``xarray.open_zarr(store)``: metadata is consolidated again after writing.

The group is written whole or not at all: it is built as ``.analysis-building`` inside the
store and takes the place of the previous ``analysis`` only once everything, the CSV tables
included, has been written; an analysis that fails half-way leaves the previous one as it was.

Everything over the replicates is computed lazily with dask, one point's block at a time, so a
store larger than memory is analysed in bounded memory. Histograms need each species' range
first, so their species are read a second time.
"""

from __future__ import annotations

import datetime as _dt
import time as _time
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sweep.analysis.options import SPECIES_STATISTICS, AnalysisOptions, Output

if TYPE_CHECKING:
    import pandas as pd
    import xarray as xr

#: size of one chunk of the written results
WRITE_CHUNK_BYTES = 4 * 2**20


@dataclass(frozen=True)
class AnalysisResult:
    """What ``analyze`` computed and where it put it."""

    store: Path
    group: str
    tables: tuple[Path, ...]
    design: str
    method: str | None
    outputs: tuple[Output, ...]
    sensitivity: pd.DataFrame = field(repr=False)
    adequacy: pd.DataFrame = field(repr=False)
    points: int
    replicates: int
    seconds: float
    replicates_run: int = -1  # replicates with any result (an adaptive store holds fewer than its capacity)
    #: points that lost replicates: point, run, finished, capped (status 1), numerical (status 2)
    lost: pd.DataFrame | None = field(default=None, repr=False)
    #: clearly bimodal (point, time, species): shares of the replicates in each mode (``sweep.analysis.modes``)
    modes: pd.DataFrame | None = field(default=None, repr=False)
    #: points where an approximate method's species spent time at low copy numbers (``sweep.analysis.validity``)
    low_copy: dict | None = None
    time_unit: str | None = None
    max_events: int | None = None
    method_run: str = ""  # the simulation method of the store


def analyze(path: str | Path, options: AnalysisOptions | None = None) -> AnalysisResult:
    """Analyse a results store and write the results into it and into CSV tables.

    Parameters
    ----------
    path : the store (``sweep run`` wrote it; it may be incomplete: missing replicates are left out).
    options : what to compute (defaults: quantiles 5/25/50/75/95 %, sensitivity and standard
        errors of the mean and Fano factor of every species at the last time, 5 % precision).

    Returns
    -------
    AnalysisResult

    Raises
    ------
    StoreError
        No store at ``path``, or a live ``sweep run`` is writing it.
    SpecError
        An option names an unknown species, a time outside the grid, and so on.

    Example
    -------
    >>> result = analyze("results/reporter.zarr", AnalysisOptions(statistics=("fano",), species=("protein",)))  # doctest: +SKIP
    >>> result.sensitivity[["parameter", "value", "p_value"]]  # doctest: +SKIP
    """
    from sweep import store
    from sweep.analysis import modes, source, tables, validity

    started = _time.perf_counter()
    path = Path(path)
    options = options or AnalysisOptions()
    ds = source.open_store(path)
    source.check_writable(path)
    options.check(str(path))
    unit = ds.attrs.get("time_unit") or None
    plan = _resolve(ds, options, str(path), unit)  # every option is checked before anything is written
    facts = source.design_facts(path, dict(ds.attrs), [str(p) for p in ds["param"].values])
    folder = Path(options.tables) if options.tables else default_tables(path)
    staging = f".{source.GROUP}-building"
    _remove(path / staging)  # left by an analysis that was killed
    try:
        _write_statistics(path, ds, options, plan, staging)
        if options.histogram_species:
            _write_histograms(path, ds, options, plan, staging)
        unused = ("quantiles", "m3", "m4", "passage_pmf", "passage_cdf", "histogram", "stationary")
        results = _open_group(path, group=staging)
        results = results.drop_vars([v for v in unused if v in results]).sel(time=plan["times"]).load()
        sensitivity, adequacy = _sensitivity_and_adequacy(results, ds, facts, options, plan["outputs"])
        found = modes.table(ds, plan["mode_species"], plan["times"])
        lost = validity.lost_replicates(ds)
        low = validity.low_copy(ds) if ds.attrs.get("method") in validity.APPROXIMATE else None
        _write_table(path, f"{staging}/sensitivity", sensitivity)
        _write_table(path, f"{staging}/adequacy", adequacy)
        _write_table(path, f"{staging}/modes", found)
        seconds = _time.perf_counter() - started
        _finish(path, staging, ds, options, facts, seconds, low)
        written = tables.write(_open_group(path, group=staging), sensitivity, adequacy, folder, found)
        _swap(path, staging)
    except BaseException:
        _remove(path / staging)
        store.consolidate(path)
        raise
    store.consolidate(path)
    return AnalysisResult(path, source.GROUP, tuple(written), str(facts.get("kind")), _method(facts),
                          plan["outputs"], sensitivity, adequacy, ds.sizes["point"], ds.sizes["replicate"],
                          _time.perf_counter() - started, int((ds["status"] >= 0).sum()), lost, found, low, unit,
                          ds.attrs.get("max_events"), str(ds.attrs.get("method", "")))


def default_tables(path: Path) -> Path:
    """Where the CSV tables go by default: beside the store, named after it
    (``results/reporter.zarr`` -> ``results/reporter_analysis``)."""
    return path.parent / f"{path.stem}_analysis"


def _remove(folder: Path) -> None:
    import shutil

    if folder.is_dir() and not folder.is_symlink():
        shutil.rmtree(folder)


def _swap(path: Path, staging: str) -> None:
    """Put the built group in the place of the previous analysis (two renames, then a delete)."""
    import os

    from sweep.analysis import source

    target, old = path / source.GROUP, path / f".{source.GROUP}-previous"
    _remove(old)
    if target.exists():
        os.replace(target, old)
    os.replace(path / staging, target)
    _remove(old)


def open_analysis(path: str | Path, table: str | None = None) -> xr.Dataset:
    """The analysis results of a store (``table``: ``"sensitivity"`` or ``"adequacy"``), lazily.

    Raises
    ------
    StoreError
        The store has not been analysed (run ``sweep analyze`` first).
    """
    return _open_group(Path(path), table)


def _open_group(path: Path, table: str | None = None, group: str | None = None) -> xr.Dataset:
    import xarray as xr

    from sweep.analysis.source import GROUP
    from sweep.errors import StoreError

    group = group or GROUP
    group = group if table is None else f"{group}/{table}"
    try:
        return xr.open_zarr(path, group=group)
    except (FileNotFoundError, KeyError, OSError) as exc:
        raise StoreError(f"{path}: no analysis results here (run `sweep analyze {path}` first)") from exc


def _resolve(ds: xr.Dataset, options: AnalysisOptions, src: str, unit: str | None = None) -> dict[str, Any]:
    """Check options against the store; pick sample times; list the outputs."""
    from sweep.analysis import source

    species = list(options.species) or [str(s) for s in ds["species"].values]
    source.check_species(ds, species, src)
    source.check_species(ds, [th.species for th in options.thresholds], src, "--threshold")
    source.check_species(ds, options.histogram_species, src, "--histogram")
    times = source.sample_times(ds, options.times, src)
    if options.stationary_from is not None:
        source.time_index(ds, options.stationary_from, src, "--stationary-from")
    outputs = []
    for t in times:
        for stat in options.statistics:
            if stat in SPECIES_STATISTICS:
                outputs += [Output(stat, s, t, time_unit=unit) for s in species]
            elif stat == "fraction":
                outputs += [Output(stat, th.species, t, th.label, unit) for th in options.thresholds]
    for stat in options.statistics:  # first passage covers the whole time grid: once, not per time
        if stat in ("passage_mean", "never"):
            outputs += [Output(stat, th.species, None, th.label, unit) for th in options.thresholds]
    mode_species = list(dict.fromkeys(species + list(options.histogram_species)))
    return {"times": times, "hist_times": times, "outputs": tuple(outputs), "mode_species": mode_species}


def _write_statistics(path: Path, ds: xr.Dataset, options: AnalysisOptions, plan: dict, group: str) -> None:
    import xarray as xr

    from sweep.analysis import adequacy, passage, source, stats

    x = source.valid_counts(ds)
    moments = stats.moments(x, options.quantiles)
    parts = [moments, adequacy.standard_errors(moments)]
    if options.thresholds:
        parts.append(stats.fractions(x, options.thresholds).to_dataset(name="fraction"))
        parts.append(passage.first_passage(x, options.thresholds))
    out = xr.merge(parts, compat="override", join="exact")
    out = out.assign_coords(params=ds["params"].compute().variable, time=ds["time"].values,
                            species=ds["species"].values.astype(object))
    out = out.assign_coords(param=ds["param"].values.astype(object))
    if ds.attrs.get("time_unit"):
        out["time"].attrs["units"] = str(ds.attrs["time_unit"])
    _store(_chunked(out), path, group, "w")


def _chunked(out: xr.Dataset) -> xr.Dataset:
    """Few, mid-sized chunks: every time, species, quantile and threshold; points in blocks."""
    per_point = 8 * max(int(v.size // max(v.sizes.get("point", 1), 1)) for v in out.data_vars.values())
    block = int(max(1, WRITE_CHUNK_BYTES // max(per_point, 1)))
    chunks = {d: -1 for d in out.dims}
    chunks["point"] = block
    return out.chunk(chunks)


def _write_histograms(path: Path, ds: xr.Dataset, options: AnalysisOptions, plan: dict, group: str) -> None:
    import xarray as xr

    from sweep.analysis import distributions, source

    written = xr.open_zarr(path, group=group)
    ranges = {}
    for s in options.histogram_species:
        times = plan["hist_times"]
        if options.stationary_from is not None:
            times = sorted(set(times) | {float(t) for t in ds["time"].values if t >= options.stationary_from})
        at = written.sel(species=s, time=times)
        ranges[s] = (float(at["min"].min().compute()), float(at["max"].max().compute()))
    x = source.valid_counts(ds, list(options.histogram_species))
    hist = distributions.histograms(x, ranges, plan["hist_times"], options.stationary_from, options.bins)
    _store(_chunked(hist), path, group, "a")


def _method(facts: dict) -> str | None:
    from sweep.analysis.sensitivity import method_for

    return method_for(facts)


def _sensitivity_and_adequacy(results, ds, facts, options, outputs) -> tuple[pd.DataFrame, pd.DataFrame]:
    import numpy as np
    import pandas as pd

    from sweep.analysis import adequacy, sensitivity, tables

    points = ds["params"].values
    names = [str(p) for p in ds["param"].values]
    facts = {**facts, "names": names}  # the store's param coordinate names the columns of points
    sa, ad = [], []
    for out in outputs:
        label = {"statistic": out.statistic, "species": out.species, "threshold": out.threshold or "",
                 "time": np.nan if out.time is None else out.time, "output": out.label}
        rows = adequacy.table(results, out, options.precision, options.relative)
        for q, name in enumerate(names):
            rows.insert(1 + q, tables.param_column(name), points[:, q])
        ad.append(rows.assign(**label))
        if points.shape[1] and points.shape[0] > 1:
            sa.append(sensitivity.indices(facts, points, rows["value"].to_numpy(), options.seed).assign(**label))
    lead = ["output", "statistic", "species", "threshold", "time"]
    sa_table = pd.concat(sa, ignore_index=True) if sa else pd.DataFrame(columns=lead + list(sensitivity.COLUMNS))
    ad_table = pd.concat(ad, ignore_index=True)
    return (sa_table[lead + [c for c in sa_table.columns if c not in lead]],
            ad_table[lead + [c for c in ad_table.columns if c not in lead]])


def _write_table(path: Path, group: str, table: pd.DataFrame) -> None:
    import xarray as xr

    data = {}
    for column in table.columns:
        values = table[column].to_numpy()
        if values.dtype == object or str(values.dtype).startswith(("string", "str")):
            values = values.astype(str).astype(object)
        data[column] = ("row", values)
    _store(xr.Dataset(data), path, group, "w")


def _store(data: xr.Dataset, path: Path, group: str, mode: str) -> None:
    """Compute and write ``data`` into ``group``, then consolidate the root metadata again.

    A point with no finished replicate yet gives all-NaN slices; numpy's warnings about
    those are expected, and its results (NaN) are what we want.
    """
    import warnings

    from sweep import store

    with warnings.catch_warnings():
        for message in ("All-NaN slice", "Mean of empty slice", "Degrees of freedom", "invalid value encountered"):
            warnings.filterwarnings("ignore", message=message, category=RuntimeWarning)
        data.drop_encoding().to_zarr(path, group=group, mode=mode, consolidated=False)
    store.consolidate(path)


def _finish(path: Path, group: str, ds: xr.Dataset, options: AnalysisOptions, facts: dict, seconds: float,
            low_copy: dict | None) -> None:
    import json

    import zarr

    done = ds["done"].values
    g = zarr.open_group(path, path=group, mode="r+", use_consolidated=False)
    g.attrs.update({
        "created": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "seconds": round(seconds, 3),
        "options": json.loads(json.dumps(asdict(options), default=list)),
        "design_kind": str(facts.get("kind")),
        "sensitivity_method": _method(facts) or "",
        "tasks_done": int(done.sum()),
        "tasks_total": int(done.size),
        "store_spec_sha256": ds.attrs.get("spec_sha256", ""),
        "store_last_run": ds.attrs.get("last_run", ""),
        "replicates_used": "finished replicates only (status 0); see variable n",
        "time_unit": str(ds.attrs.get("time_unit") or ""),
        **({"low_copy": low_copy} if low_copy is not None else {}),
    })
