"""``sweep.export``: a store's trajectories as tidy tables (CSV, Parquet) or as NetCDF.

Tables have one row per (point, replicate, time, species): ``point``, the varied parameters'
values, ``replicate``, ``status``, ``time``, ``species``, ``count``. They are written one
task chunk (one point's replicate block) at a time, so a store larger than memory exports
in bounded memory. Replicates not run yet (status -1) are left out; unknown samples (after a
replicate stopped at the event cap, status 1) are empty (null) counts.

NetCDF holds the whole Dataset (after the filters), written with the netCDF4 or h5netcdf
library when installed (NetCDF-4, written chunk by chunk), else with scipy (NetCDF-3, which
builds the file in memory: refused when it would not fit).
"""

from __future__ import annotations

import importlib.util
import json
import os
import time as _time
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import numpy as np

from sweep.errors import SpecError, StoreError

FORMATS = {".csv": "csv", ".parquet": "parquet", ".pq": "parquet", ".nc": "netcdf", ".nc4": "netcdf"}
#: NetCDF-3 through scipy holds the whole file in memory; refuse beyond this share of free memory
SCIPY_MEMORY_SHARE = 0.5

Selection = Sequence["int | float | tuple[float, float]"]


@dataclass(frozen=True)
class ExportSummary:
    path: Path
    format: str
    rows: int          # table rows written (for NetCDF: samples of counts)
    engine: str        # "pyarrow" for tables; the NetCDF library used
    seconds: float


def export(path: str | Path, output: str | Path, *, format: str | None = None, points: Selection | None = None,
           species: Sequence[str] | None = None, times: Selection | None = None) -> ExportSummary:
    """Export a store (optionally only some points, species and times).

    Parameters
    ----------
    path : the results store.
    output : file to write; its suffix (.csv, .parquet, .nc) gives the format unless ``format`` does.
    points : point indices, or inclusive (first, last) ranges.
    species : species names.
    times : sample times (the nearest sample is taken), or inclusive (start, end) ranges.

    Returns
    -------
    ExportSummary

    Raises
    ------
    StoreError
        No store at ``path``, or the output cannot be written.
    SpecError
        Unknown format, species, point or time.

    Example
    -------
    >>> export("results/reporter.zarr", "protein.parquet", species=["protein"], times=[(300, 600)])  # doctest: +SKIP
    """
    from sweep import store

    started = _time.perf_counter()
    path, output = Path(path), Path(output)
    fmt = _format(output, format)
    ds = store.open_dataset(path)
    p_idx = _points(ds.sizes["point"], points, str(path))
    t_idx = _times(ds["time"].values, times, str(path))
    # observables are named like species, after them (sweep.store.observed); -1 marks none asked for
    n_s = ds.sizes["species"]
    observed = [str(s) for s in ds["observable"].values] if "observable" in ds else []
    s_idx = _species([str(s) for s in ds["species"].values] + observed, species, str(path))
    try:
        output.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise StoreError(f"{output}: cannot create its folder: {exc.strerror or exc}") from exc
    # written under a temporary name and moved in whole: a failed export never leaves half a
    # file, nor destroys the file it would have replaced
    partial = output.with_name(f".{output.name}.partial")
    try:
        if fmt == "netcdf":
            picked = {"species": s_idx[s_idx < n_s]} | ({"observable": s_idx[s_idx >= n_s] - n_s} if observed else {})
            engine, rows = _netcdf(ds.isel(point=p_idx, time=t_idx, **picked), partial)
        else:
            engine, rows = "pyarrow", _table(path, ds, partial, fmt, p_idx, t_idx, s_idx)
        os.replace(partial, output)
    except BaseException:
        partial.unlink(missing_ok=True)
        raise
    return ExportSummary(output, fmt, rows, engine, _time.perf_counter() - started)


