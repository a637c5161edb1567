"""Safe arithmetic expressions: derived parameters and custom rate laws.

An expression is read by Python's own parser (``ast.parse(mode="eval")``) and then checked
against a whitelist: numbers, names, ``+ - * / **``, unary ``+``/``-``, parentheses, and calls
of ``min``, ``max``, ``exp``, ``log`` (natural), ``sqrt`` and the named rate laws ``hill_up(x, vmax,
K, n)``, ``hill_down(x, vmax, K, n)`` and ``michaelis(s, vmax, Km)``. Everything else (attributes,
subscripts, other calls, keyword arguments, lambdas, comprehensions, comparisons, strings,
``//`` and ``%``, ...) is refused with a ``SpecError`` naming the field, as are numbers that are
not finite (``1e309`` reads as infinity) and expressions longer than
``limits.MAX_EXPRESSION_LENGTH`` characters or nested deeper than ``limits.MAX_EXPRESSION_DEPTH``
levels (a rate law becomes generated source, and Python's parser bounds its nesting). The checked tree is
copied into plain nested tuples, so evaluation never calls Python's ``eval`` and never sees
an ``ast`` object: nothing the user wrote can reach anything but the arithmetic below.

Evaluation uses numpy float64 throughout and works elementwise on arrays, so one call can
give a derived parameter at every point of a design. Division by zero, ``log`` of a negative
number and overflow give ``inf``/``nan`` (no exception); callers check ``numpy.isfinite``.
"""

from __future__ import annotations

import ast
import functools
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

from sweep.spec import limits
from sweep.errors import SpecError

MAX_LENGTH = limits.MAX_EXPRESSION_LENGTH
MAX_DEPTH = limits.MAX_EXPRESSION_DEPTH

_BINARY = {ast.Add: "+", ast.Sub: "-", ast.Mult: "*", ast.Div: "/", ast.Pow: "**"}
_OPS = {"+": np.add, "-": np.subtract, "*": np.multiply, "/": np.divide, "**": np.power}
# name -> (numpy function, fewest arguments, most arguments or None)
_FUNCTIONS = {
    "exp": (np.exp, 1, 1),
    "log": (np.log, 1, 1),
    "sqrt": (np.sqrt, 1, 1),
    "floor": (np.floor, 1, 1),  # rounds SBML initial assignments to whole counts: floor(v + 0.5)
    "ceil": (np.ceil, 1, 1),
    "sin": (np.sin, 1, 1), "cos": (np.cos, 1, 1), "tan": (np.tan, 1, 1),
    "sinh": (np.sinh, 1, 1), "cosh": (np.cosh, 1, 1), "tanh": (np.tanh, 1, 1),
    # comparisons as indicators (1.0 true, 0.0 false), for SBML piecewise; and/or/not are min/max/1-x
    "lt": (lambda a, b: np.less(a, b).astype(np.float64), 2, 2),
    "le": (lambda a, b: np.less_equal(a, b).astype(np.float64), 2, 2),
    "gt": (lambda a, b: np.greater(a, b).astype(np.float64), 2, 2),
    "ge": (lambda a, b: np.greater_equal(a, b).astype(np.float64), 2, 2),
    "eq": (lambda a, b: np.equal(a, b).astype(np.float64), 2, 2),
    "ne": (lambda a, b: np.not_equal(a, b).astype(np.float64), 2, 2),
    # piecewise(v1, c1, v2, c2, ..., otherwise): the first v whose c is non-zero, else otherwise
    "piecewise": (None, 3, None),
    "min": (np.minimum, 2, None),
    "max": (np.maximum, 2, None),
    # the named rate laws, written as their spelled-out forms (kernels.ratelaw compiles the same)
    "hill_up": (lambda x, vmax, k, n: vmax * x ** n / (k ** n + x ** n), 4, 4),
    "hill_down": (lambda x, vmax, k, n: vmax * k ** n / (k ** n + x ** n), 4, 4),
    "michaelis": (lambda s, vmax, km: vmax * s / (km + s), 3, 3),
}
_ALLOWED = ("numbers, names, + - * / **, parentheses and min, max, exp, log, sqrt, floor, ceil, sin, cos, tan, "
            "sinh, cosh, tanh, lt, le, gt, ge, eq, ne, piecewise, "
            "hill_up, hill_down, michaelis")


