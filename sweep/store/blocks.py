"""Writing and reading a store's data: task blocks, their checksums and the completion record.

``sweep.store.layout`` creates the store and owns its metadata; this module holds what changes
while a sweep runs. Only the client (the lock's holder) writes ``done`` and ``checksums``; a
worker writes only the chunks its task owns (``write_block``).
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import zarr
from zarr.codecs import Crc32cCodec

from sweep.errors import StoreError
from sweep.store import durable
from sweep.store.chunks import remove_stale
from sweep.store.layout import (CHECKSUMS, DATA_ARRAYS, OBSERVABLES, DamagedDone, _WRITE_EMPTY, _array,
                                _checksums_array, _now, brief, consolidate)
from sweep.store.records import mark as _mark_recorded
from sweep.store.records import merge_sums as _merge_recorded_sums
from sweep.store.records import read_indices as _recorded_by_shards
from sweep.store.records import read_sums as _recorded_sums

if TYPE_CHECKING:
    from kernels.network import KernelResult


def write_block(path: str | Path, point: int, start: int, stop: int, result: KernelResult,
                store_id: str = "", observables: np.ndarray | None = None) -> tuple[int, ...]:
    """Write one task's replicates into the chunks it alone owns, durably. Runs on a worker.

    Each chunk goes to a temporary file that is fsynced and renamed into place, and its folder
    is fsynced (``sweep.store.chunks``), so the data survives a crash of the machine, not only of the
    process, before the client marks the task done. Every chunk is written, even one equal to
    the fill value (a task whose replicates all failed). With ``store_id`` (the store's
    ``attrs["store_id"]``) the worker keeps the store's array handles open between tasks.

    ``observables`` (replicates, times, observables), when the store has that array, is its
    fourth chunk (``sweep.model.observables.Readout.evaluate``).

    Returns the CRC-32C that ends each chunk file (0 for an array written before checksums were
    kept), in the order of ``data_arrays``, for the completion record to keep beside ``done``.

    Raises
    ------
    StoreError
        If a chunk's folder leads out of the store through a symlink, or the block is not one chunk.
    """
    from sweep.store.chunks import ChunkWriter

    root = Path(path)
    chunks = _chunks(result, observables)
    writer = ChunkWriter.of(root, store_id) if store_id else None
    if writer is None:
        return _write_block_with_zarr(root, point, start, stop, chunks)
    per_chunk = writer.arrays["status"].chunks[1]
    if start % per_chunk or stop - start > per_chunk:
        raise StoreError(f"{root}: replicates {start}:{stop} are not one chunk of {per_chunk}")
    block = start // per_chunk
    if (OBSERVABLES in writer.arrays) != (observables is not None):
        raise StoreError(f"{root}: the store {'has' if OBSERVABLES in writer.arrays else 'has no'} observables "
                         "array but the task computed " + ("none" if observables is None else "some"))
    return tuple(writer.write(name, point, block, values) for name, values in chunks.items())


def _chunks(result: KernelResult, observables: np.ndarray | None) -> dict[str, np.ndarray]:
    """A block's chunks by array name, in the order of the recorded checksums."""
    out = dict(zip(DATA_ARRAYS, (result.counts, result.status, result.events)))
    if observables is not None:
        out[OBSERVABLES] = observables
    return out


def _write_block_with_zarr(root: Path, point: int, start: int, stop: int, chunks: dict) -> tuple[int, ...]:
    """The same through zarr (a store whose codecs ``sweep.store.chunks`` does not write itself)."""
    g = zarr.open_group(root, mode="r+")
    sums = []
    for name, values in chunks.items():
        array = g[name].with_config(_WRITE_EMPTY)
        target = chunk_file(root, name, array, point, start)
        if not durable.inside(target.parent, root):
            raise StoreError(f"{root}: {target.parent.relative_to(root)} leads out of the store through a "
                             "symlink; refusing to write there")
        remove_stale(target)
        array[point, start:stop] = values
        _fsync_chunk(root, target)
        sums.append(trailing_checksum(target) if has_checksums(array) else 0)
    return tuple(sums)


def has_checksums(array: zarr.Array) -> bool:
    """True when every chunk of ``array`` ends in a CRC-32C (stores created since checksums were kept)."""
    return any(isinstance(c, Crc32cCodec) for c in array.metadata.codecs)


def trailing_checksum(file: Path) -> int:
    """The CRC-32C stored in a chunk file's last four bytes (little-endian, as zarr's codec writes it)."""
    with open(file, "rb") as f:
        f.seek(-4, os.SEEK_END)
        return int.from_bytes(f.read(4), "little")


def read_checksums(path: Path) -> np.ndarray | None:
    """The recorded checksums (points, blocks, 3) merged with the shards' records; None if the
    store keeps none (created before they were kept) or they are unreadable."""
    try:
        sums = zarr.open_array(path, path=CHECKSUMS, mode="r")[:]
    except Exception:
        return None
    return _merge_recorded_sums(sums, _recorded_sums(path))


