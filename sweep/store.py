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
import os
import shutil
import warnings
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import zarr
from zarr.codecs import BloscCodec

from sweep import design as designs
from sweep.errors import StoreError
from sweep.lock import LOCK_NAME
from sweep.records import SHARDS_DIR
from sweep.records import mark as _mark_recorded
from sweep.records import read_indices as _recorded_by_shards

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

    Deletes whatever else is at ``path`` (but not the lock); callers decide whether that
    is allowed.
    """
    _clear(path)
    # an adaptive sweep's store holds its max_replicates; replicates never run stay -1 (not run)
    n_p, n_r, n_t, n_s = points.shape[0], spec.store_replicates, len(spec.times), len(spec.model.species)
    rb = spec.replicates_per_task
    g = zarr.open_group(path, mode="a", zarr_format=3)
    g.attrs.update(_attributes(spec))
    # every written chunk exists on disk, even one equal to the fill value, so that
    # `sweep status --verify` can tell a lost chunk from a block of failed replicates
    data = {"write_empty_chunks": True}
    _array(g, "counts", (n_p, n_r, n_t, n_s), (1, rb, n_t, n_s), counts_dtype(spec.method), -1,
           ("point", "replicate", "time", "species"), data)
    _array(g, "status", (n_p, n_r), (1, rb), "int8", -1, ("point", "replicate"), data)
    _array(g, "events", (n_p, n_r), (1, rb), "int64", -1, ("point", "replicate"), data)
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


def counts_dtype(method: str) -> np.dtype:
    """int32 molecule counts, or float64 for methods with a real-valued state (Langevin, ODE).

    A kernel module says so with ``COUNTS_DTYPE``; unknown samples are -1 either way.
    """
    import kernels

    return np.dtype(getattr(kernels.get(method), "COUNTS_DTYPE", np.int32))


def _clear(path: Path) -> None:
    path.mkdir(parents=True, exist_ok=True)
    for child in path.iterdir():
        # the lock, and another process's lock being created or removed at this moment (sweep.lock)
        if child.name == LOCK_NAME or child.name.startswith(f".{LOCK_NAME}."):
            continue
        if child.is_dir() and not child.is_symlink():
            shutil.rmtree(child)
        else:
            child.unlink(missing_ok=True)


def consolidate(path: Path) -> None:
    """Consolidate metadata so a plain ``xarray.open_zarr(path)`` opens without warnings.

    zarr warns about the lock file while listing the hierarchy; it is ours, so that
    warning is dropped here.
    """
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="Consolidated metadata is currently not part")
        warnings.filterwarnings("ignore", message=f"Object at {LOCK_NAME} is not recognized")
        warnings.filterwarnings("ignore", message=f"Object at {SHARDS_DIR} is not recognized")
        # a lock being created or removed by another process at this moment (sweep.lock._create)
        warnings.filterwarnings("ignore", message=rf"Object at \.{LOCK_NAME}\..* is not recognized")
        zarr.consolidate_metadata(path)


def _array(g, name, shape, chunks, dtype, fill, dims, config=None):
    return g.create_array(name, shape=shape, chunks=chunks, dtype=dtype, fill_value=fill,
                          dimension_names=dims, compressors=_COMPRESSORS, config=config)


def _attributes(spec: Spec) -> dict:
    return {
        "format_version": FORMAT_VERSION,
        "spec": spec.text,
        "spec_path": str(spec.path),
        "model": spec.model_text,
        "spec_sha256": spec.sha256,
        "content_sha256": spec.content_sha256,
        "design_file_sha256": spec.design.option("file_sha256") or "",
        "design": designs.describe(spec.design),  # what an analysis needs to pair samples
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


DATA_ARRAYS = ("counts", "status", "events")


def write_block(path: str | Path, point: int, start: int, stop: int, result: KernelResult) -> None:
    """Write one task's replicates into the chunks it alone owns, durably. Runs on a worker.

    zarr writes each chunk to a temporary file and renames it into place; the fsync of
    the files and of their directories afterwards makes the data survive a crash of the
    machine, not only of the process, before the client marks the task done.
    """
    g = zarr.open_group(path, mode="r+")
    for name, values in zip(DATA_ARRAYS, (result.counts, result.status, result.events)):
        array = g[name]
        array[point, start:stop] = values
        _fsync_chunk(Path(path), name, array, point, start)


def _chunk_file(path: Path, name: str, array: zarr.Array, point: int, start: int) -> Path:
    coords = (point, start // array.chunks[1]) + (0,) * (array.ndim - 2)
    return path / name / array.metadata.encode_chunk_key(coords)


def _fsync_chunk(path: Path, name: str, array: zarr.Array, point: int, start: int) -> None:
    target = _chunk_file(path, name, array, point, start)
    for node in (target, *target.parents):
        fd = os.open(node, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
        if node == path:
            break


def verify(path: Path, done: np.ndarray, replicates_per_task: int) -> list[tuple[int, int, str]]:
    """Re-read every chunk of every task marked done; return (point, block, problem) for bad ones."""
    g = zarr.open_group(path, mode="r")
    arrays = {name: g[name] for name in DATA_ARRAYS}
    problems = []
    for point, block in zip(*np.nonzero(done)):
        start = int(block) * replicates_per_task
        for name, array in arrays.items():
            if not _chunk_file(path, name, array, int(point), start).is_file():
                problems.append((int(point), int(block), f"{name} chunk missing"))
                break
            try:
                array[int(point), start:start + replicates_per_task]
            except Exception as exc:  # any decode failure means the chunk is unusable
                problems.append((int(point), int(block), f"{name} chunk unreadable: {exc}"))
                break
    return problems


def remove_partials(path: Path) -> int:
    """Delete temporary chunk files (``*.partial``) left by writers killed mid-write.

    zarr writes a chunk to ``<key>.<uuid>.partial`` and renames it; a SIGKILL between the
    two leaves the temporary file, which readers ignore but listings show.
    """
    removed = 0
    for leftover in path.rglob("*.partial"):
        leftover.unlink(missing_ok=True)
        removed += 1
    return removed


def read_done(path: Path) -> np.ndarray:
    """The completion record, bool (points, blocks): ``done`` merged with the shards' records.

    The shards' records are read first: folding them writes ``done`` before it deletes
    them, so a record that vanished meanwhile is already in the ``done`` read after it.
    """
    recorded = _recorded_by_shards(path)
    return _mark_recorded(zarr.open_array(path, path="done", mode="r")[:], recorded)


def write_done(path: Path, done: np.ndarray) -> None:
    """Replace ``done`` (only the lock's holder calls this: a single writer; shards keep records)."""
    zarr.open_array(path, path="done", mode="r+")[:] = done


def record_failures(path: Path, failed: list[dict], done: np.ndarray) -> None:
    """Keep the failed tasks (point, block, error) in the attributes.

    This run's failures replace earlier ones of the same task; earlier failures of tasks
    that are still not done (e.g. not reached before an interruption) are kept.
    """
    g = zarr.open_group(path, mode="r+", use_consolidated=False)
    fresh = {(f["point"], f["block"]) for f in failed}
    kept = [f for f in g.attrs.get("failed_tasks", [])
            if (f["point"], f["block"]) not in fresh and not done[f["point"], f["block"]]]
    g.attrs["failed_tasks"] = sorted(kept + failed, key=lambda f: (f["point"], f["block"]))


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
