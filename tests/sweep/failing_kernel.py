"""A kernel for tests: every replicate ends in a numerical failure (status 2, every sample -1).

It stands for a model whose propensities overflow or divide by zero everywhere; the block it
returns equals the arrays' fill value, which zarr would not write unless told to.
Registered by tests under the method name "failing".
"""

from __future__ import annotations

import numpy as np

from kernels.network import STATUS_NUMERICAL, KernelResult


def simulate(network, rates, x0, times, seeds, max_events):
    n = len(seeds)
    return KernelResult(np.full((n, len(times), len(x0)), -1, dtype=np.int32),
                        np.full(n, STATUS_NUMERICAL, dtype=np.int8), np.zeros(n, dtype=np.int64))
