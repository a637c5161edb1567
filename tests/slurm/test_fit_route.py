"""`sweep fit --cluster slurm`: the fit's batches run on Dask workers that are Slurm jobs, one cluster
kept for the whole fit. Its posterior must be byte-identical to the in-process (`--serial`) fit of
the same spec, since every random choice derives from the root seed and the round, particle and
replicate indices (docs/fit.md)."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
import xarray as xr
from typer.testing import CliRunner

from sweep.cli import app

pytestmark = pytest.mark.slurm

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "sweep"))
from test_fit_engine import _write  # noqa: E402  (the fit spec and invented data of the engine tests)
from test_dask_route import _cluster_table, _gone  # noqa: E402


def _posterior(folder: Path) -> dict:
    ds = xr.open_zarr(folder / "fit" / "posterior.zarr").load()
    return {name: ds[name].values for name in ("theta", "weight", "distance", "tolerance", "ess")}


def test_fit_on_slurm_workers_matches_the_serial_fit(tmp_path):
    serial, slurm = tmp_path / "serial", tmp_path / "slurm"
    serial.mkdir(), slurm.mkdir()
    result = CliRunner().invoke(app, ["fit", str(_write(serial, particles=8, rounds=2)), "--serial"])
    assert result.exit_code == 0, result.output
    name = f"swfit-{os.getpid()}"
    spec = _write(slurm, particles=8, rounds=2)
    spec.write_text(spec.read_text() + _cluster_table(name, min_jobs=1, max_jobs=1, walltime="00:10:00"))
    done = subprocess.run([sys.executable, "-m", "sweep.cli", "fit", str(spec), "--cluster", "slurm"],
                          capture_output=True, text=True, timeout=600, env={**os.environ, "COLUMNS": "200"})
    out = done.stdout + done.stderr
    assert done.returncode == 0, out
    assert "Slurm: 1 to 1 jobs" in out
    a, b = _posterior(serial), _posterior(slurm)
    for field in a:
        assert a[field].tobytes() == b[field].tobytes(), field
    assert not _gone(name)  # the jobs were cancelled when the fit ended

