"""Observables ([observables] in a model): stored beside counts, read by analysis as species.

External check: for two independent immigration-death species A and B started empty, each count
at time t is Poisson with mean (k/g)(1 - exp(-g t)) (Gardiner, Handbook of Stochastic Methods,
1985; Jahnke & Huisinga 2007), so the observable A + B is Poisson with the sum of the means
(the sum of independent Poisson variables is Poisson: common practice). Chi-square goodness of
fit, alpha = 0.001. The other checks compare the stored observables and their analysis with the
expression evaluated by hand with numpy on the stored counts (exact, or to float rounding).
"""

from __future__ import annotations

import shutil

import numpy as np
import pytest
import xarray as xr
import zarr
from typer.testing import CliRunner

import sweep
from sweep.cli import app
from sweep.errors import SpecError
from sweep.model.observables import Readout, parse, storable
from sweep.model.sbml import read
from sweep.store import integrity
from scipy import stats
from support.exact import pooled_chisquare

runner = CliRunner()

TWO_SPECIES = """
[model.species]
A = 0
B = 0
[model.parameters]
ka = 3.0
kb = 5.0
g = 1.0
alpha = 2.0
background = -4.0
[model.reactions]
make_a = { reaction = "0 -> A", rate = "ka" }
lose_a = { reaction = "A -> 0", rate = "g" }
make_b = { reaction = "0 -> B", rate = "kb" }
lose_b = { reaction = "B -> 0", rate = "g" }
[model.observables]
total = "A + B"
fluor = "alpha * A + background"
"""

BODY = """
[run]
replicates = 800
replicates_per_task = 400
seed = 2026
[time]
points = [0.0, 2.0, 8.0]
[design.vary]
alpha = [1.0, 3.0]
"""


# adaptive on an observable: fluor = alpha A - 4 at t = 8 has a relative standard error of about 8.7 % at
# alpha = 1 and 5.2 % at alpha = 3 with 400 replicates (A ~ Poisson(3)), so only point 0 needs more
# replicates for 6 %; A itself (2.9 % at both) would stop both points at 400
ADAPTIVE = BODY.replace("replicates = 800", "replicates = 400").replace("[time]", """[run.adaptive]
statistic = "mean"
species = "fluor"
time = 8.0
precision = 0.06
max_replicates = 1200
[time]""")


@pytest.fixture(scope="module")
def stored(tmp_path_factory, spec_writer):
    """One adaptive run through a real local Dask cluster (one worker) into a real store on disk."""
    folder = tmp_path_factory.mktemp("observables")
    spec = sweep.load(spec_writer(folder, ADAPTIVE, model=TWO_SPECIES), store=folder / "obs.zarr")
    summary = sweep.run(spec, workers=1)
    assert summary.complete
    return spec, xr.open_zarr(spec.store)


def test_stored_observables_are_the_expressions_on_the_stored_counts(stored):
    spec, ds = stored
    assert ds["observables"].dims == ("point", "replicate", "time", "observable")
    assert list(ds["observable"].values) == ["total", "fluor"]
    assert ds["observables"].chunks[1] == ds["counts"].chunks[1]  # one chunk per task, as counts
    counts, obs = ds["counts"].values.astype(np.float64), ds["observables"].values
    ran = ds["status"].values >= 0  # replicates the adaptive rounds did not need stay NaN (never run)
    assert np.isnan(obs[~ran]).all() and ran.sum() > 0
    alpha = np.broadcast_to(ds["params"].values[:, 0][:, None], ran.shape)[ran][:, None]
    np.testing.assert_array_equal(obs[ran][..., 0], counts[ran][..., 0] + counts[ran][..., 1])
    np.testing.assert_array_equal(obs[ran][..., 1], alpha * counts[ran][..., 0] - 4.0)
    assert ds.attrs["observables"] == {"total": "A + B", "fluor": "alpha * A + background"}
    assert list(zarr.open_array(spec.store, path="checksums").attrs["arrays"])[-1] == "observables"