def _format(output: Path, format: str | None) -> str:
    if format is not None:
        if format not in set(FORMATS.values()):
            raise SpecError("sweep export", "--format", "unknown format", format, "choose csv, parquet or netcdf")
        return format
    if output.suffix.lower() not in FORMATS:
        raise SpecError("sweep export", "--output", "cannot tell the format from the file name", str(output),
                        "end it in .csv, .parquet or .nc, or pass --format")
    return FORMATS[output.suffix.lower()]


def _points(n: int, wanted: Selection | None, src: str) -> np.ndarray:
    if not wanted:
        return np.arange(n)
    out = []
    for item in wanted:
        first, last = item if isinstance(item, tuple) else (item, item)
        if not (0 <= int(first) <= int(last) < n):
            raise SpecError(src, "--point", f"must be within 0..{n - 1}", item)
        out.extend(range(int(first), int(last) + 1))
    return np.array(sorted(set(out)))


def _times(grid: np.ndarray, wanted: Selection | None, src: str) -> np.ndarray:
    if not wanted:
        return np.arange(grid.size)
    out = set()
    for item in wanted:
        if isinstance(item, tuple):
            hit = np.flatnonzero((grid >= item[0]) & (grid <= item[1]))
            if not hit.size:
                raise SpecError(src, "--time", f"no sample time in this range (samples {grid[0]:g}..{grid[-1]:g})", item)
            out.update(hit.tolist())
        else:
            spacing = float(np.min(np.diff(grid))) if grid.size > 1 else 0.0
            if not grid[0] - spacing / 2 <= item <= grid[-1] + spacing / 2:
                raise SpecError(src, "--time", f"outside the sampled times {grid[0]:g}..{grid[-1]:g}", item)
            out.add(int(np.argmin(np.abs(grid - item))))
    return np.array(sorted(out))


def _species(names: list[str], wanted: Sequence[str] | None, src: str) -> np.ndarray:
    if not wanted:
        return np.arange(len(names))
    for name in wanted:
        if name not in names:
            raise SpecError(src, "--species", "not a species of this store", name, f"choose from: {', '.join(names)}")
    return np.array([names.index(name) for name in dict.fromkeys(wanted)])


def _table(path: Path, ds, output: Path, fmt: str, p_idx, t_idx, s_idx) -> int:
    """Stream tidy rows, one task chunk at a time, into a CSV or Parquet file."""
    import pyarrow as pa
    import zarr

    g = zarr.open_group(path, mode="r")
    counts, status = g["counts"], g["status"]
    block = counts.chunks[1]
    params = ds["params"].values
    names = [str(p) for p in ds["param"].values]
    times = ds["time"].values[t_idx]
    labels = [str(s) for s in ds["species"].values] + ([str(s) for s in ds["observable"].values] if "observable" in ds
                                                        else [])
    species = pa.array([labels[i] for i in s_idx])
    read = _reader(g, t_idx, s_idx)
    observed = bool(np.any(s_idx >= counts.shape[3]))
    writer, rows = None, 0
    try:
        for p in p_idx:
            for start in range(0, counts.shape[1], block):
                stop = min(start + block, counts.shape[1])
                ran = np.flatnonzero(status[p, start:stop] >= 0)
                if not ran.size:
                    continue
                data = read(int(p), start, stop)[ran]
                table = _rows(int(p), params[p], names, start + ran, status[p, start:stop][ran], times, species, data,
                              observed)
                writer = writer or _writer(output, fmt, table.schema)
                writer.write_table(table)
                rows += table.num_rows
        if writer is None:  # nothing run yet: still write the header
            writer = _writer(output, fmt, _rows(0, params[0] if len(params) else [], names, np.arange(0), np.arange(0),
                                               times, species, read(0, 0, 0), observed).schema)
    except OSError as exc:
        raise StoreError(f"{output}: cannot write: {exc.strerror or exc}") from exc
    finally:
        if writer is not None:
            writer.close()
    return rows


