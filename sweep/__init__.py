"""Parameter sweeps of stochastic reaction-network simulations into a resumable Zarr store.

The public Python API; the ``sweep`` command line is a thin layer over it::

    import sweep
    spec = sweep.load("configs/reporter.toml")
    summary = sweep.run(spec, workers=2)
    ds = sweep.open_results(summary.store)      # xarray.Dataset

Each name is imported on first use (PEP 562), so ``import sweep`` costs milliseconds, not
the second that numpy, zarr, xarray and numba take: the command line installs its Ctrl-C
handling before it pays for them (``sweep.cli.main``).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from sweep import lazy

# public name -> its module ("module:name" where the name there differs)
_NAMES = {
    "AnalysisOptions": "sweep.analysis.options",
    "Threshold": "sweep.analysis.options",
    "AnalysisResult": "sweep.analysis.report",
    "analyze": "sweep.analysis.report",
    "open_analysis": "sweep.analysis.report",
    "KernelError": "sweep.errors",
    "SpecError": "sweep.errors",
    "StoreError": "sweep.errors",
    "SweepError": "sweep.errors",
    "ExportSummary": "sweep.store.export",
    "export": "sweep.store.export",
    "Execution": "sweep.execute.execution",
    "Progress": "sweep.execute.loop",
    "RunSummary": "sweep.execute.run",
    "Started": "sweep.execute.run",
    "run": "sweep.execute.run",
    "ShardSummary": "sweep.execute.run",
    "run_shard": "sweep.execute.run",
    "Spec": "sweep.spec",
    "load": "sweep.spec",
    "open_results": "sweep.store.layout:open_dataset",
    "StoreStatus": "sweep.store.status",
    "status": "sweep.store.status",
    "verify": "sweep.store.status",
    "ReplicateTrace": "sweep.execute.trace",
    "trace": "sweep.execute.trace",
}
__all__ = sorted(_NAMES)
__getattr__, __dir__ = lazy.exports(__name__, _NAMES)

if TYPE_CHECKING:  # what type checkers and IDEs see; at run time these come from __getattr__
    from sweep.analysis.options import AnalysisOptions, Threshold
    from sweep.analysis.report import AnalysisResult, analyze, open_analysis
    from sweep.errors import KernelError, SpecError, StoreError, SweepError
    from sweep.store.export import ExportSummary, export
    from sweep.execute.execution import Execution
    from sweep.execute.loop import Progress
    from sweep.execute.run import RunSummary, ShardSummary, Started, run, run_shard
    from sweep.spec import Spec, load
    from sweep.store.status import StoreStatus, status, verify
    from sweep.store import open_dataset as open_results
    from sweep.execute.trace import ReplicateTrace, trace