def test_adaptive_rounds_follow_the_observable(stored):
    """The planner read fluor, not a species: point 0 (alpha = 1) grew past 400 replicates because fluor's
    standard error was above 6 % of its mean there (checked by hand on the first 400), point 1 did not."""
    _, ds = stored
    status, fluor = ds["status"].values, ds["observables"].sel(observable="fluor", time=8.0).values
    run = (status >= 0).sum(axis=1)
    first = np.where(status[:, :400] == 0, fluor[:, :400], np.nan)
    se = np.nanstd(first, axis=1, ddof=1) / np.sqrt(np.sum(~np.isnan(first), axis=1))
    relative = se / np.abs(np.nanmean(first, axis=1))
    assert relative[0] > 0.06 and run[0] > 400, (relative, run)
    assert relative[1] <= 0.06 and run[1] == 400, (relative, run)
    assert ds.attrs["adaptive"]["target"]["species"] == "fluor"


def test_sum_of_independent_poisson_species_is_poisson(stored):
    """A + B at t = 8 is Poisson(ka/g (1 - e^-8) + kb/g (1 - e^-8)); chi-square, alpha = 0.001."""
    _, ds = stored
    mean = (3.0 + 5.0) * (1 - np.exp(-8.0))
    sample = ds["observables"].sel(observable="total").isel(point=0, time=2).values
    sample = sample[ds["status"].values[0] == 0]
    assert sample.size >= 400 and np.all(sample == np.round(sample))  # whole counts, none missing
    pmf = stats.poisson.pmf(np.arange(int(stats.poisson.ppf(1 - 1e-9, mean)) + 1), mean)
    assert pooled_chisquare(sample.astype(np.int64), pmf).pvalue > 1e-3


def test_analysis_of_an_observable_is_the_analysis_of_its_expression(stored, tmp_path):
    spec, ds = stored
    options = sweep.AnalysisOptions(thresholds=(sweep.Threshold("fluor", "<=", 0),), statistics=("mean",),
                                    histogram_species=("total",), tables=str(tmp_path / "tables"))
    sweep.analyze(spec.store, options)
    out = sweep.open_analysis(spec.store)
    counts = np.where((ds["status"].values == 0)[:, :, None, None], ds["counts"].values, np.nan)
    alpha = ds["params"].values[:, 0][:, None]
    by_hand = alpha * counts[:, :, 2, 0] - 4.0  # (point, replicate) at t = 8, NaN where not finished
    total = counts[:, :, 2, 0] + counts[:, :, 2, 1]
    np.testing.assert_allclose(out["mean"].sel(species="total", time=8.0).values, np.nanmean(total, axis=1),
                               rtol=1e-12)
    np.testing.assert_allclose(out["var"].sel(species="fluor", time=8.0).values, np.nanvar(by_hand, axis=1, ddof=1),
                               rtol=1e-12)
    fraction = np.nansum(by_hand <= 0, axis=1) / np.sum(~np.isnan(by_hand), axis=1)
    np.testing.assert_allclose(out["fraction"].sel(threshold="fluor<=0", time=8.0).values, fraction, rtol=1e-12)
    np.testing.assert_allclose(out["histogram"].sel(hist_species="total").sum(["hist_time", "bin"]).values, 1.0)


def test_unfinished_replicates_give_nan_in_a_real_run(tmp_path, spec_file):
    """An event cap stops some replicates (status 1, later samples -1): their observables are NaN,
    never computed from -1; the finished ones equal the expression. Shard route, in this process."""
    body = BODY.replace("replicates = 800", "replicates = 40").replace("replicates_per_task = 400",
                                                                        "replicates_per_task = 20")
    body = body.replace("seed = 2026", "seed = 5\nmax_events = 125")
    spec = sweep.load(spec_file(body, model=TWO_SPECIES), store=tmp_path / "capped.zarr")
    assert sweep.run_shard(spec, 1, 1).complete
    ds = xr.open_zarr(spec.store)
    status, obs = ds["status"].values, ds["observables"].values
    counts = ds["counts"].values.astype(np.float64)
    assert (status == 0).any() and (status == 1).any()
    assert np.isnan(obs[status != 0]).all()
    finished = status == 0
    np.testing.assert_array_equal(obs[finished][..., 0], counts[finished][..., 0] + counts[finished][..., 1])
    assert integrity.verify(spec.store, repair=False).sound
    # the observables chunk is part of the record, and their names a coordinate like species: a damaged
    # chunk is found by --verify (which unmarks its task) and a lost coordinate too; a rerun restores both
    chunk = next(p for p in (spec.store / "observables").rglob("*") if p.is_file() and p.name != "zarr.json")
    chunk.write_bytes(chunk.read_bytes()[:-1] + bytes([chunk.read_bytes()[-1] ^ 1]))
    shutil.rmtree(spec.store / "observable")
    found = integrity.verify(spec.store)
    assert any("observables chunk" in problem for _, _, problem in found.tasks), found.tasks
    assert "observable" in found.coordinates
    assert sweep.run_shard(spec, 1, 1).complete
    assert integrity.verify(spec.store, repair=False).sound
    np.testing.assert_array_equal(xr.open_zarr(spec.store)["observables"].values, obs)  # the same values again
    assert list(xr.open_zarr(spec.store)["observable"].values) == ["total", "fluor"]


