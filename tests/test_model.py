"""Tests of branchline.model.build: compiled expression models and Python models.

References (outside the project):
- sympy's own differentiation (``sympy.diff``) evaluated at 30 significant
  digits with ``evalf`` (mpmath arithmetic): the exact values of f, df/dx,
  df/dp, the second and third derivative tensors.
- mpmath's numerical differentiation (``mpmath.diff``, high-precision
  finite differences with step refinement) of the right-hand side evaluated in
  mpmath: an independent check of the Jacobian that never calls sympy.diff.
- For Python models, the same model written as expressions (exact sympy
  derivatives) is the reference for the finite differences.
"""

from __future__ import annotations

import random
import sys

import mpmath
import numpy as np
import pytest
import scipy.sparse
import sympy as sp

import models_for_tests
from branchline.errors import ScanError
from branchline.model.build import (
    JACOBIAN_CHECK_TOLERANCE,
    build_model,
    check_jacobian,
    jacobian_dense,
    resolve_callable,
)
from branchline.numerics.policy import DEFAULT
from branchline.scan.expressions import parse_expression
from branchline.scan.loader import ExpressionModelSpec, PythonModelSpec

# Compiled double-precision values against 30-digit references: a few hundred
# rounding errors of the largest intermediate term.
EXACT_TOLERANCE = 1e-10
REFERENCE_DIGITS = 30

# ---------------------------------------------------------------------------
# Seeded random expressions on safe domains
# ---------------------------------------------------------------------------

# Every whitelisted function, wrapped so that its argument stays inside the
# domain where it is smooth and finite for any real input.
_FUNCTION_FORMS = (
    "exp(sin({a}))",
    "exp(-({a})^2)",
    "log(1 + ({a})^2)",
    "log10(2 + ({a})^2)",
    "sqrt(1 + ({a})^2)",
    "sin({a})",
    "cos({a})",
    "tan(0.6*tanh({a}))",
    "asin(0.7*tanh({a}))",
    "acos(0.7*tanh({a}))",
    "atan({a})",
    "atan2({a}, 2 + ({b})^2)",
    "sinh(tanh({a}))",
    "cosh(sin({a}))",
    "tanh({a})",
    "asinh({a})",
    "acosh(2 + ({a})^2)",
    "atanh(0.7*tanh({a}))",
    "pow(1 + ({a})^2, 1/3)",
)


def _random_text(rng: random.Random, names: list[str], depth: int) -> str:
    """A random expression in ``names``: arithmetic and whitelisted functions."""
    if depth == 0 or rng.random() < 0.2:
        if rng.random() < 0.8:
            return rng.choice(names)
        return repr(round(rng.uniform(0.2, 2.0), 3))
    kind = rng.random()
    a = _random_text(rng, names, depth - 1)
    b = _random_text(rng, names, depth - 1)
    if kind < 0.45:
        return rng.choice(_FUNCTION_FORMS).format(a=a, b=b)
    if kind < 0.6:
        return f"({a}) + ({b})"
    if kind < 0.7:
        return f"({a}) - ({b})"
    if kind < 0.85:
        return f"({a})*({b})"
    if kind < 0.93:
        return f"({a})/(1 + ({b})^2)"
    return f"({a})^{rng.choice([2, 3])}"


def _random_specs(count: int, seed: int) -> list[ExpressionModelSpec]:
    rng = random.Random(seed)
    specs = []
    for index in range(count):
        n = rng.randint(2, 4)
        states = [f"s{i}" for i in range(n)]
        parameters = {
            "alpha": round(rng.uniform(0.5, 2.0), 3),
            "beta": round(rng.uniform(0.5, 2.0), 3),
        }
        names = states + list(parameters)
        definitions = {}
        if index % 3 == 0:  # every third model routes through a definition
            definitions["g"] = _random_text(rng, names, 2)
            names = [*names, "g"]
        equations = {s: _random_text(rng, names, 3) for s in states}
        specs.append(ExpressionModelSpec(parameters, equations, definitions))
    return specs


