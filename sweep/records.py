"""Per-shard completion records: what a shard finished, durably, without touching ``done``.

``done`` is one Zarr chunk, rewritten whole; two shards writing it at once would each drop
the other's flags. So a shard (``sweep run --shard I/N``) never writes it. It appends the
index of every task it finished to a file of its own, and fsyncs it, only after the task's
chunks were written and fsynced. Readers take the union of ``done`` and every record
(``sweep.store.read_done``). Whoever holds the store's lock later folds the records of
shards no longer running into ``done`` and deletes them (``sweep.claims.fold``).

Files, in ``<store>/shards/``:

- ``done-<I>-of-<N>.bin``: little-endian int64 task indices (``point * blocks + block``, the
  task's place in ``sweep.tasks.make_tasks``), appended; a torn last entry (a crash
  mid-append) is ignored;
- ``failed-<I>-of-<N>.json``: the tasks this shard's last run failed, with their errors,
  replaced atomically (written to a temporary file and renamed).

Only the shard holding claim ``I/N`` (``sweep.claims``) writes these two files.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np

SHARDS_DIR = "shards"
_ENTRY = np.dtype("<i8")


def folder(store: Path) -> Path:
    """The store's folder of shard claims and records."""
    return Path(store) / SHARDS_DIR


def done_file(store: Path, index: int, count: int) -> Path:
    return folder(store) / f"done-{index}-of-{count}.bin"


def failed_file(store: Path, index: int, count: int) -> Path:
    return folder(store) / f"failed-{index}-of-{count}.json"


def append_done(store: Path, index: int, count: int, tasks: list[int]) -> None:
    """Append finished task indices to shard ``index/count``'s record, durably.

    One ``write`` of a few bytes with O_APPEND, then fsync; the file's first creation also
    fsyncs its folder, so the name survives a crash of the machine too.
    """
    path = done_file(store, index, count)
    new = not path.exists()
    fd = os.open(path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
    try:
        os.write(fd, np.asarray(tasks, dtype=_ENTRY).tobytes())
        os.fsync(fd)
    finally:
        os.close(fd)
    if new:
        fsync_dir(path.parent)


def fsync_dir(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def read_file(path: Path) -> np.ndarray:
    """Task indices in one record; empty if it vanished (folded meanwhile). A torn tail is dropped."""
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        return np.zeros(0, dtype=_ENTRY)
    usable = len(raw) - len(raw) % _ENTRY.itemsize
    return np.frombuffer(raw[:usable], dtype=_ENTRY)


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
    with open(tmp, "w", encoding="utf-8") as f:
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
