"""The whitelisting expression parser: text -> sympy, never executing anything.

Expression text is parsed with :func:`ast.parse` (which only builds a syntax
tree and runs nothing), every node is checked against a short whitelist, and
the sympy expression is built node by node from sympy constructors. Nothing
is ever handed to ``eval``, ``sympify`` or ``parse_expr``.

Accepted
--------
- numbers: integer and real literals, scientific notation (``1e-3``),
  underscores as digit separators (``1_000``);
- names: states, parameters, definitions (each becomes a plain
  ``sympy.Symbol``), and the constant ``pi``;
- operators: ``+ - * /``, powers written ``**`` or ``^`` (both right
  associative, binding tighter than ``*`` and unary minus: ``-x^2 = -(x^2)``),
  unary ``+``/``-``, parentheses;
- calls of the functions in :data:`FUNCTIONS` with positional arguments.

Everything else (attributes, indexing, strings, comparisons, ``and``/``or``,
lambdas, comprehensions, keyword arguments, other calls, ...) is refused with
an :class:`~branchline.errors.ExpressionError` that shows the text with a
caret under the offending piece.

Size guards refuse absurd input before any work is done: the text length,
the nesting depth and the number of syntax nodes are limited, and numeric
powers are checked for the size of their result *before* sympy would compute
them, so ``9**9**9**9`` is refused at once.
"""

from __future__ import annotations

import ast
import difflib
import importlib
import math
import warnings
from collections.abc import Callable
from typing import Any

from branchline.errors import ExpressionError


class _OnFirstUse:
    """sympy, imported when the parser first needs it.

    A run whose model code is in the model cache never parses, so it never pays
    for importing sympy; everything else here reads the same as with ``import sympy``.
    """

    def __getattr__(self, name: str) -> Any:
        module = importlib.import_module("sympy")
        globals()["sympy"] = module
        return getattr(module, name)


sympy: Any = _OnFirstUse()


class _SympyFunction:
    """A sympy function looked up by name when first called (see :class:`_OnFirstUse`)."""

    __slots__ = ("name",)

    def __init__(self, name: str) -> None:
        self.name = name

    def __call__(self, *args: Any) -> Any:
        return getattr(sympy, self.name)(*args)

    def __repr__(self) -> str:
        return f"sympy.{self.name}"


# Limits. Real model expressions are a few hundred characters long and nest a
# dozen levels at most; the limits leave ample room for generated equations
# while keeping ast.parse, sympy's recursive algorithms and later code
# generation far below Python's recursion limit.
MAX_EXPRESSION_LENGTH = 10_000  # characters
MAX_PAREN_DEPTH = 50  # nested brackets, checked on the text before ast.parse
MAX_TREE_DEPTH = 100  # nested operations (chains of + - or * / count once)
MAX_NODES = 5_000  # syntax-tree nodes
# Integer literals longer than this are typing mistakes, not model constants
# (a double carries 17 significant digits).
MAX_INTEGER_DIGITS = 30
# A numeric exponent beyond this makes no sense in a rate law and would make
# sympy's exact arithmetic (and later derivatives) blow up.
MAX_EXPONENT = 1000
# Exact numbers built while parsing (products, powers of literals) may not
# exceed this many decimal digits in numerator or denominator; doubles end at
# about 1e308, so nothing useful is lost.
MAX_NUMBER_DIGITS = 400
# sympy looks for exact roots of a number by factoring it, which takes
# milliseconds at a few hundred digits; no rate law takes the root of such a
# number, so roots of numbers (or numeric factors) beyond this are refused.
MAX_ROOT_DIGITS = 50

_LOG10_2 = math.log10(2.0)
# Characters shown either side of the caret in messages about long expressions.
_CARET_CONTEXT = 60


def _log10(x: sympy.Expr) -> sympy.Expr:
    return sympy.log(x, 10)


def _pow(base: sympy.Expr, exponent: sympy.Expr) -> sympy.Expr:
    return sympy.Pow(base, exponent)