RANDOM_SPECS = _random_specs(count=36, seed=20261201)


def _reference_system(spec: ExpressionModelSpec):
    """f as sympy in plain symbols, definitions substituted, built independently of model.py."""
    definitions = {
        sp.Symbol(name): parse_expression(text) for name, text in spec.definitions.items()
    }
    f = [parse_expression(text).subs(definitions) for text in spec.equations.values()]
    x = [sp.Symbol(name) for name in spec.equations]
    p = [sp.Symbol(name) for name in spec.parameters]
    return f, x, p


def _evaluate(expression: sp.Expr, values: dict) -> complex:
    return complex(expression.evalf(REFERENCE_DIGITS, subs=values))


def _random_point(rng: np.random.Generator, spec: ExpressionModelSpec):
    x = rng.uniform(-1.5, 1.5, len(spec.equations))
    p = rng.uniform(0.5, 2.0, len(spec.parameters))
    return x, p


def _substitution(xs, ps, x, p) -> dict:
    values = {s: sp.Float(float(v), REFERENCE_DIGITS) for s, v in zip(xs, x, strict=True)}
    values.update({s: sp.Float(float(v), REFERENCE_DIGITS) for s, v in zip(ps, p, strict=True)})
    return values


def _assert_close(actual, expected, tolerance=EXACT_TOLERANCE):
    actual = np.asarray(actual)
    expected = np.asarray(expected)
    assert actual.shape == expected.shape
    scale = 1.0 + np.abs(expected)
    assert np.all(np.abs(actual - expected) <= tolerance * scale), (actual, expected)


def test_random_expressions_cover_about_a_hundred_equations():
    assert sum(len(spec.equations) for spec in RANDOM_SPECS) >= 100


@pytest.mark.parametrize("index", range(len(RANDOM_SPECS)))
def test_rhs_and_first_derivatives_match_sympy(index):
    """Reference: sympy.diff of the parsed text, evaluated with 30-digit evalf."""
    spec = RANDOM_SPECS[index]
    model = build_model(spec)
    f, xs, ps = _reference_system(spec)
    rng = np.random.default_rng(index)
    for _ in range(2):
        x, p = _random_point(rng, spec)
        values = _substitution(xs, ps, x, p)
        expected_f = [_evaluate(fi, values).real for fi in f]
        expected_fx = [[_evaluate(sp.diff(fi, xj), values).real for xj in xs] for fi in f]
        expected_fp = [[_evaluate(sp.diff(fi, pk), values).real for pk in ps] for fi in f]
        _assert_close(model.rhs(x, p), expected_f)
        _assert_close(model.jacobian(x, p), expected_fx)
        _assert_close(model.parameter_jacobian(x, p), expected_fp)
        fx, fp = model.derivatives(x, p)
        _assert_close(fx, expected_fx)
        _assert_close(fp, expected_fp)
        # A column of points takes the numpy code path: same values.
        _assert_close(model.rhs(x[:, None], p)[:, 0], expected_f)
        _assert_close(model.jacobian(x[:, None], p)[:, :, 0], expected_fx)


@pytest.mark.parametrize("index", range(0, len(RANDOM_SPECS), 4))
def test_jacobian_matches_mpmath_numerical_differentiation(index):
    """Reference: mpmath.diff (no sympy.diff involved) at 30 digits."""
    spec = RANDOM_SPECS[index]
    model = build_model(spec)
    f, xs, ps = _reference_system(spec)
    x, p = _random_point(np.random.default_rng(100 + index), spec)
    functions = [sp.lambdify(xs + ps, fi, modules="mpmath") for fi in f]
    expected = np.zeros((len(xs), len(xs)))
    with mpmath.workdps(REFERENCE_DIGITS):
        for i, function in enumerate(functions):
            for j in range(len(xs)):
                order = [0] * (len(xs) + len(ps))
                order[j] = 1
                point = [mpmath.mpf(float(v)) for v in (*x, *p)]
                expected[i, j] = float(mpmath.diff(function, point, tuple(order)))
    _assert_close(model.jacobian(x, p), expected, tolerance=1e-9)


