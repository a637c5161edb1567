"""sweep.analyze against published results: Sobol (Ishigami), PRCC, Fano factor, first passage (Morris: test_morris.py).

Statistical checks are seeded; each states its source, significance level or tolerance.
"""

from __future__ import annotations

import logging
import warnings

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from distributed import LocalCluster
from typer.testing import CliRunner

import sweep
from sweep.store import lock
from sweep.analysis import stats
from sweep.analysis.adequacy import standard_errors
from sweep.cli import app
from sweep.errors import SpecError, StoreError
from support.sensitivity_conformance import SensitivityConformance, analysed

Z_999 = 3.29  # two-sided normal quantile for alpha = 0.001

# One network of independent parts, so one single-point store serves two tests:
# two-stage gene expression (M, P) and a pure death process (D from 20).
TWO_STAGE_AND_DEATH = """
[model.species]
M = 0
P = 25
D = 20
[model.parameters]
k_m = 0.5
k_p = 5.0
g_m = 1.0
g_p = 0.1
g_d = 1.0
[model.reactions]
transcribe = { reaction = "0 -> M", rate = "k_m" }
translate = { reaction = "M -> M + P", rate = "k_p" }
m_decay = { reaction = "M -> 0", rate = "g_m" }
p_decay = { reaction = "P -> 0", rate = "g_p" }
d_decay = { reaction = "D -> 0", rate = "g_d" }
"""
DEATH_STEP = 0.02  # sample spacing while D can still be alive (P(T > 15) = 20 e^-15 ~ 6e-6)
SINGLE_POINT = """
[run]
replicates = 2000
replicates_per_task = 1000
seed = 2001
[time]
points = {points}
"""

IMMIGRATION_DEATH = """
[model.species]
A = 0
[model.parameters]
k = 5.0
g = 0.5
u = 1.0            # used by no reaction
[model.reactions]
birth = { reaction = "0 -> A", rate = "k" }
death = { reaction = "A -> 0", rate = "g" }
"""
LHS = """
[run]
replicates = 40
replicates_per_task = 40
seed = 3
[time]
end = 20.0
samples = 21
[design]
kind = "lhs"
points = 30
[design.vary]
k = { low = 5, high = 20 }
g = { low = 0.5, high = 2 }
u = { low = 0, high = 1 }
"""


@pytest.fixture(scope="module")
def single_point(tmp_path_factory, spec_writer):
    """2000 replicates of two-stage expression and a death process, run and analysed."""
    folder = tmp_path_factory.mktemp("single")
    grid = [float(t) for t in np.round(np.arange(0, 15 + DEATH_STEP / 2, DEATH_STEP), 10)] + [20.0, 40.0, 60.0, 80.0]
    spec = sweep.load(spec_writer(folder, SINGLE_POINT.format(points=grid), model=TWO_STAGE_AND_DEATH),
                      store=folder / "single.zarr")
    with LocalCluster(n_workers=1, threads_per_worker=2, processes=False, dashboard_address=":0",
                      silence_logs=logging.ERROR) as cluster:
        sweep.run(spec, scheduler=cluster.scheduler_address)
    options = sweep.AnalysisOptions(thresholds=(sweep.Threshold("D", "<=", 0),), statistics=("fano", "passage_mean"),
                                    species=("P",), histogram_species=("P",), stationary_from=40.0)
    return spec.store, sweep.analyze(spec.store, options)


@pytest.fixture(scope="module")
def lhs_store(tmp_path_factory, spec_writer):
    """Immigration-death over a 30-point Latin hypercube, run on 2 local worker processes."""
    folder = tmp_path_factory.mktemp("lhs")
    spec = sweep.load(spec_writer(folder, LHS, model=IMMIGRATION_DEATH), store=folder / "lhs.zarr")
    sweep.run(spec, workers=2)
    return spec.store


