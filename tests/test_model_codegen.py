"""Sparse code generation and the model cache of expression models.

References (outside the project):
- sympy: ``sympy.Matrix.jacobian`` and ``sympy.diff`` of the parsed equations,
  built densely (every entry, no structure used) and evaluated with
  ``sympy.lambdify`` on numpy: the reference for df/dx, df/dp, the second and
  third derivative tensors and d2f/dx dp, against which the entries generated
  only at structural nonzeros, once per equation template, are compared.
- The chain of Brusselator cells (Prigogine & Lefever, J. Chem. Phys. 48 (1968)
  1695) from ``tests/cell_chains.py``: its Jacobian has exactly 4 structural
  nonzeros in each row of an inner cell and 3 at the two end cells (the
  coupling of a path with no-flux ends; elementary counting).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
import scipy.sparse
import sympy as sp

from branchline import user_cache
from branchline.model import cache as model_cache
from branchline.model import expression_model
from branchline.model.build import build_model
from branchline.model.safe_code import (
    CodeRefused,
    compile_checked,
    math_namespace,
    numpy_namespace,
)
from branchline.scan.expressions import parse_expression
from branchline.scan.loader import ExpressionModelSpec
from cell_chains import brusselator_equations, cubic_equations

SRC = Path(__file__).resolve().parents[1] / "src"
# Double-precision code against sympy's own lambdified numpy code for the same
# derivatives: both round; a few ulps of the largest term.
TOLERANCE = 1e-12


@pytest.fixture(autouse=True)
def private_cache(tmp_path, monkeypatch):
    """Every test here has its own empty model cache."""
    folder = tmp_path / "cache"
    monkeypatch.setenv(user_cache.CACHE_VARIABLE, str(folder))
    return folder


def _chain(cells: int, kind: str = "brusselator") -> ExpressionModelSpec:
    if kind == "brusselator":
        return ExpressionModelSpec({"a": 2.0, "b": 4.0, "d": 0.3}, brusselator_equations(cells))
    return ExpressionModelSpec({"p": 0.2, "d": 0.3}, cubic_equations(cells))


def _reference(spec: ExpressionModelSpec):
    """Dense sympy derivatives of the parsed equations (no structure used)."""
    x = sp.symbols(list(spec.equations), real=True)
    p = sp.symbols(list(spec.parameters), real=True)
    names = {s.name: s for s in (*x, *p)}
    f = [
        parse_expression(text).xreplace(
            {s: names[s.name] for s in parse_expression(text).free_symbols}
        )
        for text in spec.equations.values()
    ]
    jacobian = sp.Matrix(f).jacobian(x)
    hessian = [[[sp.diff(fi, a, b) for b in x] for a in x] for fi in f]
    third = [[[[sp.diff(fi, a, b, c) for c in x] for b in x] for a in x] for fi in f]
    mixed = [[[sp.diff(fi, a, k) for k in p] for a in x] for fi in f]

    def numeric(table):
        function = sp.lambdify([x, p], table, modules="numpy")
        return lambda xv, pv: np.array(function(xv, pv), dtype=float)

    return {
        "jacobian": numeric(jacobian.tolist()),
        "parameters": numeric(sp.Matrix(f).jacobian(p).tolist()),
        "hessian": numeric(hessian),
        "third": numeric(third),
        "mixed": numeric(mixed),
        "pattern": np.array([[entry != 0 for entry in row] for row in jacobian.tolist()]),
    }


def _close(actual, expected):
    actual, expected = np.asarray(actual), np.asarray(expected)
    assert actual.shape == expected.shape
    scale = 1.0 + np.max(np.abs(expected))
    assert np.max(np.abs(actual - expected), initial=0.0) <= TOLERANCE * scale


@pytest.mark.parametrize(("cells", "kind"), [(5, "brusselator"), (6, "cubic")])
def test_sparse_entries_equal_dense_sympy_derivatives(cells, kind):
    """Reference: sympy.Matrix.jacobian / sympy.diff over every entry, lambdified."""
    spec = _chain(cells, kind)
    model = build_model(spec)
    reference = _reference(spec)
    rng = np.random.default_rng(cells)
    n, m = model.size, len(model.parameters)
    x = rng.uniform(0.3, 1.7, n)
    p = model.defaults
    u, v, w = (rng.standard_normal(n) + 1j * rng.standard_normal(n) for _ in range(3))
    jacobian = model.jacobian(x, p)
    _close(jacobian, reference["jacobian"](x, p))
    _close(model.parameter_jacobian(x, p), reference["parameters"](x, p))
    for k in range(m):
        fx, column = model.derivatives(x, p, k)
        _close(fx, reference["jacobian"](x, p))
        _close(column, reference["parameters"](x, p)[:, k])
    hessian, third = reference["hessian"](x, p), reference["third"](x, p)
    _close(model.second(x, p, v, w), np.einsum("ijk,j,k->i", hessian, v, w))
    _close(model.third(x, p, u, v, w), np.einsum("ijkl,j,k,l->i", third, u, v, w))
    _close(
        model.jacobian_parameter_derivative(x, p, v),
        np.einsum("ijk,j->ik", reference["mixed"](x, p), v),
    )
    # Broadcast form (what the boundary curves call): B(v_c, e_j) for all c, j at once.
    vectors = np.column_stack([v.real, w.real])
    stacked = model.second(x, p, vectors[:, :, None], np.eye(n)[:, None, :])
    _close(stacked, np.einsum("ijk,jc,kl->icl", hessian, vectors, np.eye(n)))
    # Code exists only for the structural nonzeros, and one template serves many rows.
    functions = model.jacobian.__self__
    pattern = np.zeros((n, n), dtype=bool)
    pattern[tuple(functions._jacobian.indices.T)] = True
    np.testing.assert_array_equal(pattern, reference["pattern"])
    assert functions.blocks.symbolic().calculus.template_count <= 6


def test_large_chain_is_sparse_with_the_counted_nonzeros():
    """300 states (150 cells): above the policy's threshold, so df/dx is scipy.sparse;
    4 nonzeros per row of an inner cell, 3 per row of an end cell (counting);
    values equal the dense assembly and sympy's derivatives of three sample rows."""
    cells = 150
    spec = _chain(cells)
    model = build_model(spec)
    assert model.sparse
    rng = np.random.default_rng(7)
    x = rng.uniform(0.3, 1.7, model.size)
    p = model.defaults
    matrix = model.jacobian(x, p)
    assert scipy.sparse.issparse(matrix) and matrix.format == "csc"
    assert matrix.nnz == 4 * (2 * cells) - 2 * 2
    # A trailing axis takes the numpy code and the dense assembly: same values up to
    # the rounding of numpy's against Python's float power.
    dense = model.jacobian(x[:, None], p)[:, :, 0]
    np.testing.assert_allclose(matrix.toarray(), dense, rtol=1e-15, atol=1e-15)
    states = sp.symbols(list(spec.equations), real=True)
    a, b, d = sp.symbols("a b d", real=True)
    names = {s.name: s for s in (*states, a, b, d)}
    values = dict(zip(states, x, strict=True)) | {a: p[0], b: p[1], d: p[2]}
    for row in (0, 151, 2 * cells - 1):
        text = list(spec.equations.values())[row]
        expression = parse_expression(text)
        expression = expression.xreplace({s: names[s.name] for s in expression.free_symbols})
        expected = [float(sp.diff(expression, s).evalf(subs=values)) for s in states]
        np.testing.assert_allclose(matrix[[row], :].toarray()[0], expected, rtol=1e-13, atol=1e-13)