@dataclass(frozen=True)
class Expr:
    """A checked expression: its text, the parameter names it uses, and a tuple tree.

    Tree nodes are ``("num", value)``, ``("name", name)``, ``("neg", node)``,
    ``(op, left, right)`` with op one of ``+ - * / **``, and ``("call", function, args)``.
    """

    text: str
    tree: tuple
    names: tuple[str, ...]


def parse(text: str, source: str, field: str) -> Expr:
    """Check ``text`` against the whitelist and return a frozen ``Expr``.

    Parameters
    ----------
    text : str
        The expression, e.g. ``"k_on * Kd"``.
    source, field : str
        Spec file and dotted field, for error messages.

    Returns
    -------
    Expr

    Raises
    ------
    SpecError
        Not a string, too long or too deeply nested, a syntax error, a number that is not finite,
        or any construct outside the whitelist.

    Example
    -------
    >>> parse("k_on * Kd", "spec.toml", "derived.k_off").names
    ('k_on', 'Kd')
    """
    if not isinstance(text, str) or not text.strip():
        raise SpecError(source, field, "must be an arithmetic expression in quotes", text, 'e.g. "k_on * Kd"')
    if len(text) > MAX_LENGTH:
        raise SpecError(source, field, f"expression longer than {MAX_LENGTH} characters", text[:40] + "...")
    try:
        body = ast.parse(text.strip(), mode="eval").body
    except (SyntaxError, ValueError, RecursionError, MemoryError) as exc:
        raise SpecError(source, field, f"cannot read the expression: {_reason(exc)}", text,
                        f"allowed: {_ALLOWED}") from exc
    names: list[str] = []
    try:
        tree = _convert(body, names, text, source, field, 0)
    except RecursionError as exc:
        raise SpecError(source, field, "expression nested too deeply", text,
                        f"at most {MAX_DEPTH} levels of operators and calls") from exc
    return Expr(text, tree, tuple(dict.fromkeys(names)))


def _reason(exc: BaseException) -> str:
    return exc.msg if isinstance(exc, SyntaxError) and exc.msg else type(exc).__name__


def _convert(node: ast.AST, names: list[str], text: str, source: str, field: str, depth: int) -> tuple:
    """Copy a whitelisted ``ast`` node into a tuple tree; refuse everything else."""
    def refuse(what: str, fix: str = f"allowed: {_ALLOWED}") -> SpecError:
        return SpecError(source, field, f"{what} not allowed in an expression", text, fix)

    def sub(child: ast.AST) -> tuple:
        return _convert(child, names, text, source, field, depth + 1)

    if depth > MAX_DEPTH:
        raise SpecError(source, field, f"expression nested more than {MAX_DEPTH} levels deep", text,
                        f"a sum of n terms is n levels: split it, e.g. into derived parameters")
    if isinstance(node, ast.Constant):
        value = node.value
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise refuse(f"the constant {value!r} is")
        return ("num", _finite(value, ast.get_source_segment(text.strip(), node) or repr(value), text, source, field))
    if isinstance(node, ast.Name):
        names.append(node.id)
        return ("name", node.id)
    if isinstance(node, ast.BinOp):
        op = _BINARY.get(type(node.op))
        if op is None:
            raise refuse(f"the operator {type(node.op).__name__} is")
        return (op, sub(node.left), sub(node.right))
    if isinstance(node, ast.UnaryOp):
        if not isinstance(node.op, (ast.USub, ast.UAdd)):
            raise refuse(f"the operator {type(node.op).__name__} is")
        operand = sub(node.operand)
        return ("neg", operand) if isinstance(node.op, ast.USub) else operand
    if isinstance(node, ast.Call):
        return _call(node, sub, refuse)
    raise refuse(f"{_describe(node)} is")