#: Functions an expression may call: name -> sympy constructor.
#: ``log`` is the natural logarithm, ``log10`` the decimal one, ``atan2(y, x)``
#: the quadrant-aware arc tangent, ``pow(a, b)`` the same as ``a**b``.
#: ``abs`` and ``sign`` are not smooth at 0: equilibria exactly there have no
#: Jacobian, and continuation across that point is not reliable.
FUNCTIONS: dict[str, Callable[..., sympy.Expr]] = {
    "exp": _SympyFunction("exp"),
    "log": _SympyFunction("log"),
    "log10": _log10,
    "sqrt": _SympyFunction("sqrt"),
    "sin": _SympyFunction("sin"),
    "cos": _SympyFunction("cos"),
    "tan": _SympyFunction("tan"),
    "asin": _SympyFunction("asin"),
    "acos": _SympyFunction("acos"),
    "atan": _SympyFunction("atan"),
    "atan2": _SympyFunction("atan2"),
    "sinh": _SympyFunction("sinh"),
    "cosh": _SympyFunction("cosh"),
    "tanh": _SympyFunction("tanh"),
    "asinh": _SympyFunction("asinh"),
    "acosh": _SympyFunction("acosh"),
    "atanh": _SympyFunction("atanh"),
    "abs": _SympyFunction("Abs"),
    "sign": _SympyFunction("sign"),
    "pow": _pow,
}

#: Number of positional arguments each function takes.
FUNCTION_ARITY: dict[str, int] = {name: 1 for name in FUNCTIONS} | {"atan2": 2, "pow": 2}

#: Named constants an expression may use: name -> the sympy value (made on call).
CONSTANTS: dict[str, Callable[[], sympy.Expr]] = {"pi": lambda: sympy.pi}

#: Names that states, parameters, definitions and observables may not take.
RESERVED: set[str] = set(FUNCTIONS) | set(CONSTANTS)

_OPERATOR_TEXT = {
    ast.FloorDiv: "//",
    ast.Mod: "%",
    ast.MatMult: "@",
    ast.LShift: "<<",
    ast.RShift: ">>",
    ast.BitOr: "|",
    ast.BitAnd: "&",
    ast.BitXor: "^",
    ast.Invert: "~",
    ast.Not: "not",
}

_REFUSED_NODES: dict[type, str] = {
    ast.Attribute: "attribute access is not allowed",
    ast.Subscript: "indexing is not allowed",
    ast.Slice: "indexing is not allowed",
    ast.Lambda: "lambda functions are not allowed",
    ast.ListComp: "comprehensions are not allowed",
    ast.SetComp: "comprehensions are not allowed",
    ast.DictComp: "comprehensions are not allowed",
    ast.GeneratorExp: "comprehensions are not allowed",
    ast.Compare: "comparisons are not allowed",
    ast.BoolOp: "'and'/'or' are not allowed",
    ast.IfExp: "conditional expressions (if/else) are not allowed",
    ast.NamedExpr: "assignments (:=) are not allowed",
    ast.JoinedStr: "text strings are not allowed",
    ast.FormattedValue: "text strings are not allowed",
    ast.List: "lists are not allowed",
    ast.Tuple: "tuples are not allowed",
    ast.Set: "sets are not allowed",
    ast.Dict: "dictionaries are not allowed",
    ast.Starred: "argument unpacking (*) is not allowed",
    ast.Await: "'await' is not allowed",
    ast.Yield: "'yield' is not allowed",
    ast.YieldFrom: "'yield' is not allowed",
}

_ADDITIVE = (ast.Add, ast.Sub)
_MULTIPLICATIVE = (ast.Mult, ast.Div)


class _Refusal(Exception):
    """Internal: a refused piece, with its column in the parsed text."""

    def __init__(self, problem: str, column: int | None) -> None:
        super().__init__(problem)
        self.problem = problem
        self.column = column


