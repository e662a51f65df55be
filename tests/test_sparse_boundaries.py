"""Boundary curves of large sparse models: the complex bordered Hopf curve, the fold
curve, their codimension-two points, and no n x n dense array.

Models (all with closed-form curves; chains of identical cells coupled by diffusion,
whose uniform mode is the single cell, tests/cell_chains.py and
tests/boundary_models.py):

- the reaction-diffusion Brusselator of tests/test_sparse_eigen.py (Prigogine &
  Lefever, "Symmetry breaking instabilities in dissipative systems II", J. Chem.
  Phys. 48, 1968): the uniform state (a, b / a) has its Hopf point at b = 1 + a^2
  with frequency a (trace zero, determinant a^2 of the cell's linearization);
- cusp cells x' = a + b x - x^3: the uniform mode's fold curve is the cusp's,
  27 a^2 = 4 b^3, with the cusp at a = b = 0 (Kuznetsov, Elements of Applied
  Bifurcation Theory, 3rd ed., section 8.2);
- Bautin cells z' = (beta1 + i) z + beta2 z |z|^2 - z |z|^4 (Kuznetsov, section
  8.3): the Hopf curve beta1 = 0 with l1 = beta2 per cell and the Bautin point at
  beta1 = beta2 = 0;
- Bogdanov-Takens cells x' = y, y' = b1 + b2 x + x^2 - x y (Kuznetsov, section
  8.4): the fold curve b1 = b2^2 / 4, the Hopf curve b1 = 0, b2 < 0 with
  omega^2 = -b2, meeting at the Bogdanov-Takens point b1 = b2 = 0.

On the uniform mode of N cells the eigenvectors are the cell's spread evenly,
q = q_cell / sqrt(N) per cell (and likewise the adjoint), so the cubic terms of
the normal form scale as N * N^(-1/2) * N^(-3/2): l1 of the chain is the cell's
divided by N (and l2 the cell's divided by N^2; derived by hand from the
invariant formula, Kuznetsov section 3.5).
"""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp

from branchline.model.build import build_model
from branchline.problems.boundary import curve_class, trace_boundary
from branchline.problems.boundary_switching import start_event
from branchline.problems.sparse_hopf_curve import SparseHopfCurve
from branchline.results.records import Event
from branchline.scan.loader import PythonModelSpec, StepSettings
from memory_cap import run_under_memory_cap
from test_sparse_eigen import brusselator_model, uniform_state

NODES = 1000  # 2,000 states


def hopf_event(model, vary: str, value: float, state, frequency: float) -> Event:
    return Event(
        trace="line",
        kind="hopf",
        vary=vary,
        value=value,
        state=np.asarray(state, dtype=float),
        parameters=model.defaults.copy(),
        arclength=0.0,
        frequency=frequency,
    )


# ---------------------------------------------------------------------------
# the Brusselator's Hopf curve in (a, b)


@pytest.fixture(scope="module")
def brusselator_curve():
    model = brusselator_model(NODES, 2.0)  # a = 1: the Hopf point b = 2, omega = 1
    event = hopf_event(model, "b", 2.0, uniform_state(NODES, 2.0), 1.0)
    steps = StepSettings(initial=0.5, smallest=1e-6, largest=5.0, max_points=200)
    window = {"b": (1.0, 5.0), "a": (0.5, 1.5)}
    return model, trace_boundary(model, "onset", event, "a", window, steps)


def test_hopf_curve_of_the_2000_state_brusselator_is_b_equals_1_plus_a2(brusselator_curve):
    model, outcome = brusselator_curve
    assert curve_class(model, "hopf") is SparseHopfCurve  # 2,000 states > 300
    boundary = outcome.boundary
    assert boundary.status == "done", boundary.message
    a, b = boundary.second_values, boundary.first_values
    assert len(a) > 10 and a.min() == 0.5 and a.max() == 1.5  # edge to edge
    # b = 1 + a^2 and omega = a (Prigogine & Lefever 1968, the uniform mode)
    np.testing.assert_allclose(b, 1.0 + a * a, rtol=0.0, atol=1e-10)
    np.testing.assert_allclose(boundary.frequency, a, rtol=0.0, atol=1e-10)
    for row in range(len(a)):  # every point on the uniform state (a, b / a)
        np.testing.assert_allclose(
            boundary.states[row, :NODES], a[row], rtol=0.0, atol=1e-10
        )
        np.testing.assert_allclose(
            boundary.states[row, NODES:], b[row] / a[row], rtol=0.0, atol=1e-10
        )