def _complex_vector(rng: np.random.Generator, n: int) -> np.ndarray:
    return rng.standard_normal(n) + 1j * rng.standard_normal(n)


@pytest.mark.parametrize("index", range(1, len(RANDOM_SPECS), 5))
def test_higher_derivatives_match_sympy_tensors(index):
    """Reference: the tensors d2f_i/dx_j dx_k, d3f_i/dx_j dx_k dx_l and d2f_i/dx_j dp_k
    from sympy.diff at 30 digits, contracted with complex vectors."""
    spec = RANDOM_SPECS[index]
    model = build_model(spec)
    f, xs, ps = _reference_system(spec)
    rng = np.random.default_rng(200 + index)
    x, p = _random_point(rng, spec)
    n, m = len(xs), len(ps)
    u, v, w = (_complex_vector(rng, n) for _ in range(3))
    values = _substitution(xs, ps, x, p)
    hessian = np.array(
        [[[_evaluate(sp.diff(fi, a, b), values).real for b in xs] for a in xs] for fi in f]
    )
    third = np.array(
        [
            [[[_evaluate(sp.diff(fi, a, b, c), values).real for c in xs] for b in xs] for a in xs]
            for fi in f
        ]
    )
    mixed = np.array(
        [[[_evaluate(sp.diff(fi, a, k), values).real for k in ps] for a in xs] for fi in f]
    )
    _assert_close(model.second(x, p, v, w), np.einsum("ijk,j,k->i", hessian, v, w))
    _assert_close(model.third(x, p, u, v, w), np.einsum("ijkl,j,k,l->i", third, u, v, w))
    _assert_close(model.jacobian_parameter_derivative(x, p, v), np.einsum("ijk,j->ik", mixed, v))
    assert model.jacobian_parameter_derivative(x, p, v).shape == (n, m)
    real = model.second(x, p, v.real, w.real)
    assert not np.iscomplexobj(real)
    _assert_close(real, np.einsum("ijk,j,k->i", hessian, v.real, w.real))


# ---------------------------------------------------------------------------
# Expression models: behaviour
# ---------------------------------------------------------------------------

BIOREACTOR = ExpressionModelSpec(
    parameters={"D": 0.1, "S_in": 4.0, "mu_max": 0.5, "K_s": 0.1, "K_i": 0.5, "Y": 0.5},
    equations={"S": "D*(S_in - S) - mu*X/Y", "X": "(mu - D)*X"},
    definitions={"mu": "mu_max*S/(K_s + S + S^2/K_i)"},
    observables={"biomass_out": "D*X", "growth": "mu"},
)


def test_names_defaults_and_texts_are_kept():
    model = build_model(BIOREACTOR)
    assert model.states == ("S", "X")
    assert model.parameters == ("D", "S_in", "mu_max", "K_s", "K_i", "Y")
    np.testing.assert_array_equal(model.defaults, [0.1, 4.0, 0.5, 0.1, 0.5, 0.5])
    assert model.equations == dict(BIOREACTOR.equations)
    assert model.definitions == dict(BIOREACTOR.definitions)
    assert model.observable_names == ("biomass_out", "growth")
    assert model.exact_derivatives and not model.sparse


