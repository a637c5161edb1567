"""Load and validate a sweep spec (TOML) into frozen objects.

``load`` is the only code that reads spec and model files; everything after it works on
the frozen ``Spec``. Errors name the file, the dotted field, the bad value and the fix.

Layout of a spec::

    model = "reporter_model.toml"     # a model file (relative to this spec), or a [model] table

    [run]
    method = "direct"                 # registered kernel
    replicates = 400                  # per point
    replicates_per_task = 100         # one task = one Zarr chunk (default: 100)
    seed = 20261202                   # root seed (default 0)
    store = "results/reporter.zarr"   # relative to the working directory (default <spec>.zarr)
    max_events = 100_000_000          # event cap per replicate

    [time]
    end = 600.0                       # sample 0..end at `samples` evenly spaced times
    samples = 61                      # or: points = [0, 10, 100]

    [parameters]                      # fixed values that override the model's
    g_p = 0.02

    [design]
    kind = "grid"
    [design.vary]                     # full grid over these explicit values
    k_tx = [0.05, 0.1, 0.2]
"""

from __future__ import annotations

import hashlib
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

import numpy as np

import kernels
from sweep import design as designs
from sweep.errors import SpecError
from sweep.model import Model, parse_model

DEFAULT_REPLICATES_PER_TASK = 100
DEFAULT_MAX_EVENTS = 100_000_000
DEFAULT_SAMPLES = 101

_TOP_KEYS = {"model", "run", "time", "parameters", "design"}
_RUN_KEYS = {"method", "replicates", "replicates_per_task", "seed", "store", "max_events"}


@dataclass(frozen=True)
class Spec:
    """A validated sweep. ``fixed`` holds every model parameter's value after overrides."""

    path: Path
    text: str
    model_text: str
    sha256: str
    model: Model
    method: str
    replicates: int
    replicates_per_task: int
    seed: int
    store: Path
    max_events: int
    times: tuple[float, ...]
    fixed: tuple[tuple[str, float], ...]
    design: designs.Design

    @property
    def param_names(self) -> tuple[str, ...]:
        """Names of the varied parameters, in spec order (the ``param`` coordinate)."""
        return self.design.names

    def points(self) -> np.ndarray:
        """The design's parameter points, shape (points, varied parameters)."""
        return designs.expand(self.design, self.seed)

    def values_at(self, row: np.ndarray) -> dict[str, float]:
        """Every parameter's value at one point (fixed values overridden by the row)."""
        values = dict(self.fixed)
        values.update(zip(self.param_names, (float(v) for v in row)))
        return values


def load(path: str | Path, store: str | Path | None = None) -> Spec:
    """Read, parse and validate a spec file.

    Parameters
    ----------
    path : str or Path
        The spec (TOML).
    store : str or Path, optional
        Overrides ``run.store``.

    Returns
    -------
    Spec

    Raises
    ------
    SpecError
        Missing or unreadable file, TOML syntax error (with line), or invalid field.

    Example
    -------
    >>> spec = load("configs/reporter.toml")
    """
    path = Path(path)
    text = _read(path, str(path), "")
    doc = _parse_toml(text, str(path))
    model_text = ""
    if isinstance(doc.get("model"), str):
        model_text = _read(path.parent / doc["model"], str(path), "model")
    return from_text(text, path, model_text, store)


def from_text(text: str, path: str | Path, model_text: str = "", store: str | Path | None = None) -> Spec:
    """Validate a spec given as text (plus the text of the model file it names); reads no files.

    ``path`` is used in error messages and to name the model file. A store keeps both texts
    in its attributes, so ``sweep trace`` rebuilds the exact spec a store was run with.
    """
    path = Path(path)
    doc = _parse_toml(text, str(path))
    src = str(path)
    _unknown(doc, _TOP_KEYS, src, "")
    model = _load_model(doc, path, model_text)
    run = _sub(doc, "run", src)
    _unknown(run, _RUN_KEYS, src, "run")
    method = run.get("method", "direct")
    if method not in kernels.METHODS:
        raise SpecError(src, "run.method", "unknown method", method,
                        f"choose one of: {', '.join(sorted(kernels.METHODS))}")
    replicates = _int(run, "replicates", src, "run", minimum=1, default=None)
    per_task = _int(run, "replicates_per_task", src, "run", minimum=1,
                    default=min(replicates, DEFAULT_REPLICATES_PER_TASK))
    seed = _int(run, "seed", src, "run", minimum=0, default=0)
    max_events = _int(run, "max_events", src, "run", minimum=1, default=DEFAULT_MAX_EVENTS)
    store_path = Path(store) if store is not None else Path(_str(run, "store", src, "run", f"{path.stem}.zarr"))
    times = _times(_sub(doc, "time", src, required=True), src)
    fixed = _fixed(_sub(doc, "parameters", src), model, src)
    design = designs.parse(_sub(doc, "design", src), dict(fixed), src)
    digest = hashlib.sha256(text.encode() + b"\0" + model_text.encode()).hexdigest()
    spec = Spec(path, text, model_text, digest, model, method, replicates, per_task, seed, store_path,
                max_events, times, fixed, design)
    _check_points(spec, src)
    return spec


