"""A Dask cluster on this machine: one single-threaded worker process per core.

Security: a Dask scheduler runs whatever pickled code reaches it, and a worker runs what its
scheduler or a peer sends it, as the user running the sweep. Listening on 127.0.0.1 keeps
other machines out, not the other users of this one. So every connection (client, scheduler,
nannies, workers) is mutual TLS with a key and a self-signed certificate made for this run
(``Security.temporary()``): a process without that key cannot complete a handshake. The key
lives in this process's memory; the worker processes get their copy through multiprocessing's
pipe, not a file (distributed writes it to a private temporary folder for a moment to load it
into OpenSSL). The dashboard is plain HTTP on 127.0.0.1: anyone on this machine can read it
(task names, worker logs, exceptions, call stacks), but it offers no way to submit work.

Ctrl-C: a terminal sends SIGINT to its whole foreground process group, worker processes
included. The workers must not die of it (the client stops them, after recording what
finished), and the client must react at once, also while the cluster starts. ``_started``
builds the cluster in a helper thread that has SIGINT blocked. Threads inherit their
creator's signal mask: distributed's event-loop thread, made by ``LocalCluster``, and the
threads it makes to spawn each worker process inherit the block; a child keeps the spawning
thread's mask across fork and exec, and Python does not unblock it, so the workers never see
SIGINT. The main thread keeps SIGINT and waits for the helper. On Ctrl-C it ends the worker
processes the start has spawned so far (and any it spawns after), so that the start fails at
once through distributed's own "worker died while starting" path, which closes the scheduler
and nannies; then it re-raises ``KeyboardInterrupt``. Waiting for the start to finish and
closing it gracefully took 5-11 s on a loaded machine; this way the client is out of
the start within about a tenth of a second.
"""

from __future__ import annotations

import logging
import multiprocessing
import os
import queue
import signal
import threading
import time
from contextlib import contextmanager, suppress
from multiprocessing import resource_tracker
from typing import TYPE_CHECKING, Callable, Iterator

import dask
from distributed import Client, LocalCluster
from distributed.security import Security

from sweep.execute.pool import BOUNDED_LOGS, DaskPool

if TYPE_CHECKING:
    from pathlib import Path

    from sweep.execute.execution import Execution

POLL_SECONDS = 0.1  # how often the main thread looks up from waiting (it wakes at once for its own signals)
ABANDON_SECONDS = 30.0  # after Ctrl-C, how long to wait for the start to give up (its processes are gone by then)


@contextmanager
def pool(execution: Execution, store: Path) -> Iterator[DaskPool]:
    """The run loop's pool: a local cluster of ``execution.workers`` processes (default: one per core)."""
    with connect(execution.workers) as client:
        yield DaskPool(client, slots=len(client.scheduler_info(n_workers=-1)["workers"]))


@contextmanager
def connect(workers: int | None = None) -> Iterator[Client]:
    """Start the cluster, yield a client, and close both on the way out (Ctrl-C included).

    Raises
    ------
    KeyboardInterrupt
        Ctrl-C while the cluster starts: what had started is closed first.
    """
    n = workers or os.cpu_count() or 1
    with dask.config.set(BOUNDED_LOGS):
        cluster, client = _started(lambda: _open(n))
        try:
            yield client
        finally:
            _close(cluster, client)


def _open(n: int) -> tuple[LocalCluster, Client]:
    security = Security.temporary()
    cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, host="127.0.0.1",
                           dashboard_address="127.0.0.1:0", security=security,
                           # task errors are reported by the client, once; not by every worker too
                           silence_logs=logging.CRITICAL)
    try:
        return cluster, Client(cluster, security=security)
    except BaseException:
        cluster.close()
        raise


def _close(cluster: LocalCluster, client: Client) -> None:
    """Close the client, end the worker processes, then close the scheduler and nannies.

    When this runs, the run loop has recorded every completion, so nothing a worker still holds
    is needed: a task in flight is never marked done, and the chunk it may have half-written is
    a temporary file its next writer removes. A graceful worker close took 0.2-0.6 s of a
    seconds-long demo; ending the processes takes a few ms.
    """
    processes = [p for p in (_process_of(nanny) for nanny in cluster.workers.values()) if p is not None]
    try:
        client.close()
    finally:
        with _quiet("distributed"):  # the scheduler logs each lost worker connection at INFO
            for process in processes:
                with suppress(OSError, ValueError):
                    process.kill()
            cluster.close()


def _process_of(nanny) -> multiprocessing.Process | None:
    """The worker process a nanny runs, if it is running (distributed keeps it two levels down)."""
    return getattr(getattr(nanny, "process", None), "process", None)


@contextmanager
def _quiet(name: str) -> Iterator[None]:
    logger = logging.getLogger(name)
    level = logger.level
    logger.setLevel(logging.CRITICAL)
    try:
        yield
    finally:
        logger.setLevel(level)


def _started(start: Callable[[], tuple[LocalCluster, Client]]) -> tuple[LocalCluster, Client]:
    """Run ``start`` in a thread with SIGINT blocked; wait for it here, where Ctrl-C still works."""
    outcome: queue.Queue[tuple[bool, object]] = queue.Queue(maxsize=1)  # (started, cluster and client or error)

    def target() -> None:
        try:
            outcome.put((True, start()))
        except BaseException as exc:  # handed to the waiting thread
            outcome.put((False, exc))

    # multiprocessing starts its resource tracker before the first worker, from the thread that
    # spawns it, and unblocks SIGINT in that thread afterwards (resource_tracker.ensure_running):
    # start it here, so the spawning threads keep the block
    resource_tracker.ensure_running()
    before = set(multiprocessing.active_children())
    helper = threading.Thread(target=target, name="sweep: start the local Dask cluster", daemon=True)
    try:
        with _sigint_blocked():  # the helper inherits the block from its first instruction on
            helper.start()
        while True:
            try:
                started, value = outcome.get(timeout=POLL_SECONDS)
                break
            except queue.Empty:
                continue
    except KeyboardInterrupt:
        if helper.ident is not None:  # a second Ctrl-C leaves the rest to exit: the workers end with us
            started, value = _abandon(outcome, before)
            if started:
                _close(*value)  # type: ignore[misc]
        raise
    if not started:
        raise value  # type: ignore[misc]
    return value  # type: ignore[return-value]


def _abandon(outcome: queue.Queue, before: set) -> tuple[bool, object]:
    """End the worker processes an interrupted start has spawned, until the start gives up."""
    deadline = time.monotonic() + ABANDON_SECONDS
    while True:
        with suppress(queue.Empty):
            return outcome.get_nowait()
        if time.monotonic() > deadline:
            return False, None
        for child in set(multiprocessing.active_children()) - before:
            child.kill()
        time.sleep(POLL_SECONDS / 2)


@contextmanager
def _sigint_blocked() -> Iterator[None]:
    if not hasattr(signal, "pthread_sigmask"):  # not POSIX: nothing to inherit
        yield
        return
    previous = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT})
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, previous)
