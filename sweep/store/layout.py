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

A model with observables adds ``observables`` (point, replicate, time, observable; float64, NaN
where the replicate did not finish), chunked as ``counts`` and written by the same task, and the
``observable`` coordinate; a store without them has neither, and the bytes it always had.

One chunk of ``counts``/``status``/``events`` is one task's (point, replicate block), so
no two writers ever share a chunk. Only the client writes ``done``, after the worker's
write has returned; zarr >= 3.1.3 writes each chunk to a temporary file and renames it,
so a killed writer leaves the old chunk or the new one, never a torn one. Every chunk of
every array ends in a CRC-32C checksum (zarr's ``crc32c`` codec), so a flipped bit fails
to decode instead of reading as other numbers.

Creation is all or nothing: a marker file ``.sweep-incomplete`` is written (and fsynced)
before anything else, the layout is built in ``.sweep-building/`` inside the folder,
fsynced, and moved into place with the root ``zarr.json`` last; the marker goes only then.
A folder holding the marker is a store whose creation was interrupted: readers refuse it
and the next ``sweep run`` rebuilds it.
"""

from __future__ import annotations

import datetime as _dt
import importlib.metadata
import json
import os
import shutil
import uuid
import warnings
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import zarr
from zarr.codecs import BloscCodec, Crc32cCodec

from sweep import design as designs
from sweep.store import durable
from sweep.spec import identity
from sweep.errors import StoreError
from sweep.store.lock import LOCK_NAME
from sweep.store.records import SHARDS_DIR

if TYPE_CHECKING:
    import xarray as xr

    from sweep.spec import Spec

FORMAT_VERSION = 1
# compression, then a checksum of the compressed bytes (checked on every read). Level 1 with bit
# shuffle: on the bench's counts chunks it encodes 2.6-3.5x faster than level 3 with byte shuffle
# (the store format of FORMAT_VERSION 1's first stores) and compresses as well or better (x6.0-11.8
# against x5.2-11.9), docs/measurements.md. Each array's codec is in its own metadata, so stores
# made with the other one are read and resumed with theirs.
_COMPRESSORS = (BloscCodec(cname="zstd", clevel=1, shuffle="bitshuffle"), Crc32cCodec())
INCOMPLETE = ".sweep-incomplete"  # present from the first byte of a store's creation to the last
BUILDING = ".sweep-building"  # where the layout is built before it is moved into place
COORDINATES = ("time", "species", "param", "params")
DATA_ARRAYS = ("counts", "status", "events")
OBSERVABLES = "observables"  # a fourth data array, only in a store whose model has observables
CHECKSUMS = "checksums"
# write every chunk, even one equal to the fill value (zarr's default deletes those): a runtime
# setting, not kept in an array's metadata, so every handle that writes needs it
_WRITE_EMPTY = {"write_empty_chunks": True}


class DamagedDone(StoreError):
    """The completion record cannot be read; it can be rebuilt from the chunks (``sweep.store.integrity``)."""


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
    """Create the whole layout (shapes, chunks, attributes) before any task runs, all or nothing.

    Deletes whatever else is at ``path`` (but not the lock); callers decide whether that
    is allowed. Interrupted at any moment (SIGKILL, Ctrl-C, a full disk), it leaves either
    what was there before or a folder marked incomplete, which ``exists`` refuses and the
    next call rebuilds.
    """
    path.mkdir(parents=True, exist_ok=True)
    _mark_incomplete(path)
    _clear(path)
    build = path / BUILDING
    _build(build, spec, points, n_blocks)
    durable.fsync_tree(build)
    for child in sorted(build.iterdir()):
        if child.name != "zarr.json":
            os.rename(child, path / child.name)
    durable.fsync(path)
    os.rename(build / "zarr.json", path / "zarr.json")  # the root last: xarray sees all or nothing
    build.rmdir()
    durable.fsync(path)
    (path / INCOMPLETE).unlink()
    durable.fsync(path)


def _mark_incomplete(path: Path) -> None:
    with open(path / INCOMPLETE, "w", encoding="utf-8") as f:
        f.write("a sweep store is being created here; if no `sweep run` is running, the next one rebuilds it\n")
        f.flush()
        os.fsync(f.fileno())
    durable.fsync(path)


def _build(build: Path, spec: Spec, points: np.ndarray, n_blocks: int) -> None:
    # an adaptive sweep's store holds its max_replicates; replicates never run stay -1 (not run)
    n_p, n_r, n_t, n_s = points.shape[0], spec.store_replicates, len(spec.times), len(spec.model.species)
    rb = spec.replicates_per_task
    g = zarr.open_group(build, mode="w", zarr_format=3)
    g.attrs.update(_attributes(spec, points))
    # every written chunk exists on disk, even one equal to the fill value, so that
    # `sweep status --verify` can tell a lost chunk from a block of failed replicates
    data = {"write_empty_chunks": True}
    _array(g, "counts", (n_p, n_r, n_t, n_s), (1, rb, n_t, n_s), counts_dtype(spec.method), -1,
           ("point", "replicate", "time", "species"), data)
    _array(g, "status", (n_p, n_r), (1, rb), "int8", -1, ("point", "replicate"), data)
    _array(g, "events", (n_p, n_r), (1, rb), "int64", -1, ("point", "replicate"), data)
    _array(g, "done", (n_p, n_blocks), (n_p, n_blocks), "bool", False, ("point", "block"), data)[:] = False
    names = _observables_arrays(g, spec, points, (n_p, n_r, n_t), rb)
    _checksums_array(g, n_p, n_blocks, DATA_ARRAYS + names)
    write_coordinates(g, spec, points, COORDINATES, create=True)
    consolidate(build)


def _observables_arrays(g: zarr.Group, spec: Spec, points: np.ndarray, shape: tuple[int, int, int],
                        rb: int) -> tuple[str, ...]:
    """``observables`` (point, replicate, time, observable; float64, NaN = none) chunked as ``counts``, and its
    ``observable`` coordinate; nothing at all for a model without observables, so such a store keeps its bytes."""
    names = [name for name, _ in spec.model.observables]
    if not names:
        return ()
    n_p, n_r, n_t = shape
    data = {"write_empty_chunks": True}
    _array(g, OBSERVABLES, (n_p, n_r, n_t, len(names)), (1, rb, n_t, len(names)), "float64", np.nan,
           ("point", "replicate", "time", "observable"), data)
    write_coordinates(g, spec, points, ("observable",), create=True)
    return (OBSERVABLES,)


def data_arrays(g: zarr.Group | Path) -> tuple[str, ...]:
    """The arrays every task writes one chunk of, in the order of ``checksums``: ``DATA_ARRAYS``, then
    ``observables`` when the store has it."""
    if not isinstance(g, zarr.Group):
        g = zarr.open_group(g, mode="r", use_consolidated=False)
    return DATA_ARRAYS + ((OBSERVABLES,) if OBSERVABLES in g else ())


def _checksums_array(g: zarr.Group, n_p: int, n_blocks: int, names: tuple[str, ...] = DATA_ARRAYS) -> zarr.Array:
    """The CRC-32C of each done task's data chunks, as recorded when the task finished (0: none)."""
    array = _array(g, CHECKSUMS, (n_p, n_blocks, len(names)), (max(n_p, 1), max(n_blocks, 1), len(names)),
                   "uint32", 0, ("point", "block", "array"), {"write_empty_chunks": True})
    array.attrs["arrays"] = list(names)
    array[:] = 0
    return array


def write_coordinates(g: zarr.Group, spec: Spec, points: np.ndarray, names, create: bool = False) -> None:
    """(Re)write the coordinate arrays ``names`` from the spec: they follow from it alone."""
    n_p, n_t, n_s, n_q = points.shape[0], len(spec.times), len(spec.model.species), len(spec.param_names)
    layout = {
        "params": ((n_p, points.shape[1]), (n_p, max(points.shape[1], 1)), "float64", np.nan, ("point", "param"),
                   points),
        "time": ((n_t,), (n_t,), "float64", np.nan, ("time",), np.asarray(spec.times)),
        "species": ((n_s,), (n_s,), str, "", ("species",), np.asarray(spec.model.species, dtype=object)),
        "param": ((n_q,), (max(n_q, 1),), str, "", ("param",), np.asarray(spec.param_names, dtype=object)),
        # only in a store whose model has observables (``_observables_arrays``)
        "observable": ((len(spec.observables),), (max(len(spec.observables), 1),), str, "", ("observable",),
                       np.asarray([name for name, _ in spec.observables], dtype=object)),
    }
    for name in names:
        shape, chunks, dtype, fill, dims, values = layout[name]
        if create:
            array = _array(g, name, shape, chunks, dtype, fill, dims, {"write_empty_chunks": True})
        else:
            array = g[name].with_config(_WRITE_EMPTY)
        if np.asarray(values).size:
            array[:] = values


def counts_dtype(method: str) -> np.dtype:
    """int32 molecule counts, or float64 for methods with a real-valued state (Langevin, ODE).

    A kernel module says so with ``COUNTS_DTYPE``; unknown samples are -1 either way.
    """
    import kernels

    return np.dtype(getattr(kernels.get(method), "COUNTS_DTYPE", np.int32))


def _clear(path: Path) -> None:
    """Delete everything but the lock and the creation marker; the root ``zarr.json`` first,
    so that no reader takes the remains for a store while the rest goes."""
    (path / "zarr.json").unlink(missing_ok=True)
    for child in path.iterdir():
        # the lock, and another process's lock being created or removed at this moment (sweep.lock)
        if child.name in (LOCK_NAME, INCOMPLETE) or child.name.startswith(f".{LOCK_NAME}."):
            continue
        if child.is_dir() and not child.is_symlink():
            shutil.rmtree(child)
        else:
            child.unlink(missing_ok=True)


def is_ours(name: str) -> bool:
    """Names a folder may hold before it is a store: the lock (and its temporary names), the
    creation marker, the build folder and the shards' folder."""
    return name in (LOCK_NAME, INCOMPLETE, BUILDING, SHARDS_DIR) or name.startswith(f".{LOCK_NAME}.")


def check_claimable(path: Path) -> None:
    """Refuse a folder that holds something other than a store, our own leftovers, or nothing.

    Raises
    ------
    StoreError
        If ``path`` is a file, or a folder with foreign entries.
    """
    if not path.exists() or exists(path) or incomplete(path):
        if path.exists() and not path.is_dir():
            raise StoreError(f"{path}: exists and is not a results store; choose another --store")
        return
    if not path.is_dir() or any(not is_ours(p.name) for p in path.iterdir()):
        raise StoreError(f"{path}: exists and is not a results store; choose another --store")


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
        warnings.filterwarnings("ignore", message=rf"Object at \{INCOMPLETE} is not recognized")
        zarr.consolidate_metadata(path)


def _array(g, name, shape, chunks, dtype, fill, dims, config=None, overwrite=False):
    return g.create_array(name, shape=shape, chunks=chunks, dtype=dtype, fill_value=fill,
                          dimension_names=dims, compressors=_COMPRESSORS, config=config, overwrite=overwrite)


def _attributes(spec: Spec, points: np.ndarray) -> dict:
    fingerprint = identity.of(spec, points)
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
        **({"default_species": spec.plot_species} if spec.plot_species else {}),
        **({"time_unit": spec.time_unit} if spec.time_unit else {}),  # plots and reports label time with it
        **({"observables": dict(spec.observables)} if spec.observables else {}),  # name -> expression, for readers
        # what decides the bytes (sweep.identity): a resume must match it
        "identity": fingerprint,
        "identity_sha256": identity.digest(fingerprint),
        "versions": versions(),
        "created": _now(),
        "store_id": uuid.uuid4().hex,  # new at every creation: workers' cached handles follow it
    }


