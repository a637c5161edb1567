"""Derived parameters: ``[derived]`` expressions evaluated at every point, validated like the rest."""

from __future__ import annotations

import numpy as np
import pytest
from typer.testing import CliRunner

import sweep
from sweep.cli import app
from sweep.errors import SpecError

# A + B -> C with a deterministic constant k converted for the volume: c = k / (N_A V)
# (Gillespie 1977); the initial counts are parameters too, so the volume can scale them.
MODEL = """
[model.species]
A = "A0"
B = 100
C = 0
[model.parameters]
k = 1e6          # per molar per second
V = 1e-15        # litres
NA = 6.022e23
c = 0.0          # stochastic constant, derived below
A0 = 50
Kd = 1.0
k_off = 0.0
k_on = 1.0
[model.reactions]
bind = { reaction = "A + B -> C", rate = "c" }
unbind = { reaction = "C -> A + B", rate = "k_off" }
"""
RUN = "[run]\nreplicates = 2\n[time]\nend = 1.0\nsamples = 3\n"


def load(spec_file, body: str) -> sweep.Spec:
    return sweep.load(spec_file(RUN + body, model=MODEL))


def expect_bad(spec_file, body: str, field: str, *fragments: str) -> str:
    path = spec_file(RUN + body, model=MODEL)
    with pytest.raises(SpecError) as info:
        sweep.load(path)
    message = str(info.value)
    assert field in message and all(f in message for f in fragments), message
    assert CliRunner().invoke(app, ["check", str(path)]).exit_code == 2
    return message


def test_volume_conversion_at_every_point(spec_file):
    spec = load(spec_file, """
    [design.vary]
    V = [1e-15, 2e-15]
    [derived]
    c = "k / (NA * V)"
    k_off = "k_on * Kd"
    """)
    for row in spec.points():
        values = spec.values_at(row)
        assert values["c"] == pytest.approx(1e6 / (6.022e23 * row[0]), rel=1e-12)
        assert values["k_off"] == 1.0
    np.testing.assert_allclose(spec.columns(spec.points())["c"], 1e6 / (6.022e23 * np.array([1e-15, 2e-15])))


def test_derived_may_use_derived_in_any_order(spec_file):
    spec = load(spec_file, '[derived]\nk_off = "c * 2"\nc = "k_on + 1"\n')
    assert [name for name, _ in spec.derived] == ["c", "k_off"]
    assert spec.values_at(spec.points()[0])["k_off"] == 4.0


def test_derived_initial_count(spec_file):
    spec = load(spec_file, '[design.vary]\nKd = [1, 2]\n[derived]\nA0 = "10 * Kd"\n')
    assert [spec.values_at(row)["A0"] for row in spec.points()] == [10.0, 20.0]


def test_cycle_is_refused(spec_file):
    expect_bad(spec_file, '[derived]\nc = "k_off * 2"\nk_off = "Kd * c"\n', "derived.", "cycle", "c -> k_off -> c")
    expect_bad(spec_file, '[derived]\nc = "c + 1"\n', "derived.c", "cycle")


def test_unknown_name_in_expression(spec_file):
    expect_bad(spec_file, '[derived]\nc = "k / (NA * Vol)"\n', "derived.c", "unknown name 'Vol'")


def test_derived_must_be_a_model_parameter(spec_file):
    expect_bad(spec_file, '[derived]\nc2 = "k"\n', "derived.c2", "not a parameter")


def test_derived_cannot_also_be_fixed_or_varied(spec_file):
    expect_bad(spec_file, '[parameters]\nc = 1.0\n[derived]\nc = "k"\n', "derived.c", "also set under [parameters]")
    expect_bad(spec_file, '[design.vary]\nc = [1.0]\n[derived]\nc = "k"\n', "derived.c", "also set under [design]")


def test_derived_must_be_an_expression(spec_file):
    expect_bad(spec_file, "[derived]\nc = 2.0\n", "derived.c", "in quotes")


def test_forbidden_construct_in_derived(spec_file):
    expect_bad(spec_file, '[derived]\nc = "__import__(\'os\').getpid()"\n', "derived.c", "not allowed")


def test_negative_derived_rate_names_the_point(spec_file):
    message = expect_bad(spec_file, '[design.vary]\nKd = [1, -2]\n[derived]\nk_off = "k_on * Kd"\n',
                         "derived.k_off", "rate constant k_off must be >= 0", "point 1", "Kd = -2")
    assert "'k_on * Kd'" in message


def test_non_finite_derived_value(spec_file):
    expect_bad(spec_file, '[design.vary]\nV = [1e-15, 0]\n[derived]\nc = "k / (NA * V)"\n',
               "derived.c", "not a finite number", "point 1", "division by zero")


def test_fractional_derived_initial_count(spec_file):
    expect_bad(spec_file, '[design.vary]\nKd = [1, 1.55]\n[derived]\nA0 = "10 * Kd"\n',
               "derived.A0", "whole number", "point 1")