class TestSobol(SensitivityConformance):
    method, main_index = "sobol", "ST"
    design = {"kind": "saltelli", "base_samples": 256}

    def test_known_result(self):
        """Ishigami & Homma (1990), a = 7, b = 0.1; analytic indices as in Saltelli et al. (2008), Global
        Sensitivity Analysis: The Primer, section 4.7: S1 = 0.314, S2 = 0.442, S3 = 0, ST1 = 0.558,
        ST2 = 0.442, ST3 = 0.244. Evaluated on our own Saltelli design's points, through the same
        function `sweep analyze` uses; each analytic value must lie in its 95 % bootstrap interval."""
        a, b, pi = 7.0, 0.1, np.pi
        variance = a ** 2 / 8 + b * pi ** 4 / 5 + b ** 2 * pi ** 8 / 18 + 0.5
        v1, v2, v13 = 0.5 * (1 + b * pi ** 4 / 5) ** 2, a ** 2 / 8, 8 * b ** 2 * pi ** 8 / 225
        exact = {"S1": [v1 / variance, v2 / variance, 0.0],
                 "ST": [(v1 + v13) / variance, v2 / variance, v13 / variance]}
        np.testing.assert_allclose(exact["S1"] + exact["ST"], [0.314, 0.442, 0, 0.558, 0.442, 0.244], atol=5e-4)
        vary = {n: {"low": -pi, "high": pi} for n in ("x1", "x2", "x3")}
        table = analysed({"kind": "saltelli", "base_samples": 2048, "vary": vary},
                         lambda x: np.sin(x[:, 0]) + a * np.sin(x[:, 1]) ** 2 + b * x[:, 2] ** 4 * np.sin(x[:, 0]))
        for index, want in exact.items():
            rows = table[table["index"] == index]
            assert list(rows["parameter"]) == ["x1", "x2", "x3"]
            for value, low, high in zip(want, rows["conf_low"], rows["conf_high"]):
                assert low <= value <= high, (index, value, low, high)
                assert high - low < 0.15  # and the intervals are informative
        assert len(table[table["index"] == "S2"]) == 3  # second-order pairs x1:x2, x1:x3, x2:x3


class TestPrcc(SensitivityConformance):
    # an exact linear function leaves no scatter for partial rank correlations to rank inputs by
    method, main_index, noise = "prcc", "PRCC", 0.3
    design = {"kind": "lhs", "points": 200}

    def test_known_result(self):
        """Marino et al. (2008): PRCC near +1/-1 for a monotone increasing/decreasing dependence and
        near 0, not significant, for an unused parameter. Immigration-death mean k/g with 10 % noise."""
        vary = {"k": {"low": 1, "high": 10}, "g": {"low": 0.1, "high": 1}, "u": {"low": 0, "high": 1}}
        noise = np.random.default_rng(np.random.SeedSequence(5, spawn_key=(1,))).normal(1.0, 0.1, 200)
        table = analysed({"kind": "lhs", "points": 200, "vary": vary}, lambda x: x[:, 0] / x[:, 1] * noise,
                         seed=0, design_seed=5).set_index("parameter")
        assert table.loc["k", "value"] > 0.9 and table.loc["k", "p_value"] < 1e-6
        assert table.loc["g", "value"] < -0.9 and table.loc["g", "p_value"] < 1e-6
        assert abs(table.loc["u", "value"]) < 0.2 and table.loc["u", "p_value"] > 0.001


def test_prcc_through_a_real_lhs_sweep(lhs_store):
    """The same through simulation: the stationary mean of immigration-death is k/g (Poisson; Gardiner
    1985), so PRCC of mean(A) at t = 20 is positive for k, negative for g, and not significant
    (alpha = 0.001) for the unused u."""
    result = sweep.analyze(lhs_store, sweep.AnalysisOptions(statistics=("mean",)))
    assert result.design == "lhs" and result.method == "prcc"
    table = result.sensitivity.set_index("parameter")
    assert set(table["output"]) == {"mean(A) at t=20"} and set(table["time"]) == {20.0}
    assert table.loc["k", "value"] > 0.8 and table.loc["k", "p_value"] < 0.001
    assert table.loc["g", "value"] < -0.8 and table.loc["g", "p_value"] < 0.001
    assert table.loc["u", "p_value"] > 0.001


