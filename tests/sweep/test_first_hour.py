"""Issue 17, "a modeller's first hour": what the CLI, analysis, plots and export say and draw.

Each test names the bug it holds down. Stores are small and run in-process (a thread-based Dask
cluster), so the module stays within seconds per store.
"""

from __future__ import annotations

import json
import logging
import re

import matplotlib.image
import numpy as np
import pandas as pd
import pytest
import xarray as xr
import zarr
from distributed import LocalCluster
from typer.testing import CliRunner

import sweep
from sweep import store as store_mod
from sweep.cli import app

runner = CliRunner()

# Repressed production, the README's Hill law, with a parameter named `n` (a column name of the
# tables). vmax = 0 keeps A at 0, so its Fano factor is undefined at those points.
HILL = """
[model.species]
A = 0
[model.parameters]
vmax = 20.0
K = 10.0
n = 2.0
g = 1.0
[model.reactions]
make = { reaction = "0 -> A", propensity = "hill_down(A, vmax, K, n)" }
loss = { reaction = "A -> 0", rate = "g" }
"""
HILL_BODY = """
[run]
replicates = 40
replicates_per_task = 20
seed = 17
[time]
end = 5.0
samples = 6
[design.vary]
vmax = [0.0, 10.0, 40.0]
n = [1.0, 4.0]
"""

# Immigration-death (tests/conftest.py) where k = 0 keeps A at 0: its Fano factor is undefined there.
GRID_BODY = """
[run]
replicates = 40
replicates_per_task = 40
seed = {seed}
[time]
end = 5.0
samples = 6
[design.vary]
k = [0.0, 2.0, 8.0]
g = [0.5, 2.0]
"""

# Immigration-death with an event cap (120 events) that only the slowest points stay under.
CAPPED_BODY = """
[run]
replicates = 20
replicates_per_task = 10
seed = 5
max_events = 120
[time]
end = 2.0
samples = 5
[design.vary]
k = [1.0, 200.0, 400.0, 800.0]
g = [0.5, 1.0]
"""

# Two fates: a decision molecule S becomes On or Off with equal rates; On makes P. At t = 4 about
# half the replicates hold P near 4 x 30 (Poisson) and half hold P = 0: clearly bimodal.
FATES = """
[model.species]
S = 1
On = 0
Off = 0
P = 0
[model.parameters]
a = 5.0
b = 5.0
k = 30.0
[model.reactions]
go_on = { reaction = "S -> On", rate = "a" }
go_off = { reaction = "S -> Off", rate = "b" }
make = { reaction = "On -> On + P", rate = "k" }
"""
FATES_BODY = """
[run]
replicates = 300
replicates_per_task = 150
seed = 11
[time]
end = 4.0
samples = 9
[design.vary]
k = [30.0, 60.0]
"""

# A telegraph gene: one promoter copy switching on and off, mRNA made while on.
TELEGRAPH = """
[model.species]
G_off = 1
G_on = 0
M = 0
[model.parameters]
k_on = 0.5
k_off = 0.5
k_tx = 20.0
g = 1.0
[model.reactions]
on = { reaction = "G_off -> G_on", rate = "k_on" }
off = { reaction = "G_on -> G_off", rate = "k_off" }
tx = { reaction = "G_on -> G_on + M", rate = "k_tx" }
deg = { reaction = "M -> 0", rate = "g" }
"""
TELEGRAPH_BODY = """
[run]
method = "{method}"
replicates = {replicates}
replicates_per_task = {replicates}
seed = 7
[time]
end = 5.0
samples = 11
[design.vary]
k_tx = [5.0, 20.0]
"""


@pytest.fixture(scope="module")
def cluster():
    with LocalCluster(n_workers=1, threads_per_worker=2, processes=False, dashboard_address=":0",
                      silence_logs=logging.ERROR) as c:
        yield c.scheduler_address


def _run_cli(spec, cluster, *extra):
    result = runner.invoke(app, ["run", str(spec), "--scheduler", cluster, *extra])
    assert result.exit_code == 0, result.output
    return result


