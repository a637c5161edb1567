"""Make demo data with the tool itself: simulate the fit's model at known values, write the CSV.

Cell i of condition c is replicate i of point c of a sweep at the true values, seeded from
``seed`` (not the fit's root seed, so the data and the fit's simulations never share streams).
Every time of the model's grid after 0 is written for the species asked for.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path
from typing import Mapping

import numpy as np

from sweep.errors import SpecError
from sweep.fit.spec import FitSpec, observable_names


def simulate(fit: FitSpec, truth: Mapping[str, float], cells: int, seed: int, species: tuple[str, ...],
             times: tuple[float, ...] | None = None, out: Path | None = None) -> Path:
    """Write ``cells`` simulated cells per (condition, time, species or observable) to ``out``
    (default: ``[fit].data``).

    Raises
    ------
    SpecError
        A true value is missing for a fitted parameter, or a name is neither a species nor an observable.
    """
    import sweep
    from sweep.execute.execution import Execution

    for name in fit.prior.names:
        if name not in truth:
            raise SpecError(str(fit.path), f"fit.priors.{name}", "no true value given",
                            fix=f"give {name}=<value> to --simulate-data")
    model_species, model_observables = fit.sweep.model.species, observable_names(fit.sweep.model)
    for s in species:
        if s not in model_species and s not in model_observables:
            raise SpecError(str(fit.path), "--species", "unknown species or observable", s,
                            f"species: {', '.join(model_species)}"
                            + (f"; observables: {', '.join(model_observables)}" if model_observables else ""))
    times = times or tuple(t for t in fit.sweep.times if t > 0)
    out = Path(out) if out is not None else fit.data_path
    fixed = dict(fit.sweep.fixed)
    extra = fit.condition_parameters
    with tempfile.TemporaryDirectory(prefix="sweep-fit-data-") as tmp:
        folder = Path(tmp)
        rows = [",".join(fit.prior.names + extra)]
        for _, values in fit.conditions:
            given = dict(values)
            rows.append(",".join([repr(float(truth[n])) for n in fit.prior.names] +
                                 [repr(given.get(n, fixed[n])) for n in extra]))
        (folder / "points.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
        base = dict(fit.base)
        base["run"] = {**base.get("run", {}), "replicates": cells, "replicates_per_task": min(cells, 500)}
        text = FitSpec.batch_text(_With(base), seed, folder / "data.zarr", "points.csv")
        (folder / "spec.toml").write_text(text, encoding="utf-8")
        spec = sweep.load(folder / "spec.toml")
        summary = sweep.run(spec, Execution("shard", shard=(1, 1)))
        if not summary.complete:
            raise RuntimeError("the data simulation stopped early")
        ds = sweep.open_results(spec.store)
        counts, status = ds["counts"].values, ds["status"].values
        observed = ds["observables"].values if model_observables else None
    grid = list(fit.sweep.times)
    lines = ["time,condition,species,value"]
    for c, (name, _) in enumerate(fit.conditions):
        for t in times:
            for s in species:
                values = (counts[c, status[c] == 0, grid.index(t), model_species.index(s)] if s in model_species
                          else observed[c, status[c] == 0, grid.index(t), model_observables.index(s)])
                lines += [f"{t:g},{name},{s},{v:g}" for v in values]
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp_out = out.with_name(f".tmp-{out.name}-{os.getpid()}")
    tmp_out.write_text("\n".join(lines) + "\n", encoding="utf-8")
    os.replace(tmp_out, out)
    return out


class _With:
    """Just enough of a FitSpec for ``FitSpec.batch_text``."""

    def __init__(self, base: dict):
        self.base = base


def truth_from_text(items: list[str], source: str = "--simulate-data") -> dict[str, float]:
    """``["k_tx=2", "k_off=0.1"]`` (or one comma-separated item) -> {"k_tx": 2.0, "k_off": 0.1}."""
    out = {}
    for item in (p for i in items for p in i.split(",") if p.strip()):
        name, sep, value = item.partition("=")
        try:
            number = float(value)
        except ValueError:
            number = float("nan")
        if not sep or not np.isfinite(number):
            raise SpecError(source, item.strip(), "expected NAME=VALUE with a finite number", fix="e.g. k_tx=2.0,k_off=0.1")
        out[name.strip()] = number
    return out
