"""A Dask cluster on this machine: one single-threaded worker process per core.

It listens on loopback only: a Dask scheduler runs whatever pickled code reaches it.
"""

from __future__ import annotations

import logging
import os
from contextlib import contextmanager
from typing import Iterator

from distributed import Client, LocalCluster


@contextmanager
def connect(workers: int | None = None, **_: object) -> Iterator[Client]:
    n = workers or os.cpu_count() or 1
    with LocalCluster(n_workers=n, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address="127.0.0.1:0",
                      # task errors are reported by the client, once; not by every worker too
                      silence_logs=logging.CRITICAL) as cluster:
        with Client(cluster) as client:
            yield client
