"""Load and validate a sweep spec (TOML) into frozen objects.

``load`` is the only code that reads spec and model files; everything after it works on
the frozen ``Spec``. Errors name the file, the dotted field, the bad value and the fix.

Layout of a spec::

    model = "reporter_model.toml"     # a model file (relative to this spec), or a [model] table;
                                      # a file ending in .xml or .sbml is read as SBML (sweep.sbml)
    model_volume = 1e-15              # SBML only: system volume in litres (sweep.spec.imports)

    [run]
    method = "direct"                 # registered kernel
    replicates = 400                  # per point
    replicates_per_task = 100         # one task = one Zarr chunk (default: 100)
    seed = 20261202                   # root seed (default 0)
    store = "../results/reporter.zarr" # relative to this spec's folder, like the model (default <spec>.zarr)
    max_events = 100_000_000          # event cap per replicate

    [run.adaptive]                    # optional: more replicates where a statistic is imprecise
    statistic = "fano"                # (see sweep.spec.adaptive)
    species = "protein"
    precision = 0.05
    max_replicates = 5000

    [time]
    end = 600.0                       # sample 0..end at `samples` evenly spaced times
    samples = 61                      # or: points = [0, 10, 100]
    unit = "min"                      # optional label; an SBML model's timeUnits by default

    [parameters]                      # fixed values that override the model's
    g_p = 0.02

    [design]
    kind = "grid"                     # or lhs, sobol, saltelli, morris, table (see sweep.design)
    [design.vary]                     # full grid over these explicit values
    k_tx = [0.05, 0.1, 0.2]

    [derived]                         # parameters computed at each point from others
    k_off = "k_on * Kd"               # arithmetic only (see sweep.model.expr)
"""

from __future__ import annotations

import functools
import hashlib
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

import numpy as np

import kernels
from sweep.spec import adaptive as adaptives
from sweep.batch import settings as clusters
from sweep import design as designs
from sweep.spec import derived as derived_table
from sweep.spec import diff as specdiff
from sweep.model import changes as interventions, expr as expressions
from sweep.spec import imports as model_files
from sweep.spec import inputs, limits
from sweep.model import sbml
from sweep.errors import SpecError
from sweep.model import Model, listing, parse_model
from sweep.spec.values import check_points

DEFAULT_REPLICATES_PER_TASK = 100
DEFAULT_MAX_EVENTS = 100_000_000
DEFAULT_SAMPLES = 101

_TOP_KEYS = {"model", "model_volume", "run", "time", "parameters", "design", "derived", "cluster", "plot", "change",
             "when"}
_PLOT_KEYS = {"species"}
_RUN_KEYS = {"method", "replicates", "replicates_per_task", "seed", "store", "max_events", "options", "adaptive"}


