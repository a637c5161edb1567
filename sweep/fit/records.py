"""The fit's folder: what each batch and round found, kept so a rerun continues where it stopped.

Layout (every ``.zarr`` here opens with ``xarray.open_zarr(path, consolidated=False)``)::

    <folder>/fit.json                         which fit this is (spec, model and data SHA-256)
    <folder>/round_000/batch_000/spec.toml    the batch's sweep spec and its table of points
    <folder>/round_000/batch_000/points.csv
    <folder>/round_000/batch_000/sims.zarr    the batch's simulations: an ordinary sweep store
    <folder>/round_000/batch_000/candidates.zarr   values, ancestors, distances of its candidates
    <folder>/round_000/population.zarr        the round's particles, weights, distances
    <folder>/posterior.zarr                   the last round's particles and the per-round table

A record is written to a temporary name and renamed into place, so it exists only complete;
a kill leaves at most a temporary folder, which the next run removes.
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import numpy as np
import xarray as xr

from sweep.errors import StoreError
from sweep.fit.loop import Batch, Evaluated
from sweep.fit.smc import Population

_TMP = ".tmp-"


class Folder:
    """``Records`` (``sweep.fit.loop``) in a fit's folder."""

    def __init__(self, root: Path, names: tuple[str, ...], labels: tuple[str, ...]):
        self.root, self.names, self.labels = Path(root), names, labels

    def round_dir(self, t: int) -> Path:
        return self.root / f"round_{t:03d}"

    def batch_dir(self, t: int, b: int) -> Path:
        return self.round_dir(t) / f"batch_{b:03d}"

    def batch(self, round_: int, index: int) -> Evaluated | None:
        path = self.batch_dir(round_, index) / "candidates.zarr"
        if not path.is_dir():
            return None
        ds = xr.open_zarr(path, consolidated=False).load()
        return Evaluated(ds["distance"].values, ds["components"].values, ds["unfinished"].values)

    def save_batch(self, batch: Batch, evaluated: Evaluated) -> None:
        ds = xr.Dataset(
            {"theta": (("candidate", "param"), batch.theta), "ancestor": ("candidate", batch.ancestor),
             "inside_prior": ("candidate", batch.inside), "distance": ("candidate", evaluated.distance),
             "components": (("candidate", "component"), evaluated.components),
             "unfinished": ("candidate", evaluated.unfinished)},
            coords={"candidate": batch.first + np.arange(batch.theta.shape[0]), "param": list(self.names),
                    "component": list(self.labels)},
            attrs={"round": batch.round, "batch": batch.index})
        write(ds, self.batch_dir(batch.round, batch.index) / "candidates.zarr")

    def population(self, round_: int) -> Population | None:
        path = self.round_dir(round_) / "population.zarr"
        if not path.is_dir():
            return None
        ds = xr.open_zarr(path, consolidated=False).load()
        a = ds.attrs
        return Population(int(a["round"]), ds["theta"].values, ds["weight"].values, ds["distance"].values,
                          float(a["tolerance"]), int(a["candidates"]), int(a["simulated"]), int(a["accepted"]),
                          int(a["batches"]), ds["components"].values, int(a["unfinished"]))

    def save_population(self, p: Population) -> None:
        write(population_dataset(p, self.names, self.labels), self.round_dir(p.round) / "population.zarr")


def population_dataset(p: Population, names, labels) -> xr.Dataset:
    return xr.Dataset(
        {"theta": (("particle", "param"), p.theta), "weight": ("particle", p.weight),
         "distance": ("particle", p.distance), "components": (("particle", "component"), p.components)},
        coords={"particle": np.arange(p.theta.shape[0]), "param": list(names), "component": list(labels)},
        attrs={"round": p.round, "tolerance": p.tolerance, "candidates": p.candidates, "simulated": p.simulated,
               "accepted": p.accepted, "batches": p.batches, "unfinished": p.unfinished, "ess": p.ess})


def posterior_dataset(populations, names, labels, stopped: str, simulations: int) -> xr.Dataset:
    """The last round's particles, and per round: tolerance, acceptance, ESS, candidates, simulated."""
    ds = population_dataset(populations[-1], names, labels)
    rounds = np.arange(len(populations))
    ds = ds.assign(tolerance=("round", [p.tolerance for p in populations]),
                   acceptance=("round", [p.acceptance for p in populations]),
                   ess=("round", [p.ess for p in populations]),
                   candidates=("round", [p.candidates for p in populations]),
                   simulated=("round", [p.simulated for p in populations]),
                   unfinished=("round", [p.unfinished for p in populations]))
    ds = ds.assign_coords(round=rounds)
    ds.attrs.update(stopped=stopped, simulations=simulations, rounds=len(populations))
    return ds


def write(ds: xr.Dataset, path: Path) -> None:
    """Write ``ds`` as Zarr v3 under a temporary name, then rename it into place."""
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f"{_TMP}{path.name}-{os.getpid()}")
    if tmp.exists():
        shutil.rmtree(tmp)
    # names as variable-length strings: a fixed-width unicode array has no Zarr v3 data type yet,
    # and zarr warns about it on every write (stderr of every fit batch)
    ds = ds.assign_coords({k: v.astype(object) for k, v in ds.coords.items() if v.dtype.kind == "U"})
    ds = ds.assign({k: v.astype(object) for k, v in ds.data_vars.items() if v.dtype.kind == "U"})
    ds.to_zarr(tmp, mode="w", zarr_format=3, consolidated=False)
    if path.exists():  # written before (a rerun's posterior): same bytes, replaced
        shutil.rmtree(path)
    os.replace(tmp, path)


def claim(root: Path, sha256: str, spec_path: Path, fresh: bool) -> None:
    """Make ``root`` this fit's folder, or check that it is; ``fresh`` deletes a previous fit's.

    Raises
    ------
    StoreError
        The folder holds another fit (a different spec, model or data), or is not a fit's.
    """
    marker = root / "fit.json"
    if fresh and root.exists():
        if not marker.is_file():
            raise StoreError(f"{root}: not a fit's folder (no fit.json); refusing to delete it with --fresh")
        shutil.rmtree(root)
    if marker.is_file():
        recorded = json.loads(marker.read_text(encoding="utf-8"))
        if recorded.get("sha256") != sha256:
            raise StoreError(f"{root}: holds a fit of another spec, model or data ({recorded.get('spec')}); "
                             "run with --fresh to start over, or give another run.store")
    elif root.exists() and any(p for p in root.iterdir() if not p.name.startswith(_TMP)):
        raise StoreError(f"{root}: exists and is not a fit's folder; choose another run.store")
    root.mkdir(parents=True, exist_ok=True)
    for pattern in (f"{_TMP}*", f"*/{_TMP}*", f"*/*/{_TMP}*"):  # not inside the sweep stores
        for stale in root.glob(pattern):
            shutil.rmtree(stale, ignore_errors=True) if stale.is_dir() else stale.unlink(missing_ok=True)
    if not marker.is_file():
        tmp = root / f"{_TMP}fit.json"
        tmp.write_text(json.dumps({"sha256": sha256, "spec": str(spec_path)}, indent=1), encoding="utf-8")
        os.replace(tmp, marker)
