"""One point's interventions as the kernels take them: a ``kernels.interventions.Schedule``.

``build`` is pure: the model, its checked interventions (``sweep.model.changes``), the spec's
derived parameters and one point's values in, a Schedule out. It resolves parameter-valued
fields at the point, expands repeats up to the end time, maps species to indices and turns
each ``set`` of a parameter into ``RATE`` operations on the kernel's rate vector.

A parameter reaches the rate vector through the model's conversion (molar constants times
N_A V factors, SBML's derived ``<reaction>__c`` parameters, the parameters a law reads after
the R reaction constants), so the new entries are computed the way the run computes them:
``rate_constants`` of the point's values with the set applied and the derived parameters
recomputed. A RATE operation is emitted for every entry that reads the set parameter
(directly or through derived ones), whether or not its value moves, because an earlier
change may have moved it. Timed changes are applied in time order here exactly as the
kernel will, so an entry reading two parameters set at different instants gets the right
value at each; a state-triggered change fires at a time known only during the run, so an
entry it writes must read no other parameter that any change sets (``check`` refuses that).
"""

from __future__ import annotations

import math
from typing import Any, Mapping, Sequence

import numpy as np

from kernels import interventions as kc
from sweep.errors import SpecError
from sweep.model import expr as expressions
from sweep.model.changes import Change, Intervention, Step, Trigger, bounds_problem, referenced
from sweep.model.tables import TIME, Model, rate_constants
from sweep.spec import limits

Derived = Sequence[tuple[str, expressions.Expr]]
_CODES = {"set": kc.SET, "add": kc.ADD, "subtract": kc.SUB, "keep": kc.KEEP}


def build(model: Model, listed: Sequence[Intervention], derived: Derived, values: Mapping[str, float],
          end: float) -> kc.Schedule | None:
    """The Schedule of one point (None when there are no interventions: the kernels' plain path).

    Raises
    ------
    SpecError
        A parameter-valued field out of its bounds at this point, more than
        ``limits.MAX_INSTANTS`` instants, or a negative rate constant after a set.

    Example
    -------
    >>> s = build(model, model.interventions, (), model.parameter_values, 600.0)
    >>> s.times.tolist()
    [60.0]
    """
    if not listed:
        return None
    index = {name: i for i, name in enumerate(model.species)}
    readers = _readers(model, derived)
    base = dict(values)
    timed = _instants(listed, values, end)
    current = dict(values)
    pairs = []
    for t, item in timed:
        pairs.append((t, _operations(item.steps, item, current, model, derived, index, readers)))
    watches = []
    for item in listed:
        if isinstance(item, Trigger):
            threshold = _resolve(item.threshold, values, item, item.field + " (threshold)", None, None)
            ops = _operations(item.steps, item, dict(base), model, derived, index, readers)
            watches.append((index[item.species], kc.COMPARISONS[item.compare], threshold, item.repeat, ops))
    return kc.schedule(pairs, watches)


def _readers(model: Model, derived: Derived) -> dict[str, list[int]]:
    """For each parameter, the entries of the rate vector that read it (through derived ones too)."""
    deps = _depends(derived)
    names = [r.rate if isinstance(r.rate, str) and r.propensity is None else None for r in model.reactions]
    names += list(model.law_parameters)
    out: dict[str, list[int]] = {}
    for e, name in enumerate(names):
        if name is not None:
            for p in deps(name):
                out.setdefault(p, []).append(e)
    return out


def _depends(derived: Derived):
    """name -> the parameters its value depends on (itself, and through derived ones)."""
    formulas = dict(derived)
    memo: dict[str, frozenset[str]] = {}

    def deps(name: str) -> frozenset[str]:
        if name not in memo:
            memo[name] = frozenset()  # derived parameters are acyclic (sweep.spec refuses a cycle)
            found = {name}
            if name in formulas:
                for used in formulas[name].names:
                    found |= deps(used)
            memo[name] = frozenset(found)
        return memo[name]

    return deps