def test_second_build_reads_the_cache_without_symbolic_work(private_cache, monkeypatch):
    spec = _chain(4)
    first = build_model(spec)
    x = np.linspace(0.5, 1.5, first.size)
    v = np.linspace(-1.0, 1.0, first.size)
    expected = (first.rhs(x, first.defaults), first.jacobian(x, first.defaults))
    expected_second = first.second(x, first.defaults, v, v)
    files = sorted(p.name for p in (private_cache / "models").iterdir())
    assert any(name.endswith(".rhs.json") for name in files)
    assert any(name.endswith(".second.json") for name in files)

    def refuse(*_):
        raise AssertionError("the cached model was derived again")

    monkeypatch.setattr(expression_model, "_Symbolic", refuse)
    second = build_model(spec)
    np.testing.assert_array_equal(second.rhs(x, second.defaults), expected[0])
    np.testing.assert_array_equal(second.jacobian(x, second.defaults), expected[1])
    np.testing.assert_array_equal(second.second(x, second.defaults, v, v), expected_second)


def test_cache_is_keyed_by_the_model_text_not_the_defaults(private_cache):
    spec = _chain(3)
    build_model(spec)
    key = model_cache.model_key(spec)
    assert model_cache.model_key(replace(spec, parameters={"a": 1.0, "b": 9.0, "d": 0.1})) == key
    changed = dict(spec.equations)
    changed["u0"] = changed["u0"] + " + 0.5"
    other = replace(spec, equations=changed)
    assert model_cache.model_key(other) != key
    model = build_model(other)
    x = np.ones(model.size)
    # The changed equation is computed, not read from the first model's entries.
    assert model.rhs(x, model.defaults)[0] == pytest.approx(
        build_model(spec).rhs(x, model.defaults)[0] + 0.5, abs=1e-14
    )
    keys = {name.split(".")[0] for name in os.listdir(private_cache / "models")}
    assert keys == {key, model_cache.model_key(other)}


