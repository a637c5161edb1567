"""A kernel for tests: the direct method, except that it raises in one parameter region.

It stands for a numerical failure that a real kernel could meet in a stiff or explosive
corner of parameter space. Registered by tests under the method name "faulty".
"""

from __future__ import annotations

from kernels import direct

FAIL_ABOVE = 350.0  # rate constant of the first reaction above which every call fails


def simulate(network, rates, x0, times, seeds, max_events):
    if rates[0] > FAIL_ABOVE:
        raise FloatingPointError(f"step size underflow at rate {rates[0]:g}")
    return direct.simulate(network, rates, x0, times, seeds, max_events)