def test_readout_masks_unknown_samples_and_unfinished_replicates():
    readout = Readout(("d",), (parse({"d": "A - 1"}, ("A",), set(), set(), "m", "o")[0][1],), ("A",), ())
    counts = np.array([[[3], [4]], [[2], [-1]], [[5], [6]]])
    out = readout.evaluate(counts, np.array([0, 1, 2]), ())
    np.testing.assert_array_equal(out[0, :, 0], [2.0, 3.0])
    assert np.isnan(out[1:]).all()


@pytest.mark.parametrize("table, field, words", [
    ('A = "B"', "model.observables.A", "species share this name"),
    ('ka = "A"', "model.observables.ka", "parameter share this name"),
    ('make_a = "A"', "model.observables.make_a", "reaction share this name"),
    ('x = "A + C"', "model.observables.x", "unknown name 'C'"),
    ('x = "A.real"', "model.observables.x", "attribute access"),
    ('x = "__import__(1)"', "model.observables.x", "calling '__import__'"),
    ("x = 3", "model.observables.x", "expression in quotes"),
])
def test_bad_observables_are_refused_with_exit_2(tmp_path, spec_file, table, field, words):
    model = TWO_SPECIES.split("[model.observables]")[0] + "[model.observables]\n" + table + "\n"
    path = spec_file(BODY, model=model)
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 2, result.output
    text = " ".join(result.output.split())
    assert str(path.name) in text and field in text and words in text, text


def test_editing_an_observable_is_another_sweep_on_resume(stored, tmp_path):
    spec, _ = stored
    edited = spec.path.read_text().replace('fluor = "alpha * A + background"', 'fluor = "alpha * A"')
    path = tmp_path / "edited.toml"
    path.write_text(edited)
    result = runner.invoke(app, ["run", str(path), "--store", str(spec.store), "--workers", "1"])
    assert result.exit_code == 2, result.output
    text = " ".join(result.output.split())
    assert "observable fluor: edited" in text and "model.observables.fluor" in text, text


SBML = """<?xml version="1.0" encoding="UTF-8"?>
<sbml xmlns="http://www.sbml.org/sbml/level3/version2/core" level="3" version="2">
  <model id="ruled" substanceUnits="item" extentUnits="item" timeUnits="second">
    <listOfCompartments><compartment id="cell" size="1" spatialDimensions="3" constant="true"/></listOfCompartments>
    <listOfSpecies>
      <species id="A" compartment="cell" initialAmount="30" hasOnlySubstanceUnits="true"
               boundaryCondition="false" constant="false"/>
      <species id="B" compartment="cell" initialAmount="0" hasOnlySubstanceUnits="true"
               boundaryCondition="false" constant="false"/>
    </listOfSpecies>
    <listOfParameters>
      <parameter id="k" value="0.5" constant="true"/>
      <parameter id="total" constant="false"/>
    </listOfParameters>
    <listOfRules>
      <assignmentRule variable="total">
        <math xmlns="http://www.w3.org/1998/Math/MathML"><apply><plus/><ci>A</ci><ci>B</ci></apply></math>
      </assignmentRule>
    </listOfRules>
    <listOfReactions>
      <reaction id="convert" reversible="false">
        <listOfReactants><speciesReference species="A" stoichiometry="1" constant="true"/></listOfReactants>
        <listOfProducts><speciesReference species="B" stoichiometry="1" constant="true"/></listOfProducts>
        <kineticLaw><math xmlns="http://www.w3.org/1998/Math/MathML">
          <apply><times/><ci>k</ci><ci>A</ci></apply></math></kineticLaw>
      </reaction>
    </listOfReactions>
  </model>
</sbml>
"""