@pytest.fixture(scope="module")
def hill(tmp_path_factory, spec_writer, cluster):
    folder = tmp_path_factory.mktemp("hill")
    spec = sweep.load(spec_writer(folder, HILL_BODY, model=HILL), store=folder / "hill.zarr")
    sweep.run(spec, scheduler=cluster)
    return spec.store


@pytest.fixture(scope="module")
def grid(tmp_path_factory, spec_writer, cluster):
    folder = tmp_path_factory.mktemp("grid")
    spec = sweep.load(spec_writer(folder, GRID_BODY.format(seed=4)), store=folder / "grid.zarr")
    sweep.run(spec, scheduler=cluster)
    return spec.store


@pytest.fixture(scope="module")
def capped(tmp_path_factory, spec_writer, cluster):
    folder = tmp_path_factory.mktemp("capped")
    spec = spec_writer(folder, CAPPED_BODY)
    result = _run_cli(spec, cluster, "--store", str(folder / "capped.zarr"))
    return folder / "capped.zarr", result.output


@pytest.fixture(scope="module")
def fates(tmp_path_factory, spec_writer, cluster):
    """The two-fate store, with a time unit in its attributes (as the spec's [time] unit will write)."""
    folder = tmp_path_factory.mktemp("fates")
    spec = sweep.load(spec_writer(folder, FATES_BODY, model=FATES), store=folder / "fates.zarr")
    sweep.run(spec, scheduler=cluster)
    store_mod.finish_run(spec.store, time_unit="min")
    return spec.store


# --- 1. markup: brackets in errors, stored text and help --------------------------------------------


@pytest.mark.parametrize("term", ["P[cyt]", "P[/]"])
def test_bracketed_reaction_is_quoted_as_written(spec_file, term):
    """Bug 1: rich ate "[cyt]" (a message about 'P -> 0'), and "[/]" crashed with a MarkupError, exit 1."""
    spec = spec_file("[time]\nend = 1.0\nsamples = 2\n",
                     model=f'[model.species]\nP = 0\n[model.parameters]\nk = 1.0\n[model.reactions]\n'
                           f'r = {{ reaction = "{term} -> 0", rate = "k" }}\n')
    result = runner.invoke(app, ["check", str(spec)])
    assert result.exit_code == 2, result.output
    assert f"'{term} -> 0'" in result.output and "Traceback" not in result.output


def test_unknown_species_hint_keeps_its_brackets(spec_file):
    spec = spec_file("[time]\nend = 1.0\nsamples = 2\n",
                     model='[model.species]\nP = 0\n[model.parameters]\nk = 1.0\n[model.reactions]\n'
                           'r = { reaction = "0 -> Q", rate = "k" }\n')
    result = runner.invoke(app, ["check", str(spec)])
    assert result.exit_code == 2 and "declare it under [species]" in result.output, result.output


def test_paths_with_brackets_are_printed_as_given(hill, tmp_path):
    """A store or output path holding brackets is printed whole, by every command that names it."""
    target = tmp_path / "fig[1]" / "a[/].png"
    result = runner.invoke(app, ["plot", str(hill), "ensemble", "-o", str(target)])
    assert result.exit_code == 0 and target.is_file(), result.output
    assert str(target) in result.output.replace("\n", "")
    out = tmp_path / "t[x].csv"
    result = runner.invoke(app, ["export", str(hill), "-o", str(out), "-p", "0"])
    assert result.exit_code == 0 and str(out) in result.output.replace("\n", ""), result.output


def _commands():
    return {c.name: c for c in app.registered_commands}


@pytest.mark.parametrize("name", ["init", "check", "plan", "run", "status", "trace", "analyze", "plot", "export",
                                  "export-model", "bench", "submit"])
def test_help_screens_keep_brackets_and_show_no_type_noise(name):
    """Bug 1 (help), and "no <bool> on flags, no {SPEC}": every [word] of a help text is shown."""
    import inspect

    result = runner.invoke(app, [name, "--help"], terminal_width=200)
    assert result.exit_code == 0, result.output
    text = result.output
    assert "<bool>" not in text and "{" not in text.split("\n", 3)[1], text
    callback = _commands()[name].callback
    helps = [callback.__doc__ or ""]
    for param in inspect.signature(callback).parameters.values():
        for info in getattr(param.annotation, "__metadata__", ()):
            if getattr(info, "help", None) and not getattr(info, "hidden", False):
                helps.append(info.help)
    flat = " ".join(text.split())
    for help_text in helps:
        for token in re.findall(r"\\*\[[a-z][\w.]*\]", help_text):
            assert token.lstrip("\\") in flat, (name, token)


