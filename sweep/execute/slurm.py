"""Dask workers as Slurm jobs (dask-jobqueue's ``SLURMCluster``), scaled adaptively.

The scheduler runs in this process; each Slurm job runs ``processes`` worker processes.
``connect`` scales between ``min_jobs`` and ``max_jobs`` with the work in flight, retires
each worker gracefully ``lifetime_margin`` before its walltime (``ClusterConfig.worker_args``),
and cancels every job it submitted when the sweep ends, fails or is interrupted.

What dask-jobqueue and distributed do not cover, and this module adds (see docs/design-notes.md):

- A retired or lost worker's job is replaced only once the cluster forgets it, after
  ``distributed.deploy.lost-worker-timeout`` (15 s by default, with nobody working when all
  workers retire together); it is set to ``LOST_WORKER_TIMEOUT`` here.
- A job that ends before its worker ever connects (a failing ``setup`` line, a wrong
  ``python``, a node fault, a cancelled job) is never replaced: the cluster still counts it
  as requested. ``_Replacing`` asks ``squeue`` every ``poll_seconds`` for such jobs and drops
  them, so that adaptive scaling submits new ones; after ``max(3, max_jobs)`` of them in a
  row with no worker connecting in between, it stops the sweep with the job's log.
- A job sbatch refuses (an unknown partition, too much memory) would leave the sweep waiting
  forever; it is submitted again (a busy controller may time out once), and after
  ``REFUSALS`` refusals in a row the sweep stops with sbatch's message.

Stopping the sweep from the cluster's event loop interrupts the main thread (as Ctrl-C
does: completions are recorded, tasks in flight dropped); ``connect`` then raises the reason.
"""

from __future__ import annotations

import _thread
import asyncio
import logging
import signal
import threading
from contextlib import contextmanager, suppress
from pathlib import Path
from typing import TYPE_CHECKING, Iterator

import dask
from distributed import Client
from distributed.deploy import Adaptive
from distributed.deploy.spec import ProcessInterface
from distributed.security import Security

from sweep.batch import jobs
from sweep.batch.settings import ClusterConfig, for_store
from sweep.errors import SweepError
from sweep.execute.pool import BOUNDED_LOGS, DaskPool

if TYPE_CHECKING:
    from sweep.execute.execution import Execution


def _import_jobqueue():
    """Import dask-jobqueue without letting it take over Ctrl-C.

    Its ``runner`` module (0.9.0) sets ``signal.signal(SIGINT, lambda *_: sys.exit())`` at
    import: Ctrl-C would then exit with status 0 and no record of the interruption.
    """
    previous = signal.getsignal(signal.SIGINT)
    import dask_jobqueue.slurm

    if previous is not None and threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGINT, previous)
    return dask_jobqueue.slurm


_jobqueue = _import_jobqueue()
SLURMCluster, SLURMJob = _jobqueue.SLURMCluster, _jobqueue.SLURMJob

LOST_WORKER_TIMEOUT = "5s"  # a retired worker's job ends by itself within ~2 s; then replace it
ADAPT_INTERVAL = "1s"
REFUSALS = 3
LOG_TAIL_LINES = 5

logger = logging.getLogger(__name__)


class _Job(SLURMJob):
    """A worker job that keeps sbatch's refusal, so the sweep can stop with it."""

    refused: str | None = None

    async def start(self):
        try:
            await super().start()
        except Exception as exc:
            self.refused = _sbatch_message(str(exc))
            raise

    async def close(self):
        await super().close()  # scancel (nothing to cancel when sbatch refused the job)
        # dask-jobqueue 0.9 leaves the status "running", and SpecCluster.close asserts that every
        # job it created is closed (it passes only when the job was garbage-collected already)
        await ProcessInterface.close(self)


class _Cluster(SLURMCluster):
    job_cls = _Job


class _Watch:
    """What the adaptive loop found wrong; read by ``connect`` in the main thread."""

    def __init__(self, config: ClusterConfig, log_dir: Path):
        self.config, self.log_dir = config, log_dir
        self.failure: str | None = None
        self.closing = False  # the sweep is over: nothing left to interrupt

    def fail(self, message: str) -> None:
        if self.failure is None and not self.closing:
            self.failure = message
            _thread.interrupt_main()  # stops the client loop as Ctrl-C would


