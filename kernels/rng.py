"""xoshiro256+ random numbers inside numba kernels (Blackman & Vigna 2018).

Each replicate owns a 4-word state seeded from ``numpy.random.SeedSequence(root,
spawn_key=(point, replicate))``. A generator inlined into the kernel costs about a
nanosecond per draw, several times less than calling a ``numpy.random.Generator`` from
numba, and the event loop of an exact method draws two numbers per event.
"""

from __future__ import annotations

from typing import NamedTuple, Sequence

import numba
import numpy as np

_U53 = 1.0 / 9007199254740992.0  # 2**-53


class Streams(NamedTuple):
    """The streams of replicates ``start:stop`` of ``point`` under root seed ``root``.

    Stands for ``[SeedSequence(root, spawn_key=(point, r)) for r in range(start, stop)]`` as a
    kernel's ``seeds`` argument, with the states computed compiled (``kernels.seeding``).
    """

    root: int
    point: int
    start: int
    stop: int

    def __len__(self) -> int:  # type: ignore[override]  (as many seeds as replicates)
        return self.stop - self.start


def seed_states(seeds: Streams | Sequence[np.random.SeedSequence]) -> np.ndarray:
    """Return one xoshiro256+ state per seed, shape (n, 4) uint64.

    A state of all zeros is the one fixed point of the generator; ``SeedSequence``
    output is hashed, so it never occurs in practice, but it is guarded anyway.
    """
    if isinstance(seeds, Streams):
        from kernels.seeding import replicate_states

        return replicate_states(*seeds)
    states = np.empty((len(seeds), 4), dtype=np.uint64)
    for i, seq in enumerate(seeds):
        states[i] = seq.generate_state(4, np.uint64)
        if not states[i].any():
            states[i, 0] = np.uint64(0x9E3779B97F4A7C15)
    return states


@numba.njit(inline="always", cache=True)
def _rotl(x, k):
    return (x << np.uint64(k)) | (x >> np.uint64(64 - k))


@numba.njit(inline="always", cache=True)
def next_words(s0, s1, s2, s3):
    """One xoshiro256+ step on a state held in four scalars.

    Returns ``(output, s0, s1, s2, s3)``. A kernel that keeps its state in local variables
    lets LLVM hold it in registers (or spill it once) instead of loading and storing an
    array, which it cannot prove is not aliased by the kernel's other arrays.
    """
    result = s0 + s3
    t = s1 << np.uint64(17)
    s2 ^= s0
    s3 ^= s1
    s1 ^= s2
    s0 ^= s3
    s2 ^= t
    s3 = _rotl(s3, 45)
    return result, s0, s1, s2, s3


@numba.njit(inline="always", cache=True)
def to_open0(r):
    """Map a 64-bit output to a double in (0, 1] from its top 53 bits (never 0: ``log`` is safe).

    The shifted value is below 2**53, so it goes through int64: a signed conversion is one
    instruction on every x86-64, an unsigned one needs a multi-instruction sequence before AVX-512.
    """
    return np.float64(np.int64(r >> np.uint64(11)) + 1) * _U53


@numba.njit(inline="always", cache=True)
def to_unit(r):
    """Map a 64-bit output to a double in [0, 1) from its top 53 bits (see ``to_open0``)."""
    return np.float64(np.int64(r >> np.uint64(11))) * _U53


@numba.njit(inline="always", cache=True)
def next_u64(s):
    """Advance state ``s`` (uint64[4]) in place and return the next 64-bit output."""
    result, s[0], s[1], s[2], s[3] = next_words(s[0], s[1], s[2], s[3])
    return result


@numba.njit(inline="always", cache=True)
def uniform_open0(s):
    """Uniform double in (0, 1] from the top 53 bits (never 0, so ``log`` is safe)."""
    return to_open0(next_u64(s))


@numba.njit(inline="always", cache=True)
def uniform(s):
    """Uniform double in [0, 1) from the top 53 bits."""
    return to_unit(next_u64(s))
