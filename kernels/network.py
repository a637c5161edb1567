"""Plain-array description of a reaction network, shared by every kernel.

Kernels see only these arrays (no names, no files). ``sweep.model`` builds them.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, NamedTuple

import numpy as np

if TYPE_CHECKING:
    from kernels.ratelaw import RateLaw


class Network(NamedTuple):
    """A reaction network as padded integer arrays, plus its custom rate laws if any.

    Attributes
    ----------
    reactant_idx : int32 (R, K)
        Species index of each distinct reactant of reaction j, padded with -1.
    reactant_mult : int32 (R, K)
        Its multiplicity (2 for ``2 A``), 0 in padding.
    change_idx : int32 (R, L)
        Species whose count reaction j changes, padded with -1.
    change_val : int32 (R, L)
        The net change of each of those species.
    dep_ptr : int32 (R + 1,)
        CSR row pointers of the dependency graph: reactions whose propensity
        must be recomputed after reaction j fires are
        ``dep_idx[dep_ptr[j]:dep_ptr[j + 1]]`` (Gibson & Bruck 2000).
    dep_idx : int32 (nnz,)
        CSR column indices of the dependency graph.
    law_mask : int8 (R,)
        1 where reaction j's propensity is a custom law (``law``), 0 for mass action.
    law : RateLaw or None
        The generated callbacks of the custom laws (``kernels.ratelaw``). With laws, a kernel's
        ``rates`` holds the R mass-action constants followed by the parameters the laws read.
    time_slot : int
        Where a law reads the time (``sweep.model.tables.TIME``, from SBML's time csymbol): the
        deterministic method writes t into ``rates[time_slot]`` before evaluating the laws; -1
        when no law reads it. Only the ODE honours it (a spec refuses it for the other methods).
    """

    reactant_idx: np.ndarray
    reactant_mult: np.ndarray
    change_idx: np.ndarray
    change_val: np.ndarray
    dep_ptr: np.ndarray
    dep_idx: np.ndarray
    law_mask: np.ndarray
    law: RateLaw | None = None
    time_slot: int = -1  # index in ``rates`` the ODE sets to t before each law call (-1: no law reads time)

    @property
    def n_reactions(self) -> int:
        return int(self.reactant_idx.shape[0])

    @property
    def arrays(self) -> tuple[np.ndarray, ...]:
        """The seven arrays, in field order, as the compiled kernels take them."""
        return tuple(self[:7])


class KernelResult(NamedTuple):
    """What one call of a kernel's ``simulate`` returns for a block of replicates.

    Attributes
    ----------
    counts : int32 (n, T, S)
        State sampled on the time grid; -1 after a replicate stopped early.
    status : int8 (n,)
        0 finished, 1 stopped at the event cap, 2 numerical failure.
    events : int64 (n,)
        Reaction events fired by each replicate.
    """

    counts: np.ndarray
    status: np.ndarray
    events: np.ndarray


class Trace(NamedTuple):
    """Full event log of one replicate (for ``sweep trace`` and tests).

    ``times[i]`` and ``reactions[i]`` are the time and index of event i; ``states[i]``
    is the state just after it. ``result`` is what ``simulate`` gives for the same seed.
    """

    times: np.ndarray
    reactions: np.ndarray
    states: np.ndarray
    result: KernelResult


STATUS_FINISHED = 0
STATUS_EVENT_CAP = 1
STATUS_NUMERICAL = 2
# internal to a run with state-triggered events (``kernels.changes``): the loop stopped right after
# the event or step that made an armed condition true; never stored
STATUS_STOPPED = 3
