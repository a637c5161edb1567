"""The base every sensitivity method's tests derive from (``SensitivityConformance``).

A method is reached the way ``sweep analyze`` reaches it: a design of a kind whose module names
the method (``SENSITIVITY``), its points from ``sweep.design.expand``, one output per point, and
``sweep.analysis.sensitivity.indices(facts, points, y, seed)``. Every method must return the
shared columns for the design's parameters in order, the same table for the same seed, and, on a
linear model y = 3 x1 + x2 + 0 x3 over the unit cube, rank the inputs by their slopes (common
practice: a linear function's inputs matter in the order of |slope| x range, whatever the
index, Saltelli et al. 2008, Global Sensitivity Analysis: The Primer, ch. 1). Each subclass adds
one check against a published result (``test_known_result``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from sweep import analysis, design
from sweep.analysis import sensitivity

NAMES = ("x1", "x2", "x3")
SLOPES = (3.0, 1.0, 0.0)


def analysed(table: dict, function, seed: int = 1, noise: float = 0.0, design_seed: int = 20261202):
    """The sensitivity table of ``function(points)`` (plus Gaussian noise of sd ``noise``) over the
    design ``table`` (a [design] table; its ``vary`` names the parameters)."""
    known = {name: 0.0 for name in table["vary"]}
    d = design.parse(table, known, "conformance.toml")
    points = design.expand(d, design_seed)
    y = function(points)
    if noise:
        y = y + np.random.default_rng(np.random.SeedSequence(design_seed, spawn_key=(1,))).normal(0, noise, len(y))
    return sensitivity.indices(design.describe(d), points, y, seed=seed)


def values(table: pd.DataFrame, index: str) -> dict[str, float]:
    rows = table[table["index"] == index]
    return dict(zip(rows["parameter"], rows["value"]))


class SensitivityConformance:
    """What every sensitivity method must do. Subclasses set ``method`` (a key of
    ``sweep.analysis.METHODS``), ``design`` (the [design] table, without ``vary``, of a kind whose
    module names the method), ``main_index`` (the index that ranks inputs; compared by absolute
    value), ``noise`` (sd added to the linear model, for a method that needs scatter to rank, e.g.
    rank correlations of an exact function) and ``test_known_result``."""

    method: str
    design: dict
    main_index: str
    noise = 0.0

    def linear(self, seed: int = 1) -> pd.DataFrame:
        vary = {name: {"low": 0.0, "high": 1.0} for name in NAMES}
        return analysed({**self.design, "vary": vary}, lambda x: x @ np.asarray(SLOPES), seed=seed, noise=self.noise)

    def test_registered_and_named_by_its_design(self):
        assert self.method in analysis.METHODS
        assert design.sensitivity(self.design["kind"]) == self.method
        assert {design.sensitivity(kind) for kind in design.DESIGNS} <= set(analysis.METHODS)

    def test_columns_parameters_and_method(self):
        table = self.linear()
        assert list(table.columns) == list(sensitivity.COLUMNS)
        assert set(table["method"]) == {self.method}
        assert list(values(table, self.main_index)) == list(NAMES)
        finite = table.dropna(subset=["conf_low", "conf_high"])
        assert (finite["conf_low"] <= finite["value"] + 1e-12).all()
        assert (finite["value"] <= finite["conf_high"] + 1e-12).all()

    def test_same_seed_same_table(self):
        pd.testing.assert_frame_equal(self.linear(seed=3), self.linear(seed=3))

    def test_a_linear_model_ranks_its_inputs_by_slope(self):
        main = {name: abs(value) for name, value in values(self.linear(), self.main_index).items()}
        assert main["x1"] > main["x2"] > main["x3"], main