# --- 2. a parameter named like a column ------------------------------------------------------------


def test_parameter_named_n_analyses(hill, tmp_path):
    """Bug 2: `ValueError: cannot insert n, already exists` after the analysis group was partly written."""
    # the old spelling --tables (still accepted) so that this test ran on the code before the fix
    result = runner.invoke(app, ["analyze", str(hill), "--species", "A", "--tables", str(tmp_path / "t")])
    assert result.exit_code == 0, result.output
    stats = pd.read_csv(tmp_path / "t" / "statistics.csv")
    assert list(stats.columns[:6]) == ["point", "vmax", "param.n", "time", "species", "n"]
    assert stats["n"].eq(40).all() and set(stats["param.n"]) == {1.0, 4.0}
    adequacy = pd.read_csv(tmp_path / "t" / "adequacy.csv")
    assert "param.n" in adequacy.columns


def test_analysis_group_is_written_whole_or_not_at_all(hill, tmp_path, monkeypatch):
    """Bug 2: a failure after the statistics left a half-new `analysis` group; now the old one stays."""
    from sweep.analysis import tables

    sweep.analyze(hill, sweep.AnalysisOptions(statistics=("mean",), species=("A",), tables=str(tmp_path / "a")))
    before = xr.open_zarr(hill, group="analysis/sensitivity").to_dataframe()

    def broken(*args, **kwargs):
        raise OSError("disk full (simulated)")

    monkeypatch.setattr(tables, "write", broken)
    with pytest.raises(OSError):
        sweep.analyze(hill, sweep.AnalysisOptions(statistics=("fano",), species=("A",), tables=str(tmp_path / "b")))
    after = xr.open_zarr(hill, group="analysis/sensitivity").to_dataframe()
    assert set(after["statistic"]) == {"mean"} and len(after) == len(before)
    assert not any(p.name.startswith(".analysis") for p in hill.iterdir())


# --- 3. the adequacy table's worst point ------------------------------------------------------------


def test_worst_point_is_the_largest_not_the_first_defined(grid, tmp_path):
    """Bug 3: with the Fano factor undefined at k = 0, the table named the first defined point."""
    result = runner.invoke(app, ["analyze", str(grid), "-s", "fano", "--tables", str(tmp_path / "w")],
                           terminal_width=200)
    assert result.exit_code == 0, result.output
    table = pd.read_csv(tmp_path / "w" / "adequacy.csv")
    ratio = (table["se"] / table["target_se"]).to_numpy()
    assert np.isnan(ratio[:2]).all()  # k = 0: the mean is 0
    expected = int(table["point"][np.nanargmax(ratio)])
    assert expected != 2  # the first defined point: what the old code printed
    adequacy = result.output.split("Replicate adequacy", 1)[1]
    row = next(line for line in adequacy.splitlines() if "fano(A)" in line)
    cells = [c.strip() for c in row.split("│") if c.strip()]
    assert cells[3] == str(expected), row


# --- 5. the worked example's histogram, --time, and where the tables go -------------------------------


def test_histogram_with_stationary_from_still_writes_histograms_at_the_last_time(grid, tmp_path):
    """Bug 5: `--histogram A --stationary-from 2` wrote stationary.csv but no histograms.csv."""
    result = runner.invoke(app, ["analyze", str(grid), "--histogram", "A", "--stationary-from", "2",
                                 "--tables", str(tmp_path / "h")])
    assert result.exit_code == 0, result.output
    hist = pd.read_csv(tmp_path / "h" / "histograms.csv")
    assert set(hist["time"]) == {5.0} and (tmp_path / "h" / "stationary.csv").is_file()