def cell_lyapunov(a: float) -> float:
    """l1 of the single Brusselator cell at its Hopf point b = 1 + a^2, in the contract's
    scaling, from the planar formula (Guckenheimer & Holmes, Nonlinear Oscillations,
    Dynamical Systems, and Bifurcations of Vector Fields, eq. (3.4.11)): the cell is put
    in the coordinates (xi, eta) of x - x0 = 2 Re((xi + i eta) q), <q, q> = 1/2, where
    its linear part is [[0, -omega], [omega, 0]] and r = |xi + i eta| is the contract's
    amplitude; then l1 = a_GH / omega. Derivatives by sympy."""
    u, v, xi, eta = sp.symbols("u v xi eta", real=True)
    a_s = sp.Float(a, 30)
    b = 1 + a_s**2
    f = [a_s - (b + 1) * u + u**2 * v, b * u - u**2 * v]
    x0 = {u: a_s, v: b / a_s}
    jacobian = np.array(sp.Matrix(f).jacobian([u, v]).subs(x0), dtype=float)
    values, vectors = np.linalg.eig(jacobian)
    k = int(np.argmax(values.imag))
    omega = float(values[k].imag)
    q = vectors[:, k] / np.sqrt(2.0 * np.vdot(vectors[:, k], vectors[:, k]).real)
    t = np.column_stack([2.0 * q.real, -2.0 * q.imag])
    assert np.allclose(np.linalg.solve(t, jacobian @ t), [[0, -omega], [omega, 0]])
    t_s = sp.Matrix(t.tolist())
    moved = {u: x0[u] + t_s[0, 0] * xi + t_s[0, 1] * eta, v: x0[v] + t_s[1, 0] * xi + t_s[1, 1] * eta}
    field = t_s.inv() * sp.Matrix([e.subs(moved, simultaneous=True) for e in f])
    g1 = sp.expand(field[0] + omega * eta)  # the nonlinear parts f, g of (3.4.10)
    g2 = sp.expand(field[1] - omega * xi)
    at0 = {xi: 0, eta: 0}

    def d(expr, *variables):
        return float(sp.diff(expr, *variables).subs(at0))

    a_gh = (
        d(g1, xi, xi, xi) + d(g1, xi, eta, eta) + d(g2, xi, xi, eta) + d(g2, eta, eta, eta)
    ) / 16.0 + (
        d(g1, xi, eta) * (d(g1, xi, xi) + d(g1, eta, eta))
        - d(g2, xi, eta) * (d(g2, xi, xi) + d(g2, eta, eta))
        - d(g1, xi, xi) * d(g2, xi, xi)
        + d(g1, eta, eta) * d(g2, eta, eta)
    ) / (16.0 * omega)
    return a_gh / omega


