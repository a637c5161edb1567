"""The wrapper every stochastic kernel shares: arguments, output buffers, seeds, ``simulate``, ``trace``.

A kernel module provides its event loop and a little around it:

- ``prepare(network, rates, x0, times, **options) -> tuple``: the method's own arrays and scalars
  (its packed program, option values, ...), built once per call in Python; it validates options
  and raises ``ValueError`` for a bad one.
- ``run(model, rates, law, x0, times, states, max_events, counts, status, events, aux, log_t,
  log_r, log_x)``: a numba function that simulates replicate i from the generator state
  ``states[i]`` into ``counts[i]``, ``status[i]``, ``events[i]`` (and ``aux[i]``, an int64 the method
  may use, e.g. the Langevin kernel's clip count). ``model`` is ``prepare``'s tuple; ``law`` is None
  for a mass-action model, else what ``law_value`` reads (``kernels.propensity``). The ``log_*``
  arrays are None (``simulate``: numba compiles the logging away) or receive each event's time,
  reaction and post-event state (``trace``).
- ``LAW_PATH``: its numba functions on the path from ``run`` to ``law_value``, callees first, so
  that ``kernels.ratelaw.specialised`` can compile them again with a model's laws inline.

The replicate loop is part of ``run`` rather than a numba function here: numba can neither cache
a function that takes another jitted function as an argument nor one that closes over it (the
dispatcher pickles with a per-process id), and a cached caller in this file would keep a stale
copy of a kernel whose own file changed.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Sequence

import numpy as np

import kernels
from kernels.interventions import Schedule, no_watch
from kernels.network import KernelResult, Network, Trace
from kernels.rng import Streams, seed_states

if TYPE_CHECKING:
    Seeds = Streams | Sequence[np.random.SeedSequence]


def arguments(rates, x0, times, real_state: bool = False) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``rates`` and ``times`` as contiguous float64, ``x0`` as int64 (float64 for a real state)."""
    return (np.ascontiguousarray(rates, dtype=np.float64),
            np.ascontiguousarray(x0, dtype=np.float64 if real_state else np.int64),
            np.ascontiguousarray(times, dtype=np.float64))


def outputs(n: int, n_times: int, n_species: int, counts_dtype=np.int32) -> tuple[np.ndarray, ...]:
    """Uninitialised (counts, status, events, aux) for ``n`` replicates, for ``run`` to fill."""
    return (np.empty((n, n_times, n_species), dtype=counts_dtype), np.empty(n, dtype=np.int8),
            np.empty(n, dtype=np.int64), np.zeros(n, dtype=np.int64))


def loop(method: str, network: Network, rates: np.ndarray) -> tuple:
    """(``run``, ``law``) for ``method`` on ``network``: the kernel module's own loop for mass
    action; for custom laws the loop specialised with them inline, and their per-block constants;
    without an inline form (or a ``LAW_PATH``), the callback's address (``kernels.ratelaw``)."""
    rec = kernels.record(method)
    return _loop(rec, rec.load(), network, rates)


def _loop(rec: kernels.Method, module, network: Network, rates: np.ndarray) -> tuple:
    from kernels import ratelaw

    law = network.law
    if law is None:
        return module.run, None
    if law.inline is not None and hasattr(module, "LAW_PATH"):
        generated = ratelaw.specialised(module, law, rec.real_state)
        # a tuple, not an array: numba refcounts an array passed into the inlined propensity on
        # every call (its refcount pruning misses it there), a tuple of floats it passes by value
        return generated.run, tuple(float(v) for v in generated.law_constants(rates))
    return module.run, ratelaw.addresses(network)[1 if rec.real_state else 0]


def is_cached(method: str, network: Network) -> bool:
    """See ``kernels.compiled``."""
    from kernels import ratelaw

    rec = kernels.record(method)
    if network.law is None or network.law.inline is None:
        return True
    module = rec.load()
    if not hasattr(module, "LAW_PATH"):
        return True
    return ratelaw.is_cached(module, network.law, rec.real_state)


