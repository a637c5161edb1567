"""Mass-action propensities and the packed network program shared by the exact and leaping kernels.

``propensity`` evaluates one reaction's propensity from its kind code; ``program`` packs a
``Network`` into the one flat int64 array the event loops read. ``law_value`` is the hook for
custom rate laws: here it calls the model's compiled callback through its address (``None`` for a
mass-action model, which numba prunes), and a kernel specialised for a model's laws
(``kernels.ratelaw.specialised``) replaces it with the laws written inline.
"""

from __future__ import annotations

import numba
import numpy as np
from llvmlite import ir
from numba import types
from numba.extending import intrinsic

from kernels.ratelaw import call_law

# Propensity kinds of mass-action reactions. The common shapes get a branch of their own;
# anything else (3A, A + 2B, A + B + C, ...) goes through the general product.
_K_ZERO = 0  # 0 -> ...       a = c
_K_UNI = 1  # A -> ...        a = c A
_K_BI = 2  # A + B -> ...     a = c A B
_K_DIMER = 3  # 2A -> ...     a = c A(A-1)/2
_K_GEN = 4  # general         a = c prod_s C(X_s, m_s)
_K_LAW = 5  # custom law      a = law(j, x, p) (``kernels.ratelaw``), p1 = j

# Every index into the kernel's arrays is made unsigned: numba then skips the negative-index
# wraparound (a compare and a select per access) that it adds for signed indices, and the
# hot loop has one fewer live array length per indexed array. Mixing uint64 with a plain int
# literal gives float64 in numba, hence these typed constants.
_U0 = np.uint64(0)
_U1 = np.uint64(1)
_U2 = np.uint64(2)
_U3 = np.uint64(3)
_U4 = np.uint64(4)


@intrinsic
def float_bits(typingctx, value):
    """The bit pattern of a float64 as an int64 (a register move, no memory round trip).

    For doubles >= +0.0, +inf included, IEEE 754 makes the integer order the numeric order, and
    ``bits >> 52`` is the biased binary exponent.
    """
    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], ir.IntType(64))
    return types.int64(types.float64), codegen


@intrinsic
def bits_float(typingctx, value):
    """The float64 whose bit pattern is the given int64 (inverse of ``float_bits``)."""
    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], ir.DoubleType())
    return types.float64(types.int64), codegen


@numba.njit(inline="always", cache=True, error_model="numpy")
def law_value(law, j, x, p):
    """Propensity of custom-law reaction ``j`` on state ``x`` with parameters ``p``.

    ``law`` is the address of the model's compiled callback (``kernels.ratelaw.addresses``). A
    specialised kernel defines its own ``law_value`` with the laws inline (``kernels.ratelaw``).
    Callers test ``law is None`` (a mass-action model) themselves, in their own body, so that numba
    prunes the call: an opaque call that receives the state's pointer, even one never taken, stops
    LLVM from keeping the event loop in registers (measured 4x slower per event in the direct
    method), and numba does not prune that test reliably once it is inlined from here.
    """
    return call_law(law, j, x, p)


@numba.njit(inline="always", cache=True, error_model="numpy")
def propensity(kind, c, p1, p2, x, prog, law, rates):
    """Mass-action propensity counting distinct combinations: c * prod C(x_s, m_s).

    C(A, 2) = A(A-1)/2 and C(A, 3) = A(A-1)(A-2)/6 (Gillespie 1977). ``kind`` is one of the
    ``_K_*`` codes; ``p1``, ``p2`` (uint64) are the reactant species, or for ``_K_GEN`` ``p1`` is
    the offset in ``prog`` of the reactant list (count, then (species, multiplicity) pairs).
    The closed forms need no ``x < m`` test: with counts >= 0 they are 0 exactly then.
    A ``_K_LAW`` reaction evaluates the model's law for reaction ``p1`` with ``law_value``.
    """
    if kind == _K_UNI:
        return c * np.float64(x[p1])
    if kind == _K_BI:
        return c * np.float64(x[p1]) * np.float64(x[p2])
    if kind == _K_DIMER:
        n = np.float64(x[p1])
        return c * (0.5 * n * (n - 1.0))
    if kind == _K_ZERO:
        return c
    if kind == _K_LAW:
        if law is None:  # a mass-action model: numba prunes the branch here, in this function's own IR
            return 0.0
        return law_value(law, p1, x, rates)
    a = c
    q = p1 + _U1
    end = q + _U2 * np.uint64(prog[p1])
    while q < end:
        n = np.float64(x[np.uint64(prog[q])])
        m = prog[q + _U1]
        if n < m:
            return 0.0
        for i in range(m):
            a *= (n - i) / (i + 1.0)
        q += _U2
    return a


