"""MathML (libsbml's ``ASTNode``) to our expression trees and back, by walking the tree.

Trees are the nested tuples of ``sweep.model.expr``: ``("num", v)``, ``("name", n)``, ``("neg", x)``,
``(op, a, b)`` with op one of ``+ - * / **``, and ``("call", f, args)``. Nothing is ever
evaluated from text: the walk copies the whitelisted node types below and records every other
one as unsupported, so the caller can list them all at once.

Supported MathML: numbers (integer, real, e-notation, rational), names, ``plus``, ``minus``
(unary and binary), ``times``, ``divide``, ``power``, ``root`` (any degree), ``exp``, ``ln``,
``log`` (any base), ``abs`` (as ``max(x, -x)``), ``min``, ``max``, ``floor``, ``ceiling``, the
trigonometric and hyperbolic sin/cos/tan, the constants e, pi, true and false, the Avogadro
csymbol, calls of the document's function definitions (inlined), and ``piecewise`` with an
``otherwise``, whose conditions (relations ``lt le gt ge eq neq``, ``and or not``) become
indicators that are 1.0 when they hold (``and`` is their minimum, ``or`` their maximum).
"""

from __future__ import annotations

import math
from typing import Callable, Mapping

from sweep.spec import limits
AVOGADRO = 6.02214076e23  # exact since the 2019 SI redefinition (BIPM 2019)
TIME = "sbml_time"  # the time csymbol; the same name as sweep.model.tables.TIME

_MAX_DEPTH = limits.MAX_EXPRESSION_DEPTH
_MAX_NODES = limits.MAX_EXPRESSION_NODES


class _TooLarge(Exception):
    """The tree being built passed ``_MAX_NODES`` nodes (function definitions inline into it)."""


class _Budget:
    """Nodes left to build in one expression; inlining a chain of functions that each call the
    previous twice would otherwise build 2^n nodes before anything could refuse it."""

    def __init__(self, nodes: int):
        self.left = nodes

    def take(self) -> None:
        self.left -= 1
        if self.left < 0:
            raise _TooLarge


class Unsupported(Exception):
    """A MathML construct outside the supported subset; ``what`` names it for the user."""

    def __init__(self, what: str):
        super().__init__(what)
        self.what = what


def from_ast(node, env: Mapping[str, tuple], functions: Mapping[str, object], problems: list[str],
             where: str) -> tuple | None:
    """Copy a libsbml ``ASTNode`` into a tuple tree.

    Parameters
    ----------
    node : libsbml.ASTNode
        The math (a kinetic law, an initial assignment, ...).
    env : mapping of str to tree
        Replacements for names (local parameters to their internal names, compartments to
        their sizes, function arguments to the caller's trees). Other names are kept.
    functions : mapping of str to libsbml.FunctionDefinition
        The document's function definitions; calls are inlined.
    problems : list of str
        Each unsupported construct is appended as ``"<where>: <construct>"``.
    where : str
        The element the math belongs to, e.g. ``"reaction r1 kinetic law"``.

    Returns
    -------
    tuple or None
        The tree, or None when something was unsupported (and recorded in ``problems``).

    Example
    -------
    >>> import libsbml
    >>> from_ast(libsbml.parseL3Formula("k * A"), {}, {}, [], "law")
    ('*', ('name', 'k'), ('name', 'A'))
    """
    found: list[str] = []
    try:
        tree = _walk(node, env, functions, found, 0, _Budget(_MAX_NODES))
        size, depth = _measure(tree)
    except _TooLarge:
        size, depth = _MAX_NODES + 1, 0
    if size > _MAX_NODES or depth > _MAX_DEPTH:
        what = (f"more than {_MAX_NODES:,} operations" if size > _MAX_NODES
                else f"nested more than {_MAX_DEPTH} levels deep (a sum of n terms is n levels)")
        problems.append(f"{where}: {what} once its function definitions are inlined (each call is replaced "
                        "by the function's body); write the math out smaller")
        return None
    for what in dict.fromkeys(found):
        problems.append(f"{where}: {what}")
    return None if found else tree


