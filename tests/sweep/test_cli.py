"""The command line as a user meets it: init, check, run, status, bench; exit codes."""

from __future__ import annotations

import re

from typer.testing import CliRunner

from sweep.cli import app

runner = CliRunner()


def test_init_check_run_status(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    result = runner.invoke(app, ["init", "starter"])
    assert result.exit_code == 0, result.output
    assert (tmp_path / "starter" / "spec.toml").is_file() and (tmp_path / "starter" / "model.toml").is_file()
    assert runner.invoke(app, ["init", "starter"]).exit_code == 2  # never overwrites silently

    result = runner.invoke(app, ["check", "starter/spec.toml"])
    assert result.exit_code == 0, result.output
    assert "6 points x 200 replicates" in result.output and "2 P -> P2" in result.output

    # shrink the example so the test stays quick, then run it twice: the second run has nothing to do
    spec = tmp_path / "starter" / "spec.toml"
    spec.write_text(spec.read_text().replace("replicates = 200", "replicates = 20")
                    .replace("replicates_per_task = 100", "replicates_per_task = 10"))
    result = runner.invoke(app, ["run", str(spec), "--workers", "1", "--store", "out.zarr"])
    assert result.exit_code == 0, result.output
    assert "Sweep finished" in result.output and "12 run" in result.output
    result = runner.invoke(app, ["run", str(spec), "--workers", "1", "--store", "out.zarr"])
    assert result.exit_code == 0 and "nothing to do" in result.output

    result = runner.invoke(app, ["status", "out.zarr"])
    assert result.exit_code == 0, result.output
    assert re.search(r"12 done, 0 failed, 0 pending, of 12", result.output)


def test_fresh_needs_confirmation_without_a_terminal(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    runner.invoke(app, ["init", "."])
    spec = tmp_path / "spec.toml"
    # replicates_per_task may not exceed replicates (sweep.limits.check_sweep), so both shrink
    spec.write_text(spec.read_text().replace("replicates = 200", "replicates = 2")
                    .replace("replicates_per_task = 100", "replicates_per_task = 2"))
    assert runner.invoke(app, ["run", "spec.toml", "--workers", "1"]).exit_code == 0
    result = runner.invoke(app, ["run", "spec.toml", "--workers", "1", "--fresh"])
    assert result.exit_code == 2 and "--yes" in result.output
    result = runner.invoke(app, ["run", "spec.toml", "--workers", "1", "--fresh", "--yes"])
    assert result.exit_code == 0 and "6 run" in result.output


def test_status_of_missing_store_is_bad_input(tmp_path):
    result = runner.invoke(app, ["status", str(tmp_path / "none.zarr")])
    assert result.exit_code == 2 and "no results store" in result.output


def test_bench_prints_events_per_second():
    result = runner.invoke(app, ["bench", "--network", "isomerization", "--repeats", "1"])
    assert result.exit_code == 0, result.output
    assert "isomerization" in result.output and "events / CPU-s" in result.output


def test_help_shows_the_spec_tables_it_names():
    """Square brackets are rich markup in typer's help: a table name like [fit] must be escaped, or
    the help reads "TOML with  tables" (seen in ``sweep fit --help``)."""
    for name in ("fit", "run", "submit"):
        result = runner.invoke(app, [name, "--help"], terminal_width=200)
        assert result.exit_code == 0, result.output
        assert "  tables" not in result.output and "with a  table" not in result.output
    fit_help = runner.invoke(app, ["fit", "--help"], terminal_width=200).output
    assert "[fit] tables" in fit_help and "[fit.priors] parameters" in fit_help and "[fit].data" in fit_help
