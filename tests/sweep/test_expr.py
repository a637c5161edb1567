"""Safe arithmetic expressions: the whitelist refuses everything else, and the arithmetic is right."""

from __future__ import annotations

import math

import numpy as np
import pytest

from sweep.errors import SpecError
from sweep.model.expr import Expr, evaluate, parse

VALUES = {"a": 2.0, "b": 3.0, "k_on": 0.5, "Kd": 4.0}


def value(text: str, values=VALUES) -> float:
    return evaluate(parse(text, "spec.toml", "derived.x"), values)


@pytest.mark.parametrize("text, expected", [
    ("k_on * Kd", 2.0),
    ("a + b * 2", 8.0),
    ("(a + b) * 2", 10.0),
    ("a - b - 1", -2.0),            # left-associative
    ("a / b / 2", 2.0 / 3.0 / 2.0),
    ("a ** b ** 2", 2.0 ** 9),      # ** is right-associative
    ("-a ** 2", -4.0),              # unary minus binds looser than **
    ("2 ** -1", 0.5),
    ("+a", 2.0),
    ("--a", 2.0),
    ("1e-3 * 6.022e23", 6.022e20),
    ("7 / 2", 3.5),                 # true division, even for whole numbers
    ("min(a, b)", 2.0),
    ("max(a, b, 10)", 10.0),
    ("exp(log(b))", 3.0),
    ("sqrt(a * 8)", 4.0),
    ("log(exp(1))", 1.0),
])
def test_arithmetic(text, expected):
    assert value(text) == pytest.approx(expected, rel=1e-12)


def test_names_in_order_of_first_use():
    assert parse("Kd * k_on + Kd / a", "s", "f").names == ("Kd", "k_on", "a")
    assert parse("3 * exp(2)", "s", "f").names == ()


def test_vectorised_over_arrays():
    k = np.array([1.0, 2.0, 4.0])
    out = evaluate(parse("k * Kd + max(k, 2)", "s", "f"), {"k": k, "Kd": 10.0})
    np.testing.assert_array_equal(out, [12.0, 22.0, 44.0])
    assert isinstance(value("a * b"), float)


def test_domain_errors_give_non_finite_values_not_exceptions():
    assert value("a / 0") == math.inf
    assert math.isnan(value("log(0 - a)"))
    assert math.isnan(value("sqrt(-a)"))
    assert value("10 ** 400") == math.inf
    assert math.isnan(value("(-8) ** (1 / 3)"))


def test_expr_is_frozen_and_hashable():
    expr = parse("k_on * Kd", "s", "f")
    assert isinstance(expr, Expr) and hash(expr) == hash(parse("k_on * Kd", "s", "f"))
    with pytest.raises(AttributeError):
        expr.text = "1"


def test_missing_name_at_evaluation():
    with pytest.raises(KeyError, match="'z'"):
        value("a * z")


@pytest.mark.parametrize("text, fragment", [
    ("a.real", "attribute access"),
    ("k.__class__", "attribute access"),
    ("a[0]", "indexing"),
    ("__import__('os')", "calling '__import__'"),
    ("open('/etc/passwd')", "calling 'open'"),
    ("eval('1')", "calling 'eval'"),
    ("abs(a)", "calling 'abs'"),
    ("round(a)", "calling 'round'"),
    ("a(2)", "calling 'a'"),
    ("exp.__call__(1)", "calling 'attribute access'"),
    ("(lambda: 1)()", "calling 'a lambda'"),
    ("lambda: 1", "a lambda"),
    ("[x for x in a]", "a comprehension"),
    ("{x for x in a}", "a comprehension"),
    ("sum(x for x in a)", "calling 'sum'"),
    ("'text'", "the constant 'text'"),
    ("f'{a}'", "a string"),
    ("b'1'", "the constant"),
    ("True", "the constant True"),
    ("None", "the constant None"),
    ("1j", "the constant 1j"),
    ("a if b else 1", "if/else"),
    ("a < b", "a comparison"),
    ("a and b", "and/or"),
    ("not a", "the operator Not"),
    ("~a", "the operator Invert"),
    ("a // b", "the operator FloorDiv"),
    ("a % b", "the operator Mod"),
    ("a @ b", "the operator MatMult"),
    ("a << b", "the operator LShift"),
    ("a | b", "the operator BitOr"),
    ("(a, b)", "a tuple"),
    ("[a]", "a list"),
    ("{'a': 1}", "a dict"),
    ("(y := 2)", "assignment"),
    ("exp(a, b)", "exp() takes exactly 1"),
    ("min(a)", "min() takes at least 2"),
    ("max(*a)", "starred"),
    ("exp(x=a)", "keyword"),
])
def test_forbidden_constructs_are_refused_naming_the_field(text, fragment):
    with pytest.raises(SpecError) as info:
        parse(text, "spec.toml", "derived.k_off")
    message = str(info.value)
    assert message.startswith("spec.toml: derived.k_off = ") and fragment in message, message


@pytest.mark.parametrize("text, fragment", [
    ("a +", "cannot read the expression"),
    ("import os", "cannot read the expression"),
    ("a; b", "cannot read the expression"),
    ("", "must be an arithmetic expression"),
    (2.5, "must be an arithmetic expression"),
    ("a + " * 400 + "a", "longer than"),
    ("(" * 300 + "a" + ")" * 300, "cannot read the expression"),
])
def test_unreadable_text_is_refused(text, fragment):
    with pytest.raises(SpecError, match="derived.k_off") as info:
        parse(text, "spec.toml", "derived.k_off")
    assert fragment in str(info.value)
