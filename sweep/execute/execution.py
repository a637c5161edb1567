"""How and where a sweep runs: one frozen object the command line resolves and the run loop reads.

``backend`` names a module in ``sweep.execute.BACKENDS``; the other fields are its settings
and the run's. Fields a backend does not use are left at their defaults, and the CLI refuses
flags that do not fit the backend it picked, so nothing is silently ignored.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from sweep.batch.settings import ClusterConfig

PACK_SECONDS = 0.2  # a task should be worth at least this much kernel time (small points are packed)


@dataclass(frozen=True)
class Execution:
    """Backend and settings of one ``sweep run``.

    Attributes
    ----------
    backend : str
        ``"local"`` (a local Dask cluster), ``"scheduler"`` (an existing Dask scheduler),
        ``"slurm"`` (Dask workers as Slurm jobs) or ``"shard"`` (this process only, no Dask).
    workers : int, optional
        Local worker processes (default: one per core).
    address : str, optional
        The scheduler's address or scheduler file (``"scheduler"``).
    cluster : ClusterConfig, optional
        The resolved Slurm settings (``"slurm"``).
    shard : (int, int), optional
        Shard I of N, 1-based (``"shard"``).
    time_left : float, optional
        Seconds this process may run (``"shard"``; default: the Slurm job's limit).
    fresh, break_lock : bool
        Start over (deleting the store); take a lock held on another host known to be dead.
    pack_seconds : float
        Kernel time a task should be worth; small points are packed into one task until it is.
    pack : int, optional
        A fixed number of blocks per task instead (tests compare packings with it).
    client : distributed.Client, optional
        An open client to run on (``"scheduler"``), left open afterwards: ``sweep fit`` keeps
        one cluster across its rounds instead of starting one per round. ``slots``: the tasks
        it can run at once (default: its workers now).

    Example
    -------
    >>> Execution("local", workers=2).backend
    'local'
    """

    backend: str = "local"
    workers: int | None = None
    address: str | None = None
    cluster: ClusterConfig | None = None
    shard: tuple[int, int] | None = None
    time_left: float | None = None
    fresh: bool = False
    break_lock: bool = False
    pack_seconds: float = PACK_SECONDS
    pack: int | None = None
    client: Any = None
    slots: int | None = None

    @classmethod
    def choose(cls, *, workers: int | None = None, scheduler: str | None = None,
               cluster: ClusterConfig | None = None, **settings) -> "Execution":
        """The backend these settings ask for: Slurm, an existing scheduler, else a local cluster."""
        backend = "slurm" if cluster is not None else "scheduler" if scheduler else "local"
        return cls(backend, workers=workers, address=scheduler, cluster=cluster, **settings)


def parse_shard(text: str) -> tuple[int, int]:
    """``"3/8"`` -> (3, 8): shard 3 of 8, 1-based.

    Raises
    ------
    ValueError
        If ``text`` is not ``I/N`` with 1 <= I <= N.

    Example
    -------
    >>> parse_shard("3/8")
    (3, 8)
    """
    left, sep, right = text.partition("/")
    if not sep or not left.strip().isdigit() or not right.strip().isdigit():
        raise ValueError(f"{text!r}: give the shard as I/N, e.g. 1/4 (shards are numbered 1 to N)")
    index, count = int(left), int(right)
    if not 1 <= index <= count:
        raise ValueError(f"{text!r}: shard I/N needs 1 <= I <= N (shards are numbered 1 to N)")
    return index, count