def test_one_time_option_for_statistics_and_histograms(hill, tmp_path):
    result = runner.invoke(app, ["analyze", str(hill), "--histogram", "A", "--time", "2", "--time", "4:5",
                                 "-s", "mean", "--species", "A", "-o", str(tmp_path / "t")])
    assert result.exit_code == 0, result.output
    assert set(pd.read_csv(tmp_path / "t" / "histograms.csv")["time"]) == {2.0, 4.0, 5.0}
    assert set(pd.read_csv(tmp_path / "t" / "sensitivity.csv")["time"]) == {2.0, 4.0, 5.0}
    old = runner.invoke(app, ["analyze", str(hill), "--histogram", "A", "--at-time", "3", "--tables",
                              str(tmp_path / "old")])  # the old spellings still work, hidden from help
    assert old.exit_code == 0 and set(pd.read_csv(tmp_path / "old" / "histograms.csv")["time"]) == {3.0}


def test_default_tables_folder_is_named_after_the_store(hill):
    from sweep.analysis.report import default_tables

    assert default_tables(hill) == hill.parent / "hill_analysis"


# --- the event cap ---------------------------------------------------------------------------------


def test_run_status_and_analyze_name_the_points_that_lost_replicates(capped, tmp_path):
    """With the cap reached at most points: run and status list them with the fix; analyze prints
    no PRCC from two points (it printed -1.000 and 1.000 before)."""
    path, run_output = capped
    flat = " ".join(run_output.split())
    assert "points lost replicates" in flat and "run.max_events" in flat and "(now 120)" in flat
    status = runner.invoke(app, ["status", str(path)], terminal_width=200)
    assert status.exit_code == 0 and "point 7 (k=800, g=1): 0 of 20 finished, 20 capped" in status.output
    result = runner.invoke(app, ["analyze", str(path), "-s", "mean", "-o", str(tmp_path / "c")], terminal_width=200)
    assert result.exit_code == 0, result.output
    table = pd.read_csv(tmp_path / "c" / "sensitivity.csv")
    assert table["value"].isna().all() and table["note"].str.contains("too few points with a value").all()
    assert "-1.000" not in result.output and " 1.000" not in result.output
    assert "Replicates lost" in result.output and "run.max_events" in result.output


# --- vocabulary ------------------------------------------------------------------------------------


def test_point_forms_are_the_same_everywhere(hill, tmp_path):
    fig = tmp_path / "e.png"
    assert runner.invoke(app, ["plot", str(hill), "ensemble", "-p", "0:1,3", "-o", str(fig)]).exit_code == 0
    csv = tmp_path / "e.csv"
    assert runner.invoke(app, ["export", str(hill), "-o", str(csv), "-p", "0:1,3"]).exit_code == 0
    assert sorted(set(pd.read_csv(csv)["point"])) == [0, 1, 3]
    log = tmp_path / "log.csv"
    result = runner.invoke(app, ["trace", str(hill), "-p", "3", "-r", "1", "-o", str(log)])
    assert result.exit_code == 0 and log.is_file(), result.output
    result = runner.invoke(app, ["trace", str(hill), "-p", "0:2", "-r", "1"])
    assert result.exit_code == 2 and "give one point" in result.output
    result = runner.invoke(app, ["export", str(hill), "-o", str(csv), "-p", "3:1"])
    assert result.exit_code == 2 and "range end is before its start" in result.output


def test_repeated_species_is_refused_by_plot(hill, tmp_path):
    result = runner.invoke(app, ["plot", str(hill), "ensemble", "--species", "A", "--species", "A",
                                 "-o", str(tmp_path / "x.png")])
    assert result.exit_code == 2 and "--species" in result.output and not (tmp_path / "x.png").exists()


def test_output_is_dash_o_everywhere_old_spellings_hidden(hill, tmp_path):
    old = runner.invoke(app, ["export", str(hill), str(tmp_path / "pos.csv"), "-p", "0"])
    assert old.exit_code == 0 and (tmp_path / "pos.csv").is_file()
    missing = runner.invoke(app, ["export", str(hill)])
    assert missing.exit_code == 2 and "-o/--output" in missing.output
    for name in ("plot", "trace", "export", "export-model", "analyze", "submit"):
        text = runner.invoke(app, [name, "--help"], terminal_width=200).output
        assert re.search(r"--output\s+-o", text), name
        assert "--tables" not in text and "--at-time" not in text and "--out " not in text, name