def _walk(node, env, functions, found: list[str], depth: int, budget: _Budget) -> tuple:
    import libsbml

    if node is None:
        found.append("missing math")
        return ("num", 0.0)
    if depth > _MAX_DEPTH:
        found.append(f"math nested more than {_MAX_DEPTH} levels deep")
        return ("num", 0.0)
    budget.take()
    t = node.getType()
    if t in _NUMBER_TYPES():
        return _number(node, found)
    if t == libsbml.AST_NAME:
        name = node.getName()
        return env.get(name, ("name", name))
    if t == libsbml.AST_NAME_TIME and not isinstance(env, _Strict):
        return ("name", TIME)  # only the ODE honours it (sweep.model.sbml.reader: ode_only)
    simple = _SIMPLE().get(t)
    if simple is not None:
        kids = [_walk(node.getChild(i), env, functions, found, depth + 1, budget)
                for i in range(node.getNumChildren())]
        return simple(kids, found)
    if t == libsbml.AST_FUNCTION:
        return _inline(node, env, functions, found, depth, budget)
    # the outermost unsupported construct is named; what is inside it does not matter
    found.append(_describe(node))
    return ("num", 0.0)


def _measure(tree: tuple) -> tuple[int, int]:
    """(nodes, depth) of a tree once written out.

    Inlined arguments are shared, not copied, so a tree can stand for far more nodes than were
    built (``g(g(g(A)))`` with ``g(x) = x + x``): sizes are counted per distinct subtree, without
    recursion, and the walk stops as soon as the size passes ``_MAX_NODES``.
    """
    known: dict[int, tuple[int, int]] = {}
    stack = [tree]
    while stack:
        node = stack[-1]
        if id(node) in known:
            stack.pop()
            continue
        kids = _children(node)
        missing = [k for k in kids if id(k) not in known]
        if missing:
            stack.extend(missing)
            continue
        stack.pop()
        size = 1 + sum(known[id(k)][0] for k in kids)
        if size > _MAX_NODES:
            raise _TooLarge
        known[id(node)] = (size, 1 + max((known[id(k)][1] for k in kids), default=0))
    return known[id(tree)]


def _children(node: tuple) -> tuple:
    if node[0] in ("num", "name"):
        return ()
    return node[2] if node[0] == "call" else node[1:]


def _number(node, found: list[str]) -> tuple:
    import libsbml

    t = node.getType()
    if t == libsbml.AST_INTEGER:
        value = float(node.getInteger())
    elif t == libsbml.AST_RATIONAL:
        value = node.getNumerator() / node.getDenominator()
    elif t == libsbml.AST_CONSTANT_E:
        value = math.e
    elif t == libsbml.AST_CONSTANT_PI:
        value = math.pi
    elif t == libsbml.AST_NAME_AVOGADRO:
        value = AVOGADRO
    else:
        value = node.getReal()
    if not math.isfinite(value):
        found.append(f"the non-finite number {value}")
    return ("num", float(value))


def _fold(op: str, kids: list[tuple], empty: float) -> tuple:
    if not kids:
        return ("num", empty)
    tree = kids[0]
    for kid in kids[1:]:
        tree = (op, tree, kid)
    return tree


def _minus(kids, found):
    if len(kids) == 1:
        return ("neg", kids[0])
    if len(kids) == 2:
        return ("-", kids[0], kids[1])
    found.append(f"minus with {len(kids)} arguments")
    return ("num", 0.0)


def _binary(op: str) -> Callable:
    def make(kids, found):
        if len(kids) != 2:
            found.append(f"{op} with {len(kids)} arguments")
            return ("num", 0.0)
        return (op, kids[0], kids[1])
    return make


def _unary(function: str) -> Callable:
    def make(kids, found):
        if len(kids) != 1:
            found.append(f"{function} with {len(kids)} arguments")
            return ("num", 0.0)
        return ("call", function, (kids[0],))
    return make


def _root(kids, found):
    if len(kids) == 1 or (len(kids) == 2 and kids[0] == ("num", 2.0)):
        return ("call", "sqrt", (kids[-1],))
    if len(kids) == 2:
        return ("**", kids[1], ("/", ("num", 1.0), kids[0]))
    found.append(f"root with {len(kids)} arguments")
    return ("num", 0.0)


def _log(kids, found):
    # MathML <log/> without <logbase> is base 10 (MathML 2.0, section 4.4.7.3)
    if len(kids) == 1:
        return ("/", ("call", "log", (kids[0],)), ("call", "log", (("num", 10.0),)))
    if len(kids) == 2:
        return ("/", ("call", "log", (kids[1],)), ("call", "log", (kids[0],)))
    found.append(f"log with {len(kids)} arguments")
    return ("num", 0.0)


def _extremum(function: str, empty: float | None = None) -> Callable:
    def make(kids, found):
        if not kids:
            if empty is not None:
                return ("num", empty)
            found.append(f"{function} without arguments")
            return ("num", 0.0)
        return kids[0] if len(kids) == 1 else ("call", function, tuple(kids))
    return make


