"""Deterministic reaction rate equations (the large-number limit), solved with scipy.

The state x is real-valued and in molecule-number units (no volume conversion)::

    dx/dt = sum_j nu_j a_j(x),    a_j(x) = c_j * prod_s x_s^m_s / m_s!

Choices:

- **Rate law.** The macroscopic mass-action form c * prod x^m / m!, not the combinatorial
  c * prod C(x, m) of the stochastic methods: for 2A -> it is c A^2 / 2, not c A(A-1)/2. This is
  the standard rate equation in molecule numbers, the limit of the chemical master equation as
  the copy numbers grow (Kurtz 1972, "The relationship between stochastic and deterministic
  models for chemical reactions", J. Chem. Phys. 57:2976; Gillespie 1977 gives c = 2k/(N_A V) for
  2A, so c A^2 / 2 = k A^2 / (N_A V) is the textbook k[A]^2 in number units). The rate constants
  are the same stochastic c_j the other methods take, so a sweep can switch methods unchanged.
  Each x_s is clipped at 0 inside the rate law, so a species at 0 is never consumed further.
- **Solver.** ``scipy.integrate.solve_ivp`` with LSODA by default (switches between Adams and
  BDF as stiffness demands; Petzold 1983, SIAM J. Sci. Stat. Comput. 4:136) for at most
  ``LSODA_BUDGET`` right-hand-side evaluations, then BDF from the start for the rest of the cap
  (a work bound, so a stiff model never crawls under LSODA and the result is machine-independent), or BDF
  (``ode_method="BDF"``), tolerances ``RTOL`` and ``ATOL`` (molecule numbers), the analytic
  Jacobian, and the sample times as ``t_eval``. The right-hand side and Jacobian are numba
  functions; only the solver's loop runs in Python.
- **Replicates.** The solution is deterministic: the ``seeds`` only set the number of rows, and
  every row is the same trajectory (the sweep should run this method with one replicate).
- **Outputs.** ``counts`` are float64 (the registry's ``counts``); samples at t = 0 are x0 exactly, and
  values below 0 (integration error, within ``ATOL``) are reported as 0. ``events`` is the number
  of right-hand-side evaluations. ``max_events`` caps them: a solve that needs more stops with
  status 1, and as ``solve_ivp`` returns nothing from an aborted solve, every sample after t = 0
  is then -1. A solver failure (``success`` false) or a non-finite value, including a
  right-hand side that overflows in a finite-time blow-up and a rate that is infinite or NaN
  (even of a reaction that changes nothing), gives status 2 and all samples -1.
  When every rate is 0 at x0 the state is an equilibrium and is returned without calling the
  solver (``events`` 0), as the stochastic methods hold a state whose propensities are all 0.
"""

from __future__ import annotations

import math
from typing import Sequence

import numba
import numpy as np
from scipy.integrate import solve_ivp

from kernels import METHODS, changes
from kernels.network import STATUS_EVENT_CAP, STATUS_NUMERICAL, STATUS_STOPPED, KernelResult, Network
from kernels.ratelaw import addresses, call_law

