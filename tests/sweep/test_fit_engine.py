"""`sweep fit` through the engine: bad data, determinism across workers, SIGKILL + resume."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from typer.testing import CliRunner

from sweep.cli import app

MODEL = """
[species]
X = 0
[parameters]
k = 10.0
g = 1.0
[reactions]
birth = { reaction = "0 -> X", rate = "k" }
death = { reaction = "X -> 0", rate = "g" }
"""

SPEC = """
model = "model.toml"
[run]
method = "direct"
replicates = 20
replicates_per_task = 20
seed = 11
store = "{store}"
[time]
points = [0.0, 2.0, 8.0]
[fit]
data = "data.csv"
particles = {particles}
distance = "mean"
max_rounds = {rounds}
min_acceptance = 0.01
[fit.priors]
k = {{ low = 1.0, high = 30.0 }}
[fit.conditions]
a = {{}}
b = {{ g = 2.0 }}
"""


def _write(folder: Path, particles=12, rounds=2, data: str | None = None) -> Path:
    (folder / "model.toml").write_text(MODEL, encoding="utf-8")
    spec = folder / "fit.toml"
    spec.write_text(SPEC.format(store=str(folder / "fit"), particles=particles, rounds=rounds), encoding="utf-8")
    if data is None:
        rng = np.random.default_rng(1)  # invented data: Poisson cells (immigration-death, Jahnke & Huisinga 2007)
        lines = ["time,condition,species,value"]
        lines += [f"8,a,X,{v}" for v in rng.poisson(10.0, 20)] + [f"8,b,X,{v}" for v in rng.poisson(5.0, 20)]
        data = "\n".join(lines) + "\n"
    (folder / "data.csv").write_text(textwrap.dedent(data), encoding="utf-8")
    return spec


BAD = {
    "unknown species": ("time,condition,species,value\n8,a,X,3\n8,b,Y,4\n", "row 3, column species"),
    "negative count": ("time,condition,species,value\n8,a,X,3\n8,b,X,-4\n", "row 3, column value"),
    "time off the grid": ("time,condition,species,value\n8,a,X,3\n5,b,X,4\n", "row 3, column time"),
    "missing condition": ("time,condition,species,value\n8,a,X,3\n8,a,X,4\n", "column condition"),
    "unknown condition": ("time,condition,species,value\n8,a,X,3\n8,c,X,4\n", "row 3, column condition"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_data_exits_2_naming_file_row_and_column(tmp_path, case):
    data, where = BAD[case]
    spec = _write(tmp_path, data=data)
    result = CliRunner().invoke(app, ["fit", str(spec), "--serial"])
    assert result.exit_code == 2, result.output
    text = " ".join(result.output.split())
    assert "data.csv" in text and where in text, text


def _posterior(folder: Path) -> dict:
    ds = xr.open_zarr(folder / "fit" / "posterior.zarr").load()
    return {name: ds[name].values for name in ("theta", "weight", "distance", "tolerance", "ess")}


def _same(a: dict, b: dict) -> None:
    for name in a:
        assert a[name].tobytes() == b[name].tobytes(), name


def test_same_posterior_serial_and_two_workers(tmp_path):
    one, two = tmp_path / "one", tmp_path / "two"
    one.mkdir(), two.mkdir()
    runner = CliRunner()
    r1 = runner.invoke(app, ["fit", str(_write(one)), "--serial"])
    r2 = runner.invoke(app, ["fit", str(_write(two)), "--workers", "2"])
    assert r1.exit_code == 0 and r2.exit_code == 0, r1.output + r2.output
    _same(_posterior(one), _posterior(two))


def test_sigkill_then_resume_gives_the_same_posterior(tmp_path):
    ref, killed = tmp_path / "ref", tmp_path / "killed"
    ref.mkdir(), killed.mkdir()
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[2])}
    cmd = [sys.executable, "-W", "ignore", "-m", "sweep.cli", "fit"]
    spec = _write(killed, particles=20, rounds=3)
    proc = subprocess.Popen(cmd + [str(spec), "--serial"], env=env, stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 240
    # kill it once round 1 has begun simulating (its first batch's sweep store exists)
    while not (killed / "fit" / "round_001" / "batch_000" / "sims.zarr").exists():
        assert proc.poll() is None and time.monotonic() < deadline, "the fit ended or stalled before round 1"
        time.sleep(0.05)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    again = subprocess.run(cmd + [str(spec), "--serial"], env=env, capture_output=True, text=True, timeout=300)
    assert again.returncode == 0, again.stdout + again.stderr
    done = subprocess.run(cmd + [str(_write(ref, particles=20, rounds=3)), "--serial"], env=env,
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stdout + done.stderr
    _same(_posterior(ref), _posterior(killed))


def test_dry_run_estimates_without_running(tmp_path):
    spec = _write(tmp_path)
    result = CliRunner().invoke(app, ["fit", str(spec), "--dry-run", "--workers", "2"])
    assert result.exit_code == 0, result.output
    assert "trajectories" in result.output and not (tmp_path / "fit").exists()


def test_folder_of_another_fit_is_refused(tmp_path):
    spec = _write(tmp_path, particles=4, rounds=1)
    runner = CliRunner()
    assert runner.invoke(app, ["fit", str(spec), "--serial"]).exit_code == 0
    spec.write_text(spec.read_text().replace("seed = 11", "seed = 12"), encoding="utf-8")
    result = runner.invoke(app, ["fit", str(spec), "--serial"])
    assert result.exit_code == 2 and "another spec" in " ".join(result.output.split()), result.output


def test_serial_with_a_cluster_is_refused(tmp_path):
    result = CliRunner().invoke(app, ["fit", str(_write(tmp_path)), "--serial", "--cluster", "slurm"])
    assert result.exit_code == 2 and "--serial" in result.output, result.output