def test_substrate_inhibition_model_by_hand():
    """Hand-derived values for the substrate-inhibition growth law mu = mu_max S/(K_s + S + S^2/K_i)."""
    model = build_model(BIOREACTOR)
    S, X = 0.5, 1.7
    D, S_in, mu_max, K_s, K_i, Y = model.defaults
    mu = mu_max * S / (K_s + S + S**2 / K_i)
    dmu = mu_max * (K_s - S**2 / K_i) / (K_s + S + S**2 / K_i) ** 2
    x = np.array([S, X])
    np.testing.assert_allclose(
        model.rhs(x, model.defaults), [D * (S_in - S) - mu * X / Y, (mu - D) * X], rtol=1e-14
    )
    np.testing.assert_allclose(
        model.jacobian(x, model.defaults),
        [[-D - dmu * X / Y, -mu / Y], [dmu * X, mu - D]],
        rtol=1e-14,
    )
    observed = model.observables(x, model.defaults)
    assert observed == pytest.approx({"biomass_out": D * X, "growth": mu}, rel=1e-14)
    assert all(type(value) is float for value in observed.values())


def test_constant_entries_broadcast_over_many_points():
    spec = ExpressionModelSpec(
        {"a": 2.0}, {"u": "-a*u + 2*v", "v": "3*u - v"}, observables={"one": "1"}
    )
    model = build_model(spec)
    points = np.array([[0.0, 1.0, 2.0, 3.0], [1.0, 1.0, 1.0, 1.0]])
    values = model.rhs(points, model.defaults)
    assert values.shape == (2, 4)
    np.testing.assert_allclose(values[:, 2], model.rhs(points[:, 2].copy(), model.defaults))
    jac = model.jacobian(points, model.defaults)
    assert jac.shape == (2, 2, 4)
    np.testing.assert_array_equal(jac[:, :, 3], [[-2.0, 2.0], [3.0, -1.0]])
    fx, fp = model.derivatives(points, model.defaults)
    assert fx.shape == (2, 2, 4) and fp.shape == (2, 1, 4)
    np.testing.assert_array_equal(model.observables(points, model.defaults)["one"], np.ones(4))
    # A linear model has no second derivative: zeros of the inputs' type.
    v = np.array([1.0 + 1j, 2.0])
    second = model.second(np.zeros(2), model.defaults, v, v)
    assert np.iscomplexobj(second)
    np.testing.assert_array_equal(second, [0.0, 0.0])


def test_trouble_gives_nan_or_inf_not_an_exception():
    spec = ExpressionModelSpec(
        {"a": 1.0}, {"u": "log(u) + a", "v": "1/v", "w": "(u - 2)^0.5 + exp(1000*w)"}
    )
    model = build_model(spec)
    with np.errstate(all="raise"):  # the model must not leak floating-point warnings
        values = model.rhs(np.array([-1.0, 0.0, 1.0]), model.defaults)
        jac = model.jacobian(np.array([-1.0, 0.0, 1.0]), model.defaults)
    assert np.isnan(values[0]) and np.isinf(values[1]) and np.isnan(values[2])
    assert not np.all(np.isfinite(jac))
    np.testing.assert_allclose(
        model.rhs(np.array([1.0, 2.0, 0.0]), model.defaults), [1.0, 0.5, np.nan]
    )
    # Python's abs would turn the complex root of a negative number into a real
    # modulus; the compiled code must give nan as numpy does.
    spec = ExpressionModelSpec({"a": 1.0}, {"u": "abs((u - 2)^0.5) + a"})
    model = build_model(spec)
    assert np.isnan(model.rhs(np.array([1.0]), model.defaults)[0])
    np.testing.assert_allclose(model.rhs(np.array([6.0]), model.defaults), [3.0])


def test_abs_and_sign_differentiate_off_the_kink():
    spec = ExpressionModelSpec({"a": 0.5}, {"u": "abs(u) - a", "v": "sign(u)*v^2"})
    model = build_model(spec)
    x = np.array([-2.0, 3.0])
    np.testing.assert_array_equal(model.jacobian(x, model.defaults), [[-1.0, 0.0], [0.0, -6.0]])
    np.testing.assert_array_equal(
        model.second(x, model.defaults, np.ones(2), np.ones(2)), [0.0, -2.0]
    )