def _instants(listed: Sequence[Intervention], values: Mapping[str, float], end: float) -> list[tuple[float, Change]]:
    """Every occurrence at or before ``end``, in time order (equal times in the order listed)."""
    out: list[tuple[float, Change]] = []
    for item in listed:
        if not isinstance(item, Change):
            continue
        at = _resolve(item.at, values, item, f"{item.field}.at", 0.0, None)
        if at > end:
            continue  # after the last sample: it could not show (sweep check says so)
        n = 1
        if item.every is not None:
            every = _resolve(item.every, values, item, f"{item.field}.every", 0.0, None, strict=True)
            span = (end - at) / every  # may overflow to inf for a tiny period: refused just below
            n = math.floor(span) + 1 if span <= limits.MAX_INSTANTS else limits.MAX_INSTANTS + 1
            if item.count is not None:
                n = min(n, int(_resolve(item.count, values, item, f"{item.field}.count", 1.0, None, whole=True)))
        if len(out) + n > limits.MAX_INSTANTS:
            raise SpecError(item.source, item.field, f"more than {limits.MAX_INSTANTS:,} change instants up to "
                            f"t = {end:g}", fix="a longer period, a count, or fewer changes")
        # at + k * every, not a running sum: the instants do not drift
        out.extend((at + k * every, item) for k in range(n)) if n > 1 else out.append((at, item))
    out.sort(key=lambda pair: pair[0])  # stable
    return out


def _operations(steps: Sequence[Step], item: Intervention, current: dict[str, float], model: Model,
                derived: Derived, index: Mapping[str, int], readers: Mapping[str, list[int]]) -> list[kc.Operation]:
    """The kernel operations of one occurrence; ``current`` carries parameter sets forward in time."""
    ops: list[kc.Operation] = []
    before = dict(current)  # every value is read as it was just before the change (SBML's rule too)
    for step in steps:
        if step.target in index:
            lo, hi = (0.0, 1.0) if step.kind == "keep" else (0.0, None)
            v = _resolve(step.value, before, item, step.field, lo, hi, whole=step.kind != "keep")
            ops.append((_CODES[step.kind], index[step.target], v))
            continue
        current[step.target] = _resolve(step.value, before, item, step.field, None, None)
        for name, formula in derived:
            current[name] = float(expressions.evaluate(formula, current))
        rates = rate_constants(model, current)
        for e in readers.get(step.target, []):
            if not (np.isfinite(rates[e]) and (rates[e] >= 0 or e >= len(model.reactions))):
                raise SpecError(item.source, step.field, f"gives rate entry {e} the value {rates[e]:g}",
                                fix="a rate constant must be finite and >= 0")
            ops.append((kc.RATE, e, float(rates[e])))
    return ops


def _resolve(value: float | str, values: Mapping[str, float], item: Intervention, field: str,
             lo: float | None, hi: float | None, strict: bool = False, whole: bool = False) -> float:
    v = float(values[value]) if isinstance(value, str) else float(value)
    if not math.isfinite(v):
        problem = "must be finite"
    else:
        problem = bounds_problem(v, lo, hi, strict, whole)
    if problem and isinstance(value, str):
        raise SpecError(item.source, field, f"{value} = {v:g} at a point of the design: {problem}",
                        fix=f"keep {value} within the bounds of this field, in the design and [parameters]")
    if problem:
        raise SpecError(item.source, field, problem, v)
    return v


