"""Deterministic rate equations: the shared conformance tests (adapted where a deterministic,
real-valued method differs) plus closed-form solutions and the SSA mean of a linear network.

Tolerances: closed forms to rtol 1e-6 (the solver runs at rtol = atol = 1e-8); the one
statistical check uses 4 standard errors with fixed seeds.
"""

from __future__ import annotations

import numpy as np
import pytest
from support.kernel_conformance import KernelConformance, build, immigration_death, mixed_network, seeds
from scipy.integrate import solve_ivp

import kernels
from kernels import ode

CLOSED_RTOL = 1e-6
CAP = 100_000


def _solve(case, times, **kwargs):
    res = ode.simulate(case.net, case.rates, case.x0, np.asarray(times, dtype=float), seeds(1), CAP, **kwargs)
    assert res.status[0] == 0
    return res.counts[0]


class TestOde(KernelConformance):
    method = "ode"

    # --- conformance tests overridden, each with its reason ----------------------------------

    def test_shapes_and_dtypes(self, kernel):
        """As the base test, but counts are float64: the rate equations have a real-valued state
        (``ode.COUNTS_DTYPE``), which the store must honour instead of int32."""
        res = self.run(kernel, mixed_network(), np.linspace(0.0, 5.0, 7), seeds(3))
        assert ode.COUNTS_DTYPE == np.float64
        assert res.counts.shape == (3, 7, 3) and res.counts.dtype == np.float64
        assert res.status.shape == (3,) and res.status.dtype == np.int8
        assert res.events.shape == (3,) and res.events.dtype == np.int64

    def test_different_seeds_differ(self, kernel):
        """Replaces the base test: the method is deterministic, so every seed, root and point
        gives the same row (the sweep runs it with one replicate)."""
        times = np.linspace(0.0, 20.0, 41)
        res = self.run(kernel, immigration_death(), times, seeds(8))
        other = self.run(kernel, immigration_death(), times, seeds(3, root=7, point=5))
        for row in list(res.counts) + list(other.counts):
            np.testing.assert_array_equal(row, res.counts[0])
        assert (res.events == res.events[0]).all() and other.events[0] == res.events[0]

    def test_absorbing_state_holds(self, kernel):
        """A -> 0 (c = 1) from A = 3, C = 7 inert: A(t) = 3 exp(-t) (first-order decay, e.g.
        Atkins & de Paula, Physical Chemistry, 8th ed., Oxford University Press 2006; edition
        from memory), C stays 7. Replaces the base test, whose
        integer event counts do not apply."""
        case = build({"A": 3, "C": 7}, {"decay": ("A -> 0", 1.0)})
        times = np.linspace(0.0, 50.0, 101)
        res = self.run(kernel, case, times, seeds(2))
        assert (res.status == 0).all() and (res.events > 0).all()
        np.testing.assert_allclose(res.counts[0, :, 0], 3.0 * np.exp(-times), rtol=CLOSED_RTOL, atol=1e-7)
        assert (res.counts[:, :, 1] == 7.0).all()

    def test_event_cap(self, kernel):
        """``max_events`` caps right-hand-side evaluations. ``solve_ivp`` returns nothing from an
        aborted solve, so every sample after t = 0 is -1 (the base test expects a valid prefix)."""
        case = build({"A": 0}, {"birth": ("0 -> A", 1.0)})
        times = np.linspace(0.0, 1000.0, 2001)
        res = self.run(kernel, case, times, seeds(5), max_events=10)
        assert (res.status == 1).all() and (res.events == 10).all()
        assert (res.counts[:, 0, 0] == 0.0).all() and (res.counts[:, 1:, 0] == -1.0).all()

    # --- closed-form solutions ----------------------------------------------------------------

    @pytest.mark.parametrize("ode_method", ["LSODA", "BDF"])
    def test_isomerisation_closed_form(self, ode_method):
        """A <-> B (k1, k2) from A0: A(t) = A0 (k2 + k1 exp(-(k1 + k2) t)) / (k1 + k2), B = A0 - A.
        Reversible first-order kinetics (Atkins & de Paula, Physical Chemistry, 8th ed., Oxford University Press 2006; edition
        from memory). rtol 1e-6."""
        a0, k1, k2 = 1000, 1.0, 2.0
        case = build({"A": a0, "B": 0}, {"fwd": ("A -> B", k1), "back": ("B -> A", k2)})
        times = np.linspace(0.0, 5.0, 51)
        x = _solve(case, times, ode_method=ode_method)
        exact = a0 * (k2 + k1 * np.exp(-(k1 + k2) * times)) / (k1 + k2)
        np.testing.assert_allclose(x[:, 0], exact, rtol=CLOSED_RTOL)
        np.testing.assert_allclose(x[:, 1], a0 - exact, rtol=CLOSED_RTOL, atol=1e-6)

    def test_immigration_death_closed_form(self):
        """0 -> A (k), A -> 0 (g) from 0: A(t) = (k/g)(1 - exp(-g t)), the mean of the Poisson law
        (Jahnke & Huisinga 2007, J. Math. Biol. 54:1). rtol 1e-6 for t > 0; exactly 0 at t = 0."""
        k, g = 5.0, 0.5
        times = np.linspace(0.0, 30.0, 31)
        x = _solve(immigration_death(), times)
        assert x[0, 0] == 0.0
        np.testing.assert_allclose(x[1:, 0], k / g * (1.0 - np.exp(-g * times[1:])), rtol=CLOSED_RTOL)

    def test_dimerisation_uses_macroscopic_form(self):
        """2A <-> B (c1, c2) from A = 20: the solution equals a hand-written scipy solution of
        dA/dt = -2 (c1 A^2/2) + 2 c2 B, dB/dt = c1 A^2/2 - c2 B, the macroscopic mass-action law
        in molecule numbers (Kurtz 1972, J. Chem. Phys. 57:2976; c = 2k/(N_A V) for 2A, Gillespie
        1977). Stationary A = 10 (A^2 + 10A - 200 = 0). rtol 1e-6.

        Power: the combinatorial form c1 A(A-1)/2 settles at A = 10.34 (A^2 + 9A - 200 = 0),
        3% away, so the check tells the two apart.
        """
        c1, c2 = 0.1, 1.0
        case = build({"A": 20, "B": 0}, {"dimerise": ("2 A -> B", c1), "split": ("B -> 2 A", c2)})
        times = np.linspace(0.0, 5.0, 26)
        x = _solve(case, times)

        def macroscopic(t, y):
            forward, backward = c1 * y[0] ** 2 / 2.0, c2 * y[1]
            return [-2.0 * forward + 2.0 * backward, forward - backward]

        def combinatorial(t, y):
            forward, backward = c1 * y[0] * (y[0] - 1.0) / 2.0, c2 * y[1]
            return [-2.0 * forward + 2.0 * backward, forward - backward]

        kw = dict(t_eval=times, method="DOP853", rtol=1e-12, atol=1e-12)
        ref = solve_ivp(macroscopic, (0.0, times[-1]), [20.0, 0.0], **kw).y.T
        wrong = solve_ivp(combinatorial, (0.0, times[-1]), [20.0, 0.0], **kw).y.T
        np.testing.assert_allclose(x, ref, rtol=CLOSED_RTOL, atol=1e-7)
        assert abs(x[-1, 0] - 10.0) < 1e-5
        assert abs(wrong[-1, 0] - x[-1, 0]) > 0.3

    def test_second_and_third_order_closed_forms(self):
        """A + B -> C (c) from A0 = 30, B0 = 20: A(t) = D A0 / (A0 - B0 exp(-c D t)), D = A0 - B0;
        3A -> B (c) with rate c A^3/6, so dA/dt = -c A^3/2: A(t) = A0 / sqrt(1 + c A0^2 t).
        Integrated second- and third-order rate laws (Atkins & de Paula, Physical Chemistry, 8th ed., Oxford University Press 2006; edition
        from memory).
        rtol 1e-6."""
        times = np.linspace(0.0, 2.0, 21)
        c = 0.05
        x = _solve(build({"A": 30, "B": 20, "C": 0}, {"bind": ("A + B -> C", c)}), times)
        d = 10.0
        a = d * 30.0 / (30.0 - 20.0 * np.exp(-c * d * times))
        np.testing.assert_allclose(x[:, 0], a, rtol=CLOSED_RTOL)
        np.testing.assert_allclose(x[:, 1], a - d, rtol=CLOSED_RTOL)
        np.testing.assert_allclose(x[:, 2], 30.0 - a, rtol=CLOSED_RTOL, atol=1e-6)
        c = 1e-3
        x = _solve(build({"A": 50, "B": 0}, {"trimerise": ("3 A -> B", c)}), times)
        a = 50.0 / np.sqrt(1.0 + c * 50.0**2 * times)
        np.testing.assert_allclose(x[:, 0], a, rtol=CLOSED_RTOL)
        np.testing.assert_allclose(x[:, 1], (50.0 - a) / 3.0, rtol=CLOSED_RTOL, atol=1e-6)

    # --- the SSA mean of a first-order network -----------------------------------------------

    def test_linear_network_matches_ssa_mean(self):
        """0 -> A (20), A -> B (1), A -> 0 (0.5), B -> 0 (0.4) from A = 5, B = 30: for a
        first-order network the CME mean obeys the rate equations exactly (Jahnke & Huisinga
        2007, J. Math. Biol. 54:1), so the direct method's ensemble mean over 4000 replicates
        lies within 4 standard errors of the ODE at every time and species (10 checks; a false
        alarm has probability ~6e-4 overall, and the seeds are fixed)."""
        case = build({"A": 5, "B": 30},
                     {"inflow": ("0 -> A", 20.0), "convert": ("A -> B", 1.0),
                      "a_loss": ("A -> 0", 0.5), "b_loss": ("B -> 0", 0.4)})
        times = np.array([0.0, 0.5, 1.0, 2.0, 5.0, 10.0])
        x = _solve(case, times)
        ssa = kernels.get("direct").simulate(case.net, case.rates, case.x0, times, seeds(4000, root=31), CAP)
        assert (ssa.status == 0).all()
        mean = ssa.counts.mean(axis=0)
        se = ssa.counts.std(axis=0, ddof=1) / np.sqrt(4000)
        np.testing.assert_array_equal(x[0], case.x0)
        assert (np.abs(mean[1:] - x[1:]) < 4.0 * se[1:]).all(), (mean, x, se)

    # --- solver plumbing ----------------------------------------------------------------------

    def test_jacobian_matches_finite_differences(self):
        """The analytic Jacobian of the mixed network (every reaction order) against central
        differences of the right-hand side at a generic state; relative error < 1e-6."""
        case = mixed_network()
        system = ode._System(case.net, ode._scaled_rates(case.net, case.rates), case.rates, 10**9)
        x = np.array([7.3, 4.1, 2.2])
        eps = 1e-6
        numeric = np.column_stack([(system.rhs(0.0, x + eps * e) - system.rhs(0.0, x - eps * e)) / (2 * eps)
                                   for e in np.eye(3)])
        np.testing.assert_allclose(system.jac(0.0, x), numeric, rtol=1e-6, atol=1e-8)

    def test_bdf_agrees_with_lsoda(self):
        times = np.linspace(0.0, 20.0, 41)
        lsoda = _solve(mixed_network(), times)
        bdf = _solve(mixed_network(), times, ode_method="BDF")
        np.testing.assert_allclose(bdf, lsoda, rtol=1e-5, atol=1e-6)

    def test_events_are_rhs_evaluations(self):
        """``events`` equals scipy's own count of right-hand-side evaluations (``nfev``) for the
        same problem written by hand (bit-identical right-hand side and Jacobian)."""
        k, g = 5.0, 0.5
        times = np.linspace(0.0, 30.0, 31)
        res = ode.simulate(immigration_death().net, np.array([k, g]), np.array([0]), times, seeds(2), CAP)
        sol = solve_ivp(lambda t, y: np.array([k - g * y[0]]), (0.0, 30.0), [0.0], method="LSODA",
                        t_eval=times[1:], jac=lambda t, y: np.array([[-g]]), rtol=ode.RTOL, atol=ode.ATOL)
        assert (res.events == sol.nfev).all() and sol.nfev > 0

    def test_repeated_and_zero_times(self):
        case = immigration_death()
        x = _solve(case, [0.0, 0.0, 1.0, 1.0, 4.0])
        assert (x[:2] == 0.0).all()
        assert x[2, 0] == x[3, 0] > 0.0
        np.testing.assert_allclose(x[[2, 4], 0], 10.0 * (1.0 - np.exp(-0.5 * np.array([1.0, 4.0]))),
                                   rtol=CLOSED_RTOL)

    def test_blow_up_is_status_2(self):
        """2A -> 3A (c = 0.1) from 10: dA/dt = c A^2/2 blows up at t = 2/(c A0) = 2. The solve
        fails, so status 2 and every sample is -1."""
        case = build({"A": 10}, {"auto": ("2 A -> 3 A", 0.1)})
        for method in ode.ODE_METHODS:
            res = ode.simulate(case.net, case.rates, case.x0, np.linspace(0.0, 10.0, 11), seeds(2), CAP,
                               ode_method=method)
            assert (res.status == 2).all(), method
            assert (res.counts == -1.0).all()

    def test_unknown_method_raises(self):
        case = immigration_death()
        with pytest.raises(ValueError, match="ode_method"):
            ode.simulate(case.net, case.rates, case.x0, np.array([0.0, 1.0]), seeds(1), CAP, ode_method="RK45")

    def test_no_seeds_gives_empty_block(self):
        case = immigration_death()
        res = ode.simulate(case.net, case.rates, case.x0, np.array([0.0, 1.0]), [], CAP)
        assert res.counts.shape == (0, 2, 1) and res.status.shape == (0,) and res.events.shape == (0,)