def test_lists_are_accepted_as_points():
    model = build_model(BIOREACTOR)
    np.testing.assert_array_equal(
        model.rhs([0.5, 1.7], list(model.defaults)), model.rhs(np.array([0.5, 1.7]), model.defaults)
    )


def test_cubic_normal_form_third_derivative_by_hand():
    """x' = mu x - y + s x (x^2 + y^2), y' = x + mu y + s y (x^2 + y^2): at the origin
    B = 0 and C(u, v, w) = s (2 (u.v) w + 2 (u.w) v + 2 (v.w) u) restricted per component
    (hand expansion of the cubic terms)."""
    spec = ExpressionModelSpec(
        {"mu": 0.0, "s": -0.7},
        {"x": "mu*x - y + s*x*(x^2 + y^2)", "y": "x + mu*y + s*y*(x^2 + y^2)"},
    )
    model = build_model(spec)
    rng = np.random.default_rng(5)
    u, v, w = (_complex_vector(rng, 2) for _ in range(3))
    origin = np.zeros(2)
    s = -0.7
    expected = 2.0 * s * (u * (v @ w) + v * (u @ w) + w * (u @ v))
    np.testing.assert_allclose(model.third(origin, model.defaults, u, v, w), expected, rtol=1e-14)
    np.testing.assert_array_equal(model.second(origin, model.defaults, u, v), [0.0, 0.0])
    # d/dmu (f_x v) = v; d/ds (f_x v) = 0 at the origin.
    np.testing.assert_allclose(
        model.jacobian_parameter_derivative(origin, model.defaults, v), np.column_stack([v, [0, 0]])
    )


@pytest.mark.parametrize(
    ("equations", "definitions", "key", "words"),
    [
        ({"u": "u + k"}, {}, "model.equations.u", "unknown name 'k'"),
        ({"u": "g"}, {"g": "h"}, "model.definitions.g", "unknown name 'h'"),
        ({"u": "u + "}, {}, "model.equations.u", ""),
        ({"u": "__import__('os')"}, {}, "model.equations.u", ""),
    ],
)
def test_bad_expressions_raise_scan_errors(equations, definitions, key, words):
    spec = ExpressionModelSpec({"a": 1.0}, equations, definitions)
    with pytest.raises(ScanError) as caught:
        build_model(spec, source="bad.toml")
    assert caught.value.source == "bad.toml"
    assert caught.value.key == key
    assert words in caught.value.problem


def test_check_jacobian_accepts_a_compiled_model():
    model = build_model(BIOREACTOR)
    check = check_jacobian(model, np.array([0.5, 1.7]), model.defaults)
    assert check.ok and check.max_relative_error < 1e-8


# ---------------------------------------------------------------------------
# Python models
# ---------------------------------------------------------------------------


def _python_spec(**changes) -> PythonModelSpec:
    fields = {
        "parameters": dict(models_for_tests.PARAMETERS),
        "rhs": "models_for_tests:rhs",
        "size": 3,
    }
    fields.update(changes)
    return PythonModelSpec(**fields)


REFERENCE_SPEC = ExpressionModelSpec(
    dict(models_for_tests.PARAMETERS), dict(models_for_tests.EXPRESSIONS)
)
POINT = np.array([0.8, 1.3, -0.4])