@dataclass(frozen=True)
class Spec:
    """A validated sweep. ``fixed`` holds every model parameter's value after overrides.

    ``derived`` lists (name, expression) pairs in evaluation order: each is computed at every
    point from the fixed, varied and earlier derived values.
    """

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
    derived: tuple[tuple[str, expressions.Expr], ...] = ()
    options: tuple[tuple[str, Any], ...] = ()
    adaptive: adaptives.Adaptive | None = None
    model_notes: tuple[tuple[str, str], ...] = ()   # SBML import: (element, conversion applied)
    # [cluster]: batch settings for `--cluster slurm` (sweep.cluster); they do not change the numbers
    cluster: tuple[tuple[str, Any], ...] = ()
    # [plot] species: the species figures show when none is named; presentation only, like [cluster]
    plot_species: str | None = None
    # the model's observables (name, expression text): [observables], or SBML assignment rules that read species
    observables: tuple[tuple[str, str], ...] = ()
    time_unit: str = ""                              # [time] unit, else the SBML model's timeUnits
    # the model's [[change]]/[[when]] lists, then the spec's (sweep.model.changes; built per point by
    # sweep.model.schedule)
    interventions: tuple[interventions.Intervention, ...] = ()

    @property
    def store_replicates(self) -> int:
        """Replicates per point the store holds: ``replicates``, or ``[run.adaptive]``'s maximum."""
        return self.adaptive.max_replicates if self.adaptive is not None else self.replicates

    @property
    def intervention_notes(self) -> list[tuple[str, str]]:
        """Timed changes after the end (dropped), for ``sweep check`` (``sweep.model.schedule.notes``)."""
        from sweep.model import schedule
        points = self._points
        return schedule.notes(self.interventions, self.columns(points), points.shape[0], self.times[-1])

    @property
    def content_sha256(self) -> str:
        """Digest of what decides the numbers (see ``sweep.spec.diff``); resume needs it unchanged."""
        return specdiff.digest(self.text, self.model_text, self.design.option("file_sha256") or "")

    @property
    def param_names(self) -> tuple[str, ...]:
        """Names of the varied parameters, in spec order (the ``param`` coordinate)."""
        return self.design.names

    def points(self) -> np.ndarray:
        """The design's parameter points, shape (points, varied parameters)."""
        return self._points.copy()

    @functools.cached_property
    def _points(self) -> np.ndarray:
        # expanded once per Spec: an optimised Latin hypercube can take a while
        return designs.expand(self.design, self.seed)

    def values_at(self, row: np.ndarray) -> dict[str, float]:
        """Every parameter's value at one point: fixed values, overridden by the row, then derived."""
        values = dict(self.fixed)
        values.update(zip(self.param_names, (float(v) for v in row)))
        for name, expr in self.derived:
            values[name] = float(expressions.evaluate(expr, values))
        return values

    def columns(self, points: np.ndarray) -> dict[str, Any]:
        """Every parameter's values at all ``points`` at once: floats for fixed, arrays otherwise."""
        values: dict[str, Any] = dict(self.fixed)
        values.update((name, points[:, q]) for q, name in enumerate(self.param_names))
        for name, expr in self.derived:
            values[name] = np.broadcast_to(expressions.evaluate(expr, values), (points.shape[0],))
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


def load_model(path: str | Path) -> tuple[Model, dict[str, float], tuple[tuple[str, expressions.Expr], ...]]:
    """A model with its parameter values and derived parameters, from a spec, a TOML model or an SBML file.

    For a spec: its model, every parameter at the spec's fixed value (varied ones at the model's
    own value) and derived ones computed from those; for a model file, the model's own values.
    Used by ``sweep export-model``.

    Raises
    ------
    SpecError
        As ``load`` does.

    Example
    -------
    >>> model, values, derived = load_model("configs/reporter.toml")
    """
    path = Path(path)
    text = _read(path, str(path), "")
    if sbml.is_sbml(path):
        imported = sbml.read(text, str(path))
        model = parse_model(imported.table, str(path))
        derived = tuple((n, expressions.parse(t, str(path), n)) for n, t in imported.derived)
        return model, model.parameter_values, derived
    doc = _parse_toml(text, str(path))
    if "model" not in doc:
        model = parse_model(doc, str(path))
        return model, model.parameter_values, ()
    spec = load(path)
    values = dict(spec.fixed)
    for name, expr in spec.derived:
        values[name] = float(expressions.evaluate(expr, values))
    return spec.model, values, spec.derived


