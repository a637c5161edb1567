"""`sweep plan`: sizes, a calibration that measures the right events, warnings, and refusals."""

from __future__ import annotations

import math

import numpy as np
import pytest
from typer.testing import CliRunner

import sweep
from kernels.network import KernelResult
from sweep import plan as planner
from sweep.plan import estimate
from sweep.cli import app

runner = CliRunner()

# Immigration-death from A(0) = 0 (the conftest model): births are Poisson(k T) and deaths are
# births minus A(T), with E[A(T)] = (k / g)(1 - exp(-g T)), so
# E[events] = 2 k T - (k / g)(1 - exp(-g T)).
GRID = """
[run]
replicates = 40
replicates_per_task = 10
seed = 3
[time]
end = 20.0
samples = 21
[design.vary]
k = [2.0, 5.0, 10.0]
g = [0.5, 1.0]
"""


def expected_events(k: float, g: float, t: float = 20.0) -> float:
    return 2 * k * t - k / g * (1 - math.exp(-g * t))


@pytest.fixture(scope="module")
def small_plan(tmp_path_factory, spec_writer):
    spec = sweep.load(spec_writer(tmp_path_factory.mktemp("plan"), GRID))
    return spec, planner.plan(spec, workers=2, seconds=0.5)


def test_sizes(small_plan):
    spec, result = small_plan
    size = result.size
    assert (size.points, size.replicates, size.tasks, size.samples, size.species) == (6, 40, 24, 21, 1)
    assert size.raw_bytes == 6 * 40 * (21 * 1 * 4 + 1 + 8) + 6 * 4 + 6 * 2 * 8
    assert 0 < result.compressed_bytes < size.raw_bytes
    assert result.trial_replicates == 10  # one full task's chunk


def test_calibration_measures_the_expected_events(small_plan):
    spec, result = small_plan
    assert sorted(c.point for c in result.costs) == list(range(6))  # small designs: every point
    for cost in result.costs:
        k, g = dict(cost.values)["k"], dict(cost.values)["g"]
        # a mean over >= 4 replicates; the sd of one replicate's events is below sqrt(3 k T)
        assert cost.replicates >= 4
        assert cost.events_per_replicate == pytest.approx(expected_events(k, g), abs=4 * math.sqrt(3 * k * 20 / 4))
    truth = sum(expected_events(k, g) for k, g in spec.points()) * 40
    assert result.events_total == pytest.approx(truth, rel=0.15)


def test_time_estimate_is_made_of_its_measured_parts(small_plan):
    """The estimate is startup + compile + the larger of the work shared by the workers and the
    longest task, whatever this machine's speed (no bound on seconds here: speed lives in benchmarks)."""
    _, result = small_plan
    size = result.size
    assert result.events_per_second > 0 and result.calibration_seconds > 0 and result.compile_seconds >= 0
    work = (result.events_total / result.events_per_second
            + size.tasks * (estimate.TASK_OVERHEAD_SECONDS + result.write_seconds))
    expected = (planner.STARTUP_SECONDS + result.compile_seconds
                + max(work / min(result.workers, size.tasks), result.longest_task_seconds))
    assert result.seconds == pytest.approx(expected, rel=1e-12)
    assert result.longest_task_seconds <= work
    assert result.warnings == ()


def test_calibration_seeds_are_not_the_sweeps(small_plan):
    # calibration replicate r of point p uses spawn key (p, r, 1); the sweep uses (p, r)
    assert planner.CALIBRATION_KEY == 1


def test_costly_point_is_flagged(spec_file):
    spec = sweep.load(spec_file(GRID.replace("k = [2.0, 5.0, 10.0]", "k = [1.0, 1.0, 1.0, 2000.0]")
                                .replace("g = [0.5, 1.0]", "g = [1.0]")))
    result = planner.plan(spec, workers=1, seconds=0.5)
    assert any("point 3 (k = 2000, g = 1): " in w and "1 of 4 calibrated points" in w for w in result.warnings), result.warnings


def test_event_cap_in_calibration_is_reported(spec_file):
    spec = sweep.load(spec_file(GRID.replace("[run]", "[run]\nmax_events = 50")))
    result = planner.plan(spec, workers=1, seconds=0.3)
    assert all(c.events_per_replicate <= 50 for c in result.costs)
    assert any("reached the event cap (max_events = 50)" in w for w in result.warnings)


def test_short_calibration_cap_is_extrapolated(spec_file, monkeypatch):
    monkeypatch.setattr(estimate, "FIRST_CAP", 20)
    monkeypatch.setattr(estimate, "MAX_CALIBRATION_REPLICATES", 1)
    spec = sweep.load(spec_file(GRID.replace("k = [2.0, 5.0, 10.0]", "k = [10.0]").replace("g = [0.5, 1.0]", "g = [1.0]")))
    # a budget too small to raise the cap: the one replicate stops after 20 events at about t = 1,
    # and its events are extrapolated over the 20 time units
    result = planner.plan(spec, workers=1, seconds=1e-9)
    (cost,) = result.costs
    assert cost.extrapolated == 1 and 200 < cost.events_per_replicate < 600


def test_plan_command_prints_the_plan(spec_file):
    path = spec_file(GRID.replace("[design.vary]\nk = [2.0, 5.0, 10.0]\ng = [0.5, 1.0]\n",
                                  '[design]\nkind = "lhs"\npoints = 6\n[design.vary]\n'
                                  'k = { low = 1, high = 10, distribution = "log-uniform" }\n'))
    result = runner.invoke(app, ["plan", str(path), "--workers", "3", "--seconds", "0.3"], env={"COLUMNS": "200"})
    assert result.exit_code == 0, result.output
    out = " ".join(result.output.split())
    for fragment in ("Design: lhs", "log-uniform", "24 of up to 10 replicates", "compressed (ratio", "from a trial",
                     "Calibration: 6 points", "estimated run time on 3 workers"):
        assert fragment in out, out