def test_status_of_a_spec_finds_its_store(tmp_path, spec_file, cluster, monkeypatch):
    monkeypatch.chdir(tmp_path)
    spec = spec_file("[run]\nreplicates = 4\nreplicates_per_task = 4\nstore = \"s.zarr\"\n"
                     "[time]\nend = 1.0\nsamples = 3\n")
    result = runner.invoke(app, ["status", str(spec)], terminal_width=400)
    assert result.exit_code == 2 and f"this is a spec; its store {tmp_path / 's.zarr'} does not exist yet" in " ".join(
        result.output.split())
    _run_cli(spec, cluster)
    result = runner.invoke(app, ["status", str(spec)], terminal_width=400)
    assert result.exit_code == 0 and f"is a spec; its store is {tmp_path / 's.zarr'}" in result.output
    assert "1 done, 0 failed" in result.output


def test_run_store_is_beside_the_spec_from_any_folder(tmp_path, spec_file, cluster, monkeypatch):
    """`cd` into another folder, run again: the same store is found and resumed, not a new one begun."""
    spec = spec_file("[run]\nreplicates = 4\nreplicates_per_task = 4\nstore = \"out/s.zarr\"\n"
                     "[time]\nend = 1.0\nsamples = 3\n")
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    first = runner.invoke(app, ["run", str(spec), "--scheduler", cluster], terminal_width=400)
    assert first.exit_code == 0 and f"store: {tmp_path / 'out' / 's.zarr'}" in first.output, first.output
    monkeypatch.chdir(tmp_path)
    again = runner.invoke(app, ["run", "spec.toml", "--scheduler", cluster], terminal_width=400)
    assert again.exit_code == 0 and "nothing to do" in again.output, again.output
    assert not (elsewhere / "out").exists() and (tmp_path / "out" / "s.zarr" / "zarr.json").exists()


def test_a_parameter_both_fixed_and_varied_is_refused(tmp_path, spec_file):
    spec = spec_file("[run]\nreplicates = 4\n[time]\nend = 1.0\nsamples = 3\n[parameters]\nk = 2.0\n"
                     "[design]\nkind = \"grid\"\n[design.vary]\nk = [1.0, 2.0]\n")
    result = runner.invoke(app, ["check", str(spec)], terminal_width=400)
    assert result.exit_code == 2, result.output
    assert "parameters.k" in result.output and "also varied under [design]" in result.output, result.output


# --- approximate methods ----------------------------------------------------------------------------


def test_cle_on_a_telegraph_gene_is_flagged_after_the_run(tmp_path, spec_file, cluster):
    """A single-copy promoter: every species spends time below 10 molecules, so the CLE's
    assumption (many firings per step; Gillespie 2000) fails; run, status and analyze say so."""
    spec = spec_file(TELEGRAPH_BODY.format(method="cle", replicates=50), model=TELEGRAPH)
    result = _run_cli(spec, cluster, "--store", str(tmp_path / "tele.zarr"))
    assert "species spent time below 10 molecules" in " ".join(result.output.split())
    record = store_mod.attributes(tmp_path / "tele.zarr")["low_copy"]
    assert record["method"] == "cle" and [p for p, _ in record["points"]] == [0, 1]
    shares = dict(zip(record["species"], record["points"][0][1]))
    assert shares["G_on"] == pytest.approx(1.0) and shares["G_off"] == pytest.approx(1.0)
    status = runner.invoke(app, ["status", str(tmp_path / "tele.zarr")], terminal_width=200)
    assert "does not hold there" in status.output and "point 0: G_off (100% of samples)" in status.output
    analysed = runner.invoke(app, ["analyze", str(tmp_path / "tele.zarr"), "-o", str(tmp_path / "a")],
                             terminal_width=200)
    assert analysed.exit_code == 0 and "does not hold there" in analysed.output