def from_text(text: str, path: str | Path, model_text: str = "", store: str | Path | None = None) -> Spec:
    """Validate a spec given as text (plus the text of the model file it names).

    Reads no files, except the CSV file of a ``table`` design (relative to ``path``).

    ``path`` is used in error messages and to name the model file. A store keeps both texts
    in its attributes, so ``sweep trace`` rebuilds the exact spec a store was run with.

    Sizes beyond ``sweep.spec.limits`` (points, tasks, samples, one task's chunk, the event cap, the
    store path) are refused before the design is expanded or anything is allocated.
    """
    path = Path(path)
    doc = _parse_toml(text, str(path))
    src = str(path)
    _unknown(doc, _TOP_KEYS, src, "")
    model, imported = model_files.load_model(doc, path, model_text)
    if imported is not None:
        # an SBML model: dotted local-parameter names, and the parameters the import derives
        doc = sbml.adapt(doc, dict(imported.aliases), dict(imported.derived), src)
    run = _sub(doc, "run", src)
    _unknown(run, _RUN_KEYS, src, "run")
    method = run.get("method", "direct")
    if not isinstance(method, str) or method not in kernels.METHODS:
        raise SpecError(src, "run.method", "unknown method", method,
                        f"choose one of: {', '.join(sorted(kernels.METHODS))}")
    replicates = _int(run, "replicates", src, "run", minimum=1,
                      default=1 if method in kernels.DETERMINISTIC else None)
    if method in kernels.DETERMINISTIC and replicates != 1:
        raise SpecError(src, "run.replicates", f"method {method!r} is deterministic: one trajectory per point",
                        replicates, "set replicates = 1")
    model_files.check_method(imported, method, src, str(doc.get("model")))
    options = _options(run.get("options", {}), method, src)
    per_task = _int(run, "replicates_per_task", src, "run", minimum=1,
                    default=min(replicates, DEFAULT_REPLICATES_PER_TASK))
    seed = _int(run, "seed", src, "run", minimum=0, default=0)
    max_events = _int(run, "max_events", src, "run", minimum=1, default=DEFAULT_MAX_EVENTS,
                      maximum=limits.MAX_EVENT_CAP)
    if store is not None:
        store_path = Path(store)
        inputs.check_path(store_path, src, "--store")
    else:
        named = _str(run, "store", src, "run", f"{path.stem}.zarr")
        inputs.check_path(named, src, "run.store")
        store_path = beside(path, named)
    times = _times(_sub(doc, "time", src, required=True), src)
    time_unit = model_files.time_unit(_sub(doc, "time", src), imported, src)
    adaptive = None
    if "adaptive" in run:
        adaptive = adaptives.parse(run["adaptive"], replicates, model.species + _observed(model), times,
                                   method in kernels.DETERMINISTIC, src)
    overrides = _sub(doc, "parameters", src)
    fixed = _fixed(overrides, model, src)
    design = designs.parse(_sub(doc, "design", src), dict(fixed), src)
    for name in design.names:
        if name in overrides:
            raise SpecError(src, f"parameters.{name}", "also varied under [design]; the fixed value would be ignored",
                            fix=f"remove {name} from [parameters], or from the design")
    derived = derived_table.parse(_sub(doc, "derived", src), dict(fixed), overrides, design.names, src)
    limits.check_sweep(designs.size(design), adaptive.max_replicates if adaptive is not None else replicates,
                       per_task, len(times), len(model.species), lambda: _itemsize(method),
                       "run.adaptive.max_replicates" if adaptive is not None else "run.replicates", src)
    limits.check_observables(per_task, len(times), len(model.observables), src)
    hashed = text.encode() + b"\0" + model_text.encode()
    if design.option("file_sha256"):
        # a design read from a file (a table of points): changing the file changes the sweep
        hashed += b"\0" + design.option("file_sha256").encode()
    digest = hashlib.sha256(hashed).hexdigest()
    spec = Spec(path, text, model_text, digest, model, method, replicates, per_task, seed, store_path,
                max_events, times, fixed, design, derived, options, adaptive,
                model_notes=imported.notes if imported is not None else (),
                observables=tuple((n, e.text) for n, e in model.observables), time_unit=time_unit,
                cluster=tuple(clusters.parse(_sub(doc, "cluster", src), src).items()),
                plot_species=_plot_species(_sub(doc, "plot", src), model, src),
                interventions=model.interventions + interventions.parse_lists(
                    doc, model.species, model.parameter_values, src))
    check_points(spec, src, _model_source(doc, path))
    return spec


def _options(table: Any, method: str, src: str) -> tuple[tuple[str, Any], ...]:
    """Validate [run.options] against what the method takes (``kernels.OPTIONS``)."""
    if not isinstance(table, dict):
        raise SpecError(src, "run.options", "must be a table", table, "e.g. options = { dt = 0.01 }")
    allowed = kernels.OPTIONS.get(method, {})
    out = []
    for key, value in table.items():
        field = f"run.options.{key}"
        if key not in allowed:
            raise SpecError(src, field, f"method {method!r} takes no such option",
                            fix=f"it takes: {', '.join(allowed) or '(none)'}")
        kind = allowed[key]
        if isinstance(kind, tuple):
            if value not in kind:
                raise SpecError(src, field, "not a known choice", value, f"choose one of: {', '.join(kind)}")
        elif not _is_num(value) or value <= 0 or (kind == "fraction" and value >= 1):
            raise SpecError(src, field, "must be a number > 0" + (" and < 1" if kind == "fraction" else ""), value)
        out.append((key, value))
    return tuple(out)


