"""Parameter sweeps of stochastic reaction-network simulations into a resumable Zarr store.

The public Python API; the ``sweep`` command line is a thin layer over it::

    import sweep
    spec = sweep.load("configs/reporter.toml")
    summary = sweep.run(spec, workers=2)
    ds = sweep.open_results(summary.store)      # xarray.Dataset
"""

from __future__ import annotations

from sweep.analysis.options import AnalysisOptions, Threshold
from sweep.analysis.report import AnalysisResult, analyze, open_analysis
from sweep.errors import KernelError, SpecError, StoreError, SweepError
from sweep.export import ExportSummary, export
from sweep.runner import Progress, RunSummary, Started, run
from sweep.shard import ShardSummary, run_shard
from sweep.spec import Spec, load
from sweep.store import open_dataset as open_results
from sweep.status import StoreStatus, status, verify
from sweep.trace import ReplicateTrace, trace

__all__ = [
    "AnalysisOptions", "AnalysisResult", "ExportSummary", "Threshold", "analyze", "export", "open_analysis",
    "KernelError", "Progress", "RunSummary", "Spec", "SpecError", "Started", "StoreError",
    "ReplicateTrace", "StoreStatus", "SweepError", "load", "open_results", "run", "status", "trace", "verify",
    "ShardSummary", "run_shard",
]