def write_checksums(path: Path, sums: np.ndarray) -> None:
    """Replace the recorded checksums (the lock's holder only), creating the array if missing."""
    try:
        array = zarr.open_array(path, path=CHECKSUMS, mode="r+")
    except Exception:
        g = zarr.open_group(path, mode="r+", use_consolidated=False)
        if CHECKSUMS in g:
            del g[CHECKSUMS]
        array = _checksums_array(g, sums.shape[0], sums.shape[1], DATA_ARRAYS + (OBSERVABLES,) * (sums.shape[2] > 3))
    array.with_config(_WRITE_EMPTY)[:] = sums


def chunk_file(path: Path, name: str, array: zarr.Array, point: int, start: int) -> Path:
    """The file of the chunk holding replicate ``start`` of ``point`` in a data array."""
    coords = (point, start // array.chunks[1]) + (0,) * (array.ndim - 2)
    return path / name / array.metadata.encode_chunk_key(coords)


def _fsync_chunk(path: Path, target: Path) -> None:
    for node in (target, *target.parents):
        durable.fsync(node)
        if node == path:
            break


def remove_partials(path: Path) -> int:
    """Delete temporary files (``*.partial``) left by writers killed mid-write, where the client writes.

    zarr writes a chunk to ``<key>.<uuid>.partial`` and renames it; a SIGKILL between the two
    leaves the temporary file, which readers ignore but listings show. Here: the store's own
    files and the arrays only the client writes (``done``, ``checksums``, coordinates). A data
    chunk's leftovers belong to a task that never completed, and the writer that runs it again
    removes them (``sweep.store.chunks``), so a resume need not list every folder of the store.
    """
    removed = 0
    client_written = ("done", CHECKSUMS, "time", "species", "param", "params", "observable")
    folders = [path] + [path / name for name in client_written]
    for folder in folders:
        leftovers = folder.rglob("*.partial") if folder != path else folder.glob("*.partial")
        for leftover in leftovers:
            leftover.unlink(missing_ok=True)
            removed += 1
    return removed


def read_done(path: Path) -> np.ndarray:
    """The completion record, bool (points, blocks): ``done`` merged with the shards' records.

    The shards' records are read first: folding them writes ``done`` before it deletes
    them, so a record that vanished meanwhile is already in the ``done`` read after it.

    Raises
    ------
    DamagedDone
        If ``done`` is missing, fails its checksum or has the wrong shape.
    """
    recorded = _recorded_by_shards(path)
    return _mark_recorded(read_done_array(path), recorded)


def read_done_array(path: Path) -> np.ndarray:
    """``done`` alone (without the shards' records), checked against the data arrays' shape."""
    try:
        done = zarr.open_array(path, path="done", mode="r")[:]
        status = zarr.open_array(path, path="status", mode="r")
        blocks = -(-status.shape[1] // status.chunks[1])
    except Exception as exc:  # a missing array, a damaged zarr.json or a chunk failing its checksum
        raise DamagedDone(f"{path / 'done'}: the completion record is damaged ({brief(exc)})") from exc
    if done.dtype != np.bool_ or done.shape != (status.shape[0], blocks):
        raise DamagedDone(f"{path / 'done'}: the completion record is damaged (shape {done.shape}, dtype "
                          f"{done.dtype}; expected {(status.shape[0], blocks)}, bool)")
    return done


def write_done(path: Path, done: np.ndarray) -> None:
    """Replace ``done`` (only the lock's holder calls this: a single writer; shards keep records)."""
    zarr.open_array(path, path="done", mode="r+").with_config(_WRITE_EMPTY)[:] = done


def recreate_done(path: Path, done: np.ndarray) -> None:
    """Write ``done`` as a new array (its old one is missing or damaged), durably."""
    g = zarr.open_group(path, mode="r+", use_consolidated=False)
    n_p, n_b = done.shape
    _array(g, "done", (n_p, n_b), (max(n_p, 1), max(n_b, 1)), "bool", False, ("point", "block"),
           {"write_empty_chunks": True}, overwrite=True)[:] = done
    durable.fsync_tree(path / "done")
    durable.fsync(path)


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


def set_attributes(path: Path, **attrs) -> None:
    """Set (or, with None, remove) root attributes, then consolidate; the lock's holder only."""
    g = zarr.open_group(path, mode="r+", use_consolidated=False)
    merged = {**g.attrs.asdict(), **attrs}
    g.attrs.put({k: v for k, v in merged.items() if v is not None})  # one write of zarr.json
    consolidate(path)


def finish_run(path: Path, **attrs) -> None:
    """Record run attributes (e.g. when it last ran), then consolidate metadata last.

    Consolidating after the attribute write matters: a handle opened before consolidation
    would rewrite the root metadata without the consolidated block.
    """
    g = zarr.open_group(path, mode="r+", use_consolidated=False)
    g.attrs.update({"last_run": _now(), **attrs})
    consolidate(path)