def test_fano_factor_of_two_stage_expression(single_point):
    """Thattai & van Oudenaarden (2001), PNAS 98:8614: at stationarity the protein Fano factor is
    1 + k_p / (g_m + g_p) = 1 + 5 / 1.1. Checked at t = 80 (8 protein lifetimes after starting at
    the mean) within 3.29 of our own delta-method standard errors (alpha = 0.001)."""
    _, result = single_point
    row = result.adequacy[(result.adequacy["statistic"] == "fano") & (result.adequacy["species"] == "P")].iloc[0]
    exact = 1 + 5.0 / (1.0 + 0.1)
    assert row["time"] == 80.0 and row["replicates"] == 2000
    assert abs(row["value"] - exact) < Z_999 * row["se"], (row["value"], row["se"])
    assert 0.01 < row["relative_se"] < 0.1  # the standard error is of the size theory expects


def test_first_passage_of_pure_death(single_point):
    """A pure death process from N = 20 at rate g per molecule goes extinct at T = sum of independent
    exponential waits, E[T] = sum_{i=1}^{N} 1 / (g i) (common practice; e.g. Gardiner 2004, Handbook of Stochastic Methods, 3rd ed., Springer).
    On the sample grid T <= T_grid < T + step, so E[T] lies in (E[T_grid] - step, E[T_grid]];
    checked with 3.29 standard errors of the mean (alpha = 0.001)."""
    store, result = single_point
    exact = sum(1.0 / (1.0 * i) for i in range(1, 21))
    row = result.adequacy[result.adequacy["statistic"] == "passage_mean"].iloc[0]
    margin = Z_999 * row["se"]
    assert row["value"] - DEATH_STEP - margin < exact < row["value"] + margin, (row["value"], row["se"], exact)
    ds = sweep.open_analysis(store).sel(threshold="D<=0").isel(point=0)
    assert float(ds["never"]) == 0.0 and int(ds["passage_crossed"]) == 2000
    assert abs(float(ds["passage_pmf"].sum()) - 1.0) < 1e-12


def test_stationary_histogram_and_statistics_of_two_stage(single_point):
    """The stationary protein mean is k_m k_p / (g_m g_p) = 25 (Thattai & van Oudenaarden 2001); the
    pooled histogram sums to 1 and its mean matches within 3.29 standard errors of the t = 80 mean."""
    store, _ = single_point
    ds = sweep.open_analysis(store).isel(point=0)
    hist = ds["stationary"].sel(hist_species="P")
    assert abs(float(hist.sum()) - 1.0) < 1e-9
    centres = (ds["bin_low"] + ds["bin_high"]).sel(hist_species="P") / 2
    at_end = ds.sel(time=80.0, species="P")
    assert abs(float((hist * centres).sum()) - 25.0) < 1.0
    assert abs(float(at_end["mean"]) - 25.0) < Z_999 * float(at_end["se_mean"])
    q = ds["quantiles"].sel(time=80.0, species="P")
    assert list(q["quantile"].values) == [0.05, 0.25, 0.5, 0.75, 0.95] and (np.diff(q.values) >= 0).all()


