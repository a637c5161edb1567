"""Custom rate laws as a user writes them: validation with exit code 2, check output, a real run."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from typer.testing import CliRunner

from sweep.cli import app

runner = CliRunner()

GENE = """
[model.species]
R = 10
P = 0
[model.parameters]
kr = 1.0
gr = 0.1
vmax = 8.0
K = 10.0
n = 2.0
g = 0.2
[model.reactions]
r_make = {{ reaction = "0 -> R", rate = "kr" }}
r_decay = {{ reaction = "R -> 0", rate = "gr" }}
express = {{ reaction = "0 -> P", propensity = "{law}" }}
p_decay = {{ reaction = "P -> 0", rate = "g" }}
"""

BODY = """
[run]
replicates = 40
replicates_per_task = 20
seed = 5
store = "{store}"
[time]
end = 20.0
samples = 5
[design]
kind = "grid"
[design.vary]
vmax = [4.0, 8.0]
"""


def _write(tmp_path, law, name="spec.toml"):
    path = tmp_path / name
    path.write_text(GENE.format(law=law) + BODY.format(store=tmp_path / f"{name}.zarr"), encoding="utf-8")
    return path


@pytest.mark.parametrize("law, words", [
    ("__import__('os').system('true')", "attribute access"),
    ("__import__('os')", "calling '__import__'"),
    ("P.real", "attribute access"),
    ("P[0]", "indexing"),
    ("(lambda: 1)()", "calling"),
    ("open('x')", "calling 'open'"),
    ("import os", "cannot read the expression"),
    ("hill_down(Q, vmax, K, n)", "unknown name 'Q'"),
    ("hill_down(R, vmax, K)", "hill_down() with 3 arguments"),
])
def test_law_outside_the_whitelist_is_bad_input_naming_the_reaction(tmp_path, law, words):
    """Whitelisted parsing only (never eval): refused with exit code 2, naming file, reaction, fix."""
    result = runner.invoke(app, ["check", str(_write(tmp_path, law.replace('"', "'")))])
    assert result.exit_code == 2, result.output
    text = " ".join(result.output.split())
    assert "spec.toml" in text and "model.reactions.express.propensity" in text and words in text


def test_rate_and_propensity_together_is_bad_input(tmp_path):
    path = _write(tmp_path, "vmax")
    path.write_text(path.read_text().replace('propensity = "vmax"', 'rate = "g", propensity = "vmax"'))
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 2 and "exactly one of rate" in " ".join(result.output.split())


def test_check_shows_the_law_and_molar_units(tmp_path):
    path = _write(tmp_path, "hill_down(R, vmax, K, n)")
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 0, result.output
    assert "propensity hill_down(R, vmax, K, n)" in result.output
    path.write_text(path.read_text().replace("[model.reactions]",
                                             '[model.units]\nconstants = "molar"\nvolume = 1e-15\n[model.reactions]'))
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 0, result.output
    assert "N_A V = 6.02214e+08" in " ".join(result.output.split())


def test_named_and_spelled_out_law_give_the_same_store(tmp_path):
    """Through `sweep run` on a real local Dask cluster (workers compile the law themselves): the
    named Hill law and its spelled-out expression give identical counts; swept vmax reaches the law."""
    named = _write(tmp_path, "hill_down(R, vmax, K, n)", "named.toml")
    spelled = _write(tmp_path, "vmax * K**n / (K**n + R**n)", "spelled.toml")
    for path in (named, spelled):
        result = runner.invoke(app, ["run", str(path), "--workers", "2"])
        assert result.exit_code == 0, result.output
    a = xr.open_zarr(tmp_path / "named.toml.zarr")
    b = xr.open_zarr(tmp_path / "spelled.toml.zarr")
    assert np.array_equal(a.counts.values, b.counts.values)
    p_last = a.counts.sel(species="P").isel(time=-1).mean("replicate").values
    assert p_last[1] > p_last[0]  # vmax 8 makes more protein than vmax 4
