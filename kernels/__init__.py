"""Simulation kernels: pure computation, arrays in and arrays out.

Every method is one module with the same ``simulate`` signature::

    simulate(network, rates, x0, times, seeds, max_events) -> KernelResult

Registry values are dotted module names resolved on first use, so importing this
package (``sweep --help``, ``sweep check``) does not pay numba's import and compile cost.
"""

from __future__ import annotations

import importlib
from types import ModuleType

from kernels.network import KernelResult, Network, Trace

METHODS: dict[str, str] = {
    "direct": "kernels.direct",
}


def get(method: str) -> ModuleType:
    """Return the kernel module registered under ``method``.

    Raises
    ------
    KeyError
        If no kernel is registered under that name.
    """
    return importlib.import_module(METHODS[method])


__all__ = ["METHODS", "KernelResult", "Network", "Trace", "get"]
