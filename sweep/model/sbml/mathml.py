"""Our expression trees to MathML (libsbml ``ASTNode``), for ``sweep export-model``."""

from __future__ import annotations

# ---- our tree -> MathML (for export) ---------------------------------------------------------

PLACEHOLDER = "__sweep_number_{}__"


def to_ast(tree: tuple, numbers: list[float] | None = None):
    """Build a libsbml ``ASTNode`` from a tree (for export). Calls keep their names.

    libsbml writes numbers with 15 significant digits; a number that needs more is written as
    the name ``PLACEHOLDER.format(i)`` with its value appended to ``numbers`` (when given), for
    the caller to put back in full (``sweep.model.sbml.writer``).

    Example
    -------
    >>> import libsbml
    >>> libsbml.formulaToL3String(to_ast(("*", ("name", "c"), ("name", "A"))))
    'c * A'
    """
    import libsbml

    kind = tree[0]
    if kind == "num":
        value = float(tree[1])
        if numbers is not None and float(f"{value:.15g}") != value:
            numbers.append(value)
            return to_ast(("name", PLACEHOLDER.format(len(numbers) - 1)))
        node = libsbml.ASTNode(libsbml.AST_INTEGER if value.is_integer() and abs(value) < 2**31 else libsbml.AST_REAL)
        if value.is_integer() and abs(value) < 2**31:
            node.setValue(int(value))
        else:
            node.setValue(value)
        return node
    if kind == "name":
        node = libsbml.ASTNode(libsbml.AST_NAME)
        node.setName(tree[1])
        return node
    if kind == "neg":
        node = libsbml.ASTNode(libsbml.AST_MINUS)
        node.addChild(to_ast(tree[1], numbers))
        return node
    if kind == "call":
        builtin = {"exp": libsbml.AST_FUNCTION_EXP, "log": libsbml.AST_FUNCTION_LN,
                   "sqrt": libsbml.AST_FUNCTION_ROOT, "min": libsbml.AST_FUNCTION_MIN,
                   "max": libsbml.AST_FUNCTION_MAX, "floor": libsbml.AST_FUNCTION_FLOOR,
                   "ceil": libsbml.AST_FUNCTION_CEILING, "sin": libsbml.AST_FUNCTION_SIN,
                   "cos": libsbml.AST_FUNCTION_COS, "tan": libsbml.AST_FUNCTION_TAN,
                   "sinh": libsbml.AST_FUNCTION_SINH, "cosh": libsbml.AST_FUNCTION_COSH,
                   "tanh": libsbml.AST_FUNCTION_TANH}.get(tree[1])
        node = libsbml.ASTNode(builtin if builtin is not None else libsbml.AST_FUNCTION)
        if builtin is None:
            node.setName(tree[1])
        for arg in tree[2]:
            node.addChild(to_ast(arg, numbers))
        return node
    op_type = {"+": libsbml.AST_PLUS, "-": libsbml.AST_MINUS, "*": libsbml.AST_TIMES,
               "/": libsbml.AST_DIVIDE, "**": libsbml.AST_POWER}[kind]
    node = libsbml.ASTNode(op_type)
    node.addChild(to_ast(tree[1], numbers))
    node.addChild(to_ast(tree[2], numbers))
    return node