def test_l1_of_the_uniform_mode_is_the_cells_divided_by_n(brusselator_curve):
    model, outcome = brusselator_curve
    boundary = outcome.boundary
    problem = SparseHopfCurve(
        model,
        model.parameter_index("b"),
        model.parameter_index("a"),
        model.defaults,
        np.concatenate([boundary.states[0], [boundary.second_values[0], boundary.frequency[0],
                                             boundary.first_values[0]]]),
    )
    for row in (0, len(boundary.second_values) // 2, len(boundary.second_values) - 1):
        u = np.concatenate(
            [
                boundary.states[row],
                [boundary.second_values[row], boundary.frequency[row], boundary.first_values[row]],
            ]
        )
        problem.reset_borders(u)
        cell = cell_lyapunov(float(boundary.second_values[row]))
        assert cell < 0.0  # supercritical
        assert problem.lyapunov(u) == pytest.approx(cell / NODES, rel=1e-6)


# ---------------------------------------------------------------------------
# a fold curve with its cusp, and a Hopf curve with its Bautin point, on chains


def python_model(parameters: dict, rhs: str, size: int, forms: bool = False):
    """A chain of tests/boundary_models.py; ``forms``: with its B and C functions."""
    extra = {}
    if forms:
        extra = {
            "second_derivative": f"boundary_models:{rhs}_second",
            "third_derivative": f"boundary_models:{rhs}_third",
        }
    return build_model(
        PythonModelSpec(
            parameters=parameters,
            rhs=f"boundary_models:{rhs}_rhs",
            jacobian=f"boundary_models:{rhs}_jacobian",
            size=size,
            **extra,
        )
    )


CUSP_CELLS = 2000


def test_fold_curve_of_a_chain_of_cusp_cells_and_its_cusp():
    model = python_model({"a": 0.0, "b": 1.0, "d": 0.5}, "cusp_cells", CUSP_CELLS)
    x0 = 1.0 / np.sqrt(3.0)  # the fold of the cell at b = 1: b = 3 x^2, a = -2 x^3
    fold = Event(
        trace="line",
        kind="fold",
        vary="a",
        value=-2.0 * x0**3,
        state=np.full(CUSP_CELLS, x0),
        parameters=np.array([-2.0 * x0**3, 1.0, 0.5]),
        arclength=0.0,
    )
    steps = StepSettings(initial=1.0, smallest=1e-8, largest=20.0, max_points=200)
    window = {"a": (-1.0, 1.0), "b": (-1.0, 2.0)}
    outcome = trace_boundary(model, "folds", fold, "b", window, steps)
    boundary = outcome.boundary
    assert boundary.status == "done", boundary.message
    a, b, x = boundary.first_values, boundary.second_values, boundary.states[:, 0]
    # on the fold curve b = 3 x^2, a = -2 x^3, so 27 a^2 = 4 b^3 (Kuznetsov, sec. 8.2);
    # the corrector's tolerance is relative to |u| (about 30 here), hence 1e-9
    np.testing.assert_allclose(b, 3.0 * x * x, rtol=0.0, atol=1e-9)
    np.testing.assert_allclose(a, -2.0 * x**3, rtol=0.0, atol=1e-9)
    np.testing.assert_allclose(27.0 * a * a, 4.0 * b**3, rtol=0.0, atol=1e-8)
    assert np.max(np.abs(boundary.states - x[:, None])) < 1e-9  # uniform
    assert x.min() < -0.5 and x.max() > 0.5  # through the cusp
    (cusp,) = [e for e in outcome.events if e.kind == "cusp"]
    assert "not refined" not in cusp.note
    assert abs(cusp.value) < 1e-10 and abs(cusp.parameters[1]) < 1e-10  # a = b = 0
    assert np.max(np.abs(cusp.state)) < 1e-10


BAUTIN_CELLS = 160  # 320 states


def test_bautin_point_on_the_hopf_curve_of_a_chain():
    model = python_model(
        {"beta1": 0.0, "beta2": -0.5, "d": 0.3}, "bautin_cells", 2 * BAUTIN_CELLS, forms=True
    )
    assert curve_class(model, "hopf") is SparseHopfCurve
    event = hopf_event(model, "beta1", 0.0, np.zeros(2 * BAUTIN_CELLS), 1.0)
    steps = StepSettings(initial=0.1, smallest=1e-8, largest=0.2, max_points=100)
    window = {"beta1": (-1.0, 1.0), "beta2": (-0.5, 0.5)}
    outcome = trace_boundary(model, "onset", event, "beta2", window, steps)
    boundary = outcome.boundary
    assert boundary.status == "done", boundary.message
    # the Hopf curve beta1 = 0, omega = 1 (Kuznetsov, sec. 8.3)
    assert np.max(np.abs(boundary.first_values)) < 1e-12
    np.testing.assert_allclose(boundary.frequency, 1.0, rtol=0.0, atol=1e-12)
    (bautin,) = [e for e in outcome.events if e.kind == "bautin"]
    assert "not refined" not in bautin.note
    # beta1 = beta2 = 0 at the Bautin point; l2 = -1 per cell, -1 / N^2 for the chain
    assert abs(bautin.value) < 1e-10 and abs(bautin.details["second_value"]) < 1e-10
    # (l2 needs the fourth and fifth derivatives: central differences of the exact
    # third, branchline.events.hopf_coefficients, good to about 1e-8 relative)
    assert bautin.details["second_lyapunov"] == pytest.approx(-1.0 / BAUTIN_CELLS**2, rel=1e-6)


TAKENS_CELLS = 200  # 400 states


def test_bogdanov_takens_point_of_a_chain_starts_its_sparse_hopf_curve():
    model = python_model({"b1": 0.25, "b2": -1.0, "d": 0.2}, "takens_cells", 2 * TAKENS_CELLS)
    # the fold of the cell at b2 = -1: the double root x = 1/2 of b1 + b2 x + x^2, b1 = 1/4
    state = np.concatenate([np.full(TAKENS_CELLS, 0.5), np.zeros(TAKENS_CELLS)])
    fold = Event(
        trace="line",
        kind="fold",
        vary="b1",
        value=0.25,
        state=state,
        parameters=model.defaults.copy(),
        arclength=0.0,
    )
    steps = StepSettings(initial=0.5, smallest=1e-8, largest=2.0, max_points=200)
    window = {"b1": (-1.0, 1.0), "b2": (-2.0, 1.0)}
    folds = trace_boundary(model, "fold", fold, "b2", window, steps)
    b1, b2 = folds.boundary.first_values, folds.boundary.second_values
    assert folds.boundary.status == "done", folds.boundary.message
    np.testing.assert_allclose(b1, b2 * b2 / 4.0, rtol=0.0, atol=1e-10)  # Kuznetsov, sec. 8.4
    (point,) = [e for e in folds.events if e.kind == "bogdanov_takens"]
    assert "not refined" not in point.note
    assert np.max(np.abs(point.parameters[:2])) < 1e-10 and np.max(np.abs(point.state)) < 1e-10
    # the Hopf curve through it: started off the point on the null spaces of A^2
    # (shift-invert Arnoldi), then followed on the complex bordered system
    start, why = start_event(model, point, "hopf", "b2", 0.5)
    assert start is not None, why
    assert curve_class(model, "hopf") is SparseHopfCurve
    hopf = trace_boundary(model, "hopf", start, "b2", window, steps)
    boundary = hopf.boundary
    assert boundary.status == "done", boundary.message
    assert "Bogdanov-Takens" in boundary.message and boundary.second_values.min() == -2.0
    assert np.max(np.abs(boundary.first_values)) < 1e-12  # b1 = 0
    # omega^2 = -b2; the end row is the Bogdanov-Takens point located at omega = 0,
    # where the complex bordered system is singular (Im g is odd in omega for real
    # borders), so it is placed to about 1e-9 only
    inner = boundary.second_values < -1e-3
    np.testing.assert_allclose(
        boundary.frequency[inner] ** 2, -boundary.second_values[inner], rtol=0.0, atol=1e-10
    )
    (end,) = [e for e in hopf.events if e.kind == "bogdanov_takens"]
    assert np.max(np.abs(end.parameters[:2])) < 1e-8


# ---------------------------------------------------------------------------
# memory: no n x n dense array on the sparse boundary path

CAPPED_SETUP = """
from test_sparse_eigen import brusselator_model, uniform_state
from branchline.problems.boundary import trace_boundary
from branchline.results.records import Event
from branchline.scan.loader import StepSettings
nodes = {nodes}
model = brusselator_model(nodes, 2.0)
event = Event(trace="line", kind="hopf", vary="b", value=2.0, state=uniform_state(nodes, 2.0),
              parameters=model.defaults.copy(), arclength=0.0, frequency=1.0)
"""
CAPPED_BODY = """
steps = StepSettings(initial=2.0, largest=2.0, max_points=4)
outcome = trace_boundary(model, "onset", event, "a", {{"b": (1.0, 5.0), "a": (0.5, 1.5)}}, steps)
a, b = outcome.boundary.second_values, outcome.boundary.first_values
print(len(a), repr(float(np.max(np.abs(b - 1.0 - a * a)))), repr(float(np.ptp(a))))
"""


def test_the_sparse_hopf_curve_runs_under_a_memory_cap():
    nodes = 2000  # 4,000 states: one dense 4,000 x 4,000 array takes 128 MB
    lines = run_under_memory_cap(
        CAPPED_SETUP.format(nodes=nodes), CAPPED_BODY.format(), 2 * nodes, 96 * 2**20
    )
    assert lines[0] == "dense refused"
    points, error, spread = lines[1].split()
    assert int(points) >= 5 and float(spread) > 0.0  # both sides left the start
    assert float(error) < 1e-10  # b = 1 + a^2 (Prigogine & Lefever 1968)


# ---------------------------------------------------------------------------
# the complex bordered system on a small expression model (every decision sparse)


def test_sparse_hopf_curve_of_the_lorenz_equations_and_its_exact_jacobian():
    """The Hopf curve of the Lorenz equations' nontrivial equilibria, rho = sigma (sigma +
    beta + 3) / (sigma - beta - 1), omega^2 = beta (sigma + rho) (the closed form of
    tests/test_boundaries.py; Lorenz, J. Atmos. Sci. 20, 1963; Sparrow, The Lorenz
    Equations, 1982, from memory), on the complex bordered system with the exact
    second-derivative entries of an expression model; its Jacobian against central
    differences of its residual."""
    from dataclasses import replace

    from branchline.numerics.policy import SPARSE
    from branchline.problems.equilibrium_branch import locate_events, trace_branch
    from branchline.scan.loader import ExpressionModelSpec
    from test_boundaries import LORENZ

    model = build_model(ExpressionModelSpec(**LORENZ["model"]))
    x = np.sqrt(8.0 / 3.0 * 19.0)
    steps = StepSettings(0.05, 1e-8, 1.0, 2000)
    branch = trace_branch(
        model, "line", "rho", model.defaults.copy(), np.array([x, x, 19.0]), (1.5, 40.0),
        "both", steps,
    )
    (event,) = [e for e in locate_events(model, branch) if e.kind == "hopf"]
    model = replace(model, linear_algebra=SPARSE)
    assert curve_class(model, "hopf") is SparseHopfCurve
    window = {"rho": (1.5, 60.0), "sigma": (5.0, 20.0)}
    boundary = trace_boundary(model, "onset", event, "sigma", window, steps).boundary
    rho, sigma, beta = boundary.first_values, boundary.second_values, 8.0 / 3.0
    assert boundary.status == "done" and sigma.min() == 5.0 and sigma.max() == 20.0
    expected = sigma * (sigma + beta + 3.0) / (sigma - beta - 1.0)
    assert np.max(np.abs(rho / expected - 1.0)) < 1e-9
    assert np.max(np.abs(boundary.frequency**2 / (beta * (sigma + rho)) - 1.0)) < 1e-9

    row = len(rho) // 3
    u = np.concatenate(
        [boundary.states[row], [sigma[row], boundary.frequency[row], rho[row]]]
    )
    curve = SparseHopfCurve(model, 0, 1, model.defaults.copy(), u)
    u = u + 1e-3 * np.array([1.0, -2.0, 0.5, 0.3, -0.7, 1.1])  # off the curve: g != 0
    _, jacobian = curve.evaluate(u)
    jacobian = jacobian.toarray()
    step = 1e-6
    for k in range(u.size):
        shift = np.zeros(u.size)
        shift[k] = step
        column = (curve.residual(u + shift) - curve.residual(u - shift)) / (2.0 * step)
        np.testing.assert_allclose(jacobian[:, k], column, rtol=1e-6, atol=1e-7)