def _entries(folder: Path) -> list[Path]:
    return sorted((folder / "models").glob("*.json"))


@pytest.mark.parametrize("damage", ["garbage", "truncated", "checksum", "hostile"])
def test_damaged_or_hostile_entries_are_ignored_and_rebuilt(private_cache, damage):
    spec = _chain(3)
    model = build_model(spec)
    x = np.linspace(0.4, 1.4, model.size)
    expected = model.jacobian(x, model.defaults)
    marker = private_cache / "ran"
    for path in _entries(private_cache):
        text = path.read_text()
        if damage == "garbage":
            path.write_text("not json at all {")
        elif damage == "truncated":
            path.write_text(text[: len(text) // 2])
        elif damage == "checksum":
            payload = json.loads(text)
            payload["body"]["safe"] = payload["body"]["safe"].replace("+", "-", 1)
            path.write_text(json.dumps(payload))
        else:  # a valid checksum, but code that would run something else
            body = json.loads(text)["body"]
            hostile = body["safe"].replace(
                "return (", f"open({str(marker)!r}, 'w')\n    return (", 1
            )
            body["safe"] = body["fast"] = hostile
            path.write_text(json.dumps({"checksum": user_cache.checksum(body), "body": body}))
    rebuilt = build_model(spec)
    np.testing.assert_array_equal(rebuilt.jacobian(x, rebuilt.defaults), expected)
    assert not marker.exists()
    # The entries were written again and are whole.
    for path in _entries(private_cache):
        if path.name.endswith((".rhs.json", ".jacobian.json")):
            payload = json.loads(path.read_text())
            assert "open(" not in payload["body"]["safe"]


def test_entries_writable_by_others_are_not_read(private_cache, monkeypatch):
    spec = _chain(3)
    build_model(spec)
    for path in _entries(private_cache):
        path.chmod(0o666)
    calls = []
    real = expression_model._Symbolic

    def counting(*args):
        calls.append(1)
        return real(*args)

    monkeypatch.setattr(expression_model, "_Symbolic", counting)
    build_model(spec)
    assert calls == [1]
    assert all((p.stat().st_mode & 0o077) == 0 for p in _entries(private_cache))


def test_cache_can_be_turned_off(tmp_path, monkeypatch):
    monkeypatch.setenv(user_cache.CACHE_VARIABLE, "off")
    assert user_cache.cache_folder() is None
    model = build_model(_chain(2))
    assert model.rhs(np.ones(4), model.defaults).shape == (4,)
    monkeypatch.delenv(user_cache.CACHE_VARIABLE)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    assert user_cache.cache_folder() == tmp_path / "xdg" / "branchline"


@pytest.mark.parametrize(
    "source",
    [
        "import os\ndef generated(x, p):\n    return (1.0, )\n",
        "def generated(x, p):\n    return (x.__class__, )\n",
        "def generated(x, p):\n    return (x[0], )\n",
        "def generated(x, p):\n    return (open('f'), )\n",
        "def generated(x, p):\n    return ('text', )\n",
        "def generated(x, p):\n    [a] = x\n    return (a, lambda: 0, )\n",
        "def generated(x, p, *rest):\n    return (1.0, )\n",
        "def generated(x, p):\n    y = 2\n    y = 3\n    return (y, )\n",
        "def generated(x, p):\n    return (q, )\n",
        "def generated(x, p):\n    return (1.0, 2.0, )\n",  # wrong count
    ],
)
def test_code_off_the_whitelist_is_refused(source):
    with pytest.raises(CodeRefused):
        compile_checked(source, numpy_namespace(), returns=1)


def test_integer_powers_in_code_run_as_floats():
    """An integer power that would never finish as exact integers overflows at once."""
    function = compile_checked(
        "def generated(x, p):\n    return (10**10**10, 2**3, )\n", math_namespace()
    )
    with pytest.raises(OverflowError):
        function([], [])
    function = compile_checked("def generated(x, p):\n    return (2**3, )\n", math_namespace())
    assert function([], []) == (8.0,)


def test_help_and_version_load_no_numerical_library():
    code = (
        "import sys\n"
        "from branchline.cli import main\n"
        "for argv in (['--help'], ['--version'], ['run', '--help']):\n"
        "    try:\n"
        "        main(argv)\n"
        "    except SystemExit:\n"
        "        pass\n"
        "heavy = [m for m in ('numpy', 'scipy', 'matplotlib', 'sympy', 'pandas') if m in sys.modules]\n"
        "print('LOADED', heavy)\n"
    )
    result = subprocess.run(
        [sys.executable, "-c", code],
        capture_output=True,
        text=True,
        env=dict(os.environ, PYTHONPATH=str(SRC)),
        check=True,
    )
    assert "LOADED []" in result.stdout


def test_thread_policy_respects_the_users_choice():
    from branchline.cli import BLAS_THREAD_VARIABLES, single_threaded_blas

    environment = {}
    assert single_threaded_blas(environment)
    assert all(environment[name] == "1" for name in BLAS_THREAD_VARIABLES)
    chosen = {"OMP_NUM_THREADS": "4"}
    assert not single_threaded_blas(chosen)
    assert chosen == {"OMP_NUM_THREADS": "4"}


def test_a_model_seen_before_loads_and_builds_without_sympy(private_cache):
    """The second process loads the demo scan and builds its model from the cache
    alone: sympy is never imported."""
    scan = Path(__file__).resolve().parents[1] / "scans" / "cooled_reactor.toml"
    code = (
        "import sys\n"
        "import numpy as np\n"
        "from branchline.scan.loader import load_scan\n"
        "from branchline.model.build import build_model\n"
        f"scan = load_scan({str(scan)!r})\n"
        "model = build_model(scan.model, scan.source)\n"
        "values = model.jacobian(np.array([2.0, 320.0]), model.defaults).ravel().tolist()\n"
        "print('SYMPY', 'sympy' in sys.modules, values)\n"
    )
    environment = dict(os.environ, PYTHONPATH=str(SRC))
    environment[user_cache.CACHE_VARIABLE] = str(private_cache)
    outputs = [
        subprocess.run(
            [sys.executable, "-c", code],
            capture_output=True,
            text=True,
            env=environment,
            check=True,
        ).stdout
        for _ in range(2)
    ]
    assert "SYMPY True" in outputs[0]
    assert "SYMPY False" in outputs[1]
    assert outputs[0].split("True")[1] == outputs[1].split("False")[1]


def test_forms_broadcast_vectors_of_different_shapes():
    """B(v, I) with v a vector and I the identity gives the matrix B(v, .) (column k is
    B(v, e_k)), as the boundary curves call it; reference: sympy's Hessian."""
    spec = _chain(3)
    model = build_model(spec)
    reference = _reference(spec)
    x = np.linspace(0.4, 1.6, model.size)
    v = np.linspace(-1.0, 2.0, model.size)
    matrix = model.second(x, model.defaults, v, np.eye(model.size))
    _close(matrix, np.einsum("ijk,j->ik", reference["hessian"](x, model.defaults), v))