# the registry's dtype, as the attribute sweep.store and sweep.plan read until they read the record
COUNTS_DTYPE = METHODS["ode"].counts_dtype
ODE_METHODS = ("LSODA", "BDF")
DEFAULT_ODE_METHOD = "LSODA"
RTOL = 1e-8
# A solve restarted at a change or an event counts as this many evaluations against max_events: a
# repeating event whose operations make its condition true again at once (a Zeno cascade, seen in a
# curated SBML model whose events fire whenever a species leaves 0) restarts the solver every few
# evaluations, and the restarts, not the evaluations, then take the time
RESTART_COST = 50
LSODA_BUDGET = 50_000  # right-hand-side evaluations before a LSODA solve falls back to BDF
ATOL = 1e-8  # molecules: far below one molecule; RTOL governs the large values


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _rate_law(scaled, law_mask, rates, law, reactant_idx, reactant_mult, x, a):
    """a_j = scaled_j * prod_s max(x_s, 0)^m_s, with scaled_j = c_j / prod_s m_s!.

    A custom law reads the state clipped at 0, like the mass-action terms.
    """
    xp = np.maximum(x, 0.0)
    for j in range(scaled.shape[0]):
        if law is not None and law_mask[j]:
            a[j] = call_law(law, j, xp, rates)
            continue
        v = scaled[j]
        for k in range(reactant_idx.shape[1]):
            s = reactant_idx[j, k]
            if s < 0:
                break
            v *= max(x[s], 0.0) ** reactant_mult[j, k]
        a[j] = v


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _rhs(x, scaled, law_mask, rates, law, reactant_idx, reactant_mult, change_idx, change_val):
    """dx/dt = sum_j nu_j a_j(x); all NaN when a rate is infinite or NaN."""
    a = np.empty(scaled.shape[0])
    _rate_law(scaled, law_mask, rates, law, reactant_idx, reactant_mult, x, a)
    total = 0.0
    for j in range(scaled.shape[0]):
        total += a[j]
    if not total < np.inf:
        return np.full(x.shape[0], np.nan)
    dx = np.zeros(x.shape[0])
    for j in range(scaled.shape[0]):
        for l in range(change_idx.shape[1]):
            s = change_idx[j, l]
            if s < 0:
                break
            dx[s] += change_val[j, l] * a[j]
    return dx


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _jacobian(x, scaled, reactant_idx, reactant_mult, change_idx, change_val):
    """J[s, r] = sum_j nu_sj d a_j / d x_r, dense (S, S).

    d/dx_r of x_r^m is m x_r^(m-1) on max(x_r, 0); for m = 1 that is 1 (0^0 = 1), the derivative
    from the right at 0, which serves the solver's Newton iteration.
    """
    n_s = x.shape[0]
    jac = np.zeros((n_s, n_s))
    for j in range(scaled.shape[0]):
        for k in range(reactant_idx.shape[1]):
            r = reactant_idx[j, k]
            if r < 0:
                break
            d = scaled[j]
            for k2 in range(reactant_idx.shape[1]):
                s2 = reactant_idx[j, k2]
                if s2 < 0:
                    break
                m = reactant_mult[j, k2]
                xv = max(x[s2], 0.0)
                d *= m * xv ** (m - 1) if k2 == k else xv ** m
            for l in range(change_idx.shape[1]):
                s = change_idx[j, l]
                if s < 0:
                    break
                jac[s, r] += change_val[j, l] * d
    return jac


class _EventCap(Exception):
    """Raised inside ``solve_ivp`` when the right-hand side has been evaluated ``max_events`` times."""


class _NonFinite(Exception):
    """Raised inside ``solve_ivp`` when the right-hand side is not finite (a blow-up overflowed).

    Without it LSODA retries ever smaller steps on an infinite derivative until the cap.
    """


class _System:
    """The right-hand side and Jacobian for ``solve_ivp``, counting evaluations against a cap."""

    def __init__(self, network: Network, scaled: np.ndarray, rates: np.ndarray, max_events: int, t0: float = 0.0):
        self.laws = (network.law_mask, rates, addresses(network)[1])
        self.t0 = t0  # the absolute time of the solve's t = 0 (a segment of a run with changes)
        self.args = (scaled, network.reactant_idx, network.reactant_mult, network.change_idx, network.change_val)
        self.max_events = max_events
        self.time_slot = network.time_slot
        self.calls = 0

    def rhs(self, t: float, x: np.ndarray) -> np.ndarray:
        if self.calls >= self.max_events:
            raise _EventCap
        self.calls += 1
        if self.time_slot >= 0:
            self.laws[1][self.time_slot] = self.t0 + t  # a law that reads the time (Network.time_slot)
        dx = _rhs(x, self.args[0], *self.laws, *self.args[1:])
        if not np.isfinite(dx).all():
            raise _NonFinite
        return dx

    def jac(self, t: float, x: np.ndarray) -> np.ndarray:
        return _jacobian(x, *self.args)


def _scaled_rates(network: Network, rates: np.ndarray) -> np.ndarray:
    """c_j / prod_s m_s! for each reaction j (m_s its reactant multiplicities)."""
    return np.ascontiguousarray(rates, dtype=np.float64) / _factorials(network.reactant_mult)


def _factorials(reactant_mult: np.ndarray) -> np.ndarray:
    """prod_s m_s! per reaction, computed once per network (a run with changes solves many segments)."""
    key = (reactant_mult.shape, reactant_mult.tobytes())
    found = _FACTORIALS.get(key)
    if found is None:
        if len(_FACTORIALS) > 64:
            _FACTORIALS.clear()
        found = _FACTORIALS[key] = np.array([math.prod(math.factorial(int(m)) for m in row)
                                             for row in reactant_mult], dtype=np.float64)
    return found


_FACTORIALS: dict = {}


