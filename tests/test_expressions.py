"""The whitelisting expression parser: accepted forms, refusals, size guards.

Expected values are built directly with sympy's constructors (the reference
library), never by parsing text.
"""

from __future__ import annotations

import builtins

import pytest
import sympy

from branchline.errors import ExpressionError
from branchline.scan.expressions import (
    CONSTANTS,
    FUNCTION_ARITY,
    FUNCTIONS,
    MAX_EXPONENT,
    RESERVED,
    expression_names,
    parse_expression,
)

x, y, z, a, b, c = sympy.symbols("x y z a b c")
S, X, D, S_in, mu, Y = sympy.symbols("S X D S_in mu Y")
mu_max, K_s, K_i = sympy.symbols("mu_max K_s K_i")

ACCEPTED = [
    ("x + y", x + y),
    ("2*x - 3", 2 * x - 3),
    ("x**2", x**2),
    ("x^2", x**2),
    ("x ^ 2", x**2),
    # ^ is rewritten as **, so it binds tighter than * / and unary minus.
    ("-x^2", -(x**2)),
    ("a + b^2/c", a + b**2 / c),
    ("2^3^2", sympy.Integer(512)),  # right associative: 2^(3^2)
    ("x^-1", 1 / x),
    ("x**0.5", x ** sympy.Float(0.5)),
    ("a - b - c", a - b - c),
    ("a - (b - c)", a - b + c),
    ("a/b/c", a / (b * c)),
    ("a/(b/c)", a * c / b),
    ("+x", x),
    ("--x", x),
    ("(((x)))", x),
    ("1.5e-3*x", sympy.Float(1.5e-3) * x),
    ("2E+2", sympy.Float(200.0)),
    ("1_000*x", 1000 * x),
    ("1/3", sympy.Rational(1, 3)),
    ("pi*x^2", sympy.pi * x**2),
    ("atan2(y, x)", sympy.atan2(y, x)),
    ("pow(x, 3)", x**3),
    ("log10(x)", sympy.log(x) / sympy.log(10)),
    ("abs(x - 1)", sympy.Abs(x - 1)),
    ("D*(S_in - S) - mu*X/Y", D * (S_in - S) - mu * X / Y),
    ("mu_max*S/(K_s + S + S^2/K_i)", mu_max * S / (K_s + S + S**2 / K_i)),
    ("exp(-x)*sin(2*pi*y)", sympy.exp(-x) * sympy.sin(2 * sympy.pi * y)),
    # Line breaks from TOML multi-line strings are plain white space.
    ("x +\n  y", x + y),
    ("(x\n + y)\t* 2", 2 * (x + y)),
]


@pytest.mark.parametrize(("text", "expected"), ACCEPTED, ids=[t for t, _ in ACCEPTED])
def test_accepted_forms_match_sympy(text, expected):
    assert parse_expression(text) == expected


@pytest.mark.parametrize("name", sorted(FUNCTIONS))
def test_every_function_builds_its_sympy_function(name):
    args = [x, y][: FUNCTION_ARITY[name]]
    text = f"{name}({', '.join(str(arg) for arg in args)})"
    assert parse_expression(text) == FUNCTIONS[name](*args)


def test_names_are_plain_symbols_even_where_sympy_has_a_meaning():
    # sympify would read E as Euler's number, I as the imaginary unit, S as the
    # singleton registry, beta/gamma/zeta as functions; here they are just names.
    expr = parse_expression("E + I + N + S + Q + beta + gamma + zeta + lambda_")
    names = {"E", "I", "N", "S", "Q", "beta", "gamma", "zeta", "lambda_"}
    assert expression_names(expr) == names
    assert expr == sympy.Add(*[sympy.Symbol(n) for n in names])
    assert all(s.assumptions0 == {"commutative": True} for s in expr.free_symbols)


def test_expression_names_excludes_constants_and_functions():
    expr = parse_expression("pi*exp(K_s) + sqrt(mu_max*S)/(K_s + S)")
    assert expression_names(expr) == {"K_s", "mu_max", "S"}
    assert expression_names(parse_expression("2*pi + exp(1)")) == set()


