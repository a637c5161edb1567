"""Shard claims: several ``sweep run --shard I/N`` processes writing one store safely.

Rules (docs/running.md and docs/design-notes.md, shards):

- The store's lock ``<store>/sweep.lock`` is still the one way in. A whole ``sweep run``
  holds it for its run (role ``"run"``). A shard holds it only for a moment (role
  ``"shards"``): to create the store if it is missing, check the spec, and take its claim;
  and again at its end, to fold completion records. Shards wait for each other's moment;
  nobody waits for a whole run.
- A claim is a lock file of its own, ``<store>/shards/claim-<I>-of-<N>.json``, created with
  O_EXCL and judged stale exactly like the store's lock (dead pid on this host, or a Slurm
  job that no longer runs). So one shard cannot run twice at once, and a shard killed by
  SIGKILL or a node failure is taken over by its resubmission.
- All live claims share one N: shards of different N would overlap.
- A whole run, holding the lock, refuses to start while any claim is live (``settle``);
  a shard refuses while a whole run holds the lock.
- Whoever holds the lock folds the records of shards no longer running into ``done``
  (``fold``); the last one out (no live claim left) also removes stray ``*.partial``
  files and records the run in the attributes.
"""

from __future__ import annotations

import contextlib
import re
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

from sweep import store

from sweep.store import durable, integrity, lock, records
from sweep.errors import StoreError

# A shard waits this long for another shard's setup or clean-up (each well under a second).
SETUP_WAIT_SECONDS = 120.0
_CLAIM = re.compile(r"claim-(\d+)-of-(\d+)\.json$")


@dataclass(frozen=True)
class Claim:
    """Shard ``index`` of ``count``, its holder, and whether that holder still runs (None: unknown)."""

    index: int
    count: int
    holder: lock.Holder
    live: bool | None

    def describe(self) -> str:
        state = {True: "running", False: "gone", None: "cannot be checked from here"}[self.live]
        return f"shard {self.index}/{self.count}: {self.holder.describe()} ({state})"


def claim_name(index: int, count: int) -> str:
    return f"claim-{index}-of-{count}.json"


def list_claims(path: Path) -> list[Claim]:
    """Every claim file in the store, with whether its holder still runs."""
    where = records.folder(path)
    if not where.is_dir():
        return []
    out = []
    for file in sorted(where.iterdir()):
        m = _CLAIM.match(file.name)
        holder = lock.read(where, file.name) if m else None
        if holder is not None:
            stale = lock.is_stale(holder)
            out.append(Claim(int(m[1]), int(m[2]), holder, None if stale is None else not stale))
    return out


@contextlib.contextmanager
def holding_lock(path: Path, break_lock: bool = False, wait: float = SETUP_WAIT_SECONDS) -> Iterator[lock.Holder]:
    """Hold the store's lock for a shard's short setup or clean-up, waiting out other shards' turns.

    Raises
    ------
    StoreError
        If a whole ``sweep run`` holds the lock, or a holder on another host cannot be
        checked (and ``break_lock`` is false), or other shards kept it for ``wait`` seconds.
    """
    me = lock.me(role="shards")
    deadline = time.monotonic() + wait
    while True:
        other = lock.take(path, me, break_lock)
        if other is None:
            break
        busy = other.pid == -2 or other.role == "shards"  # -2: it kept changing hands (other shards)
        if not busy or time.monotonic() > deadline:
            _refuse(path, other)
        time.sleep(0.05)
    try:
        yield me
    finally:
        lock.release(path, me)


def _refuse(path: Path, other: lock.Holder) -> None:
    if other.role == "run" and lock.is_stale(other) is False:
        raise lock.LockHeld(f"{path}: a whole `sweep run` is writing this store ({other.describe()}); "
                            "shards cannot run beside it: wait for it to finish or stop it")
    if lock.is_stale(other) is None:
        raise lock.LockHeld(f"{path}: locked by {other.describe()}, which cannot be checked from here; "
                            "if that process is dead, rerun with --break-lock")
    raise lock.LockHeld(f"{path}: other shards kept the store's lock for {SETUP_WAIT_SECONDS:.0f} s "
                        f"({other.describe()}); try again")


