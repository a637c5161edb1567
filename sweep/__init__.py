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

import importlib
import sys
from types import ModuleType
from typing import TYPE_CHECKING, Any

# public name -> (module, name in that module)
_EXPORTS: dict[str, tuple[str, str]] = {
    "AnalysisOptions": ("sweep.analysis.options", "AnalysisOptions"),
    "Threshold": ("sweep.analysis.options", "Threshold"),
    "AnalysisResult": ("sweep.analysis.report", "AnalysisResult"),
    "analyze": ("sweep.analysis.report", "analyze"),
    "open_analysis": ("sweep.analysis.report", "open_analysis"),
    "KernelError": ("sweep.errors", "KernelError"),
    "SpecError": ("sweep.errors", "SpecError"),
    "StoreError": ("sweep.errors", "StoreError"),
    "SweepError": ("sweep.errors", "SweepError"),
    "ExportSummary": ("sweep.export", "ExportSummary"),
    "export": ("sweep.export", "export"),
    "Execution": ("sweep.execute.execution", "Execution"),
    "Progress": ("sweep.execute.loop", "Progress"),
    "RunSummary": ("sweep.execute.run", "RunSummary"),
    "Started": ("sweep.execute.run", "Started"),
    "run": ("sweep.execute.run", "run"),
    "ShardSummary": ("sweep.execute.run", "ShardSummary"),
    "run_shard": ("sweep.execute.run", "run_shard"),
    "Spec": ("sweep.spec", "Spec"),
    "load": ("sweep.spec", "load"),
    "open_results": ("sweep.store", "open_dataset"),
    "StoreStatus": ("sweep.status", "StoreStatus"),
    "status": ("sweep.status", "status"),
    "verify": ("sweep.status", "verify"),
    "ReplicateTrace": ("sweep.trace", "ReplicateTrace"),
    "trace": ("sweep.trace", "trace"),
}

__all__ = [
    "AnalysisOptions", "AnalysisResult", "ExportSummary", "Threshold", "analyze", "export", "open_analysis",
    "KernelError", "Progress", "RunSummary", "Spec", "SpecError", "Started", "StoreError",
    "ReplicateTrace", "StoreStatus", "SweepError", "load", "open_results", "run", "status", "trace", "verify",
    "ShardSummary", "run_shard", "Execution",
]

if TYPE_CHECKING:  # what type checkers and IDEs see; at run time these come from __getattr__
    from sweep.analysis.options import AnalysisOptions, Threshold
    from sweep.analysis.report import AnalysisResult, analyze, open_analysis
    from sweep.errors import KernelError, SpecError, StoreError, SweepError
    from sweep.export import ExportSummary, export
    from sweep.execute.execution import Execution
    from sweep.execute.loop import Progress
    from sweep.execute.run import RunSummary, ShardSummary, Started, run, run_shard
    from sweep.spec import Spec, load
    from sweep.status import StoreStatus, status, verify
    from sweep.store import open_dataset as open_results
    from sweep.trace import ReplicateTrace, trace


def __getattr__(name: str) -> Any:
    try:
        module, attr = _EXPORTS[name]
    except KeyError:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}") from None
    value = getattr(importlib.import_module(module), attr)
    globals()[name] = value  # later look-ups find it without coming here
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))


class _Package(ModuleType):
    """Keeps ``sweep.status``, ``sweep.export`` and ``sweep.trace`` the functions.

    Importing a submodule sets an attribute of that name on its package; three submodules
    share their name with the function they define (``sweep.status.status``). Imported
    eagerly, the package bound the functions after their modules; imported lazily, the
    module would win whenever someone imported it first (``from sweep.status import verify``).
    """

    def __setattr__(self, name: str, value: Any) -> None:
        if name in _EXPORTS and isinstance(value, ModuleType):
            return  # the name resolves to the function through __getattr__
        super().__setattr__(name, value)


# the documented way to customise a module's attribute setting (Python data model, "Customizing module attribute access")
sys.modules[__name__].__class__ = _Package
