"""Compile generated model code after checking it is arithmetic and nothing else.

Every function branchline compiles for an expression model, freshly generated
or read back from the model cache (:mod:`branchline.model.cache`), goes
through :func:`compile_checked`. The source is parsed with :func:`ast.parse`
(which runs nothing) and every node is checked against a short whitelist:
one ``def`` with plain positional arguments, assignments to plain names,
unpacking of the arguments into plain names, arithmetic (``+ - * / **``,
unary ``-``/``+``), numbers, calls of the whitelisted math or numpy functions
by bare name, and the conditional ``a if b == c else d`` the math printer
writes for ``sign``; one ``return`` of a tuple. No attribute access, no
indexing, no imports, no strings, no other names. Integer constants become
floats before compiling, so no integer power can grow without bound. The code
then runs in a namespace holding only the whitelisted functions and an empty
``__builtins__``.

So even a cache file written by someone else can do nothing but arithmetic on
the arguments (at worst give wrong numbers, which the cache's checksum and
key make unlikely by accident); see README, "The model cache".
"""

from __future__ import annotations

import ast
import math
from collections.abc import Callable
from typing import Any

#: The function name every generated source defines.
FUNCTION_NAME = "generated"

# Generated sources larger than this are refused (a 1,000-state model's
# Jacobian is about 0.3 MB of code); a damaged or foreign file could be huge.
MAX_SOURCE_CHARACTERS = 64_000_000

_MATH_NAMES = (
    "exp log sqrt sin cos tan asin acos atan atan2 sinh cosh tanh asinh acosh atanh copysign"
).split()
_NUMPY_NAMES = {
    "exp": "exp",
    "log": "log",
    "sqrt": "sqrt",
    "sin": "sin",
    "cos": "cos",
    "tan": "tan",
    "arcsin": "arcsin",
    "arccos": "arccos",
    "arctan": "arctan",
    "arctan2": "arctan2",
    "sinh": "sinh",
    "cosh": "cosh",
    "tanh": "tanh",
    "arcsinh": "arcsinh",
    "arccosh": "arccosh",
    "arctanh": "arctanh",
    "sign": "sign",
    "abs": "abs",
    # Derivatives of abs(...) of a possibly complex power bring these in.
    "real": "real",
    "imag": "imag",
    "conjugate": "conjugate",
    "angle": "angle",
}


class CodeRefused(ValueError):
    """Generated code (fresh or from the cache) that fails the whitelist check."""


_ARITHMETIC = (ast.Add, ast.Sub, ast.Mult, ast.Div, ast.Pow)
_UNARY = (ast.USub, ast.UAdd)


def math_namespace() -> dict[str, Any]:
    """The names code on Python floats may use: the math module's, ``abs`` as ``math.fabs``.

    ``math.fabs``, unlike ``abs``, refuses a complex number (from a fractional
    power of a negative number), so such values fail the fast path and become
    nan on the numpy path.
    """
    names: dict[str, Any] = {name: getattr(math, name) for name in _MATH_NAMES}
    names.update(abs=math.fabs, pi=math.pi, e=math.e)
    return names


def numpy_namespace() -> dict[str, Any]:
    """The names numpy code may use (numpy ufuncs, which broadcast and give nan/inf)."""
    import numpy as np

    names: dict[str, Any] = {
        name: getattr(np, attribute) for name, attribute in _NUMPY_NAMES.items()
    }
    names.update(pi=np.pi, e=np.e)
    return names


def compile_checked(source: str, namespace: dict[str, Any], returns: int | None = None) -> Callable:
    """The function defined by ``source``, after checking it against the whitelist.

    Parameters
    ----------
    source : str
        One ``def generated(...)`` as written by :mod:`branchline.model.codegen`.
    namespace : dict
        :func:`math_namespace` or :func:`numpy_namespace`: the only names the
        code may call or read besides its own arguments and locals.
    returns : int, optional
        The number of values the function must return.

    Raises
    ------
    CodeRefused
        The source is not such a function (the caller rebuilds it from the model).
    """
    if not isinstance(source, str) or len(source) > MAX_SOURCE_CHARACTERS:
        raise CodeRefused("generated code: not a text of acceptable size")
    try:
        tree = ast.parse(source, mode="exec")
    except (SyntaxError, ValueError, RecursionError, MemoryError) as error:
        raise CodeRefused(f"generated code does not parse ({type(error).__name__})") from None
    function = _the_function(tree)
    _check_body(function, set(namespace))
    if returns is not None and len(function.body[-1].value.elts) != returns:
        raise CodeRefused("generated code returns the wrong number of values")
    tree = ast.fix_missing_locations(_FloatConstants().visit(tree))
    try:
        code = compile(tree, "<branchline generated>", "exec")
    except (SyntaxError, ValueError, RecursionError, MemoryError) as error:
        raise CodeRefused(f"generated code does not compile ({type(error).__name__})") from None
    scope = dict(namespace)
    scope["__builtins__"] = {}
    exec(code, scope)  # checked above: one def of arithmetic on its arguments
    return scope[FUNCTION_NAME]


