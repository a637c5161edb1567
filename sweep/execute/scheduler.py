"""An existing Dask scheduler, given by address (``tcp://host:8786``) or by its scheduler file.

A scheduler file is the JSON a scheduler writes with ``dask scheduler --scheduler-file F``
(its address among other things); ``slurm_templates/allocation.sbatch`` starts one that way
inside a Slurm allocation, so the address is known only once the scheduler runs. With a
file, this waits for it to appear and for a first worker to connect.

Security is what the user configured for Dask, no more and no less: ``Client`` takes its TLS
credentials from dask config (``distributed.comm.tls.ca-file``, ``.client.cert``,
``.client.key``, ``distributed.comm.require-encryption``; as environment variables
``DASK_DISTRIBUTED__COMM__TLS__CA_FILE`` and so on) or from ``distributed.client.security-loader``.
With a ``tcp://`` address there is none: whoever can reach the scheduler's port can run code
on its workers as the user they run as.
"""

from __future__ import annotations

import time
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Iterator

import dask
from distributed import Client

from sweep.errors import SweepError
from sweep.execute.pool import BOUNDED_LOGS, DaskPool

if TYPE_CHECKING:
    from sweep.execute.execution import Execution

FILE_WAIT_SECONDS = 300.0  # a scheduler started in the same job writes its file within seconds
WORKER_WAIT_SECONDS = 600.0  # workers started with srun may queue behind the job's own setup


def is_file(address: str) -> bool:
    """True when ``address`` names a scheduler file rather than a ``protocol://host:port`` address."""
    return "://" not in address and (address.endswith(".json") or Path(address).is_file())


@contextmanager
def pool(execution: Execution, store: Path) -> Iterator[DaskPool]:
    """The run loop's pool: the workers of the scheduler at ``execution.address`` (or of ``execution.client``)."""
    if execution.client is not None:  # kept open by the caller across runs (sweep fit's rounds)
        workers = len(execution.client.scheduler_info(n_workers=-1)["workers"])
        yield DaskPool(execution.client, slots=execution.slots or workers)
        return
    with connect(execution.address) as client:
        yield DaskPool(client, slots=len(client.scheduler_info(n_workers=-1)["workers"]))


@contextmanager
def connect(address: str) -> Iterator[Client]:
    with dask.config.set(BOUNDED_LOGS):  # this client's log (the scheduler is the user's)
        if not is_file(address):
            with _client(address, address=address) as client:
                yield client
            return
        _wait_for(Path(address))
        with _client(address, scheduler_file=address) as client:
            client.wait_for_workers(1, timeout=WORKER_WAIT_SECONDS)
            yield client


def _client(where: str, **how: str) -> Client:
    try:
        return Client(**how)
    except (OSError, TypeError) as exc:  # TypeError: a tls:// address with no TLS settings
        hint = ("for a tls:// scheduler, give this client its certificate in dask config, e.g. "
                "DASK_DISTRIBUTED__COMM__TLS__CA_FILE, DASK_DISTRIBUTED__COMM__TLS__CLIENT__CERT and "
                "DASK_DISTRIBUTED__COMM__TLS__CLIENT__KEY")
        raise SweepError(f"{where}: cannot connect to the Dask scheduler: {exc}\n{hint}") from exc


def _wait_for(path: Path) -> None:
    deadline = time.monotonic() + FILE_WAIT_SECONDS
    while not path.is_file():
        if time.monotonic() > deadline:
            raise SweepError(f"{path}: no Dask scheduler file appeared within {FILE_WAIT_SECONDS:.0f} s; "
                             "is `dask scheduler --scheduler-file` running?")
        time.sleep(0.2)
