"""An existing Dask scheduler, given by address (``tcp://host:8786``) or by its scheduler file.

A scheduler file is the JSON a scheduler writes with ``dask scheduler --scheduler-file F``
(its address among other things); ``slurm_templates/allocation.sbatch`` starts one that way
inside a Slurm allocation, so the address is known only once the scheduler runs. With a
file, this waits for it to appear and for a first worker to connect.
"""

from __future__ import annotations

import time
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

from distributed import Client

from sweep.errors import SweepError

FILE_WAIT_SECONDS = 300.0  # a scheduler started in the same job writes its file within seconds
WORKER_WAIT_SECONDS = 600.0  # workers started with srun may queue behind the job's own setup


def is_file(address: str) -> bool:
    """True when ``address`` names a scheduler file rather than a ``protocol://host:port`` address."""
    return "://" not in address and (address.endswith(".json") or Path(address).is_file())


@contextmanager
def connect(address: str, **_: object) -> Iterator[Client]:
    if not is_file(address):
        with Client(address) as client:
            yield client
        return
    _wait_for(Path(address))
    with Client(scheduler_file=address) as client:
        client.wait_for_workers(1, timeout=WORKER_WAIT_SECONDS)
        yield client


def _wait_for(path: Path) -> None:
    deadline = time.monotonic() + FILE_WAIT_SECONDS
    while not path.is_file():
        if time.monotonic() > deadline:
            raise SweepError(f"{path}: no Dask scheduler file appeared within {FILE_WAIT_SECONDS:.0f} s; "
                             "is `dask scheduler --scheduler-file` running?")
        time.sleep(0.2)