def solve(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray, max_events: int, *,
          ode_method: str = DEFAULT_ODE_METHOD, rtol: float = RTOL, atol: float = ATOL, t0: float = 0.0,
          watch: tuple | None = None) -> tuple[np.ndarray, int, int]:
    """Solve the rate equations once: (samples float64 (T, S), status, right-hand-side evaluations).

    ``t0`` and ``watch`` serve a run with changes (``simulate_changes``): the absolute time of
    t = 0, and the state-triggered events (``kernels.changes.Watch``), located by ``solve_ivp``'s
    event finder; at the first, the status is ``STATUS_STOPPED``, ``watch[5][0]`` its time, and
    every later sample holds the state there.

    Raises
    ------
    ValueError
        If ``ode_method`` is not one of ``ODE_METHODS``.
    """
    if ode_method not in ODE_METHODS:
        raise ValueError(f"ode_method must be one of {', '.join(ODE_METHODS)}, got {ode_method!r}")
    x0 = np.ascontiguousarray(x0, dtype=np.float64)
    times = np.ascontiguousarray(times, dtype=np.float64)
    rates = np.array(rates, dtype=np.float64)  # a copy: a law reading the time has t written into it
    scaled = _scaled_rates(network, rates[:network.n_reactions])
    row = np.empty((times.shape[0], x0.shape[0]), dtype=COUNTS_DTYPE)
    row[:] = x0
    later = times > 0.0
    a = np.empty(scaled.shape[0])
    _rate_law(scaled, network.law_mask, rates, addresses(network)[1], network.reactant_idx,
              network.reactant_mult, x0, a)
    if not np.isfinite(a).all():
        row[:] = -1.0
        return row, STATUS_NUMERICAL, 0
    if not later.any() or (not a.any() and network.time_slot < 0 and watch is None):
        # nothing to integrate, or x0 is an equilibrium (every rate is 0 there and no law reads t)
        return row, 0, 0
    # solve_ivp wants strictly increasing t_eval: solve on the distinct times, then spread back
    t_eval, where = np.unique(times[later], return_inverse=True)
    # LSODA first, within a work bound: a stiff model can make it crawl for minutes where BDF takes
    # a second (LSODA's stiffness switch misjudges some models), so past LSODA_BUDGET evaluations the
    # solve restarts with BDF for the rest of max_events. The bound counts work, not seconds, so
    # the result stays the same on every machine.
    budget = min(int(max_events), LSODA_BUDGET) if ode_method == "LSODA" else int(max_events)
    spent = 0
    while True:
        system = _System(network, scaled, rates, budget, t0)
        try:
            # the analytic Jacobian covers mass action only; with custom laws the solver differences
            sol = solve_ivp(system.rhs, (0.0, float(t_eval[-1])), x0, method=ode_method, t_eval=t_eval,
                            jac=system.jac if network.law is None else None, rtol=rtol, atol=atol,
                            events=_events(watch) if watch is not None and watch[0].shape[0] else None)
            break
        except _EventCap:
            spent += system.calls
            if ode_method == "LSODA" and spent < max_events:
                ode_method, budget = "BDF", int(max_events) - spent
                continue
            row[later] = -1.0
            return row, STATUS_EVENT_CAP, spent
        except _NonFinite:
            row[:] = -1.0
            return row, STATUS_NUMERICAL, spent + system.calls
    system.calls += spent
    if sol.success and sol.status == 1:  # a state-triggered event ended the solve
        return _stopped(sol, row, later, where, watch, system.calls)
    if not sol.success or sol.y.shape[1] != t_eval.shape[0] or not np.isfinite(sol.y).all():
        row[:] = -1.0
        return row, STATUS_NUMERICAL, system.calls
    row[later] = np.maximum(sol.y.T[where], 0.0)
    return row, 0, system.calls


def _events(watch: tuple) -> list:
    """``solve_ivp`` event functions: each armed condition's threshold crossing ends the solve, and
    so does a disarmed repeating one's crossing back (``kernels.changes.fire`` then re-arms it)."""
    w_species, w_op, w_value, w_repeat, armed, _ = watch
    found = []
    for w in range(w_species.shape[0]):
        rising = w_op[w] in (changes.GE, changes.GT)
        if not armed[w] and not w_repeat[w]:
            continue
        toward = rising == bool(armed[w])  # toward the condition while armed, away from it to re-arm

        def crossing(t, x, s=int(w_species[w]), v=float(w_value[w])):
            return x[s] - v

        crossing.terminal = True
        crossing.direction = 1.0 if toward else -1.0
        found.append(crossing)
    return found