def _now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


def exists(path: Path) -> bool:
    """True for a complete store (its creation finished)."""
    return (path / "zarr.json").is_file() and not incomplete(path)


def incomplete(path: Path) -> bool:
    """True for a folder whose store creation was interrupted (the next run rebuilds it)."""
    return (path / INCOMPLETE).exists()


def _missing(path: Path) -> StoreError:
    if incomplete(path):
        return StoreError(f"{path}: the creation of this store was interrupted, so it holds no results; "
                          f"`sweep run SPEC --store {path}` rebuilds it")
    return StoreError(f"{path}: no results store here (run `sweep run SPEC --store {path}` first)")


def attributes(path: Path) -> dict:
    """The store's group attributes (spec text, hash, method, seed, versions, ...).

    Raises
    ------
    StoreError
        No store at ``path``, an interrupted creation, or a root ``zarr.json`` that is damaged
        (it holds the spec; the message names the file).
    """
    if not exists(path):
        raise _missing(path)
    root = path / "zarr.json"
    try:
        attrs = dict(json.loads(root.read_bytes())["attributes"])
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise StoreError(f"{root}: damaged ({brief(exc)}); this file holds the store's spec and attributes, so "
                         "the store can be neither checked nor resumed: restore the file from a copy, or start "
                         "over with --fresh (which deletes the store)") from exc
    if not isinstance(attrs.get("spec"), str) or "method" not in attrs:
        raise StoreError(f"{root}: not written by `sweep run` (no spec in its attributes); choose another --store")
    return attrs


def brief(exc: BaseException) -> str:
    text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    return text if len(text) <= 120 else text[:117] + "..."


def store_id(attrs: dict) -> str:
    """A value that changes whenever the store at a path is created anew (workers key their handles by it)."""
    return str(attrs.get("store_id") or f"{attrs.get('spec_sha256', '')}-{attrs.get('created', '')}")


def open_dataset(path: str | Path) -> xr.Dataset:
    """Open the store lazily as an ``xarray.Dataset`` (dask-backed)."""
    import xarray as xr

    path = Path(path)
    if not exists(path):
        raise _missing(path)
    return xr.open_zarr(path)
