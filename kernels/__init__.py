"""Simulation kernels: pure computation, arrays in and arrays out.

Every method is one module with the same ``simulate`` signature::

    simulate(network, rates, x0, times, seeds, max_events, **options) -> KernelResult

and one record in ``METHODS`` saying what the store, the planner, the benchmark and ``sweep trace``
need to know about it without importing it: the module (a dotted name, imported on first use, so
``sweep --help`` and ``sweep check`` do not pay numba's import and compile cost), the dtype of its
counts, what its ``events`` count, its keyword options, whether it is deterministic and whether it
can ``trace``. ``OPTIONS``, ``DETERMINISTIC`` and ``get`` are views of that one table.

``seeds`` is a list of ``numpy.random.SeedSequence`` (one per replicate) or a
``kernels.rng.Streams(root, point, start, stop)``, which stands for
``[SeedSequence(root, spawn_key=(point, r)) for r in range(start, stop)]`` seeded compiled.
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass, field
from types import MappingProxyType, ModuleType
from typing import Mapping

import numpy as np

from kernels.network import KernelResult, Network, Trace

# An option's rule: "positive" (a number > 0), "fraction" (0 < x < 1) or a tuple of allowed strings.
Rule = str | tuple[str, ...]


@dataclass(frozen=True)
class Method:
    """What the rest of the program may know about a method without importing its module.

    Attributes
    ----------
    module : str
        Dotted name of the kernel module (``simulate``, and ``trace`` if ``trace`` is true).
    counts : str
        dtype of ``KernelResult.counts``: ``"int32"`` for molecule counts, ``"float64"`` for a
        real-valued state. The store creates its ``counts`` array with it.
    events : str
        What ``KernelResult.events`` counts, a plural noun for reports: ``"events"`` (reactions
        fired), ``"steps"`` or ``"evaluations"``. ``max_events`` caps the same thing.
    options : mapping of str to Rule
        Keyword options of ``simulate`` a spec's ``[run.options]`` may set, with their rule.
    deterministic : bool
        The result does not depend on the seed: one replicate per point.
    trace : bool
        The module has ``trace(network, rates, x0, times, seed, max_events) -> Trace``.
    exact : bool
        Samples the chemical master equation exactly (up to floating point).
    summary : str
        One line for ``sweep check`` and the docs, citing the algorithm.
    """

    module: str
    counts: str = "int32"
    events: str = "events"
    options: Mapping[str, Rule] = field(default_factory=lambda: MappingProxyType({}))
    deterministic: bool = False
    trace: bool = False
    exact: bool = True
    summary: str = ""

    @property
    def counts_dtype(self) -> np.dtype:
        return np.dtype(self.counts)

    @property
    def real_state(self) -> bool:
        """Whether the state (and so ``counts``) is float64 rather than molecule counts."""
        return self.counts_dtype.kind == "f"

    def load(self) -> ModuleType:
        """The kernel module (imports numba on first use)."""
        return importlib.import_module(self.module)


METHODS: dict[str, Method] = {
    "direct": Method("kernels.direct", trace=True,
                     summary="Gillespie's direct method (Gillespie 1976, 1977)"),
    "nrm": Method("kernels.nrm", trace=True,
                  summary="next reaction method (Gibson & Bruck 2000)"),
    "cr": Method("kernels.cr", trace=True,
                 summary="composition-rejection (Slepoy, Thompson & Plimpton 2008), for large networks"),
    "tau_leap": Method("kernels.tau_leap", events="steps", exact=False,
                       options=MappingProxyType({"epsilon": "fraction"}),
                       summary="explicit tau-leaping (Cao, Gillespie & Petzold 2006)"),
    "cle": Method("kernels.cle", counts="float64", events="steps", exact=False,
                  options=MappingProxyType({"dt": "positive"}),
                  summary="chemical Langevin equation, Euler-Maruyama (Gillespie 2000)"),
    "ode": Method("kernels.ode", counts="float64", events="evaluations", exact=False, deterministic=True,
                  options=MappingProxyType({"ode_method": ("LSODA", "BDF"), "rtol": "fraction", "atol": "positive"}),
                  summary="deterministic rate equations (Kurtz 1972), scipy's solve_ivp"),
}


def record(method: str) -> Method:
    """The ``Method`` registered under ``method``.

    A plain dotted module name registered in ``METHODS`` (tests register stand-in kernels that way)
    reads as a record with the defaults: int32 counts, reaction events, no options.

    Raises
    ------
    KeyError
        If no method is registered under that name.
    """
    value = METHODS[method]
    return Method(value) if isinstance(value, str) else value


def get(method: str) -> ModuleType:
    """Return the kernel module registered under ``method``.

    Raises
    ------
    KeyError
        If no kernel is registered under that name.
    """
    return record(method).load()


# Derived views, kept for the code that reads them (sweep.spec, sweep.compare, the CLI).
OPTIONS: dict[str, dict[str, Rule]] = {name: dict(m.options) for name, m in METHODS.items() if m.options}
DETERMINISTIC: frozenset[str] = frozenset(name for name, m in METHODS.items() if m.deterministic)

# Where each exact method is fastest, by the number of reactions (measured on the built-in chain,
# ring and random networks, docs/notes/kernels.md): the direct method's search grows with R, the next
# reaction method's heap with log R, composition-rejection's cost per event hardly at all in
# operations; both of the latter grow with the cache misses of a large network. nrm is the faster at
# 100 and level at 1,000 reactions, cr 6-22% faster at 3,000 and 22-30% at 10,000 (interleaved rounds).
SUGGEST_NRM_FROM = 64
SUGGEST_CR_FROM = 3000
ADVISE_FROM = 500  # from here ``sweep plan`` warns against the direct method (it is >= 3x slower)


def suggest(n_reactions: int) -> str:
    """The exact method expected to be fastest for a network of ``n_reactions`` reactions.

    Example
    -------
    >>> suggest(4), suggest(300), suggest(10_000)
    ('direct', 'nrm', 'cr')
    """
    if n_reactions < SUGGEST_NRM_FROM:
        return "direct"
    return "nrm" if n_reactions < SUGGEST_CR_FROM else "cr"


def advice(method: str, n_reactions: int) -> str | None:
    """A note when another exact method is expected to be much faster for a network this large.

    Read by ``sweep check`` and ``sweep plan`` (here, so that ``check`` needs no planner).

    Example
    -------
    >>> advice("direct", 10_000).startswith("method 'direct' on 10,000 reactions")
    True
    """
    if method != "direct" or n_reactions < ADVISE_FROM:
        return None
    return (f"method 'direct' on {n_reactions:,} reactions: its reaction search costs time in proportion to "
            "the number of reactions; method 'nrm' or 'cr' (composition-rejection) samples the same process "
            "exactly at a cost per event that grows far less (3-8x faster at 1,000 reactions, 20-68x at "
            "10,000 on the built-in networks, cr the faster of the two from a few thousand; sweep bench --large)")


def compiled(method: str, network: Network) -> bool:
    """Whether ``method``'s kernel for ``network`` is already compiled in numba's disk cache.

    False only for a model with custom rate laws whose specialised kernel (``kernels.ratelaw``) was
    never compiled on this machine: its first call then compiles it (about 2 s cold, see
    docs/notes/kernels.md). Mass-action models use the package's own kernels, compiled once per install.
    Imports the kernel module (numba) but compiles nothing.
    """
    from kernels import blocks

    return blocks.is_cached(method, network)


__all__ = ["DETERMINISTIC", "METHODS", "OPTIONS", "KernelResult", "Method", "Network", "Trace", "advice", "compiled",
           "get", "record", "suggest"]
