"""Every registered method runs through the whole pipeline into the same store layout."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from typer.testing import CliRunner

import kernels
import sweep
from sweep.cli import app
from sweep.errors import SpecError

BODY = """
[run]
method = "{method}"
{replicates}
seed = 4
{options}
[time]
end = 20.0
samples = 5
[design.vary]
k = [50.0, 200.0]
"""


def _body(method, replicates="replicates = 40", options=""):
    return BODY.format(method=method, replicates=replicates, options=options)


@pytest.mark.parametrize("method", sorted(set(kernels.METHODS) - kernels.DETERMINISTIC))
def test_stochastic_methods_fill_the_store(method, spec_file, tmp_path):
    """Immigration-death at stationarity has mean k/g (Gardiner 2004, Handbook of Stochastic Methods, 3rd ed., Springer); every method must land
    within 5 standard errors of it at both points (a loose check: the kernels' own tests are
    the precise ones)."""
    spec = sweep.load(spec_file(_body(method)), store=tmp_path / f"{method}.zarr")
    assert sweep.run(spec, workers=1).complete
    ds = xr.open_zarr(spec.store)
    assert ds["counts"].dims == ("point", "replicate", "time", "species")
    final = ds["counts"].isel(time=-1, species=0).values
    for p, k in enumerate((50.0, 200.0)):
        mean = k / 0.5
        assert abs(final[p].mean() - mean) < 5 * np.sqrt(mean / final.shape[1]), (method, final[p].mean())


def test_deterministic_method_stores_one_real_valued_trajectory(spec_file, tmp_path):
    spec = sweep.load(spec_file(_body("ode", replicates="")), store=tmp_path / "ode.zarr")
    assert spec.replicates == 1
    assert sweep.run(spec, workers=1).complete
    ds = xr.open_zarr(spec.store)
    assert ds["counts"].shape == (2, 1, 5, 1) and ds["counts"].dtype == np.float64
    t = ds["time"].values
    for p, k in enumerate((50.0, 200.0)):
        # dA/dt = k - g A from 0: A(t) = (k/g)(1 - exp(-g t)) (common practice)
        np.testing.assert_allclose(ds["counts"].values[p, 0, :, 0], k / 0.5 * (1 - np.exp(-0.5 * t)), rtol=1e-6)


def test_method_options_are_validated_and_used(spec_file, tmp_path):
    spec = sweep.load(spec_file(_body("cle", options='options = { dt = 0.05 }')), store=tmp_path / "c.zarr")
    assert spec.options == (("dt", 0.05),)
    assert sweep.run(spec, workers=1).complete
    events = xr.open_zarr(spec.store)["events"].values
    assert (events == 400).all()  # 20 time units / dt 0.05 = 400 Euler-Maruyama steps
    with pytest.raises(SpecError, match="run.options.dt.*> 0"):
        sweep.load(spec_file(_body("cle", options='options = { dt = -1.0 }'), name="bad.toml"))
    result = CliRunner().invoke(app, ["check", str(spec_file(_body("direct", options='options = { dt = 0.1 }'),
                                                              name="bad2.toml"))])
    assert result.exit_code == 2 and "run.options.dt" in result.output and "takes no such option" in result.output


def test_deterministic_method_refuses_replicates(spec_file):
    with pytest.raises(SpecError, match="run.replicates.*deterministic"):
        sweep.load(spec_file(_body("ode", replicates="replicates = 5")))