def _sympy_reference(x, p, u, v, w):
    """f, f_x, f_p, B(v, w), C(u, v, w) and d/dp (f_x v) of the expression version, from
    sympy.diff evaluated at 30 digits (no branchline model code involved)."""
    f, xs, ps = _reference_system(REFERENCE_SPEC)
    values = _substitution(xs, ps, x, p)

    def ev(e):
        return _evaluate(e, values).real

    value = np.array([ev(fi) for fi in f])
    fx = np.array([[ev(sp.diff(fi, a)) for a in xs] for fi in f])
    fp = np.array([[ev(sp.diff(fi, k)) for k in ps] for fi in f])
    hessian = np.array([[[ev(sp.diff(fi, a, b)) for b in xs] for a in xs] for fi in f])
    third = np.array(
        [[[[ev(sp.diff(fi, a, b, c)) for c in xs] for b in xs] for a in xs] for fi in f]
    )
    mixed = np.array([[[ev(sp.diff(fi, a, k)) for k in ps] for a in xs] for fi in f])
    return (
        value,
        fx,
        fp,
        np.einsum("ijk,j,k->i", hessian, v, w),
        np.einsum("ijkl,j,k,l->i", third, u, v, w),
        np.einsum("ijk,j->ik", mixed, v),
    )


def _relative(actual, expected) -> float:
    return float(np.max(np.abs(np.asarray(actual) - expected)) / np.max(np.abs(expected)))


# Accuracy expected of nested central differences with k levels, about
# eps**(2/(k+2)) (truncation O(h^2) balanced against rounding eps/h^k: the usual step
# choice, common practice; e.g. Nocedal & Wright, Numerical Optimization, section 8.1,
# from memory), times a safety factor of about 30:
# (jacobian, parameter_jacobian, second, third, jacobian_parameter_derivative).
DIFFERENCE_TOLERANCES = {
    False: (1e-9, 1e-9, 1e-6, 3e-5, 1e-6),  # no Jacobian: J has 1 level, B 2, C 3
    True: (1e-14, 1e-9, 1e-9, 1e-6, 1e-9),  # exact J: B has 1 level, C 2
}


@pytest.mark.parametrize("with_jacobian", [False, True])
def test_python_model_derivatives_match_exact_ones(with_jacobian):
    """Reference: the same model as expressions, differentiated exactly by sympy.diff."""
    spec = _python_spec(jacobian="models_for_tests:jacobian" if with_jacobian else None)
    model = build_model(spec)
    p = model.defaults
    assert model.states == ("x0", "x1", "x2")
    assert not model.exact_derivatives and not model.sparse and model.derivatives is None
    rng = np.random.default_rng(11)
    u, v, w = (_complex_vector(rng, 3) for _ in range(3))
    value, fx, fp, second, third, mixed = _sympy_reference(POINT, p, u, v, w)
    np.testing.assert_allclose(model.rhs(POINT, p), value, rtol=1e-14)
    pairs = (
        (model.jacobian(POINT, p), fx),
        (model.parameter_jacobian(POINT, p), fp),
        (model.second(POINT, p, v, w), second),
        (model.third(POINT, p, u, v, w), third),
        (model.jacobian_parameter_derivative(POINT, p, v), mixed),
    )
    for (actual, expected), tolerance in zip(
        pairs, DIFFERENCE_TOLERANCES[with_jacobian], strict=True
    ):
        assert actual.shape == expected.shape
        assert _relative(actual, expected) < tolerance


def test_python_model_states_and_observables():
    spec = _python_spec(states=("a1", "b1", "c1"), observables="models_for_tests:observables")
    model = build_model(spec)
    assert model.states == ("a1", "b1", "c1")
    assert model.observable_names == ("total", "scaled")
    assert model.observables(POINT, model.defaults) == pytest.approx(
        {"total": 2.1, "scaled": 1.2 * -0.4}
    )
    assert model.python_source == "models_for_tests:rhs"


def test_check_jacobian_flags_a_wrong_jacobian():
    good = build_model(_python_spec(jacobian="models_for_tests:jacobian"))
    check = check_jacobian(good, POINT, good.defaults)
    assert check.ok and check.max_relative_error < 1e-8
    wrong = build_model(_python_spec(jacobian="models_for_tests:wrong_jacobian"))
    check = check_jacobian(wrong, POINT, wrong.defaults)
    assert not check.ok
    assert check.max_relative_error > JACOBIAN_CHECK_TOLERANCE
    assert "models_for_tests:wrong_jacobian" in check.message
    assert "d f[x1] / d x0" in check.message