def test_reserved_names_are_functions_and_constants():
    assert set(CONSTANTS) == {"pi"}
    assert {"exp", "log", "sqrt", "sin", "cos", "tan", "sinh", "cosh", "tanh", "abs"} <= RESERVED
    assert RESERVED == set(FUNCTIONS) | set(CONSTANTS)


def test_long_sums_and_products_are_built_flat():
    terms = [sympy.Symbol(f"x{i}") for i in range(600)]
    assert parse_expression(" + ".join(map(str, terms))) == sympy.Add(*terms)
    assert parse_expression("*".join(map(str, terms))) == sympy.Mul(*terms)
    assert parse_expression(" - ".join(map(str, terms))) == terms[0] - sympy.Add(*terms[1:])


def test_moderate_nesting_is_accepted():
    depth = 30
    text = "(" * depth + "x" + "+1)" * depth
    assert parse_expression(text) == x + depth
    assert parse_expression("exp(" * 20 + "x" + ")" * 20).free_symbols == {x}


REFUSED = [
    ("x + foo.bar", "attribute access"),
    ("x[0]", "indexing"),
    ("lambda: 0", "lambda"),
    ("[x for x in y]", "comprehensions"),
    ("{x for x in y}", "comprehensions"),
    ("sum(x for x in y)", "unknown function 'sum'"),
    ('"abc"', "text strings"),
    ("'abc'", "text strings"),
    ("b'abc'", "text strings"),
    ("f'{x}'", "text strings"),
    ("x < y", "comparisons"),
    ("x == y", "comparisons"),
    ("x and y", "'and'/'or'"),
    ("not x", "'not'"),
    ("~x", "'~'"),
    ("x // y", "'//'"),
    ("x % y", "'%'"),
    ("x @ y", "'@'"),
    ("x | y", "'|'"),
    ("x & y", "'&'"),
    ("x << 2", "'<<'"),
    ("x if y else z", "conditional"),
    ("(y := 2)", "assignments"),
    ("x = 1", "not a valid expression"),
    ("x; y", "not a valid expression"),
    ("import os", "not a valid expression"),
    ("x +", "not a valid expression"),
    ("(x", "not a valid expression"),
    ("(x, y)", "tuples"),
    ("[x, y]", "lists"),
    ("{x: y}", "dictionaries"),
    ("{x}", "sets"),
    ("sin(*x)", "unpacking"),
    ("sqrt(x=1)", "keyword arguments"),
    ("f(x=1)", "unknown function 'f'"),
    ("foo(x)", "unknown function 'foo'"),
    ("ex(x)", "did you mean 'exp'"),
    ("pi(2)", "constant, not a function"),
    ("exp + 1", "'exp' is a function"),
    ("sin(x, y)", "sin takes 1 argument, got 2"),
    ("atan2(x)", "atan2 takes 2 arguments, got 1"),
    ("__x + 1", "'__'"),
    ("True", "not a number"),
    ("None", "not a number"),
    ("...", "not a number"),
    ("2j", "imaginary"),
    ("sqrt(-1)", "imaginary"),
    ("1/0", "infinite or undefined"),
    ("log(0)", "infinite or undefined"),
    ("µ + 1", "plain ASCII"),
    ("x\x00", "plain ASCII"),
    ("", "empty"),
    ("   ", "empty"),
    ("await x", "'await' is not allowed"),
]


@pytest.mark.parametrize(("text", "words"), REFUSED, ids=[t for t, _ in REFUSED])
def test_refused_forms(text, words):
    with pytest.raises(ExpressionError) as err:
        parse_expression(text)
    assert words in str(err.value)


def test_non_text_is_refused():
    with pytest.raises(ExpressionError, match="must be text"):
        parse_expression(3.0)  # type: ignore[arg-type]


@pytest.mark.parametrize(
    ("text", "pointed"),
    [
        ("x + foo.bar", "."),
        ("a + b < c", "<"),
        ("x + y // z", "//"),
        ("x + 2*open(y)", "o"),
        ("x + 9^9^9^9", "^"),
    ],
)
def test_caret_points_at_the_offending_piece(text, pointed):
    with pytest.raises(ExpressionError) as err:
        parse_expression(text)
    lines = str(err.value).splitlines()
    shown, caret = lines[-2], lines[-1]
    assert shown.strip() == text
    column = caret.index("^")
    assert shown[column : column + len(pointed)] == pointed