def _read(path: Path, src: str, field: str) -> str:
    try:
        return path.read_text(encoding="utf-8")
    except FileNotFoundError as exc:
        raise SpecError(src, field, "file not found", str(path), "check the path") from exc
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(src, field, f"cannot read the file: {exc}", str(path)) from exc


def _parse_toml(text: str, src: str) -> dict:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(src, "", f"TOML syntax error: {exc}", fix="see https://toml.io for the syntax") from exc


def _load_model(doc: Mapping[str, Any], path: Path, model_text: str) -> Model:
    src = str(path)
    entry = doc.get("model")
    if entry is None:
        raise SpecError(src, "model", "missing", fix='add model = "my_model.toml" or a [model] table')
    if isinstance(entry, str):
        model_path = path.parent / entry
        return parse_model(_parse_toml(model_text, str(model_path)), str(model_path))
    if isinstance(entry, dict):
        return parse_model(entry, src, "model.")
    raise SpecError(src, "model", "must be a file name or a table", entry)


def _sub(doc, key, src, required=False) -> dict:
    value = doc.get(key)
    if value is None:
        if required:
            raise SpecError(src, key, "missing table", fix=f"add a [{key}] table")
        return {}
    if not isinstance(value, dict):
        raise SpecError(src, key, "must be a table", value, f"write it as [{key}]")
    return value


def _unknown(table, allowed, src, prefix) -> None:
    for key in table:
        if key not in allowed:
            field = f"{prefix}.{key}" if prefix else key
            raise SpecError(src, field, "unknown key", fix=f"expected one of: {', '.join(sorted(allowed))}")


def _int(table, key, src, prefix, minimum, default):
    field = f"{prefix}.{key}"
    if key not in table:
        if default is None:
            raise SpecError(src, field, "missing", fix=f"add {key} = <whole number >= {minimum}> under [{prefix}]")
        return default
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, int):
        raise SpecError(src, field, "must be a whole number", value)
    if value < minimum:
        raise SpecError(src, field, f"must be at least {minimum}", value)
    return value


def _str(table, key, src, prefix, default) -> str:
    value = table.get(key, default)
    if not isinstance(value, str) or not value:
        raise SpecError(src, f"{prefix}.{key}", "must be a non-empty string", value)
    return value


def _times(table, src) -> tuple[float, ...]:
    _unknown(table, {"end", "samples", "points"}, src, "time")
    if "points" in table:
        if "end" in table or "samples" in table:
            raise SpecError(src, "time", "give either points or end/samples, not both")
        pts = table["points"]
        if not isinstance(pts, list) or not pts or not all(_is_num(v) for v in pts):
            raise SpecError(src, "time.points", "must be a non-empty list of numbers", pts)
        arr = np.asarray(pts, dtype=np.float64)
    else:
        if "end" not in table or not _is_num(table["end"]) or not table["end"] > 0:
            raise SpecError(src, "time.end", "must be a number > 0", table.get("end"),
                            "add end = <last sample time> under [time], or list points = [...]")
        samples = _int(table, "samples", src, "time", minimum=2, default=DEFAULT_SAMPLES)
        return tuple(float(t) for t in np.linspace(0.0, float(table["end"]), samples))
    if np.any(arr < 0):
        raise SpecError(src, "time.points", "sample times must be >= 0", pts)
    if np.any(np.diff(arr) <= 0):
        raise SpecError(src, "time.points", "sample times must be strictly increasing", pts,
                        "sort them and drop repeats")
    return tuple(float(t) for t in arr)


def _is_num(v) -> bool:
    return not isinstance(v, bool) and isinstance(v, (int, float)) and bool(np.isfinite(v))


def _fixed(table, model: Model, src) -> tuple[tuple[str, float], ...]:
    values = model.parameter_values
    for name, value in table.items():
        field = f"parameters.{name}"
        if name not in values:
            raise SpecError(src, field, "not a parameter of the model", fix=_known(values))
        if not _is_num(value):
            raise SpecError(src, field, "must be a finite number", value)
        values[name] = float(value)
    return tuple(values.items())


def _known(values) -> str:
    return f"known parameters: {', '.join(values) or '(none)'}"


def _check_points(spec: Spec, src: str) -> None:
    """Every point must give non-negative rates and whole, non-negative initial counts."""
    rate_params = {r.rate for r in spec.model.reactions if isinstance(r.rate, str)}
    count_params = {v for v in spec.model.initial if isinstance(v, str)}
    points = spec.points()
    model_values = spec.model.parameter_values
    for name, value in spec.fixed:
        if name not in spec.param_names and value != model_values[name]:
            _check_value(name, value, rate_params, count_params, src, f"parameters.{name}")
    for q, name in enumerate(spec.param_names):
        for value in np.unique(points[:, q]):
            _check_value(name, float(value), rate_params, count_params, src, f"design.vary.{name}")


def _check_value(name, value, rate_params, count_params, src, field) -> None:
    if name in rate_params and value < 0:
        raise SpecError(src, field, f"rate constant {name} must be >= 0", value)
    if name in count_params and (value < 0 or value != int(value)):
        raise SpecError(src, field, f"{name} sets an initial count and must be a whole number >= 0", value)
