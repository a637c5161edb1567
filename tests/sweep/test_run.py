"""End-to-end runs on a real local Dask cluster into real Zarr stores on disk."""

from __future__ import annotations

import hashlib
import logging

import numpy as np
import pytest
import xarray as xr
from distributed import LocalCluster
from scipy import stats

import sweep
from sweep.errors import StoreError
from support.backend_conformance import BackendConformance


class TestLocalCluster(BackendConformance):
    """``sweep run`` with no cluster flags: a local Dask cluster of worker processes."""

    @pytest.fixture(scope="class")
    def route(self):
        return lambda spec: [sweep.run(spec, workers=2)]

    def test_store_contract(self, ran):
        """DESIGN.md's store contract: names, dims, dtypes and attributes via plain xarray."""
        spec, (summary,) = ran
        ds = xr.open_zarr(summary.store)
        dims = {name: ds[name].dims for name in ("counts", "params", "status", "events", "done", "time", "species",
                                                 "param")}
        assert dims == {
            "counts": ("point", "replicate", "time", "species"), "params": ("point", "param"),
            "status": ("point", "replicate"), "events": ("point", "replicate"), "done": ("point", "block"),
            "time": ("time",), "species": ("species",), "param": ("param",),
        }
        assert ds["counts"].shape == (4, 24, 9, 2) and np.issubdtype(ds["counts"].dtype, np.integer)
        assert ds["counts"].encoding["chunks"] == (1, 8, 9, 2)  # one chunk = one task
        assert list(ds["species"].values) == ["A", "B"] and list(ds["param"].values) == ["c1", "c2"]
        np.testing.assert_array_equal(ds["params"].values, [[0.01, 0.2], [0.01, 1.0], [0.05, 0.2], [0.05, 1.0]])
        np.testing.assert_allclose(ds["time"].values, np.linspace(0, 4, 9))
        assert bool(ds["done"].all()) and summary.tasks_run == 12
        assert (ds["status"].values == 0).all()
        attrs = ds.attrs
        assert attrs["spec"] == spec.text
        assert attrs["spec_sha256"] == hashlib.sha256(spec.text.encode() + b"\0").hexdigest()
        assert attrs["method"] == "direct" and attrs["root_seed"] == 7
        assert {"stochsweep", "numpy", "numba", "zarr"} <= set(attrs["versions"])

    def test_store_of_another_spec_is_refused(self, ran, tmp_path):
        spec, _ = ran
        path = tmp_path / "other.toml"
        path.write_text(spec.path.read_text(encoding="utf-8").replace("seed = 7", "seed = 8"), encoding="utf-8")
        with pytest.raises(StoreError, match=r"different spec(.|\n)*run.seed: 7 -> 8"):
            sweep.run(sweep.load(path, store=spec.store), workers=1)


class TestExistingScheduler(BackendConformance):
    """``sweep run --scheduler ADDRESS``: a running cluster (one worker process) the run does not own."""

    @pytest.fixture(scope="class")
    def route(self):
        with LocalCluster(n_workers=1, threads_per_worker=1, host="127.0.0.1", dashboard_address=":0",
                          silence_logs=logging.ERROR) as cluster:
            yield lambda spec: [sweep.run(spec, scheduler=cluster.scheduler_address)]


def test_parameters_reach_each_point(tmp_path, spec_file):
    """Immigration-death 0->A (k), A->0 (g) from A=0 is Poisson with mean (k/g)(1 - exp(-g t))
    at every time (Gardiner, Handbook of Stochastic Methods, 1985; Jahnke & Huisinga 2007).
    Checked through the whole pipeline at two grid points, chi-square, alpha = 0.001 each."""
    body = """
    [run]
    replicates = 1500
    replicates_per_task = 500
    seed = 11
    [time]
    points = [1.0, 30.0]
    [design.vary]
    k = [2.0, 12.0]
    """
    spec = sweep.load(spec_file(body), store=tmp_path / "bd.zarr")
    sweep.run(spec, workers=2)
    ds = sweep.open_results(spec.store)
    g = 0.5
    for p, k in enumerate((2.0, 12.0)):
        for ti, t in enumerate((1.0, 30.0)):
            sample = ds["counts"].isel(point=p, time=ti, species=0).values
            mean = k / g * (1 - np.exp(-g * t))
            assert _poisson_chi2_pvalue(sample, mean) > 1e-3, (k, t)


def _poisson_chi2_pvalue(sample: np.ndarray, mean: float) -> float:
    """Chi-square goodness of fit to Poisson(mean), pooling bins with expected count < 5."""
    n = sample.size
    top = int(stats.poisson.ppf(1 - 1e-9, mean)) + 1
    edges, observed, expected = [], [], []
    acc_o = acc_e = 0.0
    for x in range(top + 1):
        acc_o += np.count_nonzero(sample == x) if x < top else np.count_nonzero(sample >= x)
        acc_e += n * (stats.poisson.pmf(x, mean) if x < top else stats.poisson.sf(x - 1, mean))
        if acc_e >= 5:
            observed.append(acc_o)
            expected.append(acc_e)
            acc_o = acc_e = 0.0
    observed[-1] += acc_o
    expected[-1] += acc_e
    return float(stats.chisquare(observed, expected).pvalue)