def _finite(value: int | float, literal: str, text: str, source: str, field: str) -> float:
    """A literal as a float; one beyond the float range (``1e309`` reads as infinity) is refused."""
    try:
        number = float(value)
    except OverflowError:
        number = float("inf")
    if not np.isfinite(number):
        shown = literal if len(literal) <= 30 else f"{literal[:12]}... ({len(literal)} digits)"
        raise SpecError(source, field, f"the number {shown} is beyond the floating-point range (about 1.8e308) "
                        "and would be infinite", text, "write a finite number, or a parameter")
    return number


def _call(node: ast.Call, sub, refuse) -> tuple:
    if not isinstance(node.func, ast.Name) or node.func.id not in _FUNCTIONS:
        called = node.func.id if isinstance(node.func, ast.Name) else _describe(node.func)
        raise refuse(f"calling {called!r} is",
                     f"allowed: {_ALLOWED}")
    name = node.func.id
    if node.keywords or any(isinstance(a, ast.Starred) for a in node.args):
        raise refuse(f"keyword or starred arguments to {name}() are")
    _, fewest, most = _FUNCTIONS[name]
    if name == "piecewise" and len(node.args) % 2 == 0:
        raise refuse("piecewise() with an even number of arguments is",
                     "piecewise(value1, condition1, ..., otherwise) takes an odd number")
    if len(node.args) < fewest or (most is not None and len(node.args) > most):
        wanted = f"exactly {fewest}" if most == fewest else f"at least {fewest}"
        raise refuse(f"{name}() with {len(node.args)} arguments is", f"{name}() takes {wanted}")
    return ("call", name, tuple(sub(a) for a in node.args))


def _describe(node: ast.AST) -> str:
    kinds = {
        ast.Attribute: "attribute access", ast.Subscript: "indexing", ast.Lambda: "a lambda",
        ast.ListComp: "a comprehension", ast.SetComp: "a comprehension", ast.DictComp: "a comprehension",
        ast.GeneratorExp: "a comprehension", ast.Compare: "a comparison", ast.BoolOp: "and/or",
        ast.IfExp: "if/else", ast.JoinedStr: "a string", ast.List: "a list", ast.Tuple: "a tuple",
        ast.Dict: "a dict", ast.Set: "a set", ast.NamedExpr: "assignment", ast.Starred: "unpacking",
    }
    return kinds.get(type(node), type(node).__name__)


def evaluate(expr: Expr, values: Mapping[str, Any]) -> Any:
    """Evaluate ``expr`` with each name's value taken from ``values``.

    Parameters
    ----------
    expr : Expr
        From ``parse``.
    values : mapping of str to float or ndarray
        Arrays broadcast together, so one call evaluates every point of a design.

    Returns
    -------
    float or ndarray
        A float when every value used is a scalar, else a float64 array.

    Raises
    ------
    KeyError
        If a name in the expression has no value.

    Example
    -------
    >>> evaluate(parse("max(k, 2) ** 2 / 4", "s", "f"), {"k": 3.0})
    2.25
    """
    with np.errstate(all="ignore"):
        result = _eval(expr.tree, values)
    return float(result) if np.ndim(result) == 0 else np.asarray(result, dtype=np.float64)


def _eval(node: tuple, values: Mapping[str, Any]) -> Any:
    kind = node[0]
    if kind == "num":
        return np.float64(node[1])
    if kind == "name":
        if node[1] not in values:
            raise KeyError(f"no value for {node[1]!r}")
        return np.asarray(values[node[1]], dtype=np.float64)
    if kind == "neg":
        return np.negative(_eval(node[1], values))
    if kind == "call":
        function, fewest, most = _FUNCTIONS[node[1]]
        args = [_eval(a, values) for a in node[2]]
        if node[1] == "piecewise":
            result = args[-1]
            for k in range(len(args) - 3, -1, -2):
                result = np.where(args[k + 1] != 0.0, args[k], result)
            return np.asarray(result, dtype=np.float64)
        if len(args) == 1 or fewest == most:
            return function(*args)
        return functools.reduce(function, args)
    return _OPS[kind](_eval(node[1], values), _eval(node[2], values))


__all__ = ["Expr", "evaluate", "parse"]
