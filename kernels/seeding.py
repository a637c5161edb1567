"""Per-replicate generator states, compiled: ``SeedSequence(root, spawn_key=(p, r))`` in numba.

Replicate r of point p draws from a xoshiro256+ state equal to
``numpy.random.SeedSequence(root, spawn_key=(p, r)).generate_state(4, numpy.uint64)``.
Building 500 ``SeedSequence`` objects in Python costs about 13 µs each, the cost of hundreds
of reaction events; this module computes the same 256 bits with numpy's own hash (the
SeedSequence algorithm of numpy >= 1.19: a pool of four 32-bit words, ``hashmix`` and ``mix``
after O'Neill's seed_seq_fe, 2015) in tens of nanoseconds, for a whole block at once.

Entropy assembly follows numpy exactly: each integer becomes its little-endian 32-bit words
(0 becomes one zero word); with a spawn key the root's words are padded with zeros to the
pool size; then come the words of p and of r.
"""

from __future__ import annotations

import numba
import numpy as np

# The hash works on 32-bit words. numba widens uint32 arithmetic to 64 bits, so every word is
# held in a uint64 and cut back to 32 bits after each multiplication and subtraction.
_MASK32 = 0xFFFFFFFF
_M32 = np.uint64(_MASK32)
_INIT_A = np.uint64(0x43B0D7E5)
_MULT_A = np.uint64(0x931E8875)
_INIT_B = np.uint64(0x8B51F9DD)
_MULT_B = np.uint64(0x58F38DED)
_MIX_MULT_L = np.uint64(0xCA01F9DD)
_MIX_MULT_R = np.uint64(0x4973F715)
_XSHIFT = np.uint64(16)
_POOL = 4
_ZERO_STATE_FIX = np.uint64(0x9E3779B97F4A7C15)  # xoshiro's one fixed point (all zero) is avoided
MAX_KEY = 2**64 - 1  # root seed, point and replicate each fit two 32-bit words


@numba.njit(inline="always", cache=True)
def _hashmix(value, hash_const):
    value ^= hash_const
    hash_const = (hash_const * _MULT_A) & _M32
    value = (value * hash_const) & _M32
    value ^= value >> _XSHIFT
    return value, hash_const


@numba.njit(inline="always", cache=True)
def _mix(x, y):
    result = (_MIX_MULT_L * x - _MIX_MULT_R * y) & _M32  # modulo 2**64, then 2**32: the same bits
    result ^= result >> _XSHIFT
    return result


@numba.njit(cache=True, nogil=True)
def _words(n, out, at):
    """Write the little-endian 32-bit words of ``n`` (uint64) at ``out[at:]``; return the new end."""
    if n == 0:
        out[at] = 0
        return at + 1
    while n > 0:
        out[at] = n & _M32
        n >>= np.uint64(32)
        at += 1
    return at


@numba.njit(cache=True, nogil=True)
def _state(root_lo, root_hi, point, replicate, entropy, pool, out):
    """One replicate's 4 x uint64 state into ``out`` (``entropy``, ``pool``: scratch of 8 and 4 words,
    one per uint64)."""
    entropy[0] = root_lo
    entropy[1] = root_hi
    entropy[2] = 0
    entropy[3] = 0
    n = _words(point, entropy, _POOL)
    n = _words(replicate, entropy, n)
    h = _INIT_A
    for i in range(_POOL):
        pool[i], h = _hashmix(entropy[i], h)
    for i_src in range(_POOL):
        for i_dst in range(_POOL):
            if i_src != i_dst:
                v, h = _hashmix(pool[i_src], h)
                pool[i_dst] = _mix(pool[i_dst], v)
    for i_src in range(_POOL, n):
        for i_dst in range(_POOL):
            v, h = _hashmix(entropy[i_src], h)
            pool[i_dst] = _mix(pool[i_dst], v)
    hb = _INIT_B
    zero = True
    for k in range(4):
        lo = pool[(2 * k) % _POOL] ^ hb
        hb = (hb * _MULT_B) & _M32
        lo = (lo * hb) & _M32
        lo ^= lo >> _XSHIFT
        hi = pool[(2 * k + 1) % _POOL] ^ hb
        hb = (hb * _MULT_B) & _M32
        hi = (hi * hb) & _M32
        hi ^= hi >> _XSHIFT
        out[k] = lo | (hi << np.uint64(32))
        if out[k] != 0:
            zero = False
    if zero:
        out[0] = _ZERO_STATE_FIX


@numba.njit(cache=True, nogil=True)
def _block(root_lo, root_hi, point, start, stop, out):
    entropy = np.empty(8, np.uint64)
    pool = np.empty(_POOL, np.uint64)
    for i in range(stop - start):
        _state(root_lo, root_hi, np.uint64(point), np.uint64(start) + np.uint64(i), entropy, pool, out[i])


def replicate_states(root: int, point: int, start: int, stop: int) -> np.ndarray:
    """The xoshiro256+ states of replicates ``start:stop`` of ``point``, shape (n, 4) uint64.

    Row i equals ``SeedSequence(root, spawn_key=(point, start + i)).generate_state(4, uint64)``
    (with an all-zero state, which never occurs in practice, replaced as ``rng.seed_states`` does).

    Raises
    ------
    ValueError
        If a value is negative or does not fit 64 bits.

    Example
    -------
    >>> replicate_states(7, 2, 0, 3).shape
    (3, 4)
    """
    for name, value in (("root", root), ("point", point), ("start", start), ("stop", stop)):
        if not 0 <= int(value) <= MAX_KEY:
            raise ValueError(f"{name} = {value}: must be a whole number in 0 .. 2**64 - 1")
    if stop < start:
        raise ValueError(f"stop = {stop} < start = {start}")
    out = np.empty((stop - start, 4), dtype=np.uint64)
    root = int(root)
    _block(np.uint64(root & _MASK32), np.uint64(root >> 32), np.uint64(point), np.uint64(start),
           np.uint64(stop), out)
    return out
