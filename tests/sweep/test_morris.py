"""The Morris design end to end: our elementary effects against a direct computation and theory.

Sources, named beside the checks:
- Morris (1991), Technometrics 33:161-174: the elementary effect of x_i is
  (y(x + delta e_i) - y(x)) / delta; on a function linear in the (unit-cube) inputs every
  elementary effect equals the slope, so mu = mu* = slope and sigma = 0.
- Campolongo, Cariboni & Saltelli (2007): mu* (mean absolute effect) screens out inputs with no
  effect (mu* = 0).
- Immigration-death from zero molecules: the count at time t is Poisson with mean
  k / g (1 - exp(-g t)) (common practice; e.g. Gardiner 2004, Handbook of Stochastic Methods, 3rd ed., Springer), so a sample mean of n replicates
  has variance mean / n.
"""

from __future__ import annotations

import numpy as np
import pytest
from typer.testing import CliRunner

import sweep
from sweep import design as designs
from sweep.analysis import sensitivity
from sweep.cli import app
from support.sensitivity_conformance import SensitivityConformance

Z_999 = 3.29  # two-sided normal quantile for alpha = 0.001

LINEAR = """
[design]
kind = "morris"
trajectories = 10
levels = 6
[design.vary]
x1 = { low = 0, high = 10 }
x2 = { low = 1, high = 100, distribution = "log-uniform" }
x3 = { low = -1, high = 1 }
"""


def _parsed(body: str, known: dict[str, float]) -> designs.Design:
    import tomllib

    return designs.parse(tomllib.loads(body)["design"], known, "spec.toml")


def _direct_effects(unit: np.ndarray, y: np.ndarray, d: int) -> list[list[float]]:
    """Elementary effects computed straight from the definition (Morris 1991), per parameter."""
    effects: list[list[float]] = [[] for _ in range(d)]
    for rows, values in zip(unit.reshape(-1, d + 1, d), y.reshape(-1, d + 1)):
        for step in range(d):
            delta = rows[step + 1] - rows[step]
            i = int(np.argmax(np.abs(delta)))
            effects[i].append((values[step + 1] - values[step]) / delta[i])
    return effects


def _unit(points: np.ndarray) -> np.ndarray:
    return np.column_stack([points[:, 0] / 10, np.log10(points[:, 1]) / 2, (points[:, 2] + 1) / 2])


def _indices(table, index: str) -> dict[str, float]:
    rows = table[table["index"] == index]
    return dict(zip(rows["parameter"], rows["value"]))


class TestMorris(SensitivityConformance):
    method, main_index = "morris", "mu_star"
    design = {"kind": "morris", "trajectories": 10, "levels": 4}

    def test_known_result(self):
        """y = 2 x1 + 3 log10(x2) + 0 x3 on our Morris design (p = 6 levels): in the unit cube the
        slopes are 2 x 10 = 20 and 3 x 2 = 6 (the ranges: x1 over 10, log10 x2 over 2 decades), so
        every elementary effect is exactly that (Morris 1991); x3 is unused, mu* = 0."""
        d = _parsed(LINEAR, {"x1": 0.0, "x2": 1.0, "x3": 0.0})
        points = designs.expand(d, 5)
        y = 2 * points[:, 0] + 3 * np.log10(points[:, 1])
        table = sensitivity.indices(designs.describe(d), points, y, seed=1)
        mu_star, mu, sigma = (_indices(table, i) for i in ("mu_star", "mu", "sigma"))
        np.testing.assert_allclose([mu_star["x1"], mu_star["x2"], mu_star["x3"]], [20.0, 6.0, 0.0], atol=1e-9)
        np.testing.assert_allclose([mu["x1"], mu["x2"]], [20.0, 6.0], atol=1e-9)
        np.testing.assert_allclose(list(sigma.values()), 0.0, atol=1e-9)


