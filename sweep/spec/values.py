"""The values a sweep gives its parameters at every point, checked before anything runs.

Rates must be finite and >= 0. Initial counts must be whole, >= 0 and within what the method's
store holds: int32 for the integer-state methods (direct, nrm, tau_leap), any finite number for
the methods whose kernel module declares a real-valued state (``COUNTS_DTYPE = float64``: cle,
ode). Derived parameters must be finite at every point. ``sweep.spec.from_text`` calls
``check_points`` last, once the design is known to be small enough to expand.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

import kernels
from sweep.spec import limits
from sweep.design import describe
from sweep.errors import SpecError

if TYPE_CHECKING:
    from sweep.spec import Spec


def check_points(spec: Spec, src: str, model_where: tuple[str, str]) -> None:
    """Every point must give non-negative rates and whole, non-negative initial counts that the
    method's store can hold (``_count_limit``).

    ``model_where`` is the file holding the model and the dotted prefix of its tables there, for
    errors in the model's own values.

    Raises
    ------
    SpecError
        Naming the field that gives the value: the model's species or parameter, ``parameters.X``,
        ``design.vary.X`` or ``derived.X``.
    """
    rate_params = {r.rate for r in spec.model.reactions if isinstance(r.rate, str)}
    count_params = {v for v in spec.model.initial if isinstance(v, str)}
    roles = (rate_params, count_params, spec.method)
    model_values = spec.model.parameter_values
    derived = dict(spec.derived)
    _check_model_counts(spec, count_params, model_where)
    for name, value in spec.fixed:
        if name not in spec.param_names and name not in derived and value != model_values[name]:
            _check_value(name, value, *roles, src, f"parameters.{name}")
    facts = describe(spec.design)["parameters"]
    for name in spec.param_names:
        if (name in rate_params or name in count_params) and facts.get(name, {}).get("low", 0.0) is None:
            raise SpecError(src, f"design.vary.{name}", f"{name} must be >= 0 but its distribution is unbounded below",
                            fix="truncate it: add low = 0")
    points = spec.points()
    for q, name in enumerate(spec.param_names):
        for value in np.unique(points[:, q]):
            _check_value(name, float(value), *roles, src, f"design.vary.{name}")
    if derived and points.shape[0]:
        _check_derived(spec, points, derived, roles, src)
    if spec.interventions:
        from sweep.model import schedule  # only sweeps with interventions pay for it

        schedule.check(spec.model, spec.interventions, spec.derived, spec.columns(points), points.shape[0],
                       spec.times[-1])


def _count_limit(method: str) -> float:
    """The largest initial count ``method``'s store holds: int32 unless its state is real-valued.

    Called only for a count above ``limits.MAX_COUNT``, so ``sweep check`` imports no kernel
    module (and pays no numba import) for ordinary specs.
    """
    dtype = np.dtype(getattr(kernels.get(method), "COUNTS_DTYPE", np.int32))
    return float(np.iinfo(dtype).max) if dtype.kind in "iu" else math.inf


def _too_large(value: float, method: str) -> bool:
    return value > limits.MAX_COUNT and value > _count_limit(method)


def _count_problem(value: float, method: str) -> tuple[str, str]:
    shown = f"{value:,.0f}" if value < 1e15 else f"{value:.6g}"
    return (f"initial count {shown} is more than {limits.MAX_COUNT:,}: the {method} method keeps counts "
            "as 32-bit integers",
            f"at most {limits.MAX_COUNT:,}; a method with a real-valued state (cle, ode) takes any finite count")


def _check_model_counts(spec: Spec, count_params: set[str], model_where: tuple[str, str]) -> None:
    """The model's own initial counts (literal, or its parameters' values where the spec keeps them)."""
    source, prefix = model_where
    model_values = spec.model.parameter_values
    kept = dict(spec.fixed)
    for name, value in zip(spec.model.species, spec.model.initial):
        if not isinstance(value, str) and _too_large(value, spec.method):
            raise SpecError(source, f"{prefix}species.{name}", *_problem_value(value, spec.method))
        if not isinstance(value, str) and value != int(value) and _count_limit(spec.method) < math.inf:
            raise SpecError(source, f"{prefix}species.{name}", f"initial count {value:g} is not a whole number: the "
                            f"{spec.method} method counts molecules", value,
                            "give a whole number, or use a method with a real-valued state (cle, ode)")
    for name in sorted(count_params - set(spec.param_names) - {n for n, _ in spec.derived}):
        if kept[name] == model_values[name] and _too_large(model_values[name], spec.method):
            raise SpecError(source, f"{prefix}parameters.{name}", *_problem_value(model_values[name], spec.method))


def _problem_value(value: float, method: str) -> tuple[str, float, str]:
    problem, fix = _count_problem(value, method)
    return problem, value, fix


def _check_derived(spec: Spec, points: np.ndarray, derived, roles, src) -> None:
    """Derived values must be finite everywhere, and valid wherever they are rates or counts."""
    rate_params, count_params, method = roles
    columns = spec.columns(points)
    for name, expr in derived.items():
        values = np.asarray(columns[name], dtype=np.float64)
        problems = [(~np.isfinite(values), "is not a finite number",
                     "check for a division by zero, the log of a number <= 0, or an overflow")]
        if name in rate_params:
            problems.append((values < 0, f"rate constant {name} must be >= 0", ""))
        if name in count_params:
            problems.append(((values < 0) | (values != np.round(values)),
                             f"{name} sets an initial count and must be a whole number >= 0",
                             "the expression must come out whole at every point"))
            with np.errstate(invalid="ignore"):
                high = values > limits.MAX_COUNT
            if high.any() and _too_large(float(values[high].max()), method):
                problems.append((high, *_count_problem(float(values[high].max()), method)))
        for mask, problem, fix in problems:
            with np.errstate(invalid="ignore"):
                bad = np.flatnonzero(mask)
            if bad.size:
                p = int(bad[0])
                raise SpecError(src, f"derived.{name}", f"{problem}: it is {values[p]:g} at point {p} "
                                f"({_point_text(spec, points[p])})", expr.text, fix)


def _point_text(spec: Spec, row: np.ndarray) -> str:
    return ", ".join(f"{n} = {v:g}" for n, v in zip(spec.param_names, row)) or "the only point"


def _check_value(name, value, rate_params, count_params, method, src, field) -> None:
    if (name in rate_params or name in count_params) and not np.isfinite(value):
        raise SpecError(src, field, f"{name} must be a finite number", value)
    if name in rate_params and value < 0:
        raise SpecError(src, field, f"rate constant {name} must be >= 0", value)
    if name in count_params and (value < 0 or value != int(value)):
        fix = "add integer = true to its entry" if field.startswith("design.") else ""
        raise SpecError(src, field, f"{name} sets an initial count and must be a whole number >= 0", value, fix)
    if name in count_params and _too_large(value, method):
        raise SpecError(src, field, *_problem_value(value, method))