def _read(path: Path, src: str, field: str) -> str:
    """A spec or model file's text: a regular file, at most ``limits.MAX_TOML_BYTES`` (TOML) or
    ``limits.MAX_FILE_BYTES`` (SBML)."""
    if field:
        inputs.check_path(path, src, field)
    limit = limits.MAX_FILE_BYTES if sbml.is_sbml(path) else limits.MAX_TOML_BYTES
    return inputs.read_text(path, src, field, limit)


def _parse_toml(text: str, src: str) -> dict:
    return inputs.parse_toml(text, src)


def _sub(doc, key, src, required=False) -> dict:
    value = doc.get(key)
    if value is None:
        if required:
            raise SpecError(src, key, "missing table", fix=f"add a [{key}] table")
        return {}
    if not isinstance(value, dict):
        raise SpecError(src, key, "must be a table", value, f"write it as [{key}]")
    return value


def beside(spec_path: Path, named: str | Path) -> Path:
    """A path the spec names, relative to the spec's folder (as the model file is), so that every
    command finds the same store from any working directory; an absolute path stays as it is."""
    named = Path(named)
    if named.is_absolute():
        return named
    return Path(os.path.normpath(spec_path.parent / named))


def _plot_species(table, model: Model, src) -> str | None:
    _unknown(table, _PLOT_KEYS, src, "plot")
    if "species" not in table:
        return None
    name = table["species"]
    if not isinstance(name, str) or name not in model.species + _observed(model):
        raise SpecError(src, "plot.species", "not a species or observable of the model", name,
                        fix=f"one of {listing(model.species + _observed(model))}")
    return name


def _unknown(table, allowed, src, prefix) -> None:
    for key in table:
        if key not in allowed:
            field = f"{prefix}.{key}" if prefix else key
            raise SpecError(src, field, "unknown key", fix=f"expected one of: {', '.join(sorted(allowed))}")


def _int(table, key, src, prefix, minimum, default, maximum=None):
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
    if maximum is not None and value > maximum:
        raise SpecError(src, field, f"must be at most {maximum:,}", value, f"use {key} <= {maximum:,}")
    return value


def _str(table, key, src, prefix, default) -> str:
    value = table.get(key, default)
    if not isinstance(value, str) or not value:
        raise SpecError(src, f"{prefix}.{key}", "must be a non-empty string", value)
    return value


def _times(table, src) -> tuple[float, ...]:
    _unknown(table, {"end", "samples", "points", "unit"}, src, "time")
    if "points" in table:
        if "end" in table or "samples" in table:
            raise SpecError(src, "time", "give either points or end/samples, not both")
        pts = table["points"]
        if not isinstance(pts, list) or not pts or not all(_is_num(v) for v in pts):
            raise SpecError(src, "time.points", "must be a non-empty list of numbers", pts)
        if len(pts) > limits.MAX_SAMPLES:
            raise SpecError(src, "time.points", f"{len(pts):,} sample times, more than {limits.MAX_SAMPLES:,}",
                            fix=f"sample at most {limits.MAX_SAMPLES:,} times")
        arr = np.asarray(pts, dtype=np.float64)
    else:
        if "end" not in table or not _is_num(table["end"]) or not table["end"] > 0:
            raise SpecError(src, "time.end", "must be a number > 0", table.get("end"),
                            "add end = <last sample time> under [time], or list points = [...]")
        samples = _int(table, "samples", src, "time", minimum=2, default=DEFAULT_SAMPLES, maximum=limits.MAX_SAMPLES)
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
    return f"known parameters: {listing(values)}"


def _model_source(doc: Mapping[str, Any], path: Path) -> tuple[str, str]:
    """The file that holds the model, and the dotted prefix of its tables there."""
    entry = doc.get("model")
    return (str(path.parent / entry), "") if isinstance(entry, str) else (str(path), "model.")


def _itemsize(method: str) -> int:
    """Bytes per count in ``method``'s store (``COUNTS_DTYPE`` of its kernel module, int32 by default)."""
    return np.dtype(getattr(kernels.get(method), "COUNTS_DTYPE", np.int32)).itemsize


def _observed(model: Model) -> tuple[str, ...]:
    """Observable names: usable wherever a species name is (adaptive targets, [plot] species)."""
    return tuple(name for name, _ in model.observables)
