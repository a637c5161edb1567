"""Conformance tests every kernel method must pass.

A method's test module subclasses ``KernelConformance`` once, sets ``method`` to its
registry name, and adds its own analytic checks::

    class TestDirect(KernelConformance):
        method = "direct"

The class has no ``Test`` prefix, so pytest collects it only through its subclasses.
Everything here is the contract of ``simulate`` in ``kernels/__init__.py`` and
``kernels/network.py``; nothing depends on how a method draws its random numbers.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import pytest

import kernels
from support.hang_bound import time_bound
from kernels.network import KernelResult, Network
from sweep.model import compile_network, initial_counts, parse_model, rate_constants

ROOT = 20_240_611


class Case(NamedTuple):
    """A compiled model ready for a kernel call."""

    net: Network
    rates: np.ndarray
    x0: np.ndarray


def build(species: dict[str, int], reactions: dict[str, tuple[str, float]]) -> Case:
    """Compile a model given as ``{"A": 3}`` and ``{"decay": ("A -> 0", 1.0)}``."""
    params = {f"c_{name}": float(rate) for name, (_, rate) in reactions.items()}
    table = {"species": dict(species), "parameters": params,
             "reactions": {name: {"reaction": eq, "rate": f"c_{name}"}
                           for name, (eq, _) in reactions.items()}}
    model = parse_model(table, "<test>")
    values = model.parameter_values
    return Case(compile_network(model), rate_constants(model, values), initial_counts(model, values))


def seeds(n: int, root: int = ROOT, point: int = 0) -> list[np.random.SeedSequence]:
    """The sweep's seeding scheme: replicate r of point p uses SeedSequence(root, (p, r))."""
    return [np.random.SeedSequence(root, spawn_key=(point, r)) for r in range(n)]


def immigration_death() -> Case:
    return build({"A": 0}, {"birth": ("0 -> A", 5.0), "death": ("A -> 0", 0.5)})


def mixed_network() -> Case:
    """Every kind of mass-action term (0th to 3rd order, 2A, A+B) in one open network."""
    return build({"A": 30, "B": 10, "C": 0},
                 {"inflow": ("0 -> A", 2.0),
                  "decay": ("A -> 0", 0.1),
                  "dimerise": ("2 A -> B", 0.05),
                  "bind": ("A + B -> C", 0.02),
                  "unbind": ("C -> A + B", 0.5),
                  "trimer_loss": ("3 B -> 0", 0.01),
                  "b_loss": ("B -> 0", 0.2)})


def infinite_propensity(kind: str) -> Case:
    """Models whose propensity becomes infinite: at t = 0, or later as a count grows.

    - ``mass_action``: c = 1e308 times 1000 x 1000 molecules overflows to inf;
    - ``divide_by_zero``: the law k / (A - A);
    - ``overflow``: the law 1e300 * 1e300 * A (each number finite, the product not);
    - ``later``: the law 1e-3 exp(10 C) is finite at C = 0 and infinite once C reaches 71: an
      inflow adds 100 C at a time (twice per time unit on average).
    """
    tables = {
        "mass_action": ({"A": 1000, "B": 1000, "C": 0}, {"c": 1e308},
                        {"bind": {"reaction": "A + B -> C", "rate": "c"}, "loss": {"reaction": "C -> 0", "rate": 1.0}}),
        "divide_by_zero": ({"A": 10, "B": 0}, {"k": 1.0},
                           {"r": {"reaction": "A -> B", "propensity": "k / (A - A)"},
                            "back": {"reaction": "B -> A", "rate": 1.0}}),
        "overflow": ({"A": 10, "B": 0}, {},
                     {"r": {"reaction": "A -> B", "propensity": "1e300 * 1e300 * A"},
                      "back": {"reaction": "B -> A", "rate": 1.0}}),
        "later": ({"B": 0, "C": 0}, {},
                  {"in": {"reaction": "0 -> 100 C", "rate": 2.0},
                   "r": {"reaction": "0 -> B", "propensity": "1e-3 * exp(10 * C)"}}),
    }
    species, params, reactions = tables[kind]
    model = parse_model({"species": species, "parameters": params, "reactions": reactions}, "<test>")
    values = model.parameter_values
    return Case(compile_network(model), rate_constants(model, values), initial_counts(model, values))


