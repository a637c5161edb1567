"""Spec and model validation: every bad input names the file and the field; exit code 2."""

from __future__ import annotations

import numpy as np
import pytest
from typer.testing import CliRunner

import sweep
from sweep.cli import app
from sweep.errors import SpecError

GOOD_RUN = """
[run]
replicates = 10
[time]
end = 5.0
samples = 6
"""


def _expect(path, field, *fragments):
    with pytest.raises(SpecError) as info:
        sweep.load(path)
    message = str(info.value)
    assert str(path) in message or path.name in message
    assert field in message, message
    for fragment in fragments:
        assert fragment in message, message
    result = CliRunner().invoke(app, ["check", str(path)])
    assert result.exit_code == 2, result.output
    return message


def test_good_spec_loads(spec_file):
    spec = sweep.load(spec_file(GOOD_RUN + "[design.vary]\nk = [1, 2, 3]\ng = [0.1, 0.2]\n"))
    assert spec.replicates == 10 and spec.replicates_per_task == 10
    assert spec.times == tuple(np.linspace(0, 5, 6))
    assert spec.points().shape == (6, 2)
    assert spec.values_at(spec.points()[5]) == {"k": 3.0, "g": 0.2}
    assert len(spec.sha256) == 64


def test_unknown_species_in_reaction(spec_file):
    model = '[model.species]\nA = 0\n[model.reactions]\nr = { reaction = "A + Z -> 0", rate = 1.0 }\n'
    _expect(spec_file(GOOD_RUN, model=model), "model.reactions.r.reaction", "unknown species 'Z'")


def test_negative_rate_literal(spec_file):
    model = '[model.species]\nA = 0\n[model.reactions]\nr = { reaction = "0 -> A", rate = -1.0 }\n'
    _expect(spec_file(GOOD_RUN, model=model), "model.reactions.r.rate", ">= 0")


def test_negative_rate_parameter_override(spec_file):
    _expect(spec_file(GOOD_RUN + "[parameters]\ng = -0.5\n"), "parameters.g", ">= 0")


def test_negative_rate_in_design(spec_file):
    _expect(spec_file(GOOD_RUN + "[design.vary]\nk = [1.0, -2.0]\n"), "design.vary.k", ">= 0")


def test_zero_replicates(spec_file):
    _expect(spec_file(GOOD_RUN.replace("replicates = 10", "replicates = 0")), "run.replicates", "at least 1")


def test_non_increasing_times(spec_file):
    body = "[run]\nreplicates = 3\n[time]\npoints = [0.0, 2.0, 1.0]\n"
    _expect(spec_file(body), "time.points", "strictly increasing")


def test_unknown_method(spec_file):
    _expect(spec_file(GOOD_RUN.replace("[run]", '[run]\nmethod = "magic"')), "run.method", "unknown method", "direct")


def test_missing_spec_file(tmp_path):
    path = tmp_path / "nope.toml"
    with pytest.raises(SpecError, match="file not found"):
        sweep.load(path)
    assert CliRunner().invoke(app, ["check", str(path)]).exit_code == 2


def test_missing_model_file(spec_file):
    _expect(spec_file(GOOD_RUN, model='model = "absent.toml"\n'), "model", "file not found")


def test_toml_syntax_error_names_line(spec_file):
    path = spec_file(GOOD_RUN + "[design.vary\nk = [1]\n")
    bad_line = path.read_text().splitlines().index("[design.vary") + 1
    _expect(path, "", "TOML syntax error", f"line {bad_line},")


def test_unknown_key_is_refused(spec_file):
    _expect(spec_file(GOOD_RUN.replace("[run]", "[run]\nreplicate = 3")), "run.replicate", "unknown key")


def test_unknown_parameter_in_design(spec_file):
    _expect(spec_file(GOOD_RUN + "[design.vary]\nk_typo = [1.0]\n"), "design.vary.k_typo", "not a parameter")


def test_bad_equation(spec_file):
    model = '[model.species]\nA = 0\n[model.reactions]\nr = { reaction = "A => B", rate = 1.0 }\n'
    _expect(spec_file(GOOD_RUN, model=model), "model.reactions.r.reaction", "->")


def test_fractional_initial_count(spec_file):
    model = '[model.species]\nA = 2.5\n[model.reactions]\nr = { reaction = "A -> 0", rate = 1.0 }\n'
    _expect(spec_file(GOOD_RUN, model=model), "model.species.A", "whole number")