def test_compare_methods_finds_the_cle_bias_of_a_telegraph_gene(spec_file):
    """The exact mean of the telegraph gene's mRNA follows linear moment equations (first-order
    reactions: common practice): dG/dt = k_on (1 - G) - k_off G, dM/dt = k_tx G - g M, G(0) = M(0) = 0.
    The direct method must agree with it; the CLE must be flagged (3.29 se, two-sided 0.1 %)."""
    from sweep.plan import compare
    spec = sweep.load(spec_file(TELEGRAPH_BODY.format(method="cle", replicates=10), model=TELEGRAPH))
    result = compare.compare(spec, seconds=1.0, points=2)
    t, (k_on, k_off, g) = 5.0, (0.5, 0.5, 1.0)
    lam = k_on + k_off
    for point, k_tx in zip(result.points, (5.0, 20.0)):
        # G(t) = G* (1 - e^{-lam t}); M(t) = k_tx G* [(1 - e^{-g t}) / g - (e^{-lam t} - e^{-g t}) / (g - lam)]
        star = k_on / lam
        exact_m = k_tx * star * ((1 - np.exp(-g * t)) / g - (np.exp(-lam * t) - np.exp(-g * t)) / (g - lam)) \
            if lam != g else k_tx * star * ((1 - np.exp(-g * t)) / g - t * np.exp(-g * t))
        m = next(c for c in point.species if c.species == "M")
        assert abs(m.exact.mean - exact_m) < 3.29 * m.exact.se_mean, (m.exact.mean, exact_m)
        assert m.differs and m.mean_difference[0] > 0
    assert result.points[0].exact_seconds > 0 and result.points[0].approx_seconds > 0
    cli = runner.invoke(app, ["plan", str(spec_file(TELEGRAPH_BODY.format(method="cle", replicates=10),
                                                    model=TELEGRAPH)), "--compare-methods", "--seconds", "0.3"],
                        terminal_width=200)
    assert cli.exit_code == 0 and "differs from the exact method" in cli.output, cli.output


# --- bistable points --------------------------------------------------------------------------------


def test_analyze_reports_the_share_in_each_mode(fates, tmp_path):
    result = runner.invoke(app, ["analyze", str(fates), "--species", "P", "-s", "mean", "-o", str(tmp_path / "m")],
                           terminal_width=200)
    assert result.exit_code == 0, result.output
    modes = pd.read_csv(tmp_path / "m" / "modes.csv")
    assert set(modes["point"]) == {0, 1} and set(modes["species"]) == {"P"}
    counts = sweep.open_results(fates)["counts"].sel(species="P").isel(time=-1).values
    for _, row in modes.iterrows():
        zero = float((counts[int(row["point"])] == 0).mean())  # the Off fate: P stays 0
        assert row["low_share"] == pytest.approx(zero, abs=1e-12)
    assert "Bimodal distributions" in result.output and "t=4 min" in result.output


def test_plots_say_bimodal_and_draw_the_modes(fates, tmp_path):
    from sweep import plot

    fig = plot.ensemble(fates, "P", points=[0])
    assert "Bimodal" in fig.get_suptitle() and fig.axes[0].get_xlabel() == "time (min)"
    assert sum(line.get_linestyle() == "--" for line in fig.axes[0].lines) == 2  # the two modes' means
    fig = plot.distribution(fates, "P", points=[0, 1])
    assert "Bimodal at points 0, 1" in fig.get_suptitle() and "t = 4 min" in fig.axes[0].get_xlabel()
    assert sum(line.get_linestyle() == ":" for line in fig.axes[0].lines) == 2  # each point's split
    plot.save(fig, tmp_path / "d.png")
    assert np.ptp(matplotlib.image.imread(tmp_path / "d.png")) > 0


# --- figures ---------------------------------------------------------------------------------------


def _boxes_overlap(a, b) -> bool:
    return a.x0 < b.x1 and b.x0 < a.x1 and a.y0 < b.y1 and b.y0 < a.y1


def test_no_colour_repeats_and_many_points_become_small_multiples(hill, tmp_path):
    from sweep import plot

    fig = plot.ensemble(hill, "A", points=[0, 1, 2, 3])
    means = [line for line in fig.axes[0].lines if line.get_linewidth() == 2.5]
    assert len({line.get_color() for line in means}) == 4
    fig = plot.ensemble(hill, "A", points=[(0, 5)])
    assert len([ax for ax in fig.axes if ax.get_visible()]) == 6
    fig = plot.distribution(hill, "A", points=[0, 2, 4])
    assert not [p for p in fig.axes[0].patches if p.get_fill()]  # overlaid histograms are outlines