def _the_function(tree: ast.Module) -> ast.FunctionDef:
    if len(tree.body) != 1 or not isinstance(tree.body[0], ast.FunctionDef):
        raise CodeRefused("generated code must be exactly one function definition")
    function = tree.body[0]
    arguments = function.args
    if (
        function.name != FUNCTION_NAME
        or function.decorator_list
        or function.returns is not None
        or arguments.posonlyargs
        or arguments.vararg
        or arguments.kwonlyargs
        or arguments.kwarg
        or arguments.defaults
        or any(a.annotation is not None for a in arguments.args)
    ):
        raise CodeRefused("generated code: unexpected function signature")
    return function


def _check_body(function: ast.FunctionDef, outside: set[str]) -> None:
    """Statements: assignments to names, then one return of a tuple; names defined before use."""
    known = {a.arg for a in function.args.args}
    if known & outside or len(known) != len(function.args.args):
        raise CodeRefused("generated code: argument names clash with function names")
    body = function.body
    if not body or not isinstance(body[-1], ast.Return) or body[-1].value is None:
        raise CodeRefused("generated code must end with one return")
    for statement in body[:-1]:
        if not isinstance(statement, ast.Assign) or len(statement.targets) != 1:
            raise CodeRefused("generated code may only assign to names")
        _check_expression(statement.value, known | outside)
        known |= _target_names(statement.targets[0], known | outside)
    value = body[-1].value
    if not isinstance(value, ast.Tuple):
        raise CodeRefused("generated code must return a tuple")
    _check_expression(value, known | outside, top_tuple=True)


def _target_names(target: ast.expr, taken: set[str]) -> set[str]:
    names = target.elts if isinstance(target, (ast.Tuple, ast.List)) else [target]
    found = set()
    for name in names:
        if not isinstance(name, ast.Name) or name.id in taken or name.id.startswith("__"):
            raise CodeRefused("generated code may only assign to new plain names")
        found.add(name.id)
    return found


def _check_expression(node: ast.expr, names: set[str], top_tuple: bool = False) -> None:
    """Walk the expression without recursion; refuse every node off the whitelist."""
    stack: list[ast.AST] = [node]
    while stack:
        current = stack.pop()
        if isinstance(current, ast.Tuple) and current is node and top_tuple:
            stack.extend(current.elts)
        elif isinstance(current, ast.BinOp) and isinstance(current.op, _ARITHMETIC):
            stack.extend((current.left, current.right))
        elif isinstance(current, ast.UnaryOp) and isinstance(current.op, _UNARY):
            stack.append(current.operand)
        elif isinstance(current, ast.Constant):
            value = current.value
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise CodeRefused("generated code may only hold real numbers")
        elif isinstance(current, ast.Name):
            if current.id not in names:
                raise CodeRefused(f"generated code uses an unknown name {current.id[:40]!r}")
        elif isinstance(current, ast.Call):
            if not isinstance(current.func, ast.Name) or current.keywords:
                raise CodeRefused("generated code may only call functions by name")
            if current.func.id not in names:
                raise CodeRefused("generated code calls an unknown function")
            stack.extend(current.args)
        elif isinstance(current, ast.IfExp) and _is_equality(current.test):
            stack.extend((current.test.left, current.test.comparators[0], current.body))
            stack.append(current.orelse)
        else:
            raise CodeRefused(f"generated code: '{type(current).__name__}' is not allowed")


def _is_equality(node: ast.expr) -> bool:
    return (
        isinstance(node, ast.Compare)
        and len(node.ops) == 1
        and isinstance(node.ops[0], ast.Eq)
        and len(node.comparators) == 1
    )


class _FloatConstants(ast.NodeTransformer):
    """Integer literals as floats: the same numbers, but no unbounded integer arithmetic."""

    def visit_Constant(self, node: ast.Constant) -> ast.Constant:
        if isinstance(node.value, int) and not isinstance(node.value, bool):
            return ast.copy_location(ast.Constant(float(node.value)), node)
        return node


__all__ = [
    "FUNCTION_NAME",
    "CodeRefused",
    "compile_checked",
    "math_namespace",
    "numpy_namespace",
]