def parse_expression(text: str, where: str = "") -> sympy.Expr:
    """Parse expression text into a sympy expression, refusing anything but arithmetic.

    Parameters
    ----------
    text : str
        The expression, e.g. ``"mu_max*S/(K_s + S + S^2/K_i)"``.
    where : str, optional
        A label for messages (e.g. the scan key), put in front of the problem.

    Returns
    -------
    sympy.Expr
        Every name other than a constant becomes a plain ``sympy.Symbol``.

    Raises
    ------
    ExpressionError
        For anything outside the whitelist or beyond the size limits; the
        message shows the text with a caret under the offending piece.

    Examples
    --------
    >>> parse_expression("D*(S_in - S) - 2^-1*X")
    D*(-S + S_in) - X/2
    """
    if not isinstance(text, str):
        raise ExpressionError(_prefix(where) + "an expression must be text")
    # TOML multi-line strings may hold line breaks; as spaces they keep every column.
    shown = text.translate({ord("\n"): " ", ord("\r"): " ", ord("\t"): " "})
    try:
        return _parse_checked(shown)
    except _Refusal as refusal:
        raise ExpressionError(_message(shown, refusal, where)) from None


def expression_names(expr: sympy.Expr) -> set[str]:
    """The names of the free symbols of ``expr`` (constants and functions excluded)."""
    return {symbol.name for symbol in expr.free_symbols}


# --------------------------------------------------------------------------- parsing


def _parse_checked(text: str) -> sympy.Expr:
    if not text.strip():
        raise _Refusal("the expression is empty", None)
    if len(text) > MAX_EXPRESSION_LENGTH:
        raise _Refusal(
            f"the expression is {len(text)} characters long; at most "
            f"{MAX_EXPRESSION_LENGTH} are accepted",
            None,
        )
    _check_characters(text)
    _check_paren_depth(text)
    python_text, columns = _powers_as_python(text)
    tree = _syntax_tree(python_text, columns)
    _check_tree_size(tree, columns)
    expr = _Builder(python_text, columns).build(tree.body)
    _check_result(expr)
    return expr


def _check_characters(text: str) -> None:
    for column, char in enumerate(text):
        if not (" " <= char <= "~"):
            raise _Refusal(f"the character {char!r} is not allowed (plain ASCII only)", column)
        if char in "'\"":
            raise _Refusal("text strings are not allowed", column)


def _check_paren_depth(text: str) -> None:
    depth = 0
    for column, char in enumerate(text):
        if char in "([{":
            depth += 1
            if depth > MAX_PAREN_DEPTH:
                raise _Refusal(
                    f"brackets are nested more than {MAX_PAREN_DEPTH} levels deep", column
                )
        elif char in ")]}":
            depth -= 1


def _powers_as_python(text: str) -> tuple[str, list[int]]:
    """Write ``^`` as ``**``; return the new text and, per new column, the original column.

    Python's ``^`` binds more loosely than ``+``, so the replacement must happen
    on the text: ``S + S^2/K`` must mean ``S + (S**2)/K``.
    """
    pieces: list[str] = []
    columns: list[int] = []
    for column, char in enumerate(text):
        if char == "^":
            pieces.append("**")
            columns.extend((column, column))
        else:
            pieces.append(char)
            columns.append(column)
    columns.append(len(text))  # one past the end, for errors at the end
    return "".join(pieces), columns


def _syntax_tree(python_text: str, columns: list[int]) -> ast.Expression:
    try:
        # Python's tokenizer warns about text like "2if" (invalid decimal literal) on
        # stderr; as errors they become the clean refusal below instead.
        with warnings.catch_warnings():
            warnings.simplefilter("error", SyntaxWarning)
            warnings.simplefilter("error", DeprecationWarning)
            return ast.parse(python_text, mode="eval")
    except (SyntaxError, SyntaxWarning, DeprecationWarning) as err:
        column = None
        if getattr(err, "offset", None) is not None and getattr(err, "lineno", None) == 1:
            column = columns[min(max(err.offset - 1, 0), len(columns) - 1)]
        reason = (getattr(err, "msg", None) or str(err) or "invalid syntax").split(". Maybe")[0]
        raise _Refusal(f"not a valid expression ({reason})", column) from None
    except (RecursionError, MemoryError, ValueError):
        # CPython's parser signals absurd nesting this way (MemoryError for
        # its own stack, RecursionError while building the tree).
        raise _Refusal("the expression is too deeply nested or too long", None) from None