def test_huge_design_is_refused_without_yes(spec_file):
    path = spec_file(GRID.replace("replicates = 40\nreplicates_per_task = 10",
                                  "replicates = 200_000\nreplicates_per_task = 1"))
    result = runner.invoke(app, ["plan", str(path)])
    assert result.exit_code == 2, result.output
    out = " ".join(result.output.split())
    assert "1,200,000 tasks is more than 1,000,000" in out and "--yes" in out
    assert "Calibration" not in out  # refused before simulating anything
    result = runner.invoke(app, ["plan", str(path), "--yes", "--seconds", "0.2"])
    assert result.exit_code == 0, result.output
    assert "beyond the sane limits" in result.output


def test_terabyte_store_is_refused(spec_file):
    # tasks of 100 replicates keep each chunk (200 MB) within sweep.limits.MAX_CHUNK_BYTES
    path = spec_file(GRID.replace("replicates = 40\nreplicates_per_task = 10",
                                  "replicates = 100_000\nreplicates_per_task = 100")
                     .replace("samples = 21", "samples = 500_000"))
    result = runner.invoke(app, ["plan", str(path)])
    assert result.exit_code == 2 and "TB of raw results" in " ".join(result.output.split()), result.output


def test_limits_are_quiet_for_sane_designs(small_plan):
    assert planner.limits(small_plan[1].size) == []


def test_spread_visits_every_prefix_evenly():
    order = estimate._spread(100, 5)
    assert sorted(order) == [0, 25, 50, 74, 99] and order[:2] == [0, 99]
    assert estimate._spread(3, 32) == [0, 2, 1] and estimate._spread(1, 5) == [0]
    assert len(set(estimate._spread(1000, 256))) == 256


def test_trial_chunk_is_written_like_a_task_and_cleaned_up(small_plan, tmp_path):
    spec, _ = small_plan
    counts = np.random.default_rng(0).poisson(30, (10, 21, 1)).astype(np.int32)
    block = KernelResult(counts, np.zeros(10, np.int8), np.full(10, 100, np.int64))
    stored, seconds = planner.write_trial(block, spec, spec.points(), tmp_path)
    assert 0 < stored < counts.nbytes and seconds > 0
    assert list(tmp_path.iterdir()) == []  # the scratch store is gone


def test_compile_seconds_count_only_when_the_kernel_is_not_cached(spec_file, monkeypatch):
    """A model whose kernel is not in numba's disk cache (``kernels.compiled`` is False) pays its
    compilation once: the plan's warm-up measures it and the estimate includes it."""
    import kernels

    spec = sweep.load(spec_file(GRID))
    monkeypatch.setattr(kernels, "compiled", lambda method, network: True)
    cached = planner.plan(spec, workers=2, seconds=0.3)
    assert cached.compile_seconds == 0.0
    monkeypatch.setattr(kernels, "compiled", lambda method, network: False)
    cold = planner.plan(spec, workers=2, seconds=0.3)
    assert cold.compile_seconds > 0.0
    assert cold.seconds >= planner.STARTUP_SECONDS + cold.compile_seconds


def test_a_new_law_model_is_not_cached_and_the_plan_says_so(spec_file, tmp_path, monkeypatch):
    """With an empty law cache, a custom-law model's kernel is not compiled: ``sweep plan`` adds and
    prints the compile time; planned again, it is cached and adds nothing."""
    monkeypatch.setenv("SWEEP_CACHE_DIR", str(tmp_path / "laws"))
    model = """
    [model.species]
    A = 0
    [model.parameters]
    k = 5.0
    g = 0.5
    [model.reactions]
    birth = { reaction = "0 -> A", propensity = "k * 1.25" }
    death = { reaction = "A -> 0", propensity = "g * A" }
    """
    spec = sweep.load(spec_file(GRID, model=model))
    first = planner.plan(spec, workers=2, seconds=0.3)
    assert first.compile_seconds > 0.0
    again = planner.plan(spec, workers=2, seconds=0.3)
    assert again.compile_seconds == 0.0


def test_direct_on_a_large_network_is_advised_against():
    import kernels

    assert planner.method_advice("direct", 100) == []
    assert planner.method_advice("nrm", 5000) == []
    (note,) = planner.method_advice("direct", kernels.ADVISE_FROM)
    assert "'nrm' or 'cr'" in note


def test_plan_warns_for_direct_on_a_large_network(spec_file):
    sites = 300  # 600 reactions
    hops = "\n".join(f'f{i} = {{ reaction = "S{i} -> S{(i + 1) % sites}", rate = 1.0 }}\n'
                     f'b{i} = {{ reaction = "S{(i + 1) % sites} -> S{i}", rate = 1.0 }}' for i in range(sites))
    species = "\n".join(f"S{i} = 2" for i in range(sites))
    model = f"[model.species]\n{species}\n[model.reactions]\n{hops}\n"
    body = "[run]\nreplicates = 2\nseed = 1\nmethod = \"direct\"\n[time]\nend = 0.5\nsamples = 3\n"
    spec = sweep.load(spec_file(body, model=model))
    result = planner.plan(spec, workers=1, seconds=0.2)
    assert any("'nrm' or 'cr'" in w for w in result.warnings)
