"""One writer per store: a lock file inside the store naming its holder.

The lock is ``<store>/sweep.lock``, created whole (written to a temporary file, then
hard-linked to its name: atomic, and refused if the name exists, on local and NFSv3+
filesystems) and holding JSON: host, pid, the process's own start time, when the run
started, its role and its Slurm job. A lock whose holder is a dead process on this host (or a live process
with another start time, i.e. a reused pid) is stale and taken over; a lock from another
host cannot be checked from here and is only broken on request (``--break-lock``), unless
it names the Slurm job it ran in: a job that Slurm no longer lists as running is gone.

The same files serve two other purposes (``role``): ``"run"`` is a whole ``sweep run``
holding the store; ``"shards"`` is a shard briefly holding it to create the store, take its
claim or fold completion records (others wait for it); and the per-shard claims of
``sweep.store.claims`` are lock files of their own, one per shard, with the same stale rules.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import errno
import json
import os
import socket
import uuid
from dataclasses import asdict, dataclass
from pathlib import Path

import psutil

from sweep.errors import StoreError
from sweep.batch import jobs

LOCK_NAME = "sweep.store.lock"


class LockHeld(StoreError):
    """Another live ``sweep run`` holds the store."""


@dataclass(frozen=True)
class Holder:
    host: str
    pid: int
    process_started: float
    started: str
    role: str = "run"  # "run": a whole `sweep run`; "shards": a shard's short setup or clean-up
    job: str = ""  # the holder's Slurm job (``sweep.batch.jobs.job_id``), when it runs in one

    def describe(self) -> str:
        job = f", Slurm job {self.job}" if self.job else ""
        return f"pid {self.pid} on host {self.host}{job}, running since {self.started}"


def me(role: str = "run") -> Holder:
    """This process as a holder (with its Slurm job id, if any)."""
    return Holder(socket.gethostname(), os.getpid(), psutil.Process().create_time(),
                  _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"), role, jobs.job_id())


def read(store: Path, name: str = LOCK_NAME) -> Holder | None:
    """The current holder, or None when unlocked. An unreadable lock file reads as a dead holder."""
    try:
        data = json.loads((store / name).read_text(encoding="utf-8"))
        return Holder(str(data["host"]), int(data["pid"]), float(data["process_started"]), str(data["started"]),
                      str(data.get("role", "run")), str(data.get("job", "")))
    except FileNotFoundError:
        return None
    except (ValueError, KeyError, TypeError, OSError):
        return Holder("?", -1, 0.0, "?")


def is_stale(holder: Holder) -> bool | None:
    """True if the holder is certainly gone, False if alive, None if it can't be told (other host)."""
    if holder.pid < 0:
        return True
    if holder.host != socket.gethostname():
        return jobs.is_gone(holder.job) if holder.job else None
    try:
        return abs(psutil.Process(holder.pid).create_time() - holder.process_started) > 1.0
    except psutil.NoSuchProcess:
        return True


def acquire(store: Path, break_lock: bool = False) -> Holder:
    """Take the store's lock for this process, taking over a stale one.

    Raises
    ------
    LockHeld
        If a live process holds it, or a process on another host and ``break_lock`` is false.
    StoreError
        If the lock file cannot be written (e.g. a read-only filesystem).
    """
    holder = me()
    other = take(store, holder, break_lock)
    if other is None:
        return holder
    if other.pid == -2:
        raise LockHeld(f"{store}: could not take the lock; another process keeps taking it")
    stale = is_stale(other)
    if stale is False and other.role == "shards":
        raise LockHeld(f"{store}: a shard (`sweep run --shard`) is setting up in this store ({other.describe()}); "
                       "try again in a moment")
    if stale is False:
        raise LockHeld(f"{store}: another `sweep run` is writing this store ({other.describe()}); "
                       "wait for it to finish or stop it")
    raise LockHeld(f"{store}: locked by {other.describe()}, which cannot be checked from here; "
                   "if that run is dead, rerun with --break-lock")


def take(folder: Path, holder: Holder, break_lock: bool = False, name: str = LOCK_NAME) -> Holder | None:
    """Create the lock file ``folder/name`` for ``holder``, taking over a stale one.

    Returns
    -------
    Holder or None
        None once taken; otherwise the live holder (or one on another host that cannot be
        checked and ``break_lock`` is false). A holder with pid -2 means the file kept
        changing hands during three attempts.

    Raises
    ------
    StoreError
        If the lock file cannot be written (e.g. a read-only filesystem).
    """
    for _ in range(3):
        if _create(folder, holder, name):
            return None
        other = read(folder, name)
        if other is None:
            continue  # released between our attempt and the read
        stale = is_stale(other)
        if stale is False or (stale is None and not break_lock):
            return other
        _remove(folder, other, name)
    return Holder("?", -2, 0.0, "?")


def _create(store: Path, me: Holder, name: str = LOCK_NAME) -> bool:
    """Create the lock file whole, or not at all.

    The content is written to a private temporary file first and hard-linked to the lock's
    name (``link`` fails if the name exists, atomically, also on NFS): a lock created with
    O_EXCL and written afterwards is empty for a moment, and a process reading it then would
    take it for a dead holder's and remove it (seen with four shards starting at once).
    """
    target = store / name
    tmp = store / f".{name}.{socket.gethostname()}.{os.getpid()}.{uuid.uuid4().hex[:8]}.tmp"
    try:
        with open(tmp, "x", encoding="utf-8") as f:
            json.dump(asdict(me), f)
            f.flush()
            os.fsync(f.fileno())
        try:
            os.link(tmp, target)
        except FileExistsError:
            return False
        except OSError as exc:
            if exc.errno not in _NO_HARD_LINKS:
                raise
            return _create_exclusive(target, me)
        return True
    except OSError as exc:
        raise StoreError(f"{store}: cannot create the lock file {name}: {exc.strerror}") from exc
    finally:
        with contextlib.suppress(OSError):  # e.g. a read-only store: the error above says so
            tmp.unlink(missing_ok=True)


_NO_HARD_LINKS = {errno.EPERM, errno.EOPNOTSUPP, errno.ENOTSUP, errno.EMLINK, errno.EXDEV}


def _create_exclusive(target: Path, me: Holder) -> bool:
    """For file systems without hard links: O_EXCL, then write (briefly empty; see ``_create``)."""
    try:
        fd = os.open(target, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
    except FileExistsError:
        return False
    with os.fdopen(fd, "w", encoding="utf-8") as f:
        json.dump(asdict(me), f)
        f.flush()
        os.fsync(f.fileno())
    return True


def _remove(store: Path, expected: Holder, name: str = LOCK_NAME) -> None:
    """Remove the lock only if it still names ``expected``.

    It is first renamed aside (atomic), then checked: if a live holder had taken it over in
    between, it is linked back, so two processes taking over one stale lock at once cannot
    delete each other's.
    """
    target = store / name
    if read(store, name) != expected:
        return
    aside = store / f".{name}.{os.getpid()}.{uuid.uuid4().hex[:8]}.removed"
    try:
        os.rename(target, aside)
    except FileNotFoundError:
        return
    if read(store, aside.name) != expected:
        try:
            os.link(aside, target)  # someone else's lock after all: put it back
        except OSError:
            pass
    aside.unlink(missing_ok=True)


def release(store: Path, me: Holder, name: str = LOCK_NAME) -> None:
    """Give the lock back, if it is still ours."""
    _remove(store, me, name)