def _relation(function: str) -> Callable:
    """a < b (and chains a < b < c, MathML's n-ary form) as indicators: 1.0 when it holds."""
    def make(kids, found):
        if len(kids) < 2:
            found.append(f"a comparison with {len(kids)} argument(s)")
            return ("num", 0.0)
        pairs = [("call", function, (kids[i], kids[i + 1])) for i in range(len(kids) - 1)]
        return pairs[0] if len(pairs) == 1 else ("call", "min", tuple(pairs))
    return make


def _not(kids, found):
    if len(kids) != 1:
        found.append(f"not with {len(kids)} arguments")
        return ("num", 0.0)
    return ("-", ("num", 1.0), kids[0])


def _piecewise(kids, found):
    """MathML piecewise: libsbml lists value, condition pairs, then the otherwise value if any."""
    if len(kids) % 2 == 0:
        # no <otherwise>: undefined when no piece holds (SBML L3V2 section 3.4.9); refused, not guessed
        found.append("piecewise without <otherwise> (its value is undefined when no condition holds)")
        return ("num", 0.0)
    return kids[0] if len(kids) == 1 else ("call", "piecewise", tuple(kids))


def _abs(kids, found):
    if len(kids) != 1:
        found.append(f"abs with {len(kids)} arguments")
        return ("num", 0.0)
    return ("call", "max", (kids[0], ("neg", kids[0])))


_TABLES: dict[str, object] = {}


def _SIMPLE() -> dict:  # noqa: N802 - built on first use so that libsbml is imported lazily
    if "simple" not in _TABLES:
        import libsbml

        _TABLES["simple"] = {
            libsbml.AST_PLUS: lambda kids, found: _fold("+", kids, 0.0),
            libsbml.AST_TIMES: lambda kids, found: _fold("*", kids, 1.0),
            libsbml.AST_MINUS: _minus,
            libsbml.AST_DIVIDE: _binary("/"),
            libsbml.AST_POWER: _binary("**"),
            libsbml.AST_FUNCTION_POWER: _binary("**"),
            libsbml.AST_FUNCTION_EXP: _unary("exp"),
            libsbml.AST_FUNCTION_LN: _unary("log"),
            libsbml.AST_FUNCTION_LOG: _log,
            libsbml.AST_FUNCTION_ROOT: _root,
            libsbml.AST_FUNCTION_ABS: _abs,
            libsbml.AST_FUNCTION_MIN: _extremum("min"),
            libsbml.AST_FUNCTION_MAX: _extremum("max"),
            libsbml.AST_FUNCTION_FLOOR: _unary("floor"),
            libsbml.AST_FUNCTION_CEILING: _unary("ceil"),
            libsbml.AST_FUNCTION_SIN: _unary("sin"),
            libsbml.AST_FUNCTION_COS: _unary("cos"),
            libsbml.AST_FUNCTION_TAN: _unary("tan"),
            libsbml.AST_FUNCTION_SINH: _unary("sinh"),
            libsbml.AST_FUNCTION_COSH: _unary("cosh"),
            libsbml.AST_FUNCTION_TANH: _unary("tanh"),
            libsbml.AST_RELATIONAL_LT: _relation("lt"),
            libsbml.AST_RELATIONAL_LEQ: _relation("le"),
            libsbml.AST_RELATIONAL_GT: _relation("gt"),
            libsbml.AST_RELATIONAL_GEQ: _relation("ge"),
            libsbml.AST_RELATIONAL_EQ: _relation("eq"),
            libsbml.AST_RELATIONAL_NEQ: _relation("ne"),
            # on indicators (0 or 1): and is the minimum, or the maximum, not is 1 - x
            libsbml.AST_LOGICAL_AND: _extremum("min", empty=1.0),
            libsbml.AST_LOGICAL_OR: _extremum("max", empty=0.0),
            libsbml.AST_LOGICAL_NOT: _not,
            libsbml.AST_CONSTANT_TRUE: lambda kids, found: ("num", 1.0),
            libsbml.AST_CONSTANT_FALSE: lambda kids, found: ("num", 0.0),
            libsbml.AST_FUNCTION_PIECEWISE: _piecewise,
        }
    return _TABLES["simple"]


def _NUMBER_TYPES() -> frozenset:  # noqa: N802
    if "numbers" not in _TABLES:
        import libsbml

        _TABLES["numbers"] = frozenset((libsbml.AST_INTEGER, libsbml.AST_REAL, libsbml.AST_REAL_E,
                                        libsbml.AST_RATIONAL, libsbml.AST_CONSTANT_E, libsbml.AST_CONSTANT_PI,
                                        libsbml.AST_NAME_AVOGADRO))
    return _TABLES["numbers"]


