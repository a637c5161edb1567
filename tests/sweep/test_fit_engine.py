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

# an observable the data file may name (a negative one is allowed: it is not a count)
OBSERVABLE = """
[observables]
doubled = "2 * X"
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


def _write(folder: Path, particles=12, rounds=2, data: str | None = None, model: str = MODEL + OBSERVABLE) -> Path:
    (folder / "model.toml").write_text(model, encoding="utf-8")
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
    "negative count of a species, beside an observable": (
        "time,condition,observable,value\n8,a,doubled,-3\n8,b,X,-4\n", "row 3, column value"),
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
    # with Python's default warning filters: a resumed and an uninterrupted fit print no library
    # warnings (zarr warned on every record write of fixed-width strings; xarray on every read-back
    # of a record without consolidated metadata)
    plain = [sys.executable, "-m", "sweep.cli", "fit"]
    again = subprocess.run(plain + [str(spec), "--serial"], env=env, capture_output=True, text=True, timeout=300)
    assert again.returncode == 0, again.stdout + again.stderr
    done = subprocess.run(plain + [str(_write(ref, particles=20, rounds=3)), "--serial"], env=env,
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stdout + done.stderr
    for result in (again, done):
        assert "Warning" not in result.stderr, result.stderr
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


def test_data_may_name_an_observable_and_the_fit_reads_its_values(tmp_path):
    """A data file naming an observable ("doubled" = 2 X) is compared with the stored observable,
    which for every replicate is exactly twice its X count (common practice: a linear readout)."""
    from sweep.fit.engine import SweepEvaluator
    from sweep.fit.records import Folder
    from sweep.fit.spec import load

    rng = np.random.default_rng(2)  # invented data
    lines = ["time,condition,species,value"] + [f"8,a,doubled,{2 * v}" for v in rng.poisson(10.0, 20)]
    lines += [f"8,b,X,{v}" for v in rng.poisson(5.0, 20)] + [f"2,b,doubled,{2 * v}" for v in rng.poisson(4.0, 20)]
    spec = _write(tmp_path, data="\n".join(lines) + "\n")
    fit = load(spec)
    assert [(c.condition, c.time, c.species) for c in fit.observed.components] == [
        ("a", 8.0, "doubled"), ("b", 2.0, "doubled"), ("b", 8.0, "X")]
    from sweep.execute.execution import Execution

    evaluator = SweepEvaluator(fit, Folder(tmp_path / "fit", fit.prior.names, fit.prior.names),
                               Execution("shard", shard=(1, 1)))
    values, status = evaluator.simulate(np.array([[10.0], [20.0]]), tmp_path / "batch", seed=5)
    assert values.shape == (2, 2, 20, 3) and (status == 0).all()
    doubled_b_at_2, x_b_at_8 = values[:, 1, :, 1], values[:, 1, :, 2]
    assert np.all(values[:, 0, :, 0] % 2 == 0) and np.all(doubled_b_at_2 % 2 == 0)
    import sweep

    ds = sweep.open_results(tmp_path / "batch" / "sims.zarr")
    counts = ds["counts"].sel(species="X").values  # (point, replicate, time)
    np.testing.assert_array_equal(values[:, 1, :, 1], 2 * counts[1::2, :, 1])  # point order: particle-major
    np.testing.assert_array_equal(values[:, 1, :, 2], counts[1::2, :, 2])
    np.testing.assert_array_equal(values[:, 0, :, 0], 2 * counts[0::2, :, 2])
    result = CliRunner().invoke(app, ["fit", str(spec), "--serial"])
    assert result.exit_code == 0, result.output
