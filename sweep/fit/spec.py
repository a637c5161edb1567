"""Load a fit spec: a sweep spec's model, method and time grid, plus the ``[fit]`` tables::

    model = "reporter_model.toml"

    [run]                          # as in a sweep spec
    method = "direct"
    replicates = 200               # R: replicates per particle and condition
    seed = 7                       # the root seed of every random choice of the fit
    store = "results/reporter_fit" # the fit's folder (one sweep store per batch inside)

    [time]
    points = [0, 60, 180, 360]     # the data's times must be among them

    [fit]
    data = "reporter_data.csv"     # tidy CSV (sweep.fit.data)
    particles = 200                # per round
    distance = "wasserstein"       # or "moments", "mean" (sweep.fit.distances)
    quantile = 0.5                 # eps_t = this quantile of round t-1's distances
    tolerance = 0.2                # stop once eps_t <= this
    max_rounds = 8
    min_acceptance = 0.02          # stop once a round's acceptance is below this
    max_simulations = 5_000_000    # trajectories, all rounds together
    unfinished = "reject"          # replicates stopped at the event cap: "reject" or "drop"

    [fit.priors]                   # the sampled designs' margins (sweep.design.margins)
    k_tx = { low = 0.2, high = 5, distribution = "log-uniform" }

    [fit.conditions]               # each condition: fixed parameter values
    low = { k_on = 0.02 }
    high = { k_on = 0.1 }

The sweep-spec part is validated by ``sweep.spec`` itself (each batch of candidates is a sweep
over a table design of them), so errors there read as they do for ``sweep run``.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sweep.design import margins
from sweep.design.levels import check_keys, is_number
from sweep.errors import SpecError
from sweep.fit import data as datafile
from sweep.fit import toml
from sweep.fit.distances import KINDS, UNFINISHED
from sweep.fit.loop import Settings
from sweep.fit.priors import Prior
from sweep.spec import from_text, inputs, limits
from sweep.spec.loading import Spec

_KEYS = ("data", "particles", "distance", "quantile", "tolerance", "max_rounds", "min_acceptance",
         "max_simulations", "max_batch", "unfinished", "priors", "conditions")


@dataclass(frozen=True)
class FitSpec:
    path: Path
    text: str
    sha256: str  # of the spec, its model and its data: a fit folder belongs to one
    base: dict  # the sweep-spec tables every batch spec starts from
    model_text: str
    sweep: Spec  # the sweep-spec part, validated (model, method, replicates, time grid)
    prior: Prior
    conditions: tuple[tuple[str, tuple[tuple[str, float], ...]], ...]
    observed: datafile.Observed | None  # None while the data is still to be simulated
    data_path: Path
    settings: Settings
    distance: str
    unfinished: str
    store: Path

    @property
    def condition_names(self) -> tuple[str, ...]:
        return tuple(c for c, _ in self.conditions)

    @property
    def condition_parameters(self) -> tuple[str, ...]:
        names: list[str] = []
        for _, values in self.conditions:
            names += [n for n, _ in values if n not in names]
        return tuple(names)

    def batch_text(self, seed: int, store: Path, table: str) -> str:
        """The sweep spec of one batch: the base tables, a seed, a store and a table design."""
        doc = {**self.base, "run": {**self.base.get("run", {}), "seed": seed, "store": str(store)}}
        doc["design"] = {"kind": "table", "file": table}
        return toml.dumps(doc)


def load(path: str | Path, store: str | Path | None = None, need_data: bool = True) -> FitSpec:
    """Read and validate a fit spec, its model and its data.

    Raises
    ------
    SpecError
        Anything wrong in the spec, the model or the data file (file, field or row and column, fix).
    """
    path = Path(path)
    src = str(path)
    text = inputs.read_text(path, src, "", limits.MAX_TOML_BYTES)
    doc = inputs.parse_toml(text, src)
    fit = doc.pop("fit", None)
    if not isinstance(fit, dict):
        raise SpecError(src, "fit", "missing table" if fit is None else "must be a table",
                        fix="add a [fit] table with data = \"...csv\" and [fit.priors]")
    check_keys(fit, _KEYS, src, "fit", "[fit]")
    if "design" in doc:
        raise SpecError(src, "design", "a fit has no [design]", fix="its points come from [fit.priors]; remove [design]")
    model_text = ""
    if isinstance(doc.get("model"), str):
        model_path = path.parent / doc["model"]
        inputs.check_path(model_path, src, "model")
        model_text = inputs.read_text(model_path, src, "model", limits.MAX_FILE_BYTES)
        doc["model"] = str(model_path.resolve())
    folder = Path(f"results/{path.stem}")
    if isinstance(doc.get("run"), dict):
        doc["run"] = dict(doc["run"])
        named = doc["run"].pop("store", None)
        folder = Path(named) if isinstance(named, str) and named else folder
    folder = Path(store) if store is not None else folder
    priors_table = _table(fit, "priors", src, required=True)
    sweep_spec = _sweep_part(doc, priors_table, path, model_text, folder)
    known = dict(sweep_spec.fixed)
    prior = Prior(tuple(_prior(name, entry, known, src) for name, entry in priors_table.items()))
    conditions = _conditions(_table(fit, "conditions", src, required=True), known, prior.names, src)
    data_path = _data_path(fit, path, src)
    observed = None
    if need_data or data_path.exists():
        observed = datafile.read(data_path, src, sweep_spec.model.species, sweep_spec.times,
                                 tuple(c for c, _ in conditions), observable_names(sweep_spec.model))
    digest = hashlib.sha256(b"\0".join([text.encode(), model_text.encode(),
                                        (observed.sha256 if observed else "").encode()])).hexdigest()
    return FitSpec(path, text, digest, doc, model_text, sweep_spec, prior, conditions, observed, data_path,
                   _settings(fit, sweep_spec.seed, src), _choice(fit, "distance", KINDS, src),
                   _choice(fit, "unfinished", UNFINISHED, src), folder)


def observable_names(model) -> tuple[str, ...]:
    """The model's observables, which the data file may name beside its species."""
    return tuple(name for name, _ in model.observables)


