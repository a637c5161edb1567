"""Every figure: returned as a Figure with the right labels, saved by `sweep plot` as a real image."""

from __future__ import annotations

import logging

import matplotlib.image
import numpy as np
import pytest
from distributed import LocalCluster
from typer.testing import CliRunner

import sweep
from sweep import plot
from sweep.cli import app
from sweep.errors import SpecError, StoreError

GRID = """
[run]
replicates = 60
replicates_per_task = 30
seed = 5
[time]
end = 10.0
samples = 11
[design.vary]
k = [2.0, 8.0]
g = [0.5, 1.0, 2.0]
"""
PIXELS = (750, 1200)  # 8 x 5 inches at 150 dpi


@pytest.fixture(scope="module")
def store(tmp_path_factory, spec_writer):
    """Immigration-death (tests/conftest.py) on a 2 x 3 grid, run in-process and analysed."""
    folder = tmp_path_factory.mktemp("plot")
    spec = sweep.load(spec_writer(folder, GRID), store=folder / "grid.zarr")
    with LocalCluster(n_workers=1, threads_per_worker=2, processes=False, dashboard_address=":0",
                      silence_logs=logging.ERROR) as cluster:
        sweep.run(spec, scheduler=cluster.scheduler_address)
    sweep.analyze(spec.store, sweep.AnalysisOptions(statistics=("mean", "fano")))
    return spec.store


def _readable(fig) -> None:
    """Slide-sized: 8 x 5 inches, no text on the axes below 12 pt."""
    assert tuple(fig.get_size_inches()) == (8.0, 5.0)
    ax = fig.axes[0]
    texts = [ax.xaxis.label, ax.yaxis.label, *ax.get_xticklabels(), *ax.get_yticklabels()]
    assert min(t.get_fontsize() for t in texts) >= 12


def test_ensemble(store):
    fig = plot.ensemble(store, "A", points=[0, 5], samples=2, time_unit="min")
    ax = fig.axes[0]
    assert ax.get_xlabel() == "time (min)" and ax.get_ylabel() == "A (molecules)"
    assert [t.get_text() for t in fig.legends[0].get_texts()] == [
        "point 0: k=2, g=0.5 (60 replicates)", "point 5: k=8, g=2 (60 replicates)"]
    assert len(ax.lines) == 2 * (2 + 1)  # per point: two sample trajectories and the mean
    _readable(fig)


def test_distribution_marks_the_mean(store):
    fig = plot.distribution(store, "A", time=10.0, points=[3])
    ax = fig.axes[0]
    assert ax.get_xlabel() == "A (molecules) at t = 10" and ax.get_ylabel() == "fraction of replicates"
    counts = sweep.open_results(store)["counts"].isel(point=3, time=-1, species=0).values
    (mean_line,) = [line for line in ax.lines if line.get_linestyle() == "--"]
    assert mean_line.get_xdata()[0] == pytest.approx(counts.mean())
    _readable(fig)


def test_convergence(store):
    fig = plot.convergence(store, "fano", "A", points=[1])
    ax = fig.axes[0]
    assert ax.get_xlabel() == "finished replicates used" and ax.get_ylabel() == "Fano factor of A, t = 10"
    assert ax.get_xscale() == "log" and ax.lines[0].get_xdata()[-1] == 60
    _readable(fig)


def test_sensitivity_bars_with_intervals(store):
    fig = plot.sensitivity(store, "mean", "A")
    ax = fig.axes[0]
    assert [t.get_text() for t in ax.get_xticklabels()] == ["k", "g"]
    assert ax.get_xlabel() == "parameter" and ax.get_ylabel().startswith("PRCC")
    assert "mean of A at t = 10" in fig.get_suptitle()
    heights = [bar.get_height() for bar in ax.patches]
    assert heights[0] > 0 > heights[1]  # more immigration, more A; faster death, fewer
    _readable(fig)


def test_heatmap_over_the_grid(store):
    fig = plot.heatmap(store, "mean", "A", x="k", y="g")
    ax = fig.axes[0]
    assert ax.get_xlabel() == "k" and ax.get_ylabel() == "g"
    assert [t.get_text() for t in ax.get_yticklabels()] == ["0.5", "1", "2"]
    grid = ax.images[0].get_array()
    assert grid.shape == (3, 2) and grid[0, 1] > grid[2, 0]  # k/g: 8/0.5 against 2/2
    assert fig.axes[1].get_ylabel() == "mean of A at t = 10"  # the colour bar names the statistic
    _readable(fig)


@pytest.mark.parametrize("kind", ["ensemble", "distribution", "convergence", "sensitivity", "heatmap"])
def test_cli_writes_png_and_svg(store, tmp_path, kind):
    png, svg = tmp_path / f"{kind}.png", tmp_path / f"{kind}.svg"
    for target in (png, svg):
        result = CliRunner().invoke(app, ["plot", str(store), kind, "--species", "A", "-o", str(target)])
        assert result.exit_code == 0, result.output
    image = matplotlib.image.imread(png)
    assert image.shape[:2] == PIXELS and np.ptp(image) > 0  # not blank
    assert svg.read_text().lstrip().startswith("<?xml") and "<svg" in svg.read_text()


def test_bad_requests(store, tmp_path):
    runner = CliRunner()
    for args, message in ((["ensemble", "--species", "B"], "not a species"), (["heatmap", "--x", "z"], "not a varied"),
                          (["ensemble", "--point", "9"], "must be within 0..5"),
                          (["ensemble", "-o", str(tmp_path / "a.gif")], "unsupported image format")):
        result = runner.invoke(app, ["plot", str(store), *args])
        assert result.exit_code == 2 and message in result.output, (args, result.output)
    with pytest.raises(SpecError, match="needs a threshold"):
        plot.heatmap(store, "passage_mean")
    with pytest.raises(SpecError, match="not a statistic"):
        plot.heatmap(store, "median")
    with pytest.raises(StoreError, match="sweep analyze"):
        plot.sensitivity(tmp_path / "none.zarr")