def run(method: str, network: Network, rates, x0, times, seeds: Seeds, max_events: int,
        logs: tuple | None = None, changes: Schedule | None = None, **options) -> tuple[KernelResult, np.ndarray]:
    """Run ``method``'s loop on a block of replicates; return the result and the ``aux`` counters.

    ``logs`` is None or the (times, reactions, states) arrays of one replicate's event log.
    ``changes`` is None, or the point's interventions: each replicate then runs through
    ``kernels.changes.segments``, the loop simulating between change instants.

    Raises
    ------
    ValueError
        From the method's ``prepare``, for a bad option value.
    """
    rec = kernels.record(method)
    module = rec.load()
    rates, x0, times = arguments(rates, x0, times, rec.real_state)
    states = seed_states(seeds)
    counts, status, events, aux = outputs(states.shape[0], times.shape[0], x0.shape[0], rec.counts_dtype)
    if changes is not None and (changes.times.shape[0] or changes.n_watch):
        _run_changes(rec, module, network, rates, x0, times, states, int(max_events), logs, changes, options,
                     counts, status, events, aux)
        return KernelResult(counts, status, events), aux
    model = module.prepare(network, rates, x0, times, **options) + (no_watch(),)
    fn, law = _loop(rec, module, network, rates)
    log_t, log_r, log_x = logs if logs is not None else (None, None, None)
    fn(model, rates, law, x0, times, states, int(max_events), counts, status, events, aux, log_t, log_r, log_x)
    return KernelResult(counts, status, events), aux


def _run_changes(rec, module, network, rates, x0, times, states, max_events, logs, schedule, options,
                 counts, status, events, aux) -> None:
    """Each replicate through ``kernels.changes.segments``; the loop runs between change instants.

    The method's options are fixed from the whole sample grid (the Langevin step's default is the
    mean sample spacing, which a shifted, shortened segment would change). The loop is rebuilt only
    when an operation changed a rate (a law's constants are computed from the rates).
    """
    from kernels import changes

    if hasattr(module, "default_dt") and options.get("dt") is None:
        options = dict(options, dt=module.default_dt(times))
    mode = "langevin" if rec.real_state else "count"
    one_status, one_events, one_aux = (np.empty(1, np.int8), np.empty(1, np.int64), np.zeros(1, np.int64))
    built: dict = {}  # rate vector's bytes -> (model, loop): the replicates pass through the same few
    logged = [0]

    def run_segment(x, r, seg, budget, watch, changed, t0):
        key = r.tobytes()
        if key not in built:
            built[key] = (module.prepare(network, r, x0, times, **options), _loop(rec, module, network, r))
        model, (fn, law) = built[key]
        out = np.empty((1, seg.shape[0], x.shape[0]), dtype=rec.counts_dtype)
        n = logged[0]
        log_t, log_r, log_x = (logs[0][n:], logs[1][n:], logs[2][n:]) if logs is not None else (None, None, None)
        one_aux[0] = 0
        fn(model + (watch,), r, law, np.ascontiguousarray(x, dtype=x0.dtype), np.ascontiguousarray(seg), states[i:i + 1],
           int(budget), out, one_status, one_events, one_aux, log_t, log_r, log_x)
        if logs is not None:
            got = min(int(one_events[0]), log_t.shape[0])
            log_t[:got] += t0
            logged[0] = n + got
        return out[0], int(one_status[0]), int(one_events[0]), int(one_aux[0])

    for i in range(states.shape[0]):
        logged[0] = 0
        status[i], events[i], aux[i] = changes.segments(run_segment, schedule, x0, rates, times, max_events,
                                                         states[i], counts[i], mode)


def simulate(method: str, network: Network, rates, x0, times, seeds: Seeds, max_events: int,
             changes: Schedule | None = None, **options) -> KernelResult:
    """One replicate per seed with ``method``; see ``kernels`` for the signature."""
    return run(method, network, rates, x0, times, seeds, max_events, changes=changes, **options)[0]


def trace(method: str, network: Network, rates, x0, times, seed: np.random.SeedSequence, max_events: int,
          changes: Schedule | None = None, **options) -> Trace:
    """Recompute one replicate with its full event log.

    Runs it twice from the same seed, first to count its events, then with logs of that size, so
    ``result`` equals the replicate's row of ``simulate`` bit for bit.
    """
    first = simulate(method, network, rates, x0, times, [seed], max_events, changes, **options)
    n_ev = int(first.events[0])
    logs = (np.empty(n_ev), np.empty(n_ev, dtype=np.int32), np.empty((n_ev, len(x0)), dtype=np.int64))
    result, _ = run(method, network, rates, x0, times, [seed], max_events, logs, changes, **options)
    return Trace(*logs, result)
