"""The results store: one Zarr (format 3) directory per sweep.

Layout (``xarray.open_zarr(path)`` gives a Dataset with these names):

=========  ==============================  ====================================================
variable   dims                            meaning
=========  ==============================  ====================================================
counts     point, replicate, time, species molecule counts on the time grid (int32, -1 = none)
time       time                            sample times
species    species                         species names
param      param                           varied parameter names
params     point, param                    parameter values of each point
status     point, replicate                0 finished, 1 event cap, 2 numerical failure, -1 not run
events     point, replicate                reaction events fired
done       point, block                    completion record, true once a task's data is written
=========  ==============================  ====================================================

One chunk of ``counts``/``status``/``events`` is one task's (point, replicate block), so
no two writers ever share a chunk. Only the client writes ``done``, after the worker's
write has returned; zarr >= 3.1.3 writes each chunk to a temporary file and renames it,
so a killed writer leaves the old chunk or the new one, never a torn one.
"""

from __future__ import annotations

import datetime as _dt
import importlib.metadata
import shutil
import warnings
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import zarr
from zarr.codecs import BloscCodec

from sweep.errors import StoreError

if TYPE_CHECKING:
    import xarray as xr

    from kernels.network import KernelResult
    from sweep.spec import Spec

FORMAT_VERSION = 1
_COMPRESSORS = (BloscCodec(cname="zstd", clevel=3, shuffle="shuffle"),)


def versions() -> dict[str, str]:
    """Versions of this package and of the libraries that shape the numbers."""
    out = {}
    for dist in ("stochsweep", "numpy", "numba", "zarr"):
        try:
            out[dist] = importlib.metadata.version(dist)
        except importlib.metadata.PackageNotFoundError:
            out[dist] = "unknown"
    return out


def create(path: Path, spec: Spec, points: np.ndarray, n_blocks: int) -> None:
    """Create the whole layout (shapes, chunks, attributes) before any task runs.

    Overwrites whatever is at ``path``; callers decide whether that is allowed.
    """
    if path.exists():
        shutil.rmtree(path)
    n_p, n_r, n_t, n_s = points.shape[0], spec.replicates, len(spec.times), len(spec.model.species)
    rb = spec.replicates_per_task
    g = zarr.open_group(path, mode="w", zarr_format=3)
    g.attrs.update(_attributes(spec))
    _array(g, "counts", (n_p, n_r, n_t, n_s), (1, rb, n_t, n_s), "int32", -1,
           ("point", "replicate", "time", "species"))
    _array(g, "status", (n_p, n_r), (1, rb), "int8", -1, ("point", "replicate"))
    _array(g, "events", (n_p, n_r), (1, rb), "int64", -1, ("point", "replicate"))
    done = _array(g, "done", (n_p, n_blocks), (n_p, n_blocks), "bool", False, ("point", "block"))
    done[:] = False
    params = _array(g, "params", (n_p, points.shape[1]), (n_p, max(points.shape[1], 1)), "float64",
                    np.nan, ("point", "param"))
    if points.size:
        params[:] = points
    _array(g, "time", (n_t,), (n_t,), "float64", np.nan, ("time",))[:] = np.asarray(spec.times)
    _array(g, "species", (n_s,), (n_s,), str, "", ("species",))[:] = np.asarray(spec.model.species, dtype=object)
    names = _array(g, "param", (len(spec.param_names),), (max(len(spec.param_names), 1),), str, "", ("param",))
    if spec.param_names:
        names[:] = np.asarray(spec.param_names, dtype=object)
    consolidate(path)


def consolidate(path: Path) -> None:
    """Consolidate metadata so a plain ``xarray.open_zarr(path)`` opens without warnings."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="Consolidated metadata is currently not part")
        zarr.consolidate_metadata(path)


def _array(g, name, shape, chunks, dtype, fill, dims):
    return g.create_array(name, shape=shape, chunks=chunks, dtype=dtype, fill_value=fill,
                          dimension_names=dims, compressors=_COMPRESSORS)


def _attributes(spec: Spec) -> dict:
    return {
        "format_version": FORMAT_VERSION,
        "spec": spec.text,
        "spec_path": str(spec.path),
        "model": spec.model_text,
        "spec_sha256": spec.sha256,
        "method": spec.method,
        "root_seed": spec.seed,
        "replicates_per_task": spec.replicates_per_task,
        "max_events": spec.max_events,
        "versions": versions(),
        "created": _now(),
    }


def _now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


def exists(path: Path) -> bool:
    return (path / "zarr.json").is_file()


def attributes(path: Path) -> dict:
    """The store's group attributes (spec text, hash, method, seed, versions, ...)."""
    try:
        return dict(zarr.open_group(path, mode="r").attrs)
    except (FileNotFoundError, zarr.errors.GroupNotFoundError) as exc:
        raise StoreError(f"{path}: no results store here (run `sweep run SPEC --store {path}` first)") from exc


def write_block(path: str | Path, point: int, start: int, stop: int, result: KernelResult) -> None:
    """Write one task's replicates into the chunks it alone owns. Runs on a worker."""
    g = zarr.open_group(path, mode="r+")
    g["counts"][point, start:stop] = result.counts
    g["status"][point, start:stop] = result.status
    g["events"][point, start:stop] = result.events


def read_done(path: Path) -> np.ndarray:
    """The completion record, bool (points, blocks)."""
    return zarr.open_array(path, path="done", mode="r")[:]


def write_done(path: Path, done: np.ndarray) -> None:
    """Replace the completion record (only the client calls this: a single writer)."""
    zarr.open_array(path, path="done", mode="r+")[:] = done


def finish_run(path: Path, **attrs) -> None:
    """Record run attributes (e.g. when it last ran), then consolidate metadata last.

    Consolidating after the attribute write matters: a handle opened before consolidation
    would rewrite the root metadata without the consolidated block.
    """
    g = zarr.open_group(path, mode="r+", use_consolidated=False)
    g.attrs.update({"last_run": _now(), **attrs})
    consolidate(path)


def open_dataset(path: str | Path) -> xr.Dataset:
    """Open the store lazily as an ``xarray.Dataset`` (dask-backed)."""
    import xarray as xr

    path = Path(path)
    if not exists(path):
        raise StoreError(f"{path}: no results store here (run `sweep run SPEC --store {path}` first)")
    return xr.open_zarr(path)
