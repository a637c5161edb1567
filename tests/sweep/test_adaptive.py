"""Adaptive replicates (`[run.adaptive]`): rounds of replicate blocks until each point's statistic is
precise enough, on real local Dask clusters, real stores and real killed processes.

Sources, named beside the checks:
- Immigration-death from zero molecules: the count at time t is Poisson with mean
  lambda = k / g (1 - exp(-g t)) (common practice; e.g. Gardiner 2004, Handbook of Stochastic Methods, 3rd ed., Springer). The standard error of the
  mean of n Poisson(lambda) replicates is sqrt(lambda / n) (common practice), so a relative
  precision eps needs n = 1 / (eps^2 lambda) replicates.
- A Poisson count's Fano factor is 1 with standard error sqrt(2 / n) (the index-of-dispersion
  test: (n - 1) s^2 / mean ~ chi^2 with n - 1 degrees of freedom; Hoel 1943, from memory).
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import zarr
from typer.testing import CliRunner

import sweep
from sweep.execute import adaptive
from sweep.cli import app
from sweep.errors import SpecError
from support.stores import arrays

Z_999 = 3.29  # two-sided normal quantile for alpha = 0.001
runner = CliRunner()

MODEL = """
[model.species]
A = 0
[model.parameters]
k = 5.0
g = 1.0
[model.reactions]
birth = { reaction = "0 -> A", rate = "k" }
death = { reaction = "A -> 0", rate = "g" }
"""
# three points whose Poisson means 100, 2 and 0.2 need 1 / (0.03^2 lambda) = 11, 556 and 5,556
# replicates for a 3 % relative standard error of the mean
BODY = """
[run]
replicates = 100
replicates_per_task = 50
seed = 3
[run.adaptive]
statistic = "mean"
species = "A"
time = "last"
precision = 0.03
max_replicates = 1020          # not a whole number of blocks: the last block holds 20
[time]
end = 20.0
samples = 3
[design.vary]
k = [100.0, 2.0, 0.2]
"""
EPS, MOST, PER_TASK = 0.03, 1020, 50
LAMBDA = np.array([100.0, 2.0, 0.2]) * (1 - np.exp(-20.0))


def _needed(lam):
    return 1 / (EPS ** 2 * lam)


@pytest.fixture(scope="module")
def adaptive_store(tmp_path_factory, spec_writer):
    """One adaptive sweep run with `sweep run` on a real 2-worker local cluster."""
    folder = tmp_path_factory.mktemp("adaptive")
    path = spec_writer(folder, BODY, model=MODEL)
    store = folder / "a.zarr"
    result = runner.invoke(app, ["run", str(path), "--store", str(store), "--workers", "2"])
    assert result.exit_code == 0, result.output
    return path, store, result.output


def _text(output: str) -> str:
    """A rich table's cells as one line of words (wrapped cells joined again)."""
    return " ".join(output.replace("│", " ").split())


def _replicates_run(store: Path) -> np.ndarray:
    return (zarr.open_group(store, mode="r")["status"][:] >= 0).sum(axis=1)


def test_points_stop_when_their_mean_is_precise_enough(adaptive_store):
    _, store, output = adaptive_store
    ran = _replicates_run(store)
    # lambda = 100 needs 11: the first round's 100 replicates are enough, nothing is added
    assert ran[0] == 100
    # lambda = 2 needs 556: blocks are added; it stops within 0.7x..1.5x of that (the standard
    # error is estimated from the sample, plus a 10 % margin and whole blocks of 50)
    assert 0.7 * _needed(LAMBDA[1]) <= ran[1] <= 1.5 * _needed(LAMBDA[1]), ran
    # lambda = 0.2 needs 5,556 > max_replicates: it stops at the maximum, a partial last block included
    assert ran[2] == MOST
    assert "2 points met the target; 1 point reached max_replicates (1,020)" in _text(output)


def test_the_stored_mean_meets_the_target_and_theory(adaptive_store):
    _, store, _ = adaptive_store
    ds = sweep.open_results(store)
    counts = ds["counts"].isel(time=-1, species=0).values.astype(float)
    status = ds["status"].values
    for p, lam in enumerate(LAMBDA):
        x = counts[p][status[p] == 0]
        se = x.std(ddof=1) / np.sqrt(x.size)
        assert abs(x.mean() - lam) < Z_999 * np.sqrt(lam / x.size), (p, x.mean(), lam)  # Poisson, alpha = 0.001
        assert (se <= EPS * x.mean()) == (p < 2), (p, se / x.mean())