def check(model: Model, listed: Sequence[Intervention], derived: Derived, columns: Mapping[str, Any],
          n_points: int, end: float, most: int = 2000) -> list[tuple[str, str]]:
    """Refuse what no point can run, build the schedule at up to ``most`` distinct points, and return
    notes for ``sweep check`` (changes after the end, which are dropped).

    ``columns`` is ``Spec.columns(points)``: every parameter's value, a float or one per point.
    """
    if not listed:
        return []
    readers = _readers(model, derived)
    formulas = {name for name, _ in derived}
    for item in listed:
        for step in item.steps:
            if step.target in model.species:
                continue
            if step.target in formulas or step.target == TIME:
                raise SpecError(item.source, step.field, f"{step.target} is computed at each point (derived)",
                                fix="set the parameters it is computed from")
            if step.target not in readers:
                raise SpecError(item.source, step.field, f"no reaction rate or law reads {step.target}, so setting "
                                "it changes nothing", fix="set a parameter a reaction reads, or a species")
    _check_conflicts(listed, readers)
    _check_trigger_values(listed, derived)
    found = notes(listed, columns, n_points, end)
    names = sorted(referenced(tuple(listed)) | {p for item in listed for s in item.steps for p in [s.target]
                                                if p in readers})
    table = np.column_stack([np.broadcast_to(np.asarray(columns[n], dtype=np.float64), (n_points,))
                             for n in names]) if names and n_points else np.zeros((min(n_points, 1), 0))
    rows = np.unique(table, axis=0, return_index=True)[1] if table.shape[1] else np.arange(min(n_points, 1))
    for p in sorted(rows)[:most]:
        values = {k: (float(np.broadcast_to(np.asarray(v, dtype=np.float64), (n_points,))[p])) for k, v in
                  columns.items()}
        build(model, listed, derived, values, end)
    return found


def _check_conflicts(listed: Sequence[Intervention], readers: Mapping[str, list[int]]) -> None:
    """An entry a state-triggered change writes must read no other parameter any change sets."""
    set_params: dict[str, list[Intervention]] = {}
    for item in listed:
        for s in item.steps:
            if s.target in readers:
                set_params.setdefault(s.target, []).append(item)
    by_entry: dict[int, set[str]] = {}
    for p in set_params:
        for e in readers[p]:
            by_entry.setdefault(e, set()).add(p)
    for e, params in by_entry.items():
        if len(params) < 2:
            continue
        for p in sorted(params):
            trig = next((i for i in set_params[p] if isinstance(i, Trigger)), None)
            if trig is not None:
                others = ", ".join(sorted(params - {p}))
                raise SpecError(trig.source, f"{trig.field}.set.{p}", f"rate entry {e} reads {p} and also "
                                f"{others}, which another change sets; this change fires at a time known only "
                                "during the run, so the entry's new value cannot be computed beforehand",
                                fix=f"set {p} and {others} in the same changes, or split the rate")


def _check_trigger_values(listed: Sequence[Intervention], derived: Derived) -> None:
    """A triggered change's values are read at the point's values before the run; refuse one that
    depends on a parameter some change sets (its value at the firing is known only during the run)."""
    deps = _depends(derived)
    changed = {s.target for item in listed for s in item.steps if s.kind == "set"}
    for item in listed:
        if not isinstance(item, Trigger):
            continue
        fields = [(s.field, s.value) for s in item.steps] + [(f"{item.field}.condition", item.threshold)]
        for field, value in fields:
            moved = sorted(deps(value) & changed) if isinstance(value, str) else []
            if moved:
                raise SpecError(item.source, field, f"{value} depends on {', '.join(moved)}, which a change sets; "
                                "a triggered change fires at a time known only during the run",
                                fix="give a number, or a parameter no change sets")


def notes(listed: Sequence[Intervention], columns: Mapping[str, Any], n_points: int,
           end: float) -> list[tuple[str, str]]:
    notes = []
    for item in listed:
        if not isinstance(item, Change):
            continue
        at = np.asarray(columns[item.at] if isinstance(item.at, str) else item.at, dtype=np.float64)
        late = int(np.count_nonzero(np.broadcast_to(at, (max(n_points, 1),)) > end))
        if late:
            where = "at every point" if late >= n_points else f"at {late:,} of {n_points:,} points"
            notes.append((f"{item.source}: {item.field}.at", f"after the end t = {end:g} {where}: dropped there"))
    return notes
