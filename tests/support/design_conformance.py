"""The base every design kind's tests derive from (``DesignConformance``), and its helpers."""

from __future__ import annotations

import json
import textwrap

import numpy as np
import pytest
from typer.testing import CliRunner

import sweep
from sweep import design as designs
from sweep.cli import app
from sweep.errors import SpecError

MODEL = """
[model.species]
A = "A0"
[model.parameters]
k = 5.0
g = 0.5
A0 = 0
Kd = 1.0
[model.reactions]
birth = { reaction = "0 -> A", rate = "k" }
death = { reaction = "A -> 0", rate = "g" }
"""
RUN = """
[run]
replicates = 2
seed = 7
[time]
end = 1.0
samples = 3
"""


def load(spec_file, design: str, run: str = RUN, **kwargs) -> sweep.Spec:
    return sweep.load(spec_file(run + textwrap.dedent(design), model=MODEL, **kwargs))


def expect_bad(spec_file, design: str, field: str, *fragments: str) -> str:
    """The design is refused by ``sweep.load`` and by ``sweep check`` (exit 2), naming ``field``."""
    path = spec_file(RUN + textwrap.dedent(design), model=MODEL)
    with pytest.raises(SpecError) as info:
        sweep.load(path)
    message = str(info.value)
    assert field in message, message
    for fragment in fragments:
        assert fragment in message, message
    result = CliRunner().invoke(app, ["check", str(path)])
    assert result.exit_code == 2, result.output
    assert field in result.output.replace("\n", "")
    return message


class DesignConformance:
    """What every design kind must do. Subclasses set ``body`` (the [design] tables),
    ``names``, ``n_points`` and ``unknown`` (a body that names an unknown parameter)."""

    body: str
    names: tuple[str, ...]
    n_points: int
    unknown: str
    field_of_unknown = "design.vary.nope"

    def write_files(self, folder) -> None:
        """Files the design reads, beside the spec (none by default)."""

    @pytest.fixture
    def spec(self, spec_file, tmp_path):
        self.write_files(tmp_path)
        return load(spec_file, self.body)

    def test_shape_and_names(self, spec):
        points = spec.points()
        assert points.shape == (self.n_points, len(self.names))
        assert points.dtype == np.float64 and np.all(np.isfinite(points))
        assert spec.param_names == self.names == spec.design.names

    def test_same_seed_same_points(self, spec):
        again = designs.expand(spec.design, spec.seed)
        assert np.array_equal(spec.points(), again)
        assert np.array_equal(designs.expand(spec.design, 12345), designs.expand(spec.design, 12345))

    def test_points_within_the_described_ranges(self, spec):
        points = spec.points()
        facts = designs.describe(spec.design)["parameters"]
        for q, name in enumerate(spec.param_names):
            low, high = facts[name]["low"], facts[name]["high"]
            assert low is None or points[:, q].min() >= low
            assert high is None or points[:, q].max() <= high

    def test_describe_is_json(self, spec):
        facts = designs.describe(spec.design)
        assert json.loads(json.dumps(facts, allow_nan=False)) == facts
        assert facts["kind"] == spec.design.kind and facts["names"] == list(self.names)

    def test_design_is_frozen_and_hashable(self, spec):
        hash(spec.design)
        with pytest.raises(AttributeError):
            spec.design.kind = "other"

    def test_unknown_parameter_is_named(self, spec_file, tmp_path):
        self.write_files(tmp_path)
        expect_bad(spec_file, self.unknown, self.field_of_unknown, "not a parameter")