def test_legends_sit_outside_the_data(hill, tmp_path):
    from sweep import plot

    for fig in (plot.ensemble(hill, "A", points=[2, 3]), plot.distribution(hill, "A", points=[2, 3]),
                plot.convergence(hill, "mean", "A", points=[2, 3])):
        from matplotlib.backends.backend_agg import FigureCanvasAgg

        canvas = FigureCanvasAgg(fig)
        canvas.draw()
        renderer = canvas.get_renderer()
        legend = fig.legends[0].get_window_extent(renderer)
        assert not _boxes_overlap(legend, fig.axes[0].get_window_extent(renderer))


def test_stars_are_explained_and_clear_of_the_error_bars(hill, tmp_path):
    from sweep import plot

    sweep.analyze(hill, sweep.AnalysisOptions(statistics=("mean",), species=("A",), tables=str(tmp_path / "s")))
    fig = plot.sensitivity(hill, "mean", "A")
    ax = fig.axes[0]
    texts = [t.get_text() for t in fig.legends[0].get_texts()]
    assert any("* p < 0.05" in t and "Marino" in t for t in texts)
    table = xr.open_zarr(hill, group="analysis/sensitivity").to_dataframe()
    stars = [t for t in ax.texts if "*" in t.get_text()]
    for star in stars:
        _, y = star.xy
        highs = table["conf_high"].to_numpy(float)
        lows = table["conf_low"].to_numpy(float)
        assert np.isclose(y, highs).any() or np.isclose(y, lows).any()  # anchored at the error bar's end


def test_default_species_is_the_first(fates):
    from sweep import plot

    fig = plot.ensemble(fates, points=[0])
    assert fig.axes[0].get_ylabel() == "S (molecules)"


def test_heatmap_takes_every_statistic_it_lists(hill, tmp_path):
    for stat, extra in (("fano", []), ("fraction", ["--threshold", "A>=5"]), ("never", ["--threshold", "A>=5"]),
                        ("passage_mean", ["--threshold", "A>=5"])):
        result = runner.invoke(app, ["plot", str(hill), "heatmap", "-s", stat, *extra, "--species", "A",
                                     "-o", str(tmp_path / f"{stat}.png")])
        assert result.exit_code == 0, (stat, result.output)
    result = runner.invoke(app, ["plot", str(hill), "heatmap", "-s", "never", "-o", str(tmp_path / "x.png")])
    assert result.exit_code == 2 and "needs a threshold" in result.output


def test_time_unit_from_the_store_on_axes_and_tables(fates, tmp_path):
    from sweep import plot

    assert plot.convergence(fates, "mean", "P", points=[0]).axes[0].get_ylabel() == "mean of P, t = 4 min"
    result = runner.invoke(app, ["analyze", str(fates), "--species", "P", "-s", "mean", "-o", str(tmp_path / "u")],
                           terminal_width=200)
    assert "mean(P) at t=4 min" in result.output
    assert json.loads(json.dumps(zarr.open_group(fates, path="analysis", mode="r").attrs["time_unit"])) == "min"


def test_plot_species_names_the_default_species_and_may_change_on_resume(tmp_path, spec_file, cluster):
    body = "[run]\nreplicates = 4\nreplicates_per_task = 4\nstore = \"p.zarr\"\n[time]\nend = 1.0\nsamples = 3\n"
    spec = spec_file(body + "[plot]\nspecies = \"A\"\n")
    _run_cli(spec, cluster)
    assert zarr.open_group(tmp_path / "p.zarr", mode="r").attrs["default_species"] == "A"
    spec = spec_file(body)  # the figure default is presentation: changing it resumes the same sweep
    _run_cli(spec, cluster)
    assert "default_species" not in zarr.open_group(tmp_path / "p.zarr", mode="r").attrs
    bad = spec_file(body + "[plot]\nspecies = \"Q\"\n", name="bad.toml")
    result = runner.invoke(app, ["check", str(bad)], terminal_width=400)
    assert result.exit_code == 2 and "plot.species" in result.output, result.output