def _check_tree_size(tree: ast.Expression, columns: list[int]) -> None:
    """Count nodes and the effective depth without recursion."""
    count = 0
    stack: list[tuple[ast.AST, int]] = [(tree.body, 1)]
    while stack:
        node, depth = stack.pop()
        count += 1
        if count > MAX_NODES:
            raise _Refusal(f"the expression has more than {MAX_NODES} parts", None)
        if depth > MAX_TREE_DEPTH:
            raise _Refusal(
                f"operations are nested more than {MAX_TREE_DEPTH} levels deep",
                _column(node, columns),
            )
        for child in ast.iter_child_nodes(node):
            stack.append((child, depth + (0 if _same_chain(node, child) else 1)))


def _same_chain(node: ast.AST, child: ast.AST) -> bool:
    """True for the left operand of a + - chain or a * / chain (built as one flat sum/product)."""
    if not (isinstance(node, ast.BinOp) and isinstance(child, ast.BinOp)):
        return False
    if child is not node.left:
        return False
    for group in (_ADDITIVE, _MULTIPLICATIVE):
        if isinstance(node.op, group) and isinstance(child.op, group):
            return True
    return False


def _column(node: ast.AST, columns: list[int]) -> int | None:
    offset = getattr(node, "col_offset", None)
    if offset is None or getattr(node, "lineno", 1) != 1:
        return None
    return columns[min(offset, len(columns) - 1)]


