"""Per-shard completion records: what a shard finished, durably, without touching ``done``.

``done`` is one Zarr chunk, rewritten whole; two shards writing it at once would each drop
the other's flags. So a shard (``sweep run --shard I/N``) never writes it. It appends the
index of every task it finished to a file of its own, and fsyncs it, only after the task's
chunks were written and fsynced. Readers take the union of ``done`` and every record
(``sweep.store.read_done``). Whoever holds the store's lock later folds the records of
shards no longer running into ``done`` and deletes them (``sweep.store.claims.fold``).

Files, in ``<store>/shards/``:

- ``done-<I>-of-<N>.bin``: little-endian int64 task indices (``point * blocks + block``, the
  task's place in ``sweep.execute.tasks.make_tasks``), appended; a torn last entry (a crash
  mid-append) is ignored;
- ``sums-<I>-of-<N>.bin``: the same task index followed by the CRC-32C of its three data
  chunks (the store's ``checksums``), appended before the task's entry in ``done-...``;
- ``failed-<I>-of-<N>.json``: the tasks this shard's last run failed, with their errors,
  replaced atomically (written to a temporary file and renamed).

Only the shard holding claim ``I/N`` (``sweep.store.claims``) writes these two files.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np

from sweep.store import durable
SHARDS_DIR = "shards"
_ENTRY = np.dtype("<i8")
# four checksum slots in 24 bytes: counts, status, events, then observables (0 in a store without them, where
# the fourth slot was padding and written as 0, so records written before observables read unchanged)
_SUMS = np.dtype([("task", "<i8"), ("sums", "<u4", (4,))])
# appends never follow a symlink planted in a store someone else prepared
_APPEND = os.O_WRONLY | os.O_APPEND | os.O_CREAT | os.O_NOFOLLOW


def folder(store: Path) -> Path:
    """The store's folder of shard claims and records."""
    return Path(store) / SHARDS_DIR


def done_file(store: Path, index: int, count: int) -> Path:
    return folder(store) / f"done-{index}-of-{count}.bin"


def failed_file(store: Path, index: int, count: int) -> Path:
    return folder(store) / f"failed-{index}-of-{count}.json"


def sums_file(store: Path, index: int, count: int) -> Path:
    return folder(store) / f"sums-{index}-of-{count}.bin"


def append_done(store: Path, index: int, count: int, tasks: list[int], sums: list[tuple[int, ...]] | None = None) -> None:
    """Append finished task indices (and their chunks' checksums) to shard ``index/count``'s records, durably.

    One ``write`` of a few bytes with O_APPEND, then fsync; the file's first creation also
    fsyncs its folder, so the name survives a crash of the machine too. The checksums go
    first, so a task recorded as done always has them.
    """
    if sums is not None:
        entries = np.zeros(len(tasks), dtype=_SUMS)
        entries["task"] = tasks
        for k, one in enumerate(sums):
            entries["sums"][k, :len(one)] = one
        _append(sums_file(store, index, count), entries.tobytes())
    _append(done_file(store, index, count), np.asarray(tasks, dtype=_ENTRY).tobytes())


def _append(path: Path, data: bytes) -> None:
    new = not path.exists()
    fd = os.open(path, _APPEND, 0o644)
    try:
        os.write(fd, data)
        os.fsync(fd)
    finally:
        os.close(fd)
    if new:
        fsync_dir(path.parent)


def fsync_dir(path: Path) -> None:
    durable.fsync(path)


def read_file(path: Path) -> np.ndarray:
    """Task indices in one record; empty if it vanished (folded meanwhile). A torn tail is dropped."""
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        return np.zeros(0, dtype=_ENTRY)
    usable = len(raw) - len(raw) % _ENTRY.itemsize
    return np.frombuffer(raw[:usable], dtype=_ENTRY)


def sums_files(store: Path) -> list[Path]:
    where = folder(store)
    return sorted(where.glob("sums-*-of-*.bin")) if where.is_dir() else []


def read_sums(store: Path) -> np.ndarray:
    """Every (task, checksums) entry recorded by any shard; a torn tail is dropped."""
    parts = []
    for path in sums_files(store):
        try:
            raw = path.read_bytes()
        except FileNotFoundError:
            continue
        parts.append(np.frombuffer(raw[:len(raw) - len(raw) % _SUMS.itemsize], dtype=_SUMS))
    return np.concatenate(parts) if parts else np.zeros(0, dtype=_SUMS)


def merge_sums(sums: np.ndarray, recorded: np.ndarray) -> np.ndarray:
    """Put recorded checksums into a (points, blocks, arrays) array, in place; returns it."""
    flat = sums.reshape(-1, sums.shape[-1])
    ok = (recorded["task"] >= 0) & (recorded["task"] < flat.shape[0])
    flat[recorded["task"][ok]] = recorded["sums"][ok][:, :flat.shape[-1]]
    return sums


def done_files(store: Path) -> list[Path]:
    where = folder(store)
    return sorted(where.glob("done-*-of-*.bin")) if where.is_dir() else []


def read_indices(store: Path) -> np.ndarray:
    """Every task index recorded by any shard (may repeat)."""
    parts = [read_file(p) for p in done_files(store)]
    return np.concatenate(parts) if parts else np.zeros(0, dtype=_ENTRY)


def mark(done: np.ndarray, indices: np.ndarray) -> np.ndarray:
    """Set the flags of ``indices`` in a (points, blocks) ``done`` array, in place; returns it."""
    flat = done.reshape(-1)
    flat[indices[(indices >= 0) & (indices < flat.size)]] = True
    return done


def write_failures(store: Path, index: int, count: int, failures: list[dict]) -> None:
    """Replace shard ``index/count``'s failures (a list of {point, block, error}); none removes the file."""
    path = failed_file(store, index, count)
    if not failures:
        path.unlink(missing_ok=True)
        return
    tmp = path.with_name(path.name + ".tmp")
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC | os.O_NOFOLLOW, 0o644)
    with os.fdopen(fd, "w", encoding="utf-8") as f:
        json.dump(failures, f)
        f.flush()
        os.fsync(f.fileno())
    os.replace(tmp, path)


def failed_files(store: Path) -> list[Path]:
    where = folder(store)
    return sorted(where.glob("failed-*-of-*.json")) if where.is_dir() else []


def read_failures_file(path: Path) -> list[dict]:
    """One shard's failures; an unreadable or vanished file reads as none."""
    try:
        return list(json.loads(path.read_text(encoding="utf-8")))
    except (OSError, ValueError, TypeError):
        return []


def read_failures(store: Path) -> list[dict]:
    """Failures recorded by shards and not folded yet."""
    return [f for path in failed_files(store) for f in read_failures_file(path)]