def _reader(g, t_idx, s_idx):
    """A block's selected columns: counts (their own dtype, -1 unknown), or with observables float64 with
    NaN for unknown (a count's -1 becomes NaN; an observable may be negative)."""
    counts = g["counts"]
    n_s = counts.shape[3]
    if np.all(s_idx < n_s):
        return lambda p, start, stop: counts.get_orthogonal_selection((p, slice(start, stop), t_idx, s_idx))
    observed, mine = g["observables"], s_idx >= n_s

    def read(p: int, start: int, stop: int) -> np.ndarray:
        out = np.empty((stop - start, len(t_idx), len(s_idx)), np.float64)
        part = counts.get_orthogonal_selection((p, slice(start, stop), t_idx, s_idx[~mine])).astype(np.float64)
        out[:, :, ~mine] = np.where(part < 0, np.nan, part)
        out[:, :, mine] = observed.get_orthogonal_selection((p, slice(start, stop), t_idx, s_idx[mine] - n_s))
        return out

    return read


def _rows(point, values, names, replicates, status, times, species, data, observed=False):
    """One chunk as an Arrow table; species is dictionary-encoded (one string per species)."""
    import pyarrow as pa

    n_r, n_t, n_s = data.shape
    total = n_r * n_t * n_s
    flat = data.reshape(-1)
    columns = {"point": pa.array(np.full(total, point, np.int32))}
    for name, value in zip(names, values):
        columns[name] = pa.array(np.full(total, value, np.float64))
    columns["replicate"] = pa.array(np.repeat(replicates.astype(np.int32), n_t * n_s))
    columns["status"] = pa.array(np.repeat(np.asarray(status, np.int8), n_t * n_s))
    columns["time"] = pa.array(np.tile(np.repeat(times, n_s), n_r))
    columns["species"] = pa.DictionaryArray.from_arrays(pa.array(np.tile(np.arange(n_s, dtype=np.int32), n_r * n_t)),
                                                        species)
    # int32 molecule counts, or float64 for methods with a real-valued state; -1 is unknown either way
    # (with observables: float64, NaN unknown)
    unknown = np.isnan(flat) if observed else flat < 0
    columns["count"] = pa.array(flat, mask=unknown, type=pa.from_numpy_dtype(flat.dtype))
    return pa.table(columns)


def _writer(output: Path, fmt: str, schema):
    if fmt == "parquet":
        import pyarrow.parquet as pq

        return pq.ParquetWriter(output, schema, compression="zstd")
    import pyarrow.csv as pacsv

    return pacsv.CSVWriter(output, schema)


def _netcdf(ds, output: Path) -> tuple[str, int]:
    """Write the Dataset to NetCDF with the best library installed."""
    engine = next((e for e, module in (("netcdf4", "netCDF4"), ("h5netcdf", "h5netcdf"))
                   if importlib.util.find_spec(module) is not None), "scipy")
    ds = ds.drop_encoding()
    ds.attrs = {k: v if isinstance(v, (str, int, float)) else json.dumps(v) for k, v in ds.attrs.items()}
    if engine == "scipy":
        import psutil

        available = psutil.virtual_memory().available
        if ds.nbytes > SCIPY_MEMORY_SHARE * available:
            raise StoreError(f"{output}: {ds.nbytes / 2**30:.1f} GiB would be built in memory by scipy's NetCDF-3 writer "
                             f"({available / 2**30:.1f} GiB free); install h5netcdf (pip install h5netcdf) to write "
                             "chunk by chunk, or export fewer points, species or times")
        # NetCDF-3 has no 64-bit integers: keep event counts exact as float64
        ds["events"] = ds["events"].astype(np.float64)
    try:
        ds.to_netcdf(output, engine=engine)
    except OSError as exc:
        raise StoreError(f"{output}: cannot write: {exc.strerror or exc}") from exc
    return engine, int(ds["counts"].size) + (int(ds["observables"].size) if "observables" in ds else 0)
