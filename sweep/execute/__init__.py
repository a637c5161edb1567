"""Execution backends. Each is a context manager ``connect(...)`` yielding a Dask client."""

from __future__ import annotations

BACKENDS = {
    "local": "sweep.execute.local",
    "scheduler": "sweep.execute.scheduler",
    "slurm": "sweep.execute.slurm",
}
