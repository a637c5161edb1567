"""`sweep trace`: one replicate recomputed from its seed equals the stored one exactly."""

from __future__ import annotations

import csv

import numpy as np
import zarr
from typer.testing import CliRunner

import sweep
from sweep.cli import app

runner = CliRunner()

BODY = """
[run]
replicates = 30
replicates_per_task = 7
seed = 3
[time]
end = 8.0
samples = 17
[design.vary]
k = [2.0, 6.0]
"""


def test_trace_matches_the_store_and_writes_the_event_log(spec_file, tmp_path):
    spec = sweep.load(spec_file(BODY), store=tmp_path / "t.zarr")
    sweep.run(spec, workers=1)
    for point, replicate in [(0, 0), (1, 29), (1, 13)]:
        tr = sweep.trace(spec.store, point, replicate)
        stored = zarr.open_group(spec.store, mode="r")["counts"][point, replicate]
        np.testing.assert_array_equal(tr.counts, stored)
        assert tr.matches_store is True
        # the log replayed on the grid gives the samples: state after the last event at or before t
        for ti, t in enumerate(tr.sample_times):
            n = np.searchsorted(tr.times, t, side="right")
            expected = tr.states[n - 1] if n else np.array([0])
            np.testing.assert_array_equal(stored[ti], expected)
    out = tmp_path / "log.csv"
    result = runner.invoke(app, ["trace", str(spec.store), "--point", "1", "--replicate", "13",
                                 "--output", str(out), "--show", "3"])
    assert result.exit_code == 0, result.output
    assert "matches the store" in result.output and "k=6" in result.output
    rows = list(csv.reader(out.open()))
    assert rows[0] == ["event", "time", "reaction", "A"] and len(rows) == tr.events + 1


def test_trace_needs_the_spec_files_no_more(spec_file, tmp_path):
    """The store keeps the spec text, so a trace works after the spec file changed or went away."""
    path = spec_file(BODY)
    spec = sweep.load(path, store=tmp_path / "u.zarr")
    sweep.run(spec, workers=1)
    path.unlink()
    assert sweep.trace(spec.store, 1, 2).matches_store is True


def test_trace_out_of_range_is_bad_input(spec_file, tmp_path):
    spec = sweep.load(spec_file(BODY), store=tmp_path / "v.zarr")
    sweep.run(spec, workers=1)
    result = runner.invoke(app, ["trace", str(spec.store), "--point", "5", "--replicate", "0"])
    assert result.exit_code == 2 and "--point" in result.output
