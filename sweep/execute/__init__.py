"""Execution backends: each is one module with ``pool(execution, store)``, a context manager
yielding a ``sweep.execute.pool.Pool`` for the run loop (``sweep.execute.loop``)."""

from __future__ import annotations

BACKENDS = {
    "local": "sweep.execute.local",
    "scheduler": "sweep.execute.scheduler",
    "slurm": "sweep.execute.slurm",
    "shard": "sweep.execute.inprocess",
}