def test_nonlinear_effects_match_a_direct_computation():
    """y = x1 x3 + (log10 x2)^2: effects vary along the trajectories; mu, mu* and sigma (ddof 1)
    from sweep.analysis equal those computed here from the definition (Morris 1991)."""
    d = _parsed(LINEAR, {"x1": 0.0, "x2": 1.0, "x3": 0.0})
    points = designs.expand(d, 9)
    y = points[:, 0] * points[:, 2] + np.log10(points[:, 1]) ** 2
    effects = _direct_effects(_unit(points), y, 3)
    table = sensitivity.indices(designs.describe(d), points, y, seed=1)
    mu_star, mu, sigma = (_indices(table, i) for i in ("mu_star", "mu", "sigma"))
    for i, name in enumerate(("x1", "x2", "x3")):
        ee = np.asarray(effects[i])
        assert ee.size == 10
        assert mu[name] == pytest.approx(ee.mean(), abs=1e-9)
        assert mu_star[name] == pytest.approx(np.abs(ee).mean(), abs=1e-9)
        assert sigma[name] == pytest.approx(ee.std(ddof=1), abs=1e-9)
    assert sigma["x1"] > 1 and sigma["x3"] > 1  # the interaction spreads their effects


IMMIGRATION_DEATH = """
[model.species]
A = 0
[model.parameters]
k = 20.0
g = 1.0
u = 1.0
[model.reactions]
birth = { reaction = "0 -> A", rate = "k" }
death = { reaction = "A -> 0", rate = "g" }
"""
SWEEP = """
[run]
replicates = 200
replicates_per_task = 200
seed = 11
[time]
end = 20.0
samples = 3
[design]
kind = "morris"
trajectories = 8
[design.vary]
k = { low = 10, high = 30 }
g = { low = 0.5, high = 1.0 }
u = { low = 1, high = 2 }         # in the model, used by no reaction
"""
END, N, DELTA = 20.0, 200, 4 / (2 * 3)  # p = 4 levels: delta = 2/3


def _exact_mean(k, g):
    return k / g * (1 - np.exp(-g * END))


@pytest.mark.slow
def test_morris_sweep_of_immigration_death(spec_file, tmp_path):
    """`sweep run` (a real local Dask cluster) then `sweep analyze`: mu* of the mean count at t = 20.

    Exact effects come from the Poisson mean k / g (1 - exp(-g t)) at the design's own points;
    each estimated effect differs by the noise of two sample means, sd_j = sqrt((m1 + m2) / n) / delta.
    k's effects are all positive and far above that noise, so mu*(k) lies within 3.29 sd of the
    exact value (alpha = 0.001). u changes nothing, so its mu* is the mean |noise|: below its
    expectation sqrt(2/pi) mean(sd_j) plus 3.29 of its sd (one-sided alpha < 0.001)."""
    path = spec_file(SWEEP, model=IMMIGRATION_DEATH)
    store = tmp_path / "morris.zarr"
    runner = CliRunner()
    result = runner.invoke(app, ["run", str(path), "--store", str(store), "--workers", "2"])
    assert result.exit_code == 0, result.output
    result = runner.invoke(app, ["analyze", str(store), "--species", "A", "--statistic", "mean"])
    assert result.exit_code == 0, result.output
    assert "Sensitivity (morris)" in result.output
    table = sweep.open_analysis(store, "sensitivity").to_dataframe()
    mu_star, mu = _indices(table, "mu_star"), _indices(table, "mu")

    points = sweep.open_results(store)["params"].values  # columns k, g, u; 8 trajectories of 4
    m = _exact_mean(points[:, 0], points[:, 1])
    exact, noise = {name: [] for name in "kgu"}, {name: [] for name in "kgu"}
    for rows, means in zip(points.reshape(8, 4, 3), m.reshape(8, 4)):
        for step in range(3):
            moved = int(np.argmax(np.abs(rows[step + 1] - rows[step])))
            sign = np.sign(rows[step + 1, moved] - rows[step, moved])
            name = "kgu"[moved]
            exact[name].append((means[step + 1] - means[step]) / (sign * DELTA))
            noise[name].append(np.sqrt((means[step] + means[step + 1]) / N) / DELTA)
    k_exact, k_sd = np.asarray(exact["k"]), np.asarray(noise["k"])
    assert np.all(k_exact > 5 * k_sd)  # no effect of k can change sign by noise
    assert abs(mu_star["k"] - k_exact.mean()) < Z_999 * np.sqrt(np.sum(k_sd ** 2)) / 8
    assert mu["k"] > 0 > mu["g"]  # more immigration, more molecules; faster death, fewer
    u_sd = np.asarray(noise["u"])
    bound = np.sqrt(2 / np.pi) * u_sd.mean() + Z_999 * np.sqrt((1 - 2 / np.pi) * np.sum(u_sd ** 2)) / 8
    assert 0 <= mu_star["u"] < bound, (mu_star["u"], bound)
    assert mu_star["u"] < 0.05 * mu_star["k"]
