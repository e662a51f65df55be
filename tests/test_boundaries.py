"""Two-parameter boundaries: fold and Hopf curves against closed forms.

Sources: the cusp normal form x' = a + b x - x^3, whose fold curve is
27 a^2 = 4 b^3 with the cusp at the origin (Kuznetsov, Elements of Applied
Bifurcation Theory, 3rd ed., section 8.2); the Bogdanov-Takens normal form
x' = y, y' = b1 + b2 x + x^2 - x y, with the fold curve b1 = b2^2 / 4, the Hopf
curve b1 = 0, b2 < 0 (omega^2 = -b2) and the Bogdanov-Takens point at the
origin, where the Hopf curve goes on as neutral saddles (section 8.4; the
curves follow from the equilibria x = (-b2 +- sqrt(b2^2 - 4 b1)) / 2 and the
Jacobian's trace -x and determinant -(b2 + 2 x), derived by hand).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

import branchline
from branchline.errors import ScanError

sys.path.insert(0, str(Path(__file__).parent))

import boundary_models

CUSP = boundary_models.cusp_fold_scan(a=0.0, x=1.0, b_low=-1.0)

TAKENS = {
    "model": {
        "parameters": {"b1": 0.0, "b2": -1.0},
        "equations": {"x": "y", "y": "b1 + b2*x + x^2 - x*y"},
    },
    "trace": [{"name": "line", "vary": "b1", "interval": [-1.0, 1.0], "start": {"x": 0, "y": 0}}],
    "boundary": [
        {
            "name": kind,
            "from": "line",
            "kind": kind,
            "second": "b2",
            "window": {"b1": [-1.0, 1.0], "b2": [-2.0, 1.0]},
        }
        for kind in ("hopf", "fold")
    ],
}


@pytest.fixture(scope="module")
def cusp():
    return branchline.run(CUSP)


@pytest.fixture(scope="module")
def takens():
    return branchline.run(TAKENS)


def test_cusp_fold_curve_is_27a2_equals_4b3(cusp):
    frame = cusp.boundaries_frame()
    assert list(frame.columns) == ["boundary", "kind", "step", "a", "b", "x", "frequency"]
    a, b, x = frame["a"].to_numpy(), frame["b"].to_numpy(), frame["x"].to_numpy()
    # on the fold curve b = 3 x^2 and a = -2 x^3, hence 27 a^2 = 4 b^3 (Kuznetsov, sec. 8.2)
    assert np.max(np.abs(b - 3 * x**2)) < 1e-8
    assert np.max(np.abs(a + 2 * x**3)) < 1e-8
    assert np.max(np.abs(27 * a**2 - 4 * b**3)) < 1e-8
    # both sides end exactly on the a-window's edges
    assert sorted([a[0], a[-1]]) == [-1.0, 1.0]
    assert cusp.boundaries[0].status == "done"
    assert frame["frequency"].isna().all()
    assert len(frame) > 20 and x.min() < -0.5 and x.max() > 0.5  # through the cusp


def test_cusp_point_at_origin(cusp):
    cusps = [e for e in cusp.events if e.kind == "cusp"]
    assert len(cusps) == 1
    event = cusps[0]
    assert event.trace == "folds"
    assert abs(event.value) < 1e-8 and abs(event.parameters[1]) < 1e-8
    assert abs(event.state[0]) < 1e-8
    row = cusp.events_frame().query("kind == 'cusp'").iloc[0]
    assert row["trace"] == "folds" and abs(row["a"]) < 1e-8 and abs(row["b"]) < 1e-8


def test_hopf_curve_of_bogdanov_takens_normal_form(takens):
    frame = takens.boundaries_frame().query("boundary == 'hopf'")
    b1, b2, omega = frame["b1"].to_numpy(), frame["b2"].to_numpy(), frame["frequency"].to_numpy()
    # Hopf curve b1 = 0, omega^2 = -b2 (Kuznetsov, sec. 8.4)
    assert np.max(np.abs(b1)) < 1e-8
    assert np.max(np.abs(omega**2 + b2)) < 1e-8
    assert b2[0] == -2.0  # the window's edge
    # it ends exactly at the Bogdanov-Takens point, not continued as neutral saddles
    assert abs(b2[-1]) < 1e-8 and np.all(b2 <= 1e-8)
    boundary = takens.boundaries[0]
    assert boundary.status == "done"
    assert "Bogdanov-Takens" in boundary.message and "neutral saddles" in boundary.message


def test_fold_curve_of_bogdanov_takens_normal_form(takens):
    frame = takens.boundaries_frame().query("boundary == 'fold'")
    b1, b2 = frame["b1"].to_numpy(), frame["b2"].to_numpy()
    assert np.max(np.abs(b1 - b2**2 / 4)) < 1e-8  # fold curve b1 = b2^2/4 (sec. 8.4)
    assert np.isclose(b2.max(), 1.0, rtol=0, atol=1e-12) or np.isclose(b1.max(), 1.0)


def test_bogdanov_takens_point_found_on_both_curves(takens):
    points = [e for e in takens.events if e.kind == "bogdanov_takens"]
    assert sorted(e.trace for e in points) == ["fold", "hopf"]
    for event in points:
        assert np.max(np.abs(event.parameters)) < 1e-8
        assert np.max(np.abs(event.state)) < 1e-8
    rows = takens.events_frame().query("kind == 'bogdanov_takens'")
    assert rows[["b1", "b2"]].notna().all().all()


def test_boundaries_written(tmp_path, takens):
    folder = branchline.write_results(takens, tmp_path / "out")
    text = (folder / "boundaries.csv").read_text().splitlines()
    assert text[0] == "boundary,kind,step,b1,b2,x,y,frequency"
    info = branchline.read_results(folder).info
    assert [b["name"] for b in info["boundaries"]] == ["hopf", "fold"]


def test_sparse_python_model_fold_curve():
    """A 320-state model with a sparse Jacobian: the curve runs on sparse LU. Started by hand
    at the analytic fold x_i = 1/sqrt(3), a = -2/(3 sqrt(3)), b = 1 (the trace of so large a
    model is slow and is tested elsewhere)."""
    import boundary_models
    from branchline.model.build import build_model
    from branchline.problems.boundary import trace_boundary
    from branchline.results.records import Event
    from branchline.scan.loader import PythonModelSpec, StepSettings

    model = build_model(
        PythonModelSpec(
            parameters={"a": 0.0, "b": 1.0},
            rhs="boundary_models:chain_rhs",
            jacobian="boundary_models:chain_jacobian",
            size=boundary_models.CHAIN_SIZE,
        )
    )
    x0 = 1.0 / np.sqrt(3.0)
    fold = Event(
        trace="line",
        kind="fold",
        vary="a",
        value=-2 * x0**3,
        state=np.full(boundary_models.CHAIN_SIZE, x0),
        parameters=np.array([-2 * x0**3, 1.0]),
        arclength=0.0,
    )
    steps = StepSettings(initial=0.1, smallest=1e-8, largest=2.0, max_points=200)
    window = {"a": (-1.0, 1.0), "b": (0.5, 2.0)}
    outcome = trace_boundary(model, "folds", fold, "b", window, steps)
    boundary = outcome.boundary
    assert model.sparse and boundary.status == "done", boundary.message
    a, b, x = boundary.first_values, boundary.second_values, boundary.states[:, 0]
    assert np.max(np.abs(b - 3 * x**2)) < 1e-8 and np.max(np.abs(a + 2 * x**3)) < 1e-8
    assert np.max(np.abs(boundary.states - x[:, None])) < 1e-8  # x_i = x0 on the chain
    # one side leaves through a = -1 (at b = 3^(1/3) 2^(-2/3)), the other through b = 0.5
    assert b.min() == 0.5 and a.min() == -1.0
    # the fold moves with b as da/db = -x (a = x^3 - b x at f_x = 0), here on sparse LU
    from branchline.events.sensitivities import event_sensitivities

    moved = event_sensitivities(model, fold)["b"]["derivative"]
    assert abs(moved - (-x0)) < 1e-8


@pytest.mark.parametrize(
    ("change", "key", "words"),
    [
        (lambda b: b.pop("window"), "boundary[1].window", "missing"),
        (lambda b: b.update({"from": "lin"}), "boundary[1].from", "did you mean 'line'"),
        (lambda b: b.update({"second": "a"}), "boundary[1].second", "trace's own parameter"),
        (lambda b: b.update({"kind": "cusp"}), "boundary[1].kind", '"fold" or "hopf"'),
        (lambda b: b.update({"window": {"a": [-1, 1]}}), "boundary[1].window.b", "missing"),
        (
            lambda b: b.update({"window": {"a": [1, -1], "b": [0, 1]}}),
            "boundary[1].window.a",
            "low < high",
        ),
        (lambda b: b.update({"name": "line"}), "boundary[1].name", "already the name"),
        (lambda b: b.update({"index": 0}), "boundary[1].index", "positive whole number"),
        (lambda b: b.update({"colour": 1}), "boundary[1].colour", "unknown key"),
    ],
)
def test_bad_boundary_is_refused_naming_file_and_key(change, key, words):
    import copy

    data = copy.deepcopy(CUSP)
    change(data["boundary"][0])
    with pytest.raises(ScanError) as err:
        branchline.scan_from_dict(data, "plant.toml")
    text = str(err.value)
    assert "plant.toml" in text and key in text and words in text


def test_missing_start_event_is_a_warning():
    import copy

    data = copy.deepcopy(CUSP)
    data["boundary"][0]["index"] = 3
    result = branchline.run(data)
    assert result.boundaries == () and result.status == "done"
    assert any("no fold point" in w for w in result.warnings)


def _switched(first_kind: str, then: str) -> branchline.RunResult:
    import copy

    data = copy.deepcopy(TAKENS)
    data["boundary"] = [
        {**next(b for b in TAKENS["boundary"] if b["kind"] == first_kind), "name": "given"},
        {"name": "switched", "from": "given", "kind": then},
    ]
    return branchline.run(data, confirm=False)


def test_hopf_curve_started_at_the_bogdanov_takens_point_of_a_fold_curve():
    """From the Bogdanov-Takens point found on the fold curve b1 = b2^2/4, the Hopf curve
    b1 = 0, omega^2 = -b2 (Kuznetsov, sec. 8.4) is started and followed to the window's
    edge; traced back it ends at the Bogdanov-Takens point again."""
    result = _switched("fold", "hopf")
    assert result.warnings == ()
    switched = next(b for b in result.boundaries if b.name == "switched")
    assert switched.kind == "hopf" and switched.source == "given bogdanov_takens 1"
    frame = result.boundaries_frame().query("boundary == 'switched'")
    b1, b2, omega = frame["b1"].to_numpy(), frame["b2"].to_numpy(), frame["frequency"].to_numpy()
    assert np.max(np.abs(b1)) < 1e-8 and np.max(np.abs(omega**2 + b2)) < 1e-8
    assert b2.min() == -2.0 and abs(b2.max()) < 1e-8  # from the window's edge to the point
    ends = [e for e in result.events if e.trace == "switched" and e.kind == "bogdanov_takens"]
    assert len(ends) == 1 and np.max(np.abs(ends[0].parameters)) < 1e-8


def test_fold_curve_started_at_the_bogdanov_takens_point_of_a_hopf_curve():
    result = _switched("hopf", "fold")
    frame = result.boundaries_frame().query("boundary == 'switched'")
    b1, b2 = frame["b1"].to_numpy(), frame["b2"].to_numpy()
    assert np.max(np.abs(b1 - b2**2 / 4)) < 1e-8  # the fold curve (Kuznetsov, sec. 8.4)
    assert b2.min() < -1.9 and b2.max() == 1.0  # both sides of the point, to the edges
    report = result.report()
    assert "is followed as switched" in report


def test_points_that_start_another_curve_are_listed_in_the_report(takens):
    report = takens.report()
    assert "Curves through these points:" in report
    assert "the fold curve through the Bogdanov-Takens point of hopf" in report


@pytest.mark.parametrize(
    ("change", "key", "words"),
    [
        ({"kind": "fold"}, "boundary[2].kind", 'kind = "hopf"'),
        ({"from": "fold"}, "boundary[2].from", "did you mean 'folds'"),
        ({"second": "a"}, "boundary[2].second", "trace's own parameter"),
        ({"window": {"a": [-1, 1]}}, "boundary[2].window.b", "missing"),
    ],
)
def test_bad_boundary_from_a_boundary_is_refused(change, key, words):
    import copy

    data = copy.deepcopy(CUSP)
    data["boundary"].append({"name": "other", "from": "folds", "kind": "hopf", **change})
    with pytest.raises(ScanError) as err:
        branchline.scan_from_dict(data, "plant.toml")
    assert key in str(err.value) and words in str(err.value)


@pytest.mark.parametrize("size", [3, 30])  # the dense table (small models) and the entries
def test_second_derivative_entries_contract_like_sympy(size):
    """The boundary curves' exact gradients (``Model.second_entries``) against second
    derivatives taken by sympy itself, independently of branchline's code generation."""
    import sympy as sp

    from branchline.model.build import build_model
    from branchline.scan.loader import ExpressionModelSpec

    equations = {"x0": "a*x0*x1 - sin(x1)*b"}
    for i in range(1, size):
        equations[f"x{i}"] = f"x{i - 1}^2*b - exp(a*x{i}) + x{i}*x{(i + 1) % size}*a^2"
    model = build_model(ExpressionModelSpec(parameters={"a": 0.3, "b": 1.2}, equations=equations))
    entries = model.second_entries()
    assert entries.dense == (size <= entries.DENSE_UP_TO)
    rng = np.random.default_rng(7)
    x, p = rng.uniform(-1.0, 1.0, size), np.array([0.3, 1.2])
    terms = [(rng.normal(size=(size, 2)), rng.normal(size=(size, 2))) for _ in range(2)]
    d_x, d_p = entries.contract(x, p, terms)

    symbols = sp.symbols(f"x0:{size}")
    a, b = sp.symbols("a b")
    f = [a * symbols[0] * symbols[1] - sp.sin(symbols[1]) * b]
    f += [
        symbols[i - 1] ** 2 * b
        - sp.exp(a * symbols[i])
        + symbols[i] * symbols[(i + 1) % size] * a**2
        for i in range(1, size)
    ]
    values = {**dict(zip(symbols, x, strict=True)), a: p[0], b: p[1]}
    jacobian = sp.Matrix(f).jacobian(symbols)
    expected_x = np.zeros((size, 2))
    expected_p = np.zeros((2, 2))
    for left, right in terms:
        for c in range(2):
            form = (sp.Matrix(left[:, c]).T * jacobian * sp.Matrix(right[:, c]))[0]
            expected_x[:, c] += [float(sp.diff(form, s).subs(values)) for s in symbols]
            expected_p[:, c] += [float(sp.diff(form, q).subs(values)) for q in (a, b)]
    np.testing.assert_allclose(d_x, expected_x, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(d_p, expected_p, rtol=1e-12, atol=1e-12)
    if entries.dense:
        u, v = rng.normal(size=size) + 1j * rng.normal(size=size), rng.normal(size=size)
        form = entries.bilinear(x, p)
        np.testing.assert_allclose(form(u, v), model.second(x, p, u, v), rtol=1e-12, atol=1e-12)


LORENZ = {
    "model": {
        "parameters": {"rho": 20.0, "sigma": 10.0, "beta": 8.0 / 3.0},
        "equations": {"x": "sigma*(y - x)", "y": "x*(rho - z) - y", "z": "x*y - beta*z"},
    },
    "trace": [
        {
            "name": "line",
            "vary": "rho",
            "interval": [1.5, 40.0],
            "start": {"x": float(np.sqrt(8.0 / 3.0 * 19.0)), "y": 0.0, "z": 19.0},
        }
    ],
    "boundary": [
        {
            "name": "onset",
            "from": "line",
            "kind": "hopf",
            "second": "sigma",
            "window": {"rho": [1.5, 60.0], "sigma": [5.0, 20.0]},
        }
    ],
}
LORENZ["trace"][0]["start"]["y"] = LORENZ["trace"][0]["start"]["x"]


def test_hopf_curve_of_the_lorenz_equations_and_its_exact_jacobian():
    """The Hopf curve of the nontrivial equilibria of the Lorenz equations (Lorenz,
    "Deterministic nonperiodic flow", J. Atmos. Sci. 20, 1963): with the characteristic
    polynomial l^3 + (sigma + beta + 1) l^2 + beta (sigma + rho) l + 2 beta sigma (rho - 1)
    there, a pair +-i omega needs a2 a1 = a0, i.e. rho = sigma (sigma + beta + 3) /
    (sigma - beta - 1), and omega^2 = a1 = beta (sigma + rho) (derived by hand from the
    Routh-Hurwitz condition; the formula for rho is the one in Sparrow, The Lorenz
    Equations, 1982, from memory). The small-model fast path of the Hopf curve's
    evaluation must agree with the general one to rounding and with differences."""
    from branchline.model.build import build_model
    from branchline.problems.hopf_curve import HopfCurve
    from branchline.scan.loader import ExpressionModelSpec

    result = branchline.run(LORENZ)
    frame = result.boundaries_frame()
    rho, sigma = frame["rho"].to_numpy(), frame["sigma"].to_numpy()
    beta = 8.0 / 3.0
    assert len(frame) > 20 and sigma.min() == 5.0 and sigma.max() == 20.0  # edge to edge
    expected = sigma * (sigma + beta + 3.0) / (sigma - beta - 1.0)
    assert np.max(np.abs(rho / expected - 1.0)) < 1e-9
    omega_squared = frame["frequency"].to_numpy() ** 2
    assert np.max(np.abs(omega_squared / (beta * (sigma + rho)) - 1.0)) < 1e-9

    model = build_model(ExpressionModelSpec(**LORENZ["model"]))
    row = frame.iloc[len(frame) // 3]
    states = row[["x", "y", "z"]].to_numpy(dtype=float)
    u = np.concatenate([states, [row["sigma"], row["frequency"] ** 2, row["rho"]]])
    curve = HopfCurve(model, 0, 1, model.defaults.copy(), u)
    u = u + 1e-3 * np.array([1.0, -2.0, 0.5, 0.3, -0.7, 1.1])  # off the curve: G != 0
    fast_values, fast_jacobian = curve.evaluate(u)
    assert curve._fused  # the small-model path was taken
    curve._fused, curve._last_parts = (), None
    values, jacobian = curve.evaluate(u)
    np.testing.assert_allclose(fast_values, values, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(fast_jacobian, jacobian, rtol=1e-12, atol=1e-13)
    step = 1e-6
    for k in range(u.size):  # central differences of the residual, column by column
        shift = np.zeros(u.size)
        shift[k] = step
        column = (curve.residual(u + shift) - curve.residual(u - shift)) / (2.0 * step)
        np.testing.assert_allclose(fast_jacobian[:, k], column, rtol=1e-6, atol=1e-7)
