"""`sweep export`: tidy CSV and Parquet tables streamed chunk by chunk, NetCDF, and the filters."""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
import xarray as xr
import zarr
from distributed import LocalCluster
from typer.testing import CliRunner

import sweep
from sweep.cli import app
from sweep.errors import SpecError
from support.models import PAIRING

DIMER = PAIRING
BODY = """
[run]
replicates = 24
replicates_per_task = 8
seed = 9
[time]
end = 4.0
samples = 9
[design.vary]
c1 = [0.01, 0.05]
c2 = [0.2, 1.0]
"""
COLUMNS = ["point", "c1", "c2", "replicate", "status", "time", "species", "count"]


@pytest.fixture(scope="module")
def store(tmp_path_factory, spec_writer):
    """A 4-point dimerization store; then, as after an interruption and an event cap, point 3's
    last block is marked not run and replicate 1 of point 0 capped after t = 2."""
    folder = tmp_path_factory.mktemp("export")
    spec = sweep.load(spec_writer(folder, BODY, model=DIMER), store=folder / "dimer.zarr")
    with LocalCluster(n_workers=1, threads_per_worker=2, processes=False, dashboard_address=":0",
                      silence_logs=logging.ERROR) as cluster:
        sweep.run(spec, scheduler=cluster.scheduler_address)
    g = zarr.open_group(spec.store, mode="r+")
    g["status"][3, 16:24] = -1
    g["counts"][3, 16:24] = -1
    g["status"][0, 1] = 1
    g["counts"][0, 1, 5:] = -1
    return spec.store


def test_csv_with_filters(store, tmp_path):
    out = tmp_path / "some.csv"
    summary = sweep.export(store, out, points=[1, (2, 3)], species=["B"], times=[2.0, (3.0, 4.0)])
    table = pd.read_csv(out)
    assert list(table.columns) == COLUMNS
    # points 1, 2 (24 replicates) and 3 (16 run) x times 2, 3, 3.5, 4 x species B
    assert summary.rows == len(table) == (24 + 24 + 16) * 4
    assert sorted(table["time"].unique()) == [2.0, 3.0, 3.5, 4.0] and set(table["species"]) == {"B"}
    assert set(table[table["point"] == 3]["replicate"]) == set(range(16))
    counts = xr.open_zarr(store)["counts"]
    row = table[(table["point"] == 2) & (table["replicate"] == 5) & (table["time"] == 3.5)].iloc[0]
    assert row["count"] == int(counts.sel(time=3.5, species="B")[2, 5]) and row["c1"] == 0.05 and row["c2"] == 0.2


def test_parquet_is_streamed_chunk_by_chunk(store, tmp_path):
    out = tmp_path / "all.parquet"
    summary = sweep.export(store, out)
    file = pq.ParquetFile(out)
    assert file.metadata.num_row_groups == 4 * 3 - 1  # one row group per task chunk written (one not run)
    table = file.read().to_pandas()
    assert list(table.columns) == COLUMNS and summary.rows == len(table) == (4 * 24 - 8) * 9 * 2
    capped = table[(table["point"] == 0) & (table["replicate"] == 1)]
    assert set(capped["status"]) == {1}
    assert capped["count"].isna().sum() == 4 * 2  # samples after the cap are unknown (null), not -1
    ds = xr.open_zarr(store)
    done = table[(table["point"] == 2) & (table["species"] == "A")].sort_values(["replicate", "time"])
    np.testing.assert_array_equal(done["count"].to_numpy(), ds["counts"].sel(species="A")[2].values.reshape(-1))


def test_netcdf_holds_the_whole_dataset(store, tmp_path):
    out = tmp_path / "sub.nc"
    summary = sweep.export(store, out, points=[0, 2], species=["A"])
    with xr.open_dataset(out) as nc:
        ds = xr.open_zarr(store).isel(point=[0, 2]).sel(species=["A"])
        np.testing.assert_array_equal(nc["counts"].values, ds["counts"].values)
        np.testing.assert_array_equal(nc["events"].values, ds["events"].values)
        assert list(nc["param"].values) == ["c1", "c2"] and nc.attrs["spec"] == ds.attrs["spec"]
    assert summary.format == "netcdf" and summary.rows == 2 * 24 * 9


def test_cli_export_and_bad_input(store, tmp_path):
    runner = CliRunner()
    result = runner.invoke(app, ["export", str(store), str(tmp_path / "t.parquet"), "-p", "0:1", "--species", "A",
                                 "-t", "0:1"])
    assert result.exit_code == 0, result.output
    assert len(pd.read_parquet(tmp_path / "t.parquet")) == 2 * 24 * 3 * 1
    for args, message in (([str(tmp_path / "x.txt")], "cannot tell the format"),
                          ([str(tmp_path / "x.csv"), "--species", "C"], "not a species"),
                          ([str(tmp_path / "x.csv"), "-p", "7"], "must be within 0..3"),
                          ([str(tmp_path / "x.csv"), "-t", "9"], "outside the sampled times"),
                          ([str(tmp_path / "x.csv"), "-t", "a:b"], "not a number")):
        result = runner.invoke(app, ["export", str(store), *args])
        assert result.exit_code == 2 and message in result.output, (args, result.output)
    with pytest.raises(SpecError, match="unknown format"):
        sweep.export(store, tmp_path / "x.csv", format="xlsx")