class KernelConformance:
    """Shared contract of ``kernels.<method>.simulate``. Subclass once per method."""

    method: str = ""
    max_events = 100_000

    @pytest.fixture(scope="class")
    def kernel(self):
        return kernels.get(self.method)

    def run(self, kernel, case: Case, times, seed_list, max_events=None) -> KernelResult:
        cap = self.max_events if max_events is None else max_events
        return kernel.simulate(case.net, case.rates, case.x0, np.asarray(times, dtype=float), seed_list, cap)

    def test_shapes_and_dtypes(self, kernel):
        times = np.linspace(0.0, 5.0, 7)
        res = self.run(kernel, mixed_network(), times, seeds(3))
        assert isinstance(res, KernelResult)
        assert res.counts.shape == (3, 7, 3) and res.counts.dtype == np.int32
        assert res.status.shape == (3,) and res.status.dtype == np.int8
        assert res.events.shape == (3,) and res.events.dtype == np.int64

    def test_same_seeds_bit_identical(self, kernel):
        times = np.linspace(0.0, 20.0, 41)
        a = self.run(kernel, mixed_network(), times, seeds(20))
        b = self.run(kernel, mixed_network(), times, seeds(20))
        np.testing.assert_array_equal(a.counts, b.counts)
        np.testing.assert_array_equal(a.status, b.status)
        np.testing.assert_array_equal(a.events, b.events)

    def test_different_seeds_differ(self, kernel):
        # ~200 events per replicate: two streams giving equal paths would be a seeding bug
        times = np.linspace(0.0, 20.0, 41)
        res = self.run(kernel, immigration_death(), times, seeds(8))
        rows = {res.counts[i].tobytes() for i in range(8)}
        assert len(rows) == 8
        other_root = self.run(kernel, immigration_death(), times, seeds(8, root=ROOT + 1))
        assert not any(np.array_equal(res.counts[i], other_root.counts[i]) for i in range(8))
        other_point = self.run(kernel, immigration_death(), times, seeds(8, point=1))
        assert not any(np.array_equal(res.counts[i], other_point.counts[i]) for i in range(8))

    def test_compiled_streams_give_the_seed_sequences_results(self, kernel):
        """What a sweep's tasks pass (``Streams``, seeded compiled) equals the SeedSequence list."""
        from kernels.rng import Streams

        times = np.linspace(0.0, 20.0, 41)
        a = self.run(kernel, mixed_network(), times, Streams(ROOT, 3, 5, 17))
        b = self.run(kernel, mixed_network(), times, [np.random.SeedSequence(ROOT, spawn_key=(3, r))
                                                      for r in range(5, 17)])
        for got, want in zip(a, b):
            np.testing.assert_array_equal(got, want)

    def test_replicate_independent_of_block(self, kernel):
        times = np.linspace(0.0, 20.0, 41)
        s0, s1, s2 = seeds(3)
        case = mixed_network()
        block = self.run(kernel, case, times, [s0, s1, s2])
        alone = self.run(kernel, case, times, [s1])
        reordered = self.run(kernel, case, times, [s2, s1, s0])
        for other, row in ((alone, 0), (reordered, 1)):
            np.testing.assert_array_equal(block.counts[1], other.counts[row])
            assert block.status[1] == other.status[row]
            assert block.events[1] == other.events[row]
        np.testing.assert_array_equal(block.counts[0], reordered.counts[2])
        np.testing.assert_array_equal(block.counts[2], reordered.counts[0])

    def test_counts_non_negative(self, kernel):
        res = self.run(kernel, mixed_network(), np.linspace(0.0, 20.0, 41), seeds(200))
        assert (res.status == 0).all()
        assert (res.counts >= 0).all()
        assert (res.events > 0).all()

    def test_time_zero_sample_is_x0(self, kernel):
        case = mixed_network()
        res = self.run(kernel, case, np.linspace(0.0, 3.0, 4), seeds(50))
        np.testing.assert_array_equal(res.counts[:, 0, :], np.broadcast_to(case.x0, (50, 3)))

    def test_absorbing_state_holds(self, kernel):
        # A -> 0 from A = 3 with c = 1: P(not absorbed by t = 50) ~ 3 exp(-50). C takes part
        # in no reaction, so the held state (A, C) = (0, 7) is not all zeros.
        case = build({"A": 3, "C": 7}, {"decay": ("A -> 0", 1.0)})
        res = self.run(kernel, case, np.linspace(0.0, 50.0, 101), seeds(100))
        a = res.counts[:, :, 0]
        assert (res.status == 0).all()
        assert (res.events == 3).all()
        assert (a[:, -1] == 0).all()
        assert (np.diff(a, axis=1) <= 0).all()  # monotone, so once 0 it stays 0
        assert set(np.unique(a)) <= {0, 1, 2, 3}
        assert (res.counts[:, :, 1] == 7).all()

    def test_event_cap(self, kernel):
        # pure birth at rate 1 needs ~1000 events to reach t = 1000; the cap stops it at 10
        case = build({"A": 0}, {"birth": ("0 -> A", 1.0)})
        times = np.linspace(0.0, 1000.0, 2001)
        res = self.run(kernel, case, times, seeds(50), max_events=10)
        assert (res.status == 1).all()
        assert (res.events == 10).all()
        a = res.counts[:, :, 0]
        assert (a[:, 0] == 0).all()
        assert (a[:, -100:] == -1).all()
        for row in a:
            stopped = np.flatnonzero(row == -1)
            assert stopped.size and (stopped == np.arange(stopped[0], len(row))).all()  # -1 is a suffix
            valid = row[: stopped[0]]
            assert (valid >= 0).all() and (valid <= 10).all() and (np.diff(valid) >= 0).all()

    def test_zero_rates_hold_x0(self, kernel):
        case = build({"A": 5, "B": 3, "C": 0},
                     {"inflow": ("0 -> A", 0.0), "bind": ("A + B -> C", 0.0), "dimer": ("2 A -> B", 0.0)})
        res = self.run(kernel, case, np.linspace(0.0, 10.0, 11), seeds(5))
        assert (res.status == 0).all()
        assert (res.events == 0).all()
        np.testing.assert_array_equal(res.counts, np.broadcast_to(case.x0, (5, 11, 3)))

    @pytest.mark.parametrize("kind", ["mass_action", "divide_by_zero", "overflow", "later"])
    def test_infinite_propensity_is_a_numerical_failure(self, kernel, kind):
        # an infinite (or NaN) propensity has no meaningful next event or step: status 2 with every
        # sample -1, promptly, instead of a hang (tau-leaping looped forever on a NaN Poisson mean)
        # or garbage (the next reaction method fired an infinitely fast reaction at one instant)
        case = infinite_propensity(kind)
        # generous: the first call compiles the kernel and the law
        with time_bound(120, f"{self.method} on an infinite propensity ({kind})"):
            res = self.run(kernel, case, np.linspace(0.0, 5.0, 6), seeds(3), max_events=10_000_000)
        assert (res.status == 2).all(), res.status
        assert (res.counts == -1).all()