class _Replacing(Adaptive):
    """Adaptive scaling that also replaces jobs which ended before their worker connected."""

    def __init__(self, *args, watch: _Watch, **kwargs):
        super().__init__(*args, **kwargs)
        self.watch = watch
        self.seen: dict[str, str] = {}  # job name -> Slurm id of the job whose worker connected
        self.lost_in_a_row = 0
        self.refused_in_a_row = 0
        self.give_up_after = max(3, watch.config.max_jobs)
        self.next_poll = 0.0

    async def adapt(self) -> None:
        if self.watch.failure:
            return  # the sweep is stopping: submit nothing more
        try:
            self._note_connected()
            if await self._drop_refused_jobs():
                return
            loop = asyncio.get_running_loop()
            if loop.time() >= self.next_poll:
                self.next_poll = loop.time() + self.watch.config.poll_seconds
                await self._drop_jobs_that_ended()
        except Exception:  # never let the watchdog stop the scaling itself
            logger.exception("checking the Slurm jobs failed")
        await super().adapt()

    async def _drop_refused_jobs(self) -> bool:
        """Forget jobs sbatch refused, so they are submitted again; True once it is hopeless.

        With other jobs accepted (a site limit such as a QOS cap on jobs per user), carry on
        with those: lower the adaptive maximum instead of asking sbatch again every second.
        """
        refused = [(name, job) for name, job in self.cluster.workers.items() if getattr(job, "refused", None)]
        if not refused:
            return False
        for name, job in refused:
            del self.cluster.workers[name]
            await job.close()
        accepted = sum(1 for job in self.cluster.workers.values() if job.job_id)
        message = refused[-1][1].refused
        if accepted:
            self.maximum = accepted * self.watch.config.workers_per_job
            self.refused_in_a_row = 0
            logger.warning("Slurm refused a worker job (%s); going on with %d jobs", message, accepted)
            return False
        self.refused_in_a_row += 1
        if self.refused_in_a_row < REFUSALS:
            return False
        config = self.watch.config
        self.watch.fail(f"Slurm refused the worker job {self.refused_in_a_row} times: {message} "
                        f"(partition: {config.partition or '-'}, from {config.where('partition')}; "
                        f"account: {config.account or '-'}; memory: {config.memory}; walltime: "
                        f"{config.walltime}); fix the setting and rerun")
        return True

    def _note_connected(self) -> None:
        names = {str(w["name"]) for w in self.cluster.scheduler_info.get("workers", {}).values()}
        for name, job in self.cluster.workers.items():
            if job.job_id and self.seen.get(name) != job.job_id and _connected(name, names):
                self.seen[name] = job.job_id
                self.lost_in_a_row = 0

    async def _drop_jobs_that_ended(self) -> None:
        waiting = {name: job for name, job in self.cluster.workers.items()
                   if job.job_id and self.seen.get(name) != job.job_id}
        if not waiting:
            return
        alive = await jobs.queued_ids()
        if alive is None:  # squeue failed: better to wait than to submit duplicates
            return
        for name, job in waiting.items():
            if job.job_id in alive:
                continue
            # the job left the queue and no worker of it ever connected: forget it, so that
            # the next adapt() finds fewer requested jobs than planned and submits a new one
            del self.cluster.workers[name]
            with suppress(Exception):
                await job.close()  # scancel, in case squeue missed it
            self.lost_in_a_row += 1
            logger.warning("Slurm job %s ended before its worker connected (%d in a row)", job.job_id,
                           self.lost_in_a_row)
            if self.lost_in_a_row >= self.give_up_after:
                self.watch.fail(_lost_message(self.watch, job.job_id, self.lost_in_a_row))
                return


def _connected(job_name: str, worker_names: set[str]) -> bool:
    # a job with several processes runs workers named "<job name>-0", "<job name>-1", ...
    return job_name in worker_names or any(n.startswith(f"{job_name}-") for n in worker_names)


def _lost_message(watch: _Watch, job_id: str, count: int) -> str:
    config = watch.config
    log = watch.log_dir / f"{config.job_name}-{job_id}.err"
    tail = ""
    with suppress(OSError):
        lines = [ln for ln in log.read_text(errors="replace").splitlines() if ln.strip()]
        tail = "\n  " + "\n  ".join(lines[-LOG_TAIL_LINES:]) if lines else ""
    return (f"{count} Slurm jobs in a row ended before their Dask worker connected (last: job {job_id}; "
            f"its log: {log}){tail}\ncheck cluster.setup, cluster.python and cluster.interface "
            f"(setup from {config.where('setup')}), then rerun: the tasks already done are kept")


def _sbatch_message(text: str) -> str:
    """The useful part of dask-jobqueue's 'Command exited with non-zero exit code' error."""
    lines = [ln.strip() for ln in text.splitlines() if ln.strip().startswith("sbatch:")]
    if lines:
        return "; ".join(lines)
    return text.strip().splitlines()[-1] if text.strip() else "sbatch failed"