def _sweep_part(doc: dict, priors: dict, path: Path, model_text: str, folder: Path) -> Spec:
    """The sweep-spec tables, validated by ``sweep.spec`` with a one-point stand-in design."""
    first = next(iter(priors))
    check = {**doc, "run": {**doc.get("run", {}), "store": str(folder / "check.zarr")},
             "design": {"kind": "grid", "vary": {first: [1.0]}}}
    return from_text(toml.dumps(check), path, model_text)


def _prior(name: str, entry: Any, known: dict, src: str) -> margins.Margin:
    margin = margins.parse(name, entry, known, src, f"fit.priors.{name}")
    if margin.integer:
        raise SpecError(src, f"fit.priors.{name}.integer", "whole-number parameters cannot be fitted here",
                        fix="remove integer = true (the perturbation kernel is continuous)")
    return margin


def _conditions(table: dict, known: dict, fitted: tuple[str, ...], src: str):
    out = []
    for name, values in table.items():
        field = f"fit.conditions.{name}"
        if not isinstance(values, dict):
            raise SpecError(src, field, "must be a table of parameter values", values,
                            f"e.g. {name} = {{ k_on = 0.1 }} (or {{}} for the fixed values)")
        pairs = []
        for param, value in values.items():
            if param not in known:
                raise SpecError(src, f"{field}.{param}", "not a parameter of the model",
                                fix=f"known parameters: {', '.join(known)}")
            if param in fitted:
                raise SpecError(src, f"{field}.{param}", "also fitted under [fit.priors]", fix="fix it or fit it, not both")
            if not is_number(value):
                raise SpecError(src, f"{field}.{param}", "must be a finite number", value)
            pairs.append((param, float(value)))
        out.append((name, tuple(pairs)))
    return tuple(out)


def _data_path(fit: dict, path: Path, src: str) -> Path:
    name = fit.get("data")
    if not isinstance(name, str) or not name:
        raise SpecError(src, "fit.data", "missing" if name is None else "must be a file name",
                        name if name is not None else ..., 'add data = "observed.csv" under [fit]')
    return path.parent / name


def _settings(fit: dict, seed: int, src: str) -> Settings:
    return Settings(particles=_int(fit, "particles", src, 200, 2), quantile=_number(fit, "quantile", src, 0.5, 0, 1),
                    tolerance=_number(fit, "tolerance", src, None, 0, None, closed=True),
                    max_rounds=_int(fit, "max_rounds", src, 10, 1), seed=seed,
                    min_acceptance=_number(fit, "min_acceptance", src, 0.01, 0, 1, closed=True),
                    max_simulations=_int(fit, "max_simulations", src, None, 1),
                    max_batch=_int(fit, "max_batch", src, None, 1))


def _table(fit, key, src, required) -> dict:
    value = fit.get(key)
    if not isinstance(value, dict) or (required and not value):
        raise SpecError(src, f"fit.{key}", "missing or empty" if not value else "must be a table", value if value else ...,
                        f"add [fit.{key}]")
    return value


def _int(fit, key, src, default, minimum):
    value = fit.get(key, default)
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int) or value < minimum:
        raise SpecError(src, f"fit.{key}", f"must be a whole number >= {minimum}", value)
    return value


def _number(fit, key, src, default, low, high, closed=False):
    value = fit.get(key, default)
    if value is None:
        return None
    ok = is_number(value) and (value >= low if closed else value > low) and (high is None or value < high)
    if not ok:
        span = f"{'>=' if closed else '>'} {low}" + (f" and < {high}" if high is not None else "")
        raise SpecError(src, f"fit.{key}", f"must be a number {span}", value)
    return float(value)


def _choice(fit, key, choices, src) -> str:
    value = fit.get(key, choices[0])
    if value not in choices:
        raise SpecError(src, f"fit.{key}", "not a known choice", value, f"choose one of: {', '.join(choices)}")
    return value