@numba.njit(cache=True, nogil=True, error_model="numpy")
def program(reactant_idx, reactant_mult, change_idx, change_val, dep_ptr, dep_idx, law_mask):
    """Pack the network into one flat int64 array read by the event loop.

    Layout (R reactions):

    - ``prog[j]``, j < R: offset of reaction j's firing block.
    - ``prog[R + 3j : R + 3j + 3]``: (kind, p1, p2) of reaction j's own propensity.
    - per reaction, its reactant list: count, then (species, multiplicity) pairs
      (read only for ``_K_GEN``).
    - per reaction, its firing block: n_change, n_dep, then n_change (species, net change)
      pairs, then n_dep (reaction, kind, p1, p2) quadruples of the reactions whose
      propensity depends on a species it changes (Gibson & Bruck 2000).

    One array instead of a dozen keeps the hot loop's live pointers few enough to stay in
    registers, and copying each dependent's propensity description into the firing block
    saves one dependent load per update on the event's serial chain.
    """
    n_r = reactant_idx.shape[0]
    kind = np.empty(n_r, np.int64)
    p1 = np.zeros(n_r, np.int64)
    p2 = np.zeros(n_r, np.int64)
    n_react = np.zeros(n_r, np.int64)
    n_change = np.zeros(n_r, np.int64)
    for j in range(n_r):
        for k in range(reactant_idx.shape[1]):
            if reactant_idx[j, k] < 0:
                break
            n_react[j] += 1
        for l in range(change_idx.shape[1]):
            if change_idx[j, l] < 0:
                break
            n_change[j] += 1
    size = 4 * n_r
    for j in range(n_r):
        size += 1 + 2 * n_react[j] + 2 + 2 * n_change[j] + 4 * (dep_ptr[j + 1] - dep_ptr[j])
    prog = np.zeros(size, np.int64)
    q = 4 * n_r
    for j in range(n_r):
        gen = q
        prog[q] = n_react[j]
        q += 1
        for k in range(n_react[j]):
            prog[q] = reactant_idx[j, k]
            prog[q + 1] = reactant_mult[j, k]
            q += 2
        nk = n_react[j]
        m0 = reactant_mult[j, 0] if nk > 0 else 0
        if law_mask[j]:
            kind[j] = _K_LAW
            p1[j] = j
        elif nk == 0:
            kind[j] = _K_ZERO
        elif nk == 1 and m0 == 1:
            kind[j] = _K_UNI
            p1[j] = reactant_idx[j, 0]
        elif nk == 1 and m0 == 2:
            kind[j] = _K_DIMER
            p1[j] = reactant_idx[j, 0]
        elif nk == 2 and m0 == 1 and reactant_mult[j, 1] == 1:
            kind[j] = _K_BI
            p1[j] = reactant_idx[j, 0]
            p2[j] = reactant_idx[j, 1]
        else:
            kind[j] = _K_GEN
            p1[j] = gen
        prog[n_r + 3 * j] = kind[j]
        prog[n_r + 3 * j + 1] = p1[j]
        prog[n_r + 3 * j + 2] = p2[j]
    for j in range(n_r):
        prog[j] = q
        prog[q] = n_change[j]
        prog[q + 1] = dep_ptr[j + 1] - dep_ptr[j]
        q += 2
        for l in range(n_change[j]):
            prog[q] = change_idx[j, l]
            prog[q + 1] = change_val[j, l]
            q += 2
        for d in range(dep_ptr[j], dep_ptr[j + 1]):
            r = dep_idx[d]
            prog[q] = r
            prog[q + 1] = kind[r]
            prog[q + 2] = p1[r]
            prog[q + 3] = p2[r]
            q += 4
    return prog