def _chain_spec(jacobian: str | None) -> PythonModelSpec:
    return PythonModelSpec(
        parameters=dict(models_for_tests.CHAIN_PARAMETERS),
        rhs="models_for_tests:chain_rhs",
        size=models_for_tests.CHAIN_SIZE,
        jacobian=jacobian,
    )


def test_sparse_jacobian_model():
    model = build_model(_chain_spec("models_for_tests:chain_jacobian"))
    assert model.sparse
    x = np.linspace(0.1, 0.9, models_for_tests.CHAIN_SIZE)
    p = model.defaults
    matrix = model.jacobian(x, p)
    assert scipy.sparse.issparse(matrix) and matrix.nnz == 3 * models_for_tests.CHAIN_SIZE - 2
    differences = build_model(_chain_spec(None))
    assert models_for_tests.CHAIN_SIZE > DEFAULT.finite_differences_dense_up_to
    assert differences.sparse
    assert _relative(jacobian_dense(model, x, p), jacobian_dense(differences, x, p)) < 1e-8
    assert check_jacobian(model, x, p).ok
    # Exchange and growth are at most quadratic: B(v, w) = -2 r v w componentwise
    # (elementary calculus on r x (1 - x)).
    rng = np.random.default_rng(3)
    v, w = _complex_vector(rng, x.size), _complex_vector(rng, x.size)
    assert _relative(model.second(x, p, v, w), -2.0 * p[1] * v * w) < 1e-7
    wrong = build_model(_chain_spec("models_for_tests:wrong_chain_jacobian"))
    check = check_jacobian(wrong, x, p)
    assert not check.ok and "random direction" in check.message


@pytest.mark.parametrize(
    ("changes", "key", "words"),
    [
        ({"rhs": "no_such_module_for_branchline:rhs"}, "model.python.rhs", "cannot import module"),
        ({"rhs": "models_for_tests:missing"}, "model.python.rhs", "has no attribute 'missing'"),
        ({"rhs": "models_for_tests:NOT_A_FUNCTION"}, "model.python.rhs", "is not a function"),
        ({"rhs": "models_for_tests.rhs"}, "model.python.rhs", "expected 'module:function'"),
        ({"rhs": "models_for_tests:short_rhs"}, "model.python.rhs", "shape (2,)"),
        (
            {"jacobian": "models_for_tests:wrong_shape_jacobian"},
            "model.python.jacobian",
            "shape (2, 3)",
        ),
        ({"observables": "models_for_tests:nothing"}, "model.python.observables", "no attribute"),
        ({"states": ("a", "b")}, "model.python.states", "size is 3"),
    ],
)
def test_python_model_errors_name_the_key(changes, key, words):
    with pytest.raises(ScanError) as caught:
        build_model(_python_spec(**changes), source="scan.toml")
    assert caught.value.key == key
    assert caught.value.source == "scan.toml"
    assert words in caught.value.problem


def test_modules_next_to_the_scan_file_are_found(tmp_path):
    (tmp_path / "branchline_neighbour_model.py").write_text(
        "def start(p):\n    return [p['a'], 2.0]\n"
    )
    (tmp_path / "branchline_broken_model.py").write_text("raise RuntimeError('boom')\n")
    scan = tmp_path / "scan.toml"
    scan.write_text("")
    before = list(sys.path)
    start = resolve_callable("branchline_neighbour_model:start", str(scan), "trace[1].start")
    assert start({"a": 4.0}) == [4.0, 2.0]
    assert sys.path == before
    with pytest.raises(ScanError) as caught:
        resolve_callable("branchline_broken_model:start", str(scan), "trace[1].start")
    assert "RuntimeError: boom" in caught.value.problem
    assert caught.value.key == "trace[1].start"