def test_sbml_assignment_rule_reading_species_is_a_stored_observable(tmp_path):
    """SBML L3V2 section 4.11.3 (Hucka et al. 2019): an assignment rule holds at every instant, so
    total = A + B is an observable; A -> B conserves it, so every stored value is 30."""
    (tmp_path / "m.xml").write_text(SBML, encoding="utf-8")
    (tmp_path / "s.toml").write_text('model = "m.xml"\n[run]\nreplicates = 10\nseed = 1\n[time]\nend = 2.0\n'
                                     "samples = 3\n", encoding="utf-8")
    spec = sweep.load(tmp_path / "s.toml", store=tmp_path / "s.zarr")
    assert [(n, e.text) for n, e in spec.model.observables] == [("total", "A + B")]
    checked = runner.invoke(app, ["check", str(tmp_path / "s.toml")])
    assert checked.exit_code == 0 and "observables: total = A + B" in checked.output, checked.output
    assert sweep.run_shard(spec, 1, 1).complete
    ds = xr.open_zarr(spec.store)
    assert list(ds["observable"].values) == ["total"]
    np.testing.assert_array_equal(ds["observables"].values, 30.0)


def test_sbml_observable_names_go_through_the_same_checks():
    imported = read(SBML, "m.xml")
    assert imported.table["observables"] == {"total": "A + B"}
    with pytest.raises(SpecError, match="observables.total"):
        parse({"total": "A + Z"}, ("A", "B"), {"k"}, {"convert"}, "m.xml", "observables")


def test_export_names_observables_like_species(stored, tmp_path):
    """Rows of a selected observable carry its stored value; a count beside it keeps its own value."""
    import pandas as pd

    spec, ds = stored
    out = tmp_path / "e.csv"
    result = runner.invoke(app, ["export", str(spec.store), "-o", str(out), "--species", "fluor", "--species", "A",
                                 "--point", "1", "--time", "8"])
    assert result.exit_code == 0, result.output
    rows = pd.read_csv(out)
    fluor = rows[rows["species"] == "fluor"].sort_values("replicate")["count"].to_numpy()
    a = rows[rows["species"] == "A"].sort_values("replicate")["count"].to_numpy()
    ran = ds["status"].values[1] >= 0  # export leaves out replicates never run
    np.testing.assert_array_equal(fluor, ds["observables"].sel(observable="fluor").isel(point=1, time=2).values[ran])
    np.testing.assert_array_equal(a, ds["counts"].sel(species="A").isel(point=1, time=2).values[ran])
    assert (fluor < 0).any()  # a negative observable is a value, not "unknown"


def test_an_sbml_rule_too_long_to_read_is_left_out_with_a_note_not_a_refusal():
    """Three curated models of the corpus have such rules; they imported before observables were stored."""
    kept, notes = storable({"short": "A + B", "long": " + ".join(["A"] * 400)})
    assert kept == {"short": "A + B"}
    assert notes[0][0] == "assignment rule for long" and "longer than" in notes[0][1]


def test_an_observables_chunk_beyond_the_chunk_limit_is_refused(spec_file):
    """20,000 replicates x 1,000 samples x 3 observables x 8 bytes = 480 MB > 256 MiB (docs/limits.md),
    while that task's counts chunk (1 species, int32) is 80 MB and fits."""
    model = TWO_SPECIES.replace("B = 0\n", "", 1).split("[model.reactions]")[0] + (
        '[model.reactions]\nmake_a = { reaction = "0 -> A", rate = "ka" }\n'
        '[model.observables]\nx = "A"\ny = "2 * A"\nz = "3 * A"\n')
    body = "[run]\nreplicates = 20000\nreplicates_per_task = 20000\n[time]\nend = 1.0\nsamples = 1000\n"
    result = runner.invoke(app, ["check", str(spec_file(body, model=model))])
    assert result.exit_code == 2, result.output
    assert "run.replicates_per_task" in result.output and "observables chunk" in " ".join(result.output.split())
