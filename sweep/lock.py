"""One writer per store: a lock file inside the store naming its holder.

The lock is ``<store>/sweep.lock``, created with O_CREAT | O_EXCL (atomic on local and
NFSv3+ filesystems) and holding JSON: host, pid, the process's own start time, and when
the run started. A lock whose holder is a dead process on this host (or a live process
with another start time, i.e. a reused pid) is stale and taken over; a lock from another
host cannot be checked from here and is only broken on request (``--break-lock``).
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import socket
from dataclasses import asdict, dataclass
from pathlib import Path

import psutil

from sweep.errors import StoreError

LOCK_NAME = "sweep.lock"


class LockHeld(StoreError):
    """Another live ``sweep run`` holds the store."""


@dataclass(frozen=True)
class Holder:
    host: str
    pid: int
    process_started: float
    started: str

    def describe(self) -> str:
        return f"pid {self.pid} on host {self.host}, running since {self.started}"


def _me() -> Holder:
    return Holder(socket.gethostname(), os.getpid(), psutil.Process().create_time(),
                  _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"))


def read(store: Path) -> Holder | None:
    """The current holder, or None when unlocked. An unreadable lock file reads as a dead holder."""
    try:
        data = json.loads((store / LOCK_NAME).read_text(encoding="utf-8"))
        return Holder(str(data["host"]), int(data["pid"]), float(data["process_started"]), str(data["started"]))
    except FileNotFoundError:
        return None
    except (ValueError, KeyError, TypeError, OSError):
        return Holder("?", -1, 0.0, "?")


def is_stale(holder: Holder) -> bool | None:
    """True if the holder is certainly gone, False if alive, None if it can't be told (other host)."""
    if holder.pid < 0:
        return True
    if holder.host != socket.gethostname():
        return None
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
    me = _me()
    for _ in range(3):
        if _create(store, me):
            return me
        holder = read(store)
        if holder is None:
            continue  # released between our attempt and the read
        stale = is_stale(holder)
        if stale is False:
            raise LockHeld(f"{store}: another `sweep run` is writing this store ({holder.describe()}); "
                           "wait for it to finish or stop it")
        if stale is None and not break_lock:
            raise LockHeld(f"{store}: locked by {holder.describe()}, which cannot be checked from here; "
                           "if that run is dead, rerun with --break-lock")
        _remove(store, holder)
    raise LockHeld(f"{store}: could not take the lock; another process keeps taking it")


def _create(store: Path, me: Holder) -> bool:
    try:
        fd = os.open(store / LOCK_NAME, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
    except FileExistsError:
        return False
    except OSError as exc:
        raise StoreError(f"{store}: cannot create the lock file: {exc.strerror}") from exc
    with os.fdopen(fd, "w", encoding="utf-8") as f:
        json.dump(asdict(me), f)
        f.flush()
        os.fsync(f.fileno())
    return True


def _remove(store: Path, expected: Holder) -> None:
    """Remove the lock only if it still names ``expected`` (narrows the take-over race)."""
    if read(store) == expected:
        try:
            (store / LOCK_NAME).unlink()
        except FileNotFoundError:
            pass


def release(store: Path, me: Holder) -> None:
    """Give the lock back, if it is still ours."""
    _remove(store, me)
