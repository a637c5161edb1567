"""Compiled per-replicate seeding equals numpy's SeedSequence, bit for bit.

Reference: ``numpy.random.SeedSequence`` (NumPy >= 1.19, the open reference implementation of the
algorithm, after O'Neill's seed_seq_fe, 2015): replicate r of point p must get exactly
``SeedSequence(root, spawn_key=(p, r)).generate_state(4, uint64)``, or stores written before the
compiled seeding would no longer trace and resume identically.
"""

from __future__ import annotations

import numpy as np
import pytest

from kernels.rng import seed_states
from kernels.seeding import MAX_KEY, replicate_states


def _numpy_states(root: int, point: int, start: int, stop: int) -> np.ndarray:
    return seed_states([np.random.SeedSequence(root, spawn_key=(point, r)) for r in range(start, stop)])


EDGES = [0, 1, 2, 255, 2**31 - 1, 2**31, 2**32 - 1, 2**32, 2**32 + 1, 2**53, 2**63 - 1, 2**63, 2**64 - 2]


@pytest.mark.parametrize("root", EDGES + [20261202])
def test_edge_values_of_root_point_and_replicate(root):
    for point in EDGES:
        start = min(EDGES[(EDGES.index(point) * 7) % len(EDGES)], MAX_KEY - 2)
        np.testing.assert_array_equal(replicate_states(root, point, start, start + 2),
                                      _numpy_states(root, point, start, start + 2), err_msg=f"{root} {point} {start}")


def test_many_random_keys():
    rng = np.random.default_rng(20261202)
    for _ in range(400):
        bits = rng.integers(1, 65, size=3)
        root, point, start = (int(rng.integers(0, 2**int(b) - 1, endpoint=True, dtype=np.uint64)) for b in bits)
        start = min(start, MAX_KEY - 8)
        np.testing.assert_array_equal(replicate_states(root, point, start, start + 8),
                                      _numpy_states(root, point, start, start + 8), err_msg=f"{root} {point} {start}")


def test_a_block_of_a_real_sweep():
    np.testing.assert_array_equal(replicate_states(99, 3, 0, 500), _numpy_states(99, 3, 0, 500))


def test_out_of_range_keys_are_refused():
    with pytest.raises(ValueError, match="2\\*\\*64"):
        replicate_states(-1, 0, 0, 1)
    with pytest.raises(ValueError, match="2\\*\\*64"):
        replicate_states(0, 2**64, 0, 1)