def test_delta_method_standard_errors_match_the_spread_of_estimates():
    """Delta-method standard errors (Casella & Berger 2002, 5.5.4) against the spread of 2000
    independent estimates from negative binomial samples of 400 (seeded): within 10 %. For a Poisson
    count se(Fano) = sqrt(2 / (n - 1)) (index of dispersion ~ chi2(n - 1) / (n - 1); Fisher 1950)."""
    rng = np.random.default_rng(np.random.SeedSequence(11, spawn_key=(2,)))
    for counts, fano_se in ((rng.negative_binomial(5, 0.25, size=(2000, 400)), None),
                            (rng.poisson(30.0, size=(2000, 400)), np.sqrt(2 / 399))):
        x = xr.DataArray(counts.astype(float), dims=("point", "replicate"))
        m = stats.moments(x)
        se = standard_errors(m)
        for name in ("mean", "var", "sd", "cv", "fano"):
            spread = float(m[name].std())
            assert abs(float(se[f"se_{name}"].mean()) / spread - 1) < 0.1, name
        if fano_se is not None:
            assert abs(float(se["se_fano"].mean()) / fano_se - 1) < 0.05


def test_results_live_in_their_own_group(lhs_store, tmp_path):
    """The root still opens unchanged and without warnings; results open with xarray; CSV tables."""
    before = xr.open_zarr(lhs_store)
    result = sweep.analyze(lhs_store, sweep.AnalysisOptions(thresholds=(sweep.Threshold("A", ">=", 20),),
                                                            histogram_species=("A",), tables=str(tmp_path / "t")))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        after = xr.open_zarr(lhs_store)
        group = xr.open_zarr(lhs_store, group="analysis")
        table = xr.open_zarr(lhs_store, group="analysis/sensitivity").to_dataframe()
    assert after.identical(before)
    assert set(after.data_vars) == {"counts", "status", "events", "done", "checksums", "params"}
    for name, dims in (("mean", ("point", "time", "species")), ("quantiles", ("point", "quantile", "time", "species")),
                       ("fraction", ("point", "time", "threshold")), ("passage_pmf", ("point", "threshold", "time")),
                       ("histogram", ("point", "hist_time", "hist_species", "bin"))):
        assert group[name].dims == dims, name
    assert group.attrs["design_kind"] == "lhs" and group.attrs["tasks_done"] == 30
    assert len(table) == len(result.sensitivity) and set(table["parameter"]) == {"k", "g", "u"}
    files = {p.name for p in result.tables}
    assert {"statistics.csv", "thresholds.csv", "passage.csv", "histograms.csv", "sensitivity.csv",
            "adequacy.csv"} <= files
    csv = pd.read_csv(tmp_path / "t" / "statistics.csv")
    assert len(csv) == 30 * 21 and list(csv.columns[:6]) == ["point", "k", "g", "u", "time", "species"]
    np.testing.assert_allclose(csv["mean"], group["mean"].values.reshape(-1))


def test_refuses_a_store_being_written(lhs_store):
    holder = lock.acquire(lhs_store)
    try:
        with pytest.raises(StoreError, match="is writing this store"):
            sweep.analyze(lhs_store)
        result = CliRunner().invoke(app, ["analyze", str(lhs_store)])
        assert result.exit_code == 2 and "is writing this store" in result.output
    finally:
        lock.release(lhs_store, holder)


def test_cli_analyze_and_bad_options(lhs_store, tmp_path):
    runner = CliRunner()
    result = runner.invoke(app, ["analyze", str(lhs_store), "-s", "fano", "--species", "A", "--threshold", "A>=30",
                                 "-s", "never", "--tables", str(tmp_path / "out")])
    assert result.exit_code == 0, result.output
    assert "Sensitivity (prcc)" in result.output and "Replicate adequacy" in result.output
    assert (tmp_path / "out" / "adequacy.csv").is_file()
    for args, message in ((["--species", "B"], "not a species"), (["--threshold", "A=3"], "not a threshold"),
                          (["--time", "99"], "outside the sampled times"), (["-s", "never"], "needs a threshold")):
        result = runner.invoke(app, ["analyze", str(lhs_store), *args])
        assert result.exit_code == 2 and message in result.output, (args, result.output)
    with pytest.raises(SpecError):
        sweep.analyze(lhs_store, sweep.AnalysisOptions(quantiles=(1.5,)))