class _Builder:
    """Turns a checked syntax tree into sympy, node by node, from the whitelist only."""

    def __init__(self, python_text: str, columns: list[int]) -> None:
        self.text = python_text
        self.columns = columns

    def refuse(self, problem: str, node: ast.AST) -> _Refusal:
        return _Refusal(problem, _column(node, self.columns))

    def where(self, node: ast.AST) -> int | None:
        """The column to point at: the operator or dot itself where the node has one."""
        if isinstance(node, (ast.Attribute, ast.Subscript)):
            return self.after(node.value)
        if isinstance(node, ast.Compare):
            return self.after(node.left)
        if isinstance(node, ast.BoolOp):
            return self.after(node.values[0])
        if isinstance(node, ast.IfExp):
            return self.after(node.body)
        if isinstance(node, ast.BinOp):
            return self.after(node.left)
        return _column(node, self.columns)

    def after(self, node: ast.AST) -> int | None:
        """The column of the first character after ``node`` that is not a space or ')'."""
        end = getattr(node, "end_col_offset", None)
        if end is None or getattr(node, "end_lineno", 1) != 1:
            return _column(node, self.columns)
        text = self.text
        while end < len(text) and text[end] in " )":
            end += 1
        return self.columns[min(end, len(self.columns) - 1)]

    def build(self, node: ast.AST) -> sympy.Expr:
        if isinstance(node, ast.Constant):
            result = self.number(node)
        elif isinstance(node, ast.Name):
            result = self.name(node)
        elif isinstance(node, ast.BinOp):
            result = self.binary(node)
        elif isinstance(node, ast.UnaryOp):
            result = self.unary(node)
        elif isinstance(node, ast.Call):
            result = self.call(node)
        else:
            problem = _REFUSED_NODES.get(type(node), f"'{type(node).__name__}' is not allowed")
            raise _Refusal(problem, self.where(node))
        self.check_numbers(result, node)
        return result

    # -- leaves

    def number(self, node: ast.Constant) -> sympy.Expr:
        value = node.value
        if isinstance(value, bool) or value is None or value is Ellipsis:
            raise self.refuse(f"'{value}' is not a number", node)
        if isinstance(value, (str, bytes)):
            raise self.refuse("text strings are not allowed", node)
        if isinstance(value, complex):
            raise self.refuse("imaginary numbers are not allowed", node)
        if isinstance(value, int):
            if abs(value) >= 10**MAX_INTEGER_DIGITS:
                raise self.refuse(
                    f"integer literals may have at most {MAX_INTEGER_DIGITS} digits", node
                )
            return sympy.Integer(value)
        if isinstance(value, float):
            if not math.isfinite(value):
                raise self.refuse("the number is too large to be a finite real number", node)
            return sympy.Float(value)
        raise self.refuse(f"the constant {value!r} is not allowed", node)

    def name(self, node: ast.Name) -> sympy.Expr:
        name = node.id
        if name.startswith("__"):
            raise self.refuse("names starting with '__' are not allowed", node)
        if name in CONSTANTS:
            return CONSTANTS[name]()
        if name in FUNCTIONS:
            raise self.refuse(f"'{name}' is a function; call it as {name}(...)", node)
        return sympy.Symbol(name)

    # -- operators

    def binary(self, node: ast.BinOp) -> sympy.Expr:
        if isinstance(node.op, _ADDITIVE):
            return sympy.Add(*self.chain(node, _ADDITIVE))
        if isinstance(node.op, _MULTIPLICATIVE):
            return sympy.Mul(*self.chain(node, _MULTIPLICATIVE))
        if isinstance(node.op, ast.Pow):
            return self.power(self.build(node.left), self.build(node.right), node)
        text = _OPERATOR_TEXT.get(type(node.op), type(node.op).__name__)
        raise _Refusal(f"the operator '{text}' is not allowed", self.where(node))

    def chain(self, node: ast.BinOp, group: tuple[type, ...]) -> list[sympy.Expr]:
        """Operands of a left-nested + - (or * /) chain, negated (inverted) where needed.

        Walked iteratively, so long sums do not recurse.
        """
        operands: list[tuple[ast.operator, ast.AST]] = []
        current: ast.AST = node
        while isinstance(current, ast.BinOp) and isinstance(current.op, group):
            operands.append((current.op, current.right))
            current = current.left
        terms = [self.build(current)]
        for op, operand in reversed(operands):
            term = self.build(operand)
            if isinstance(op, ast.Sub):
                term = -term
            elif isinstance(op, ast.Div):
                term = self.power(term, sympy.Integer(-1), operand)
            terms.append(term)
        return terms

    def power(self, base: sympy.Expr, exponent: sympy.Expr, node: ast.AST) -> sympy.Expr:
        if exponent.is_Number:
            column = self.where(node)
            if abs(exponent) > MAX_EXPONENT:
                raise _Refusal(
                    f"the exponent {_short(exponent)} is too large "
                    f"(at most {MAX_EXPONENT} in size)",
                    column,
                )
            factor = _numeric_factor(base)
            if (
                factor is not None
                and not exponent.is_Integer
                and _decimal_size(factor) > MAX_ROOT_DIGITS
            ):
                raise _Refusal(
                    f"roots of numbers with more than {MAX_ROOT_DIGITS} digits are not supported",
                    column,
                )
            if base.is_Number and abs(exponent) * _decimal_size(base) > MAX_NUMBER_DIGITS:
                raise _Refusal(
                    f"the power {_short(base)}**{_short(exponent)} is out of range "
                    f"(more than {MAX_NUMBER_DIGITS} digits)",
                    column,
                )
        return sympy.Pow(base, exponent)

    def unary(self, node: ast.UnaryOp) -> sympy.Expr:
        if isinstance(node.op, ast.USub):
            return -self.build(node.operand)
        if isinstance(node.op, ast.UAdd):
            return self.build(node.operand)
        text = _OPERATOR_TEXT.get(type(node.op), type(node.op).__name__)
        raise self.refuse(f"the operator '{text}' is not allowed", node)

    def call(self, node: ast.Call) -> sympy.Expr:
        func = node.func
        if not isinstance(func, ast.Name):
            if isinstance(func, ast.Attribute):
                raise self.refuse("attribute access is not allowed", func)
            raise self.refuse("only the listed functions may be called", node)
        name = func.id
        if name not in FUNCTIONS:
            raise self.refuse(_unknown_function(name), node)
        if node.keywords:
            raise self.refuse("keyword arguments are not allowed", node.keywords[0].value)
        for arg in node.args:
            if isinstance(arg, ast.Starred):
                raise self.refuse("argument unpacking (*) is not allowed", arg)
        arity = FUNCTION_ARITY[name]
        if len(node.args) != arity:
            plural = "" if arity == 1 else "s"
            raise self.refuse(f"{name} takes {arity} argument{plural}, got {len(node.args)}", node)
        args = [self.build(arg) for arg in node.args]
        if name == "pow":
            return self.power(args[0], args[1], node)
        if name == "sqrt":
            return self.power(args[0], sympy.Rational(1, 2), node)
        return FUNCTIONS[name](*args)

    # -- guards

    def check_numbers(self, expr: sympy.Expr, node: ast.AST) -> None:
        """Refuse exact numbers that grew beyond MAX_NUMBER_DIGITS (sympy folds constants)."""
        if expr.is_Number:
            candidate = expr
        elif (expr.is_Add or expr.is_Mul) and expr.args and expr.args[0].is_Number:
            candidate = expr.args[0]  # sympy keeps the folded numeric part first
        else:
            return
        if _decimal_size(candidate) > MAX_NUMBER_DIGITS:
            raise self.refuse(
                f"a number in this expression has more than {MAX_NUMBER_DIGITS} digits", node
            )