def _inline(node, env, functions, found: list[str], depth: int, budget: _Budget) -> tuple:
    """Replace a call of a function definition by its body with the arguments substituted."""
    name = node.getName()
    definition = functions.get(name)
    if definition is None:
        found.append(f"call of the undefined function {name!r}")
        return ("num", 0.0)
    n_args = definition.getNumArguments()
    if node.getNumChildren() != n_args:
        found.append(f"call of {name!r} with {node.getNumChildren()} arguments (it takes {n_args})")
        return ("num", 0.0)
    args = [_walk(node.getChild(i), env, functions, found, depth + 1, budget) for i in range(n_args)]
    bound = {definition.getArgument(i).getName(): arg for i, arg in enumerate(args)}
    # a function body sees only its own arguments (SBML L3V2 section 4.3.2); any other name in it
    # is an error, reported rather than resolved against the model
    return _walk(definition.getBody(), _Strict(bound, name, found), functions, found, depth + 1, budget)


class _Strict(dict):
    """Function-body environment: unknown names are reported instead of passed through."""

    def __init__(self, bound, function, found):
        super().__init__(bound)
        self.function, self.found = function, found

    def get(self, key, default=None):
        if key in self:
            return self[key]
        self.found.append(f"function {self.function!r} uses {key!r}, which is not one of its arguments")
        return ("num", 0.0)


def _describe(node) -> str:
    import libsbml

    t = node.getType()
    if t == libsbml.AST_NAME_TIME:
        return "the time csymbol (time-dependent law)"
    if t == libsbml.AST_FUNCTION_DELAY:
        return "delay"
    if t == libsbml.AST_FUNCTION_PIECEWISE:
        return "piecewise"
    if t == libsbml.AST_FUNCTION_RATE_OF:
        return "rateOf"
    if node.isRelational() or node.isLogical() or node.isBoolean():
        return f"the comparison or logical operator {node.getName() or _type_name(t)!r}"
    name = node.getName() or _type_name(t)
    return f"the function {name!r}" if node.isFunction() else f"the MathML element {name!r}"


def _type_name(t: int) -> str:
    import libsbml

    for attr in dir(libsbml):
        if attr.startswith("AST_") and getattr(libsbml, attr) == t:
            return attr[4:].lower()
    return str(t)


# ---- our tree -> text (the grammar of sweep.model.expr) -------------------------------------------

_PRECEDENCE = {"+": 1, "-": 1, "*": 2, "/": 2, "neg": 3, "**": 4}


def render(tree: tuple) -> str:
    """Write a tree as expression text that ``sweep.model.expr.parse`` reads back to the same values.

    Numbers are written with ``repr`` (shortest text that reads back to the same float).

    Example
    -------
    >>> render(("*", ("name", "k"), ("-", ("name", "A"), ("num", 1.0))))
    'k * (A - 1)'
    """
    kind = tree[0]
    if kind == "num":
        value = tree[1]
        text = str(int(value)) if float(value).is_integer() and abs(value) < 1e15 else repr(float(value))
        return f"({text})" if value < 0 or text.startswith("-") else text
    if kind == "name":
        return tree[1]
    if kind == "call":
        return f"{tree[1]}({', '.join(render(a) for a in tree[2])})"
    if kind == "neg":
        return "-" + _wrap(tree[1], _PRECEDENCE["neg"], strict=False)
    op, left, right = tree
    p = _PRECEDENCE[op]
    if op == "**":
        # right-associative: the left side needs parentheses at equal precedence (and a negative
        # base always: -x ** 2 is -(x ** 2) in Python)
        return f"{_wrap(left, p, strict=True)} ** {_wrap(right, p, strict=False)}"
    # a right operand of equal precedence keeps its parentheses even for + and *: floating-point
    # addition and multiplication are not associative, and the text must give the same bits
    return f"{_wrap(left, p, strict=False)} {op} {_wrap(right, p, strict=True)}"


def _wrap(tree: tuple, parent: int, strict: bool) -> str:
    text = render(tree)
    if tree[0] in ("num", "name", "call"):
        return text
    mine = _PRECEDENCE[tree[0]]
    if mine < parent or (strict and mine == parent) or (parent == _PRECEDENCE["**"] and tree[0] == "neg"):
        return f"({text})"
    return text


# our tree -> MathML, for export, lives in its own module; named here too for the callers
from sweep.model.sbml.mathml import PLACEHOLDER, to_ast  # noqa: E402,F401