def take(path: Path, index: int, count: int, break_lock: bool = False) -> lock.Holder:
    """Claim shard ``index/count``; the caller holds the store's lock (``holding_lock``).

    Raises
    ------
    StoreError
        The shard is already claimed by a live process (or one that cannot be checked), or
        live shards were started with another shard count.
    """
    where = records.folder(path)
    try:
        where.mkdir(exist_ok=True)
    except OSError as exc:
        raise StoreError(f"{where}: cannot create the shards folder: {exc.strerror}") from exc
    others = [c for c in list_claims(path) if c.count != count and (c.live or (c.live is None and not break_lock))]
    if others:
        raise lock.LockHeld(f"{path}: shards of another shard count are running ({others[0].describe()}); "
                            f"every shard of one store must use the same N (here {others[0].count}), "
                            "or wait until they finish")
    me = lock.me(role="shard")
    other = lock.take(where, me, break_lock, claim_name(index, count))
    if other is None:
        return me
    if lock.is_stale(other) is None:
        raise lock.LockHeld(f"{path}: shard {index}/{count} is claimed by {other.describe()}, which cannot be "
                            "checked from here; if it is dead, rerun with --break-lock")
    raise lock.LockHeld(f"{path}: shard {index}/{count} is already running ({other.describe()}); "
                        "one shard runs once at a time")


def release(path: Path, index: int, count: int, me: lock.Holder) -> None:
    """Give up a claim, if it is still ours."""
    lock.release(records.folder(path), me, claim_name(index, count))


def settle(path: Path, break_lock: bool = False) -> None:
    """Before a whole run (the caller holds the store's lock): refuse while shards run, fold the rest.

    Raises
    ------
    StoreError
        If a claim's holder is alive, or cannot be checked and ``break_lock`` is false.
    """
    if not store.exists(path):
        return
    busy = [c for c in list_claims(path) if c.live or (c.live is None and not break_lock)]
    if busy:
        listed = "\n  ".join(c.describe() for c in busy)
        hint = "; if they are dead, rerun with --break-lock" if all(c.live is None for c in busy) else ""
        raise lock.LockHeld(f"{path}: shards (`sweep run --shard`) are writing this store:\n  {listed}\n"
                            f"wait for them to finish{hint}")
    fold(path, break_lock)


def fold(path: Path, break_lock: bool = False) -> int:
    """Fold the records of shards no longer running into ``done``; the caller holds the store's lock.

    ``done`` is written and fsynced before the records are deleted, so a crash in between
    only leaves records that say again what ``done`` says. Failures move into the
    attributes. With no live claim left, stray ``*.partial`` files go and the metadata is
    consolidated. Returns the number of records folded.
    """
    if not store.exists(path):
        return 0
    claims = list_claims(path)
    running = {(c.index, c.count) for c in claims if c.live or (c.live is None and not break_lock)}
    keep = ({records.done_file(path, i, n) for i, n in running} | {records.failed_file(path, i, n) for i, n in running}
            | {records.sums_file(path, i, n) for i, n in running})
    files = [f for f in records.done_files(path) if f not in keep]
    sums_files = [f for f in records.sums_files(path) if f not in keep]
    failed_files = [f for f in records.failed_files(path) if f not in keep]
    gone = [c for c in claims if (c.index, c.count) not in running]
    if not (files or failed_files or sums_files or gone):
        return 0
    try:
        done = store.read_done(path)  # includes every record, running shards' too: harmless, they are done
    except store.DamagedDone:
        integrity.rebuild_done(path)  # from the chunks, the shards' included
        done = store.read_done(path)
    failures = []
    for f in failed_files:
        failures.extend(records.read_failures_file(f))
    sums = store.read_checksums(path)  # likewise every shard's recorded checksums
    if sums is not None:
        store.write_checksums(path, sums)
        durable.fsync_tree(path / store.CHECKSUMS)
    store.write_done(path, done)
    durable.fsync_tree(path / "done")
    store.record_failures(path, failures, done)
    for f in files + failed_files + sums_files:
        f.unlink(missing_ok=True)
    for c in gone:
        lock.release(records.folder(path), c.holder, claim_name(c.index, c.count))
    if not running:
        store.remove_partials(path)  # nobody is writing: a *.partial is a dead writer's leftover
    store.finish_run(path)  # the attributes changed: consolidate again
    return len(files)

