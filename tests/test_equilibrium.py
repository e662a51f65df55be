"""Newton for one equilibrium, linearization and equilibrium types.

Reference cases:

- Planar linear systems x' = J x classified by trace tau and determinant Delta:
  Strogatz, Nonlinear Dynamics and Chaos, section 5.2 (the classification
  diagram: Delta < 0 saddles; Delta > 0 with tau^2 - 4 Delta > 0 nodes, < 0
  spirals, = 0 stars and degenerate nodes; tau = 0 < Delta centres; Delta = 0
  non-isolated fixed points). Recalled from the book.
- The rabbits-versus-sheep competition model x' = x (3 - x - 2y),
  y' = y (2 - x - y): Strogatz, section 6.4 (fixed points (0,0) unstable node
  with eigenvalues 3, 2; (0,2) stable node -1, -2; (3,0) stable node -3, -1;
  (1,1) saddle -1 +- sqrt(2)). Eigenvalues recalled from the book and
  re-derived by hand.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from branchline.numerics import eigenvalues
from branchline.problems.equilibrium import (
    classify,
    linearize,
    solve_equilibrium,
)
from branchline.vocabulary import Status
from models_for_tests import hand_model


def make_model(rhs, jacobian, states=("x",), parameters=("a",), defaults=(0.0,)):
    """A Model from hand-written numpy functions (only rhs/jacobian are used here)."""

    def no_parameter_jacobian(x, p):
        return np.zeros((len(states), len(parameters)))

    return hand_model(rhs, jacobian, no_parameter_jacobian, states, parameters, defaults)


def companion(tau: float, delta: float) -> np.ndarray:
    """A real 2x2 matrix with trace tau and determinant delta."""
    return np.array([[0.0, 1.0], [-delta, tau]])


# A fixed, non-orthogonal change of coordinates: the type must not depend on it.
SIMILARITY = np.array([[2.0, 1.0], [0.5, 3.0]])


def transformed(jac: np.ndarray) -> np.ndarray:
    return SIMILARITY @ jac @ np.linalg.inv(SIMILARITY)


# (id, matrix, kind, hyperbolic, (positive, zero, negative)); Strogatz section 5.2.
PLANAR_CASES = [
    ("node-stable", companion(-3.0, 2.0), "stable_node", True, (0, 0, 2)),
    ("node-stable-far", companion(-10.0, 1.0), "stable_node", True, (0, 0, 2)),
    ("node-unstable", companion(3.0, 2.0), "unstable_node", True, (2, 0, 0)),
    ("saddle-tau0", companion(0.0, -1.0), "saddle", True, (1, 0, 1)),
    ("saddle-tau-pos", companion(1.0, -2.0), "saddle", True, (1, 0, 1)),
    ("saddle-tau-neg", companion(-1.0, -6.0), "saddle", True, (1, 0, 1)),
    ("spiral-stable", companion(-1.0, 5.0), "stable_focus", True, (0, 0, 2)),
    ("spiral-unstable", companion(1.0, 5.0), "unstable_focus", True, (2, 0, 0)),
    ("spiral-weak", companion(-1e-3, 1.0), "stable_focus", True, (0, 0, 2)),
    ("centre", companion(0.0, 4.0), "centre", False, (0, 2, 0)),
    ("centre-slow", companion(0.0, 1e-4), "centre", False, (0, 2, 0)),
    ("degenerate-node-stable", companion(-2.0, 1.0), "stable_degenerate_node", True, (0, 0, 2)),
    ("degenerate-node-unstable", companion(4.0, 4.0), "unstable_degenerate_node", True, (2, 0, 0)),
    ("star-stable", -2.0 * np.eye(2), "stable_star", True, (0, 0, 2)),
    ("star-unstable", 3.0 * np.eye(2), "unstable_star", True, (2, 0, 0)),
    ("line-of-fixed-points-attracting", companion(-1.0, 0.0), "zero_eigenvalue", False, (0, 1, 1)),
    ("line-of-fixed-points-repelling", companion(2.0, 0.0), "zero_eigenvalue", False, (1, 1, 0)),
    ("nilpotent", companion(0.0, 0.0), "zero_eigenvalue", False, (0, 2, 0)),
    ("plane-of-fixed-points", np.zeros((2, 2)), "zero_jacobian", False, (0, 2, 0)),
]


@pytest.mark.parametrize("coordinates", ["companion", "transformed"])
@pytest.mark.parametrize(
    ("matrix", "kind", "hyperbolic", "counts"),
    [case[1:] for case in PLANAR_CASES],
    ids=[case[0] for case in PLANAR_CASES],
)
def test_planar_type_by_trace_and_determinant(matrix, kind, hyperbolic, counts, coordinates):
    # Strogatz, Nonlinear Dynamics and Chaos, section 5.2.
    # (A multiple of the identity stays one under any similarity, so stars stay stars.)
    jac = matrix if coordinates == "companion" else transformed(matrix)
    result = classify(jac)
    assert result.kind == kind
    assert result.hyperbolic is hyperbolic
    assert (result.positive, result.zero, result.negative) == counts
    assert result.trace == pytest.approx(np.trace(matrix), abs=1e-12)
    assert result.determinant == pytest.approx(np.linalg.det(matrix), abs=1e-12)
    assert result.description  # a sentence for a person
    assert np.all(np.diff(result.eigenvalues.real) <= 0.0)  # sorted, leading first


@pytest.mark.parametrize(
    ("tau", "delta"),
    [(t, d) for t in (-3.0, -0.5, 0.5, 3.0) for d in (-2.0, 0.25, 1.0, 6.0)],
)
def test_planar_grid_agrees_with_discriminant(tau, delta):
    # Strogatz section 5.2: the sign of Delta, then of tau^2 - 4 Delta, decides.
    result = classify(companion(tau, delta))
    discriminant = tau * tau - 4.0 * delta
    side = "stable" if tau < 0 else "unstable"
    if delta < 0:
        expected = "saddle"
    elif abs(discriminant) < 1e-12:
        expected = f"{side}_degenerate_node"
    elif discriminant > 0:
        expected = f"{side}_node"
    else:
        expected = f"{side}_focus"
    assert result.kind == expected


@pytest.mark.parametrize(
    ("eigenvalues", "kind", "counts"),
    [
        ((-1.0, -2.0, -3.0), "stable_node", (0, 0, 3)),
        ((1.0, 2.0, 3.0), "unstable_node", (3, 0, 0)),
        ((1.0, -2.0, -3.0), "saddle", (1, 0, 2)),
        ((-0.5 + 2j, -0.5 - 2j, -3.0), "stable_focus", (0, 0, 3)),
        ((-2.0 + 1j, -2.0 - 1j, -0.5), "stable_node", (0, 0, 3)),
        ((0.5 + 2j, 0.5 - 2j, -3.0), "saddle_focus", (2, 0, 1)),
        ((0.0 + 2j, 0.0 - 2j, -3.0), "non_hyperbolic", (0, 2, 1)),
        ((0.0, -1.0, -3.0), "zero_eigenvalue", (0, 1, 2)),
    ],
)
def test_three_state_types_by_half_plane_counts(eigenvalues, kind, counts):
    # Block-diagonal real matrices with the given spectrum (a real 2x2 block a, -b; b, a for
    # each complex pair a +- ib), in a fixed non-orthogonal basis. Expected types: counts of
    # eigenvalues in each half-plane (elementary linear algebra), and node versus focus
    # decided by the leading eigenvalue, the one nearest the imaginary axis (common
    # practice; e.g. Kuznetsov, Elements of Applied Bifurcation Theory, section 6.1, from
    # memory), so (-2 +- i, -0.5) is a node.
    blocks = []
    values = list(eigenvalues)
    while values:
        value = complex(values.pop(0))
        if value.imag:
            values.pop(0)
            blocks.append(np.array([[value.real, -value.imag], [value.imag, value.real]]))
        else:
            blocks.append(np.array([[value.real]]))
    size = sum(block.shape[0] for block in blocks)
    jac = np.zeros((size, size))
    start = 0
    for block in blocks:
        end = start + block.shape[0]
        jac[start:end, start:end] = block
        start = end
    basis = np.array([[1.0, 0.2, 0.0], [0.1, 1.0, 0.3], [0.0, 0.4, 1.0]])
    jac = basis @ jac @ np.linalg.inv(basis)
    result = classify(jac)
    assert result.kind == kind
    assert (result.positive, result.zero, result.negative) == counts
    assert result.hyperbolic is (counts[1] == 0)
    assert len(result.leading) == 3


def competition_model():
    # Strogatz, section 6.4: x' = x (3 - x - 2y), y' = y (2 - x - y).
    def rhs(z, p):
        x, y = z
        return np.array([x * (3.0 - x - 2.0 * y), y * (2.0 - x - y)])

    def jacobian(z, p):
        x, y = z
        return np.array([[3.0 - 2.0 * x - 2.0 * y, -2.0 * x], [-y, 2.0 - x - 2.0 * y]])

    return make_model(rhs, jacobian, states=("x", "y"))


@pytest.mark.parametrize(
    ("guess", "expected", "kind", "eigenvalues"),
    [
        ((0.2, -0.1), (0.0, 0.0), "unstable_node", (3.0, 2.0)),
        ((0.1, 1.7), (0.0, 2.0), "stable_node", (-1.0, -2.0)),
        ((2.6, 0.2), (3.0, 0.0), "stable_node", (-1.0, -3.0)),
        ((1.2, 0.9), (1.0, 1.0), "saddle", (-1.0 + math.sqrt(2.0), -1.0 - math.sqrt(2.0))),
    ],
)
def test_competition_model_fixed_points(guess, expected, kind, eigenvalues):
    # Strogatz, Nonlinear Dynamics and Chaos, section 6.4 (rabbits versus sheep).
    model = competition_model()
    solution = solve_equilibrium(model, np.array(guess), model.defaults)
    assert solution.converged and solution.status == Status.CONVERGED
    assert solution.message == ""
    np.testing.assert_allclose(solution.state, expected, atol=1e-12)
    assert solution.residual_norm <= 1e-10
    assert solution.iterations <= 8
    assert solution.history[0] > solution.history[-1]
    result = linearize(model, solution.state, model.defaults)
    assert result.kind == kind
    assert result.hyperbolic
    np.testing.assert_allclose(result.eigenvalues.real, eigenvalues, atol=1e-12)


def test_newton_converges_quadratically():
    # x^2 = 2 from x = 1: Newton's iterates 1.5, 1.41667, 1.414215686, ... (quadratic
    # convergence: each residual is about the square of the previous one; elementary,
    # the iterates are x -> x/2 + 1/x computed by hand).
    model = make_model(lambda x, p: x**2 - 2.0, lambda x, p: np.diag(2.0 * x))
    solution = solve_equilibrium(model, np.array([1.0]), model.defaults)
    assert solution.converged
    assert solution.state[0] == pytest.approx(math.sqrt(2.0), rel=1e-15)
    assert solution.iterations <= 5
    history = np.array(solution.history)
    assert history[2] < 10 * history[1] ** 2 and history[3] < 10 * history[2] ** 2


def test_damping_avoids_leaving_the_domain():
    # log(x) + 10 = 0 from x = 1: the full Newton step lands at x = -9 where log is
    # undefined; backtracking keeps x positive and reaches exp(-10).
    model = make_model(lambda x, p: np.log(x) + 10.0, lambda x, p: np.diag(1.0 / x))
    solution = solve_equilibrium(model, np.array([1.0]), model.defaults)
    assert solution.converged
    assert solution.state[0] == pytest.approx(math.exp(-10.0), rel=1e-12)


def test_no_root_gives_status_and_message():
    # x' = x^2 + 1 has no real equilibrium: Newton ends at the minimum of |f| (x = 0),
    # where the Jacobian vanishes.
    model = make_model(lambda x, p: x**2 + 1.0, lambda x, p: np.diag(2.0 * x))
    solution = solve_equilibrium(model, np.array([1.0]), model.defaults)
    assert not solution.converged
    assert solution.status == Status.SINGULAR_JACOBIAN
    assert "singular" in solution.message and "x=0" in solution.message
    assert solution.residual_norm == pytest.approx(1.0)


def test_no_root_from_a_generic_guess_does_not_raise():
    model = make_model(lambda x, p: x**2 + 1.0, lambda x, p: np.diag(2.0 * x))
    solution = solve_equilibrium(model, np.array([0.3]), model.defaults)
    assert not solution.converged
    assert solution.message
    assert solution.residual_norm >= 1.0


def test_nan_at_the_guess_gives_status_and_message():
    model = make_model(lambda x, p: np.log(x) + 1.0, lambda x, p: np.diag(1.0 / x))
    solution = solve_equilibrium(model, np.array([-1.0]), model.defaults)
    assert not solution.converged
    assert solution.status == Status.NON_FINITE
    assert "not finite" in solution.message and "x=-1" in solution.message


def test_overflow_gives_status_and_message():
    model = make_model(lambda x, p: np.exp(np.exp(x)), lambda x, p: np.diag(np.exp(x)))
    solution = solve_equilibrium(model, np.array([800.0]), model.defaults)
    assert not solution.converged
    assert solution.status == Status.NON_FINITE


def test_singular_jacobian_gives_status_and_message():
    # x' = x - y - 1, y' = 2 (x - y): rank-one Jacobian and no solution.
    model = make_model(
        lambda z, p: np.array([z[0] - z[1] - 1.0, 2.0 * (z[0] - z[1])]),
        lambda z, p: np.array([[1.0, -1.0], [2.0, -2.0]]),
        states=("x", "y"),
    )
    solution = solve_equilibrium(model, np.array([0.0, 0.0]), model.defaults)
    assert not solution.converged
    assert solution.status == Status.SINGULAR_JACOBIAN
    assert "singular" in solution.message


def test_python_exception_in_model_is_reported():
    def rhs(x, p):
        return np.array([math.log(x[0]) + 1.0])

    model = make_model(rhs, lambda x, p: np.array([[1.0 / x[0]]]))
    solution = solve_equilibrium(model, np.array([-2.0]), model.defaults)
    assert solution.status == Status.NON_FINITE


def test_sparse_jacobian_newton():
    # A tridiagonal system: the sparse path (SuperLU) gives the dense path's answer.
    import scipy.sparse as sp

    n = 40
    lap = sp.diags([np.ones(n - 1), -2.0 * np.ones(n), np.ones(n - 1)], [-1, 0, 1], format="csr")

    def rhs(x, p):
        return lap @ x + 0.001 * np.exp(x)

    dense = make_model(
        rhs,
        lambda x, p: lap.toarray() + np.diag(0.001 * np.exp(x)),
        states=tuple(f"x{i}" for i in range(n)),
    )
    sparse = make_model(
        rhs, lambda x, p: lap + sp.diags(0.001 * np.exp(x)), states=tuple(f"x{i}" for i in range(n))
    )
    first = solve_equilibrium(dense, np.zeros(n), dense.defaults)
    second = solve_equilibrium(sparse, np.zeros(n), sparse.defaults)
    assert first.converged and second.converged
    np.testing.assert_allclose(first.state, second.state, atol=1e-12)


def test_leading_eigenvalues_of_sparse_second_difference_matrix():
    # Eigenvalues of tridiag(1, -2, 1) / h^2 (n interior points, h = 1/(n+1)):
    # -4/h^2 sin^2(k pi h / 2), k = 1..n (LeVeque, Finite Difference Methods for
    # Ordinary and Partial Differential Equations, section 2.10, from memory; re-derived
    # with the discrete sine modes sin(j k pi h)).
    import scipy.sparse as sp

    n = 300
    h = 1.0 / (n + 1)
    lap = sp.diags([np.ones(n - 1), -2.0 * np.ones(n), np.ones(n - 1)], [-1, 0, 1]) / h**2
    k = np.arange(1, 7)
    exact = -4.0 / h**2 * np.sin(k * np.pi * h / 2.0) ** 2
    found = eigenvalues.leading_eigenvalues(lap.tocsc(), 6)
    np.testing.assert_allclose(found.real, exact, rtol=1e-9)
    np.testing.assert_allclose(found.imag, 0.0, atol=1e-9)
