"""The data of interventions, as the kernels take them (no numba: ``sweep check`` builds schedules).

A ``Schedule`` is plain arrays for one parameter point (``sweep.model.schedule`` builds it from a
spec): the sorted instants of the timed changes, each with a slice of a small program of
operations, and the state-triggered events (a species compared with a threshold), each with its
own slice of the same program. ``kernels.changes`` runs them.
"""

from __future__ import annotations

from typing import NamedTuple, Sequence

import numpy as np

SET, ADD, SUB, KEEP, RATE = 0, 1, 2, 3, 4
OPERATIONS = {"set": SET, "add": ADD, "subtract": SUB, "keep": KEEP, "rate": RATE}
GE, GT, LE, LT = 0, 1, 2, 3  # comparisons of a state-triggered condition
COMPARISONS = {">=": GE, ">": GT, "<=": LE, "<": LT}

Operation = tuple[int, int, float]  # (kind, target index, value)


class Schedule(NamedTuple):
    """The interventions of one point, as the kernels take them.

    Attributes
    ----------
    times : float64 (C,)
        Sorted instants of timed changes, each once (a repeated change appears at every instant).
    ptr : int64 (C + 1,)
        Operations of instant c: ``ptr[c]:ptr[c + 1]``.
    kind, target : int64 (N,)
        Operation code (``SET`` ...) and its species index (or rate index for ``RATE``).
    value : float64 (N,)
        Its amount, survival probability or new rate.
    w_species, w_op : int64 (W,)
        State-triggered events: the species and comparison (``GE`` ...) of each condition.
    w_value : float64 (W,)
        The threshold.
    w_repeat : int64 (W,)
        1: fires each time the condition becomes true again; 0: once.
    w_ptr : int64 (W + 1,)
        Operations of event w: ``w_ptr[w]:w_ptr[w + 1]`` (into the same arrays, after the timed ones).
    """

    times: np.ndarray
    ptr: np.ndarray
    kind: np.ndarray
    target: np.ndarray
    value: np.ndarray
    w_species: np.ndarray
    w_op: np.ndarray
    w_value: np.ndarray
    w_repeat: np.ndarray
    w_ptr: np.ndarray

    @property
    def n_watch(self) -> int:
        return int(self.w_species.shape[0])

    @property
    def changes_rates(self) -> bool:
        return bool(np.any(self.kind == RATE))


def schedule(timed: Sequence[tuple[float, Sequence[Operation]]] = (),
             watches: Sequence[tuple[int, int, float, bool, Sequence[Operation]]] = ()) -> Schedule:
    """Build a ``Schedule`` from ``(time, operations)`` pairs and ``(species, comparison, threshold,
    repeat, operations)`` events. Pairs at the same time are merged in the order given.

    Example
    -------
    >>> s = schedule([(60.0, [(RATE, 0, 5.0)]), (180.0, [(RATE, 0, 1.0)])])
    >>> s.times.tolist(), s.ptr.tolist()
    ([60.0, 180.0], [0, 1, 2])
    """
    instants: dict[float, list[Operation]] = {}
    for t, ops in sorted(timed, key=lambda pair: float(pair[0])):  # stable: equal times keep their order
        instants.setdefault(float(t), []).extend(ops)
    program: list[Operation] = []
    ptr = [0]
    for t in sorted(instants):
        program.extend(instants[t])
        ptr.append(len(program))
    w_ptr = [len(program)]
    for _, _, _, _, ops in watches:
        program.extend(ops)
        w_ptr.append(len(program))
    kinds = np.array([op[0] for op in program], dtype=np.int64)
    return Schedule(
        np.array(sorted(instants), dtype=np.float64), np.array(ptr, dtype=np.int64), kinds,
        np.array([op[1] for op in program], dtype=np.int64), np.array([op[2] for op in program], dtype=np.float64),
        np.array([w[0] for w in watches], dtype=np.int64), np.array([w[1] for w in watches], dtype=np.int64),
        np.array([w[2] for w in watches], dtype=np.float64), np.array([int(bool(w[3])) for w in watches], dtype=np.int64),
        np.array(w_ptr, dtype=np.int64))


# What a kernel loop receives: (species, comparison, threshold, repeat, armed, stop time (1,)).
Watch = tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]


def no_watch() -> Watch:
    """The watch of a run without state-triggered events (the loops then never look at it)."""
    return (np.empty(0, np.int64), np.empty(0, np.int64), np.empty(0), np.empty(0, np.int64),
            np.empty(0, np.int64), np.full(1, np.nan))


def watch_of(s: Schedule, armed: np.ndarray) -> Watch:
    return s.w_species, s.w_op, s.w_value, s.w_repeat, armed, np.full(1, np.nan)
