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
    "nrm": "kernels.nrm",
    "tau_leap": "kernels.tau_leap",
    "cle": "kernels.cle",
    "ode": "kernels.ode",
}


# Options a method takes as keyword arguments of ``simulate``, from a spec's [run.options]:
# name -> "positive" (a number > 0), "fraction" (0 < x < 1) or a tuple of allowed strings.
OPTIONS: dict[str, dict[str, str | tuple[str, ...]]] = {
    "cle": {"dt": "positive"},
    "tau_leap": {"epsilon": "fraction"},
    "ode": {"ode_method": ("LSODA", "BDF"), "rtol": "fraction", "atol": "positive"},
}

# Methods whose trajectory does not depend on the seed: one replicate per point.
DETERMINISTIC: frozenset[str] = frozenset({"ode"})


def get(method: str) -> ModuleType:
    """Return the kernel module registered under ``method``.

    Raises
    ------
    KeyError
        If no kernel is registered under that name.
    """
    return importlib.import_module(METHODS[method])


__all__ = ["DETERMINISTIC", "METHODS", "OPTIONS", "KernelResult", "Network", "Trace", "get"]