def _stopped(sol, row, later, where, watch, calls):
    """The samples of a solve ended by an event: those before it, then the state at it."""
    hits = [(float(te[0]), ye[0]) for te, ye in zip(sol.t_events, sol.y_events) if te.shape[0]]
    t_stop, y_stop = min(hits, key=lambda h: h[0])
    y_stop = np.maximum(np.asarray(y_stop, dtype=np.float64), 0.0)
    w_species, w_op, w_value, w_repeat, armed, stop = watch
    for w in range(w_species.shape[0]):
        # the located root is within rounding of the threshold: settle it on the side the crossing
        # went to (inside the condition for an armed event, outside it for one waiting to re-arm)
        s, v, op = int(w_species[w]), float(w_value[w]), int(w_op[w])
        if abs(y_stop[s] - v) > 1e-9 * max(1.0, abs(v)) or not (armed[w] or w_repeat[w]):
            continue
        up = op in (changes.GE, changes.GT)
        inside = {changes.GE: v, changes.LE: v, changes.GT: np.nextafter(v, np.inf),
                  changes.LT: np.nextafter(v, -np.inf)}[op]
        y_stop[s] = inside if armed[w] else np.nextafter(v, -np.inf if up else np.inf)
    # the samples solved before the event (scipy gives an empty list, not an array, when there are none)
    n_got = len(sol.t)
    values = np.empty((int(where.max()) + 1 if where.size else 0, row.shape[1]))
    if n_got:
        values[:n_got] = np.maximum(np.asarray(sol.y).T, 0.0)
    values[n_got:] = y_stop
    row[later] = values[where]
    stop[0] = t_stop
    return row, STATUS_STOPPED, calls


def simulate_changes(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray, n: int,
                     max_events: int, schedule: changes.Schedule, **options) -> KernelResult:
    """``simulate`` with interventions: the solution runs from change to change
    (``kernels.changes.segments``); thinning multiplies by the kept fraction."""
    row = np.empty((times.shape[0], len(x0)), dtype=COUNTS_DTYPE)

    def run_segment(x, r, seg, budget, watch, changed, t0):
        row_, status, calls = solve(network, r, x, seg, budget, t0=t0, watch=watch, **options)
        return row_, status, calls + RESTART_COST, 0

    status, calls, _ = changes.segments(run_segment, schedule, np.asarray(x0, dtype=np.float64),
                                        np.asarray(rates, dtype=np.float64), times, max_events, None, row, "mean")
    return KernelResult(np.broadcast_to(row, (n,) + row.shape).copy(),
                        np.full(n, status, dtype=np.int8), np.full(n, calls, dtype=np.int64))


def simulate(network: Network, rates: np.ndarray, x0: np.ndarray, times: np.ndarray,
             seeds: Sequence[np.random.SeedSequence], max_events: int, changes: changes.Schedule | None = None, *,
             ode_method: str = DEFAULT_ODE_METHOD, rtol: float = RTOL, atol: float = ATOL) -> KernelResult:
    """Solve the deterministic rate equations; one identical row per seed.

    Parameters
    ----------
    network : Network
        The compiled reaction network.
    rates : float64 (R,)
        Stochastic rate constants c_j; the rate law is c_j * prod x^m / m! (module docstring).
    x0 : (S,)
        Initial molecule numbers.
    times : float64 (T,)
        Non-decreasing sample times, all >= 0.
    seeds : sequence of SeedSequence
        Only their number is used: every row is the same deterministic solution.
    max_events : int
        Cap on right-hand-side evaluations.
    ode_method : {"LSODA", "BDF"}
        The ``solve_ivp`` method.
    rtol, atol : float
        Solver tolerances (``atol`` in molecules).

    Returns
    -------
    KernelResult
        counts (n, T, S) float64, status (n,) int8, events (n,) int64 = right-hand-side evaluations.

    Raises
    ------
    ValueError
        If ``ode_method`` is not one of ``ODE_METHODS``.

    Example
    -------
    >>> res = simulate(net, np.array([5.0, 0.5]), np.array([0]), np.linspace(0, 30, 31),
    ...                [np.random.SeedSequence(1, spawn_key=(0, 0))], 100_000)
    """
    if ode_method not in ODE_METHODS:
        raise ValueError(f"ode_method must be one of {', '.join(ODE_METHODS)}, got {ode_method!r}")
    n = len(seeds)
    times = np.ascontiguousarray(times, dtype=np.float64)
    if n == 0:
        return KernelResult(np.empty((0, times.shape[0], len(x0)), dtype=COUNTS_DTYPE),
                            np.empty(0, dtype=np.int8), np.empty(0, dtype=np.int64))
    if changes is not None and (changes.times.shape[0] or changes.n_watch):
        return simulate_changes(network, rates, x0, times, n, max_events, changes, ode_method=ode_method,
                                rtol=rtol, atol=atol)
    row, status, calls = solve(network, rates, x0, times, max_events, ode_method=ode_method, rtol=rtol, atol=atol)
    return KernelResult(np.broadcast_to(row, (n,) + row.shape).copy(),
                        np.full(n, status, dtype=np.int8), np.full(n, calls, dtype=np.int64))