def test_where_prefixes_the_message():
    with pytest.raises(ExpressionError, match=r"^model\.equations\.S: attribute access"):
        parse_expression("S.real", where="model.equations.S")


def test_caret_in_a_long_expression_shows_an_excerpt():
    text = "x + " * 100 + "y.z"
    with pytest.raises(ExpressionError) as err:
        parse_expression(text)
    shown, caret = str(err.value).splitlines()[-2:]
    assert shown.strip().startswith("...")
    assert shown[caret.index("^")] == "."


CODE_ATTEMPTS = [
    "__import__('os').system('x')",
    "__import__",
    "().__class__",
    "().__class__.__bases__[0].__subclasses__()",
    "lambda: 0",
    "[x for x in y]",
    "open('f')",
    "open(f)",
    "exec('print(1)')",
    "exec(x)",
    "eval('1')",
    "eval(x)",
    "getattr(x, y)",
    "globals()",
    "x.real",
    '"abc"',
    "f(x=1)",
    "breakpoint()",
    "compile(x, y, z)",
]


@pytest.mark.parametrize("text", CODE_ATTEMPTS)
def test_attempts_to_run_code_are_refused_without_running(text, monkeypatch):
    calls = []
    real_import = builtins.__import__

    def watched_import(name, *args, **kwargs):
        calls.append(f"import {name}")
        return real_import(name, *args, **kwargs)

    def refuse(name):
        def record(*args, **kwargs):
            calls.append(name)
            raise AssertionError(f"{name} was called")

        return record

    # getattr/globals/compile stay untouched: sympy, pytest and ast.parse use them.
    for name in ("open", "exec", "eval", "breakpoint"):
        monkeypatch.setattr(builtins, name, refuse(name))
    monkeypatch.setattr(builtins, "__import__", watched_import)
    try:
        parse_expression(text)
        outcome = "accepted"
    except ExpressionError:
        outcome = "refused"
    finally:
        monkeypatch.undo()
    assert outcome == "refused"
    assert "import os" not in calls
    assert [call for call in calls if not call.startswith("import ")] == []


DOS_CASES = {
    "power tower": "9**9**9**9",
    "caret tower": "9^9^9^9",
    "huge power of a literal": "2**10**5",
    "big exponent on a name": "x**100000",
    "big negative exponent": "x^-5000",
    "float exponent": "x**1e300",
    "pow function": "pow(10, 10**9)",
    "power of a big result": "(10**300)**2",
    "products of big numbers": "10**300*10**300",
    "sqrt of a huge number": "sqrt(10**450 + 1)",
    "root of a long number": "sqrt(10**60 + 7)",
    "root of a long factor": "(10**60*x)^(1/3)",
    "infinite float": "1e400",
    "long integer literal": "1" * 31,
    "very long integer literal": "9" * 5000,
    "deep parentheses": "(" * 1000 + "x" + ")" * 1000,
    "deep brackets": "[" * 1000,
    "unary chain": "-" * 9000 + "x",
    "deep calls": "exp(" * 200 + "x" + ")" * 200,
    "deep power chain": "x**" * 500 + "x",
    "long text": "x+" * 6000 + "x",
    "long sum beyond the parser": "+".join(["x"] * 4900),
}


@pytest.mark.parametrize("text", DOS_CASES.values(), ids=DOS_CASES.keys())
def test_resource_guards_refuse(text):
    with pytest.raises(ExpressionError):
        parse_expression(text)


def test_roots_of_moderate_numbers_are_exact():
    assert parse_expression("sqrt(8)") == 2 * sympy.sqrt(2)
    assert parse_expression("sqrt(4*x)") == 2 * sympy.sqrt(x)
    assert parse_expression("(10**40 + 1)^0.5") == sympy.Pow(10**40 + 1, sympy.Float(0.5))


def test_exponent_limit_is_inclusive():
    assert parse_expression(f"x**{MAX_EXPONENT}") == x**MAX_EXPONENT
    assert parse_expression("2**1000") == sympy.Integer(2) ** 1000