def _numeric_factor(expr: sympy.Expr) -> sympy.Expr | None:
    """The number ``expr`` is, or the numeric factor sympy keeps first in a product."""
    if expr.is_Number:
        return expr
    if expr.is_Mul and expr.args and expr.args[0].is_Number:
        return expr.args[0]
    return None


def _decimal_size(number: sympy.Expr) -> float:
    """About how many decimal digits ``number`` spans (either side of 1), without overflow."""
    if number.is_Rational:
        p, q = abs(int(number.p)), int(number.q)
        return max(math.log10(p) if p else 0.0, math.log10(q))
    if number.is_Float:
        _sign, mantissa, exponent, _bits = number._mpf_
        if not mantissa:
            return 0.0
        return abs(math.log10(mantissa) + exponent * _LOG10_2)
    return 0.0  # pi and the like: bounded


def _short(number: sympy.Expr) -> str:
    """A number for a message: exact when short, else its size."""
    if number.is_Float:
        return f"{float(number):g}"
    text = str(number)
    if len(text) <= 20:
        return text
    return f"(a number of about {_decimal_size(number):.0f} digits)"


def _check_result(expr: sympy.Expr) -> None:
    if expr.has(sympy.zoo, sympy.nan, sympy.oo, -sympy.oo):
        raise _Refusal("the expression is infinite or undefined (a division by zero?)", None)
    if expr.has(sympy.I):
        raise _Refusal("the expression has an imaginary value", None)


def _unknown_function(name: str) -> str:
    if name in CONSTANTS:
        return f"'{name}' is a constant, not a function"
    if name.startswith("__"):
        return "names starting with '__' are not allowed"
    close = difflib.get_close_matches(name, list(FUNCTIONS), n=1)
    hint = f"; did you mean '{close[0]}'?" if close else ""
    return f"unknown function '{name}'{hint} (known: {', '.join(FUNCTIONS)})"


def _prefix(where: str) -> str:
    return f"{where}: " if where else ""


def _message(text: str, refusal: _Refusal, where: str) -> str:
    """The problem, then the text with a caret under the offending column."""
    message = _prefix(where) + refusal.problem
    if refusal.column is None:
        return message
    start = max(0, refusal.column - _CARET_CONTEXT)
    stop = refusal.column + _CARET_CONTEXT
    excerpt = text[start:stop]
    lead = "..." if start > 0 else ""
    tail = "..." if stop < len(text) else ""
    caret = " " * (len(lead) + refusal.column - start) + "^"
    return f"{message}\n    {lead}{excerpt}{tail}\n    {caret}"


__all__ = [
    "CONSTANTS",
    "FUNCTIONS",
    "FUNCTION_ARITY",
    "MAX_EXPONENT",
    "MAX_EXPRESSION_LENGTH",
    "RESERVED",
    "expression_names",
    "parse_expression",
]