def make_cluster(config: ClusterConfig, log_dir: Path, security: Security | None = None) -> SLURMCluster:
    """A ``SLURMCluster`` for ``config`` (its scheduler starts; no job is submitted yet).

    Parameters
    ----------
    config : ClusterConfig
        Resolved settings (``sweep.batch.settings.resolve``).
    log_dir : Path
        Folder for the jobs' output, shared with the compute nodes; with ``security`` it also
        holds the workers' copy of the temporary certificate and key (mode 600) while the
        cluster lives.
    security : Security, optional
        TLS credentials (``Security.temporary()``); None for plain TCP.

    Returns
    -------
    SLURMCluster
        ``.job_script()`` shows the batch script each job runs.

    Example
    -------
    >>> cluster = make_cluster(resolve(None, {"walltime": "00:30:00"}), Path("logs"), Security.temporary())
    >>> "#SBATCH -t 00:30:00" in cluster.job_script()
    True
    """
    log_dir.mkdir(parents=True, exist_ok=True)
    return _Cluster(
        queue=config.partition, account=config.account, walltime=config.walltime,
        cores=config.cores, memory=config.memory, processes=config.workers_per_job,
        job_extra_directives=list(config.job_extra), job_script_prologue=list(config.setup),
        interface=config.interface, log_directory=str(log_dir), local_directory=config.local_dir,
        python=config.python, job_name=config.job_name, worker_extra_args=config.worker_args(),
        security=security, shared_temp_directory=str(log_dir) if security is not None else None,
        # the dashboard is plain HTTP: this host only (reach it through an ssh tunnel)
        scheduler_options={"dashboard_address": "127.0.0.1:0"},
        # task errors are reported by the client, once
        silence_logs=logging.CRITICAL,
    )


@contextmanager
def pool(execution: Execution, store: Path) -> Iterator[DaskPool]:
    """The run loop's pool: workers in Slurm jobs, sized for as many as the cluster may grow to."""
    config = execution.cluster
    with connect(config, store) as client:
        yield DaskPool(client, slots=config.max_jobs * config.workers_per_job)


@contextmanager
def connect(cluster: ClusterConfig, store: Path) -> Iterator[Client]:
    """Start the scheduler here and scale Slurm jobs of workers with the work; yield a client.

    Every job submitted is cancelled on the way out (end of the sweep, an error, Ctrl-C).

    Raises
    ------
    SweepError
        Slurm refused the job script, or jobs kept ending before their worker connected.
    """
    config = for_store(cluster, Path(store))
    log_dir = Path(config.log_dir).resolve()
    security = Security.temporary() if config.tls else None
    watch = _Watch(config, log_dir)
    with _sigterm_as_interrupt(), dask.config.set({**BOUNDED_LOGS,
                                                   "distributed.deploy.lost-worker-timeout": LOST_WORKER_TIMEOUT,
                          # the dashboard listens on this host only (make_cluster): link to it there
                          "distributed.dashboard.link": "{scheme}://127.0.0.1:{port}/status"}):
        slurm = make_cluster(config, log_dir, security)
        try:
            slurm.adapt(Adaptive=_Replacing, minimum_jobs=config.min_jobs, maximum_jobs=config.max_jobs,
                        interval=ADAPT_INTERVAL, watch=watch)
            with Client(slurm, security=security) as client:
                try:
                    yield client
                except BaseException:
                    watch.closing = True
                    if watch.failure:
                        raise SweepError(watch.failure) from None
                    raise
                watch.closing = True
                if watch.failure:
                    raise SweepError(watch.failure)
        finally:
            _close(slurm)


def _close(slurm: SLURMCluster) -> None:
    """Cancel every job and delete the workers' copy of the TLS key, shielded from a second Ctrl-C."""
    with _sigint_deferred():
        slurm.close()
        # dask-jobqueue keeps the certificate files open (NamedTemporaryFile) for the cluster's life
        for part in ("ca_file", "cert", "key"):
            handle = getattr(slurm, f"_job_{part}", None)
            if handle is not None:
                with suppress(OSError):
                    handle.close()


@contextmanager
def _sigterm_as_interrupt():
    """Treat SIGTERM as Ctrl-C, so the jobs are cancelled and completions recorded.

    ``sweep run`` itself may run in a batch job, which Slurm ends with SIGTERM at its time
    limit (then SIGKILL after ``KillWait``); by default Python would die at once and leave
    the worker jobs queued.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGTERM, signal.default_int_handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


@contextmanager
def _sigint_deferred():
    """Hold back SIGINT while jobs are cancelled: an interrupted close would leave jobs queued."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    caught = []
    previous = signal.signal(signal.SIGINT, lambda *args: caught.append(args))
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)
        if caught and callable(previous):
            previous(*caught[0])