def test_replicates_not_run_stay_missing(adaptive_store):
    _, store, _ = adaptive_store
    g = zarr.open_group(store, mode="r")
    status, counts, events, done = g["status"][:], g["counts"][:], g["events"][:], g["done"][:]
    assert status.shape == (3, MOST) and done.shape == (3, -(-MOST // PER_TASK))
    for p, n in enumerate(_replicates_run(store)):
        assert np.all(status[p, :n] == 0) and np.all(status[p, n:] == -1)
        assert np.all(counts[p, n:] == -1) and np.all(events[p, n:] == -1)
        assert done[p].tolist() == [b * PER_TASK < n for b in range(done.shape[1])]


def test_analysis_and_status_leave_not_run_replicates_out(adaptive_store, tmp_path):
    _, store, _ = adaptive_store
    ran = _replicates_run(store)
    result = sweep.analyze(store, sweep.AnalysisOptions(statistics=("mean",), precision=EPS, tables=str(tmp_path)))
    rows = result.adequacy
    assert rows["replicates"].tolist() == ran.tolist()
    assert result.replicates_run == int(ran.sum()) and result.replicates == MOST
    assert rows["meets"].tolist() == [True, True, False]
    st = sweep.status(store)
    assert st.tasks_done == int(np.sum(-(-ran // PER_TASK))) and st.tasks_pending == 0
    assert st.tasks_not_needed == st.tasks_total - st.tasks_done
    assert st.adaptive["points"] == {"met": 2, "max": 1, "undefined": 0, "adding": 0, "failed": 0}
    out = _text(runner.invoke(app, ["status", str(store)]).output)
    assert "0 pending" in out and "not needed (adaptive)" in out and "100.0% done" in out
    assert "2 points met the target; 1 point reached max_replicates (1,020) without meeting it" in out


def test_rerun_has_nothing_to_do_and_a_changed_target_is_refused(adaptive_store, tmp_path):
    path, store, _ = adaptive_store
    before = _replicates_run(store)
    result = runner.invoke(app, ["run", str(path), "--store", str(store), "--workers", "1"])
    assert result.exit_code == 0 and "nothing to do" in result.output, result.output
    assert np.array_equal(_replicates_run(store), before)
    changed = tmp_path / "changed.toml"
    changed.write_text(path.read_text().replace("precision = 0.03", "precision = 0.05"))
    result = runner.invoke(app, ["run", str(changed), "--store", str(store), "--workers", "1"])
    assert result.exit_code == 2 and "run.adaptive.precision: 0.03 -> 0.05" in result.output, result.output


def test_fano_factor_target_and_an_undefined_point(spec_file, tmp_path):
    """Fano factor of a Poisson count: 1 with se sqrt(2 / n), so 20 % needs n = 2 / 0.2^2 = 50
    (index-of-dispersion test); the first round's 100 replicates meet it. At k = 0 the count
    stays 0, the Fano factor is undefined, and that point stops adding at once."""
    path = spec_file(BODY.replace('statistic = "mean"', 'statistic = "fano"').replace("precision = 0.03", "precision = 0.2")
                     .replace("k = [100.0, 2.0, 0.2]", "k = [0.0, 5.0]"), model=MODEL)
    summary = sweep.run(sweep.load(path, store=tmp_path / "f.zarr"), workers=1)
    assert summary.complete and summary.adaptive.state == [adaptive.UNDEFINED, adaptive.MET]
    assert summary.adaptive.replicates == [100, 100] and summary.tasks_total == 4
    assert abs(summary.adaptive.values[1] - 1.0) < Z_999 * np.sqrt(2 / 100)
    assert summary.adaptive.errors[1] == pytest.approx(np.sqrt(2 / 100), rel=0.3)


def test_next_round_follows_the_standard_error():
    # se falls as 1 / sqrt(n): 200 replicates at 1.5 x the target predict 200 x 1.5^2 = 450, +10 % = 495,
    # in blocks of 50
    assert adaptive.next_replicates(200, se=0.15, target=0.1, per_task=50, most=5000) == 500
    assert adaptive.next_replicates(100, se=0.11, target=0.1, per_task=50, most=5000) == 150  # at least a block
    assert adaptive.next_replicates(100, se=1.0, target=0.1, per_task=50, most=5000) == 400  # at most 4x
    assert adaptive.next_replicates(900, se=1.0, target=0.1, per_task=50, most=1020) == 1020  # never past the max
    assert adaptive.next_replicates(100, se=1.0, target=0.0, per_task=50, most=5000) == 400


@pytest.mark.parametrize("table, field, fragment", [
    ("nope = 1\nmax_replicates = 500", "run.adaptive.nope", "unknown key"),
    ('statistic = "median"\nmax_replicates = 500', "run.adaptive.statistic", "unknown statistic"),
    ('species = "B"\nmax_replicates = 500', "run.adaptive.species", "not a species"),
    ("time = 99.0\nmax_replicates = 500", "run.adaptive.time", "outside the sampled times"),
    ("precision = 0\nmax_replicates = 500", "run.adaptive.precision", "> 0"),
    ("relative = 1\nmax_replicates = 500", "run.adaptive.relative", "true or false"),
    ("precision = 0.1", "run.adaptive.max_replicates", "missing"),
    ("max_replicates = 50", "run.adaptive.max_replicates", "at least run.replicates (100)"),
])
def test_bad_adaptive_tables_are_refused(spec_file, table, field, fragment):
    path = spec_file("[run]\nreplicates = 100\n[run.adaptive]\n" + table + "\n[time]\nend = 1.0\nsamples = 3\n",
                     model=MODEL)
    with pytest.raises(SpecError) as info:
        sweep.load(path)
    assert field in str(info.value) and fragment in str(info.value), str(info.value)
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 2 and field in result.output.replace("\n", ""), result.output


def test_deterministic_method_and_shards_are_refused(spec_file, tmp_path):
    path = spec_file('[run]\nmethod = "ode"\n[run.adaptive]\nmax_replicates = 5\n[time]\nend = 1.0\nsamples = 3\n',
                     model=MODEL)
    assert runner.invoke(app, ["check", str(path)]).exit_code == 2
    path = spec_file(BODY, model=MODEL)
    result = runner.invoke(app, ["run", str(path), "--store", str(tmp_path / "s.zarr"), "--shard", "1/2"])
    assert result.exit_code == 2 and "run.adaptive" in result.output and "--shard" in result.output, result.output


# --- a killed adaptive run resumes to the same bytes ---------------------------------------------

# The same three points with a busy second species (X, ~60,000 events per replicate), so each
# task takes a few tenths of a second and a SIGKILL lands in a later round
BUSY_MODEL = MODEL.replace("A = 0", "A = 0\nX = 0").replace("g = 1.0", "g = 1.0\nkx = 1500.0").replace(
    'death = { reaction = "A -> 0", rate = "g" }',
    'death = { reaction = "A -> 0", rate = "g" }\nxin = { reaction = "0 -> X", rate = "kx" }\n'
    'xout = { reaction = "X -> 0", rate = "g" }')
FIRST_ROUND = 3 * 2  # three points, two blocks of 50 each
DATA = ("counts", "status", "events", "done")


def _done_count(store: Path) -> int:
    try:
        return int(zarr.open_group(store, mode="r")["done"][:].sum())
    except Exception:  # not created yet
        return 0


SIGNAL_AFTER = Path(__file__).resolve().parents[1] / "support" / "signal_after.py"


def _command(path: Path, store: Path) -> list[str]:
    return [sys.executable, "-m", "sweep.cli", "run", str(path), "--store", str(store), "--workers", "2"]


@pytest.mark.slow
def test_sigkill_mid_round_then_resume_is_bit_identical(spec_file, tmp_path):
    path = spec_file(BODY, model=BUSY_MODEL)
    reference = sweep.run(sweep.load(path, store=tmp_path / "ref.zarr"), workers=2)
    assert reference.complete
    expected = arrays(tmp_path / "ref.zarr", DATA)
    total = int(expected["done"].sum())
    assert total > FIRST_ROUND + 6  # there are later rounds to interrupt

    store = tmp_path / "killed.zarr"
    # SIGKILL of the whole process group after the 3rd block of the second round has finished
    killer = [sys.executable, str(SIGNAL_AFTER), str(FIRST_ROUND + 3), "SIGKILL", *_command(path, store)[3:]]
    killed = subprocess.run(killer, capture_output=True, text=True, start_new_session=True, timeout=300,
                            env={**os.environ, "COLUMNS": "200"})
    assert killed.returncode == -signal.SIGKILL, killed.stdout + killed.stderr
    killed_at = _done_count(store)
    assert killed_at < total, (killed_at, total)

    result = subprocess.run(_command(path, store), capture_output=True, text=True, timeout=300,
                            env={**os.environ, "COLUMNS": "200"})
    assert result.returncode == 0, result.stdout + result.stderr
    assert "resuming:" in result.stdout
    got = arrays(store, DATA)
    for name in DATA:
        np.testing.assert_array_equal(got[name], expected[name], err_msg=name)
    assert sweep.status(store).adaptive == sweep.status(tmp_path / "ref.zarr").adaptive
