"""The continuation engine and equilibrium branches.

Reference cases:

- Insect outbreak (spruce budworm), dimensionless: x' = r x (1 - x/k) - x^2/(1+x^2).
  Strogatz, Nonlinear Dynamics and Chaos, section 3.7: the fold (saddle-node)
  curve in the (k, r) plane is, parametrized by the equilibrium x,
  r = 2 x^3 / (1 + x^2)^2, k = 2 x^3 / (x^2 - 1) (recalled from the book and
  re-derived from f = 0, df/dx = 0). For a fixed k inside the bistable region
  the branch of positive equilibria is S-shaped with two folds.
- The isola x' = 1 - x^2 - p^2: its equilibria form the unit circle (elementary).
- Bratu's problem u'' + lambda e^u = 0, u(0) = u(1) = 0: the fold lambda_c is
  where theta = sqrt(2 lambda) cosh(theta/4) has a double root, i.e. also
  1 = sqrt(2 lambda)/4 sinh(theta/4) (Bratu 1914; the closed-form solution
  u = -2 ln[cosh((x - 1/2) theta/2) / cosh(theta/4)] is standard, e.g.
  Ascher, Mattheij & Russell, Numerical Solution of Boundary Value Problems for
  ODEs, section 1.2, from memory). Computed here with scipy.optimize.brentq.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.optimize import brentq

from branchline.continuation import step_control
from branchline.continuation.correctors import COUNT_KEYS
from branchline.continuation.engine import follow_curve
from branchline.model.build import build_model
from branchline.problems.equilibrium_branch import trace_branch
from branchline.scan.loader import ExpressionModelSpec, StepSettings
from models_for_tests import hand_model
from reference_cases import COMBINATIONS, MAX_REJECTED_STEPS, traced

# ---------------------------------------------------------------------------
# Spruce budworm (Strogatz, section 3.7)
# ---------------------------------------------------------------------------

BUDWORM_K = 20.0


def budworm_hand():
    def rhs(x, p):
        r, k = p
        return np.array([r * x[0] * (1.0 - x[0] / k) - x[0] ** 2 / (1.0 + x[0] ** 2)])

    def jacobian(x, p):
        r, k = p
        z = x[0]
        return np.array([[r * (1.0 - 2.0 * z / k) - 2.0 * z / (1.0 + z**2) ** 2]])

    def parameter_jacobian(x, p):
        r, k = p
        z = x[0]
        return np.array([[z * (1.0 - z / k), r * z**2 / k**2]])

    return hand_model(rhs, jacobian, parameter_jacobian, ("x",), ("r", "k"), (0.4, BUDWORM_K))


def budworm_built():
    spec = ExpressionModelSpec(
        parameters={"r": 0.4, "k": BUDWORM_K},
        equations={"x": "r*x*(1 - x/k) - x^2/(1 + x^2)"},
    )
    return build_model(spec)


def budworm_folds(k: float) -> list[tuple[float, float]]:
    """(x, r) of both folds for this k from the closed form (Strogatz section 3.7)."""

    def k_of_x(x):
        return 2.0 * x**3 / (x**2 - 1.0) - k

    # k(x) has its minimum at x = sqrt(3) (dk/dx = 0); one fold on each side.
    roots = [
        brentq(k_of_x, 1.0 + 1e-9, math.sqrt(3.0), xtol=1e-15),
        brentq(k_of_x, math.sqrt(3.0), 10.0 * k, xtol=1e-15),
    ]
    return [(x, 2.0 * x**3 / (1.0 + x**2) ** 2) for x in roots]


MODELS = {"hand": budworm_hand, "built": budworm_built}


@pytest.fixture(
    params=[("hand", "full"), ("built", "full"), ("hand", "chord")],
    ids=["hand-full", "built-full", "hand-chord"],
)
def budworm_branch(request):
    kind, newton = request.param
    model = MODELS[kind]()
    branch = trace_branch(
        model,
        "budworm",
        "r",
        model.defaults,
        np.array([0.5]),
        (0.1, 0.7),
        "both",
        StepSettings(),
        newton=newton,
    )
    return model, branch


def test_budworm_passes_both_turning_points(budworm_branch):
    _, branch = budworm_branch
    assert branch.status == "done", branch.message
    fold_component = branch.tangents[:, -1]
    changes = np.nonzero(np.diff(np.sign(fold_component)))[0]
    assert len(changes) == 2
    # The fold test function (tangent's parameter component) changes sign at the same rows.
    np.testing.assert_array_equal(
        np.nonzero(np.diff(np.sign(branch.test_values[:, 0])))[0], changes
    )
    lower, upper = budworm_folds(BUDWORM_K)
    # The turning points lie between the rows around each sign change.
    for index, (x_fold, _) in zip(changes, (lower, upper), strict=True):
        low, high = sorted(branch.states[index : index + 2, 0])
        assert low - 0.05 <= x_fold <= high + 0.05


def test_budworm_extreme_parameter_values_match_closed_form(budworm_branch):
    _, branch = budworm_branch
    changes = np.nonzero(np.diff(np.sign(branch.tangents[:, -1])))[0]
    for index, (_, r_fold) in zip(changes, budworm_folds(BUDWORM_K), strict=True):
        window = slice(index - 2, index + 4)
        values = branch.parameter_values[window]
        upper_turn = r_fold > 0.3  # the lower fold is a maximum of r, the upper one a minimum
        j = index - 2 + (np.argmax(values) if upper_turn else np.argmin(values))
        extreme = branch.parameter_values[j]
        # No row passes the turning point, and the nearest row is within the step resolution
        # (r - r_fold ~ s^2 near a fold, s <= largest step 0.05).
        if upper_turn:
            assert r_fold - 2.5e-3 <= extreme <= r_fold + 1e-12
        else:
            assert r_fold - 1e-12 <= extreme <= r_fold + 2.5e-3
        # A parabola through the three rows around the turning point, r(s), has its
        # vertex at the fold to O(h^3).
        s = branch.arclength[j - 1 : j + 2]
        r = branch.parameter_values[j - 1 : j + 2]
        a2, a1, a0 = np.polyfit(s - s[1], r, 2)
        assert a0 - a1**2 / (4.0 * a2) == pytest.approx(r_fold, abs=1e-4)


def test_budworm_points_on_all_three_sheets(budworm_branch):
    model, branch = budworm_branch
    (x_low, _), (x_high, _) = budworm_folds(BUDWORM_K)
    x = branch.states[:, 0]
    assert np.any(x < x_low) and np.any((x > x_low) & (x < x_high)) and np.any(x > x_high)
    residuals = [
        abs(model.rhs(row, np.array([r, BUDWORM_K]))[0])
        for row, r in zip(branch.states, branch.parameter_values, strict=True)
    ]
    assert max(residuals) < 1e-10
    assert np.all(branch.residual_norms < 1e-10)
    # Stability: the outer sheets are stable, the middle one unstable (one positive eigenvalue).
    middle = (x > x_low * 1.01) & (x < x_high * 0.99)
    assert np.all(branch.unstable_count[middle] == 1)
    outer = (x < x_low * 0.99) | (x > x_high * 1.01)
    assert np.all(branch.unstable_count[outer] == 0)
    np.testing.assert_array_equal(branch.stable, branch.unstable_count == 0)


def test_budworm_reaches_interval_edges_exactly(budworm_branch):
    _, branch = budworm_branch
    assert branch.parameter_values[0] == 0.1
    assert branch.parameter_values[-1] == 0.7
    assert branch.interval == (0.1, 0.7)
    assert "0.1" in branch.message and "0.7" in branch.message


def test_budworm_orientation_and_arclength_in_trace_order(budworm_branch):
    _, branch = budworm_branch
    # Tangents keep their orientation through both folds: successive ones point alike.
    dots = np.sum(branch.tangents[1:] * branch.tangents[:-1], axis=1)
    assert np.all(dots > 0.9)
    np.testing.assert_allclose(np.linalg.norm(branch.tangents, axis=1), 1.0, atol=1e-12)
    # The tangent points from each row toward the next.
    steps = np.diff(np.column_stack([branch.states, branch.parameter_values]), axis=0)
    assert np.all(np.sum(steps * branch.tangents[:-1], axis=1) > 0)
    assert np.all(np.diff(branch.arclength) > 0)
    start = int(np.argmin(np.abs(branch.arclength)))
    assert branch.arclength[start] == 0.0
    assert branch.parameter_values[start] == pytest.approx(0.4, abs=0)
    assert branch.arclength[0] < 0 < branch.arclength[-1]


def test_budworm_newton_iterations_per_point(budworm_branch):
    _, branch = budworm_branch
    iterations = branch.newton_iterations[1:]  # the start row is solved separately
    assert iterations.sum() < 3 * len(iterations)
    # Quadratic (full Newton) or fast linear (chord) convergence from the tangent
    # predictor: at most three corrector iterations at any point of this smooth S-curve,
    # and step control never has to retry a step.
    assert iterations.max() <= 3
    assert branch.counts["rejected_steps"] <= 2
    # One evaluation per iteration plus the point itself and its tangent, roughly.
    assert len(branch) <= branch.counts["rhs_evaluations"] <= 4 * len(branch)
    assert len(branch) <= branch.counts["factorizations"] <= 4 * len(branch)


def test_budworm_record_is_complete(budworm_branch):
    model, branch = budworm_branch
    k = len(branch)
    assert branch.name == "budworm" and branch.vary == "r" and branch.parent is None
    assert branch.states.shape == (k, 1)
    assert branch.tangents.shape == (k, 2)
    assert branch.eigenvalues.shape == (k, 1) and branch.eigenvalues.dtype.kind == "c"
    assert branch.test_values.shape == (k, 3)
    assert branch.newton_iterations.dtype.kind == "i" and branch.unstable_count.dtype.kind == "i"
    np.testing.assert_array_equal(branch.parameters, model.defaults)
    # 1-state model: the eigenvalue is df/dx itself.
    for row in (0, k // 2, k - 1):
        p = np.array([branch.parameter_values[row], BUDWORM_K])
        assert branch.eigenvalues[row, 0].real == pytest.approx(
            model.jacobian(branch.states[row], p)[0, 0], abs=1e-12
        )


def test_directions_one_side_only():
    model = budworm_hand()
    up = trace_branch(
        model, "up", "r", model.defaults, np.array([0.5]), (0.1, 0.7), "increasing", StepSettings()
    )
    down = trace_branch(
        model,
        "down",
        "r",
        model.defaults,
        np.array([0.5]),
        (0.1, 0.7),
        "decreasing",
        StepSettings(),
    )
    assert up.parameter_values[0] == 0.4 and up.arclength[0] == 0.0
    assert up.parameter_values[1] > 0.4
    assert down.parameter_values[-1] == 0.4 and down.arclength[-1] == 0.0
    assert down.parameter_values[-2] < 0.4  # rows in trace order: toward the start
    assert down.parameter_values[0] == 0.1
    assert np.all(np.diff(down.arclength) > 0) and down.arclength[0] < 0.0
    assert np.all(np.diff(down.parameter_values) > 0)  # no fold on the lower sheet below 0.4


def test_progress_callback_counts_points():
    model = budworm_hand()
    seen = []
    branch = trace_branch(
        model,
        "t",
        "r",
        model.defaults,
        np.array([0.5]),
        (0.1, 0.7),
        "both",
        StepSettings(),
        progress=seen.append,
    )
    assert seen and seen == sorted(seen)
    assert seen[-1] == len(branch)


# ---------------------------------------------------------------------------
# Isola, failures, max_points
# ---------------------------------------------------------------------------


def circle_model():
    # x' = 1 - x^2 - p^2: the equilibria form the unit circle, a closed branch.
    return hand_model(
        lambda x, p: np.array([1.0 - x[0] ** 2 - p[0] ** 2]),
        lambda x, p: np.array([[-2.0 * x[0]]]),
        lambda x, p: np.array([[-2.0 * p[0]]]),
        ("x",),
        ("p",),
        (0.0,),
    )


@pytest.mark.parametrize("direction", ["both", "increasing", "decreasing"])
def test_isola_closes_and_stops(direction):
    model = circle_model()
    branch = trace_branch(
        model, "loop", "p", model.defaults, np.array([0.9]), (-2.0, 2.0), direction, StepSettings()
    )
    assert branch.status == "closed", branch.message
    assert "closed" in branch.message
    radius = np.hypot(branch.states[:, 0], branch.parameter_values)
    np.testing.assert_allclose(radius, 1.0, atol=1e-10)
    # Once around: first and last rows are the start point, the length is 2 pi to the
    # chord error of the steps.
    np.testing.assert_array_equal(np.abs(branch.arclength[[0, -1]]).min(), 0.0)
    length = branch.arclength[-1] - branch.arclength[0]
    assert 2 * math.pi * (1 - 1e-3) < length <= 2 * math.pi
    assert branch.parameter_values.min() == pytest.approx(-1.0, abs=2e-3)
    assert branch.parameter_values.max() == pytest.approx(1.0, abs=2e-3)
    assert len(branch) < 200


def nan_wall_model(wall=0.5):
    # x' = p - x, but the right-hand side is undefined (NaN) for p < wall.
    def rhs(x, p):
        return np.array([p[0] - x[0] if p[0] >= wall else math.nan])

    return hand_model(
        rhs, lambda x, p: np.array([[-1.0]]), lambda x, p: np.array([[1.0]]), ("x",), ("p",), (1.0,)
    )


def test_failure_keeps_points_and_says_where():
    model = nan_wall_model()
    branch = trace_branch(
        model, "wall", "p", model.defaults, np.array([1.0]), (0.0, 2.0), "both", StepSettings()
    )
    assert branch.status == "failed"
    assert "decreasing side" in branch.message and "increasing side" in branch.message
    assert "not finite" in branch.message
    assert "p=0.5" in branch.message
    # Every point is kept: the decreasing side up to the wall, the increasing side to the edge.
    assert branch.parameter_values.min() == pytest.approx(0.5, abs=1e-6)
    assert branch.parameter_values[-1] == 2.0
    np.testing.assert_allclose(branch.states[:, 0], branch.parameter_values, atol=1e-12)
    assert len(branch) > 20


def test_start_failure_returns_empty_failed_branch():
    # x' = x^2 + 1 + 0 p has no equilibrium: the start Newton fails.
    model = hand_model(
        lambda x, p: x**2 + 1.0 + 0.0 * p[0],
        lambda x, p: np.diag(2.0 * x),
        lambda x, p: np.zeros((1, 1)),
        ("x",),
        ("p",),
        (0.0,),
    )
    branch = trace_branch(
        model, "none", "p", model.defaults, np.array([1.0]), (-1.0, 1.0), "both", StepSettings()
    )
    assert branch.status == "failed"
    assert len(branch) == 0
    assert "no equilibrium found" in branch.message and "p=0" in branch.message


def test_start_outside_interval_is_reported():
    model = circle_model()
    branch = trace_branch(
        model, "out", "p", np.array([3.0]), np.array([0.0]), (-1.0, 1.0), "both", StepSettings()
    )
    assert branch.status == "failed" and "outside" in branch.message


def test_max_points_stops_with_message():
    model = budworm_hand()
    branch = trace_branch(
        model,
        "t",
        "r",
        model.defaults,
        np.array([0.5]),
        (0.1, 0.7),
        "increasing",
        StepSettings(max_points=25),
    )
    assert branch.status == "max_points"
    assert len(branch) == 25
    assert "25" in branch.message


def test_branch_switching_start_tangent():
    # x' = x (p - x): the branches x = 0 and x = p cross at the transcritical point (0, 0).
    # Started there along (1, 1)/sqrt(2), the trace follows x = p only.
    model = hand_model(
        lambda x, p: np.array([x[0] * (p[0] - x[0])]),
        lambda x, p: np.array([[p[0] - 2.0 * x[0]]]),
        lambda x, p: np.array([[x[0]]]),
        ("x",),
        ("p",),
        (0.0,),
    )
    branch = trace_branch(
        model,
        "t.1",
        "p",
        model.defaults,
        np.array([0.0]),
        (-1.0, 1.0),
        "both",
        StepSettings(),
        parent="t",
        start_tangent=np.array([1.0, 1.0]),
    )
    assert branch.status == "done" and branch.parent == "t"
    assert branch.parameter_values[0] == 0.0 and branch.parameter_values[-1] == 1.0
    np.testing.assert_allclose(branch.states[:, 0], branch.parameter_values, atol=1e-10)
    assert np.all(np.diff(branch.parameter_values) > 0)


# ---------------------------------------------------------------------------
# The engine on its own
# ---------------------------------------------------------------------------


class LineWithCloseZeros:
    """G(u) = x - p on a straight line; one test function with two zeros 2e-3 apart."""

    def __init__(self, first=0.3, second=0.302):
        self.first, self.second = first, second

    def residual(self, u):
        return np.array([u[0] - u[1]])

    def jacobian(self, u):
        return np.array([[1.0, -1.0]])

    def observe(self, u, tangent, jacobian):
        p = u[1]
        return None, np.array([(p - self.first) * (p - self.second)])


def sign_changes(values):
    return int(np.count_nonzero(np.diff(np.sign(values))))


def test_two_close_events_are_not_stepped_over(monkeypatch):
    problem = LineWithCloseZeros()
    # Constant steps of 0.1 in arclength (0.0707 in p) put both zeros (0.3, 0.302) inside
    # the step from p = 0.2828 to p = 0.3536.
    settings = StepSettings(initial=0.1, smallest=1e-8, largest=0.1, max_points=10_000)
    u0, t0 = np.array([0.0, 0.0]), np.array([1.0, 1.0])
    curve = follow_curve(problem, u0, t0, settings, (0.0, 1.0))
    assert curve.status == "done"
    assert sign_changes(curve.test_values[:, 0]) == 2
    # Without the test-function rule the same steps jump over both zeros: the rule matters.
    monkeypatch.setattr(step_control, "TEST_CHANGE_LIMIT", math.inf)
    plain = follow_curve(problem, u0, t0, settings, (0.0, 1.0))
    assert sign_changes(plain.test_values[:, 0]) == 0


def test_engine_counts_and_curve_fields():
    problem = LineWithCloseZeros()
    curve = follow_curve(problem, np.zeros(2), np.array([1.0, 1.0]), StepSettings(), (0.0, 1.0))
    assert curve.points[-1, 1] == 1.0 and curve.points[0, 1] == 0.0
    assert set(curve.counts) == set(COUNT_KEYS)
    # Totals include the attempts of rejected steps.
    assert curve.counts["newton_iterations"] >= curve.newton_iterations.sum()
    assert curve.counts["rhs_evaluations"] >= curve.counts["newton_iterations"] + len(curve)
    assert curve.payloads.shape == (len(curve),)
    assert np.all(np.diff(curve.arclength) > 0)


def test_engine_chord_and_full_agree_on_circle():
    class Circle:
        def residual(self, u):
            return np.array([u[0] ** 2 + u[1] ** 2 - 1.0])

        def jacobian(self, u):
            return np.array([[2.0 * u[0], 2.0 * u[1]]])

        def observe(self, u, tangent, jacobian):
            return None, np.array([tangent[-1]])

    for newton in ("full", "chord"):
        curve = follow_curve(
            Circle(), np.array([1.0, 0.0]), np.array([0.0, 1.0]), StepSettings(), newton=newton
        )
        assert curve.status == "closed"
        assert sign_changes(curve.test_values[:, 0]) == 2
        np.testing.assert_allclose(
            np.hypot(curve.points[:, 0], curve.points[:, 1]), 1.0, atol=1e-10
        )


class WrappedPhase:
    """p = sin(x): a curve that is invariant under x -> x + 2 pi (elementary).

    Its ``adapt`` moves each accepted point to the next copy of the curve, as a
    periodic-orbit problem re-represents its orbit between steps.
    """

    def __init__(self):
        self.adapted = []

    def residual(self, u):
        return np.array([math.sin(u[0]) - u[1]])

    def jacobian(self, u):
        return np.array([[math.cos(u[0]), -1.0]])

    def observe(self, u, tangent, jacobian):
        return None, np.array([u[1]])

    def adapt(self, u, tangent):
        self.adapted.append((u.copy(), tangent.copy()))
        shifted = u.copy()
        shifted[0] += 2.0 * math.pi
        return shifted, 3.0 * tangent  # the engine normalizes the tangent


@pytest.mark.parametrize("newton", ["full", "chord"])
def test_adapt_is_called_between_accepted_steps(newton):
    problem = WrappedPhase()
    settings = StepSettings(initial=0.05, largest=0.05, max_points=12)
    curve = follow_curve(problem, np.zeros(2), np.array([1.0, 1.0]), settings, newton=newton)
    assert curve.status == "max_points" and len(curve) == 12
    # Called once per accepted step with the point and tangent just recorded ...
    assert len(problem.adapted) == len(curve) - 1
    for k, (u, tangent) in enumerate(problem.adapted, start=1):
        np.testing.assert_array_equal(u, curve.points[k])
        np.testing.assert_array_equal(tangent, curve.tangents[k])
    # ... and each prediction starts from the adapted point: every step moves x by
    # 2 pi plus one short pseudo-arclength step, and every point still solves G = 0.
    jumps = np.diff(curve.points[:, 0])
    assert np.all(jumps[1:] > 2.0 * math.pi) and np.all(jumps[1:] < 2.0 * math.pi + 0.06)
    assert 0.0 < jumps[0] < 0.06
    np.testing.assert_allclose(np.sin(curve.points[:, 0]), curve.points[:, 1], atol=1e-12)
    # The arclength counts the steps taken, not the shifts.
    assert curve.arclength[-1] < 11 * 0.05 * 1.001
    np.testing.assert_allclose(np.linalg.norm(curve.tangents, axis=1), 1.0, rtol=1e-14)


# ---------------------------------------------------------------------------
# Sparse Jacobians: Bratu's problem
# ---------------------------------------------------------------------------


def bratu_model(n, sparse):
    h = 1.0 / (n + 1)
    lap = (
        sp.diags([np.ones(n - 1), -2.0 * np.ones(n), np.ones(n - 1)], [-1, 0, 1], format="csr")
        / h**2
    )
    dense_lap = lap.toarray()

    def rhs(u, p):
        return lap @ u + p[0] * np.exp(u)

    def jacobian(u, p):
        if sparse:
            return (lap + sp.diags(p[0] * np.exp(u))).tocsr()
        return dense_lap + np.diag(p[0] * np.exp(u))

    return hand_model(
        rhs,
        jacobian,
        lambda u, p: np.exp(u).reshape(-1, 1),
        tuple(f"u{i}" for i in range(n)),
        ("lam",),
        (0.0,),
        sparse=sparse,
    )


def bratu_fold() -> float:
    # Double root of theta = sqrt(2 lam) cosh(theta / 4): lam(theta) = theta^2 / (2 cosh^2)
    # has its maximum where d/dtheta = 0, i.e. tanh(theta/4) = 4/theta.
    theta = brentq(lambda th: math.tanh(th / 4.0) - 4.0 / th, 1.0, 10.0, xtol=1e-15)
    return theta**2 / (2.0 * math.cosh(theta / 4.0) ** 2)


def test_bratu_fold_dense_and_sparse_agree():
    n = 30
    lam_c = bratu_fold()
    # The value usually quoted for Bratu's problem (recalled from memory, e.g. Ascher,
    # Mattheij & Russell, section 1.2): a check on the brentq reference itself.
    assert lam_c == pytest.approx(3.513830719, abs=1e-9)
    branches = {}
    for sparse in (False, True):
        model = bratu_model(n, sparse)
        branch = trace_branch(
            model,
            "bratu",
            "lam",
            model.defaults,
            np.zeros(n),
            (0.0, 3.6),
            "increasing",
            StepSettings(largest=0.5, max_points=60),
        )
        branches[sparse] = branch
        assert sign_changes(branch.tangents[:, -1]) == 1
        # The discrete fold lies O(h^2) below the continuous one (second-order central
        # differences; elementary truncation-error estimate), 5e-3 covers n = 30.
        assert branch.parameter_values.max() == pytest.approx(lam_c, rel=5e-3)
    dense, sparse_branch = branches[False], branches[True]
    assert len(dense) == len(sparse_branch)
    np.testing.assert_allclose(dense.parameter_values, sparse_branch.parameter_values, atol=1e-9)
    np.testing.assert_allclose(dense.states, sparse_branch.states, atol=1e-9)
    np.testing.assert_array_equal(dense.unstable_count, sparse_branch.unstable_count)


def test_start_at_a_turning_point_leaves_both_ways():
    # Started exactly at the lower fold of the budworm branch (closed form, Strogatz 3.7),
    # the two sides must leave in opposite directions: one onto the lower sheet, one onto
    # the middle sheet.
    (x_fold, r_fold), (x_upper, _) = budworm_folds(BUDWORM_K)
    model = budworm_hand()
    parameters = np.array([r_fold, BUDWORM_K])
    branch = trace_branch(
        model,
        "fold",
        "r",
        parameters,
        np.array([x_fold]),
        (0.1, 0.7),
        "both",
        StepSettings(max_points=400),
    )
    assert branch.status == "done", branch.message
    x = branch.states[:, 0]
    assert x[0] < x_fold < x[-1]
    assert np.all(np.diff(branch.arclength) > 0)
    # Lower and middle sheets lie at r below the lower fold's r.
    assert np.all(branch.parameter_values[x < x_upper] <= r_fold + 1e-9)
    assert x[-1] > x_upper  # the middle sheet turns at the upper fold onto the upper sheet


def test_large_sparse_model_uses_leading_eigenvalues():
    # 300 states (above the policy's eigenvalues_dense_up_to): shift-invert Arnoldi gives the six
    # leading eigenvalues per row. Bratu's lower branch is stable, the upper one has one
    # unstable eigenvalue, exchanged at the fold (Bratu 1914; the stability exchange at a
    # fold is general: Kuznetsov, Elements of Applied Bifurcation Theory, section 3.3).
    n = 300
    model = bratu_model(n, sparse=True)
    branch = trace_branch(
        model,
        "bratu",
        "lam",
        model.defaults,
        np.zeros(n),
        (0.0, 3.6),
        "increasing",
        StepSettings(largest=1.0, max_points=45),
    )
    assert branch.eigenvalues.shape == (len(branch), 6)
    turn = int(np.nonzero(np.diff(np.sign(branch.tangents[:, -1])))[0][0])
    assert np.all(branch.unstable_count[: turn - 1] == 0)
    assert np.all(branch.unstable_count[turn + 2 :] == 1)
    for row in (5, turn + 5):
        jac = model.jacobian(branch.states[row], np.array([branch.parameter_values[row]]))
        dense = np.sort(np.linalg.eigvals(jac.toarray()).real)[::-1][:6]
        np.testing.assert_allclose(branch.eigenvalues[row].real, dense, rtol=1e-8)


# ---------------------------------------------------------------------------
# Every published reference case (tests/reference_cases.py), dense and sparse, both
# correctors: the trace itself. Its events: test_events.py; its switching:
# test_switching.py.
# ---------------------------------------------------------------------------


@pytest.mark.parametrize(("case", "policy", "newton"), COMBINATIONS)
def test_reference_case_trace(case, policy, newton):
    run = traced(case, policy, newton)
    branch = run.branch
    assert branch.status == "done", branch.message
    # Real caps: per point, and on the whole trace's rejected steps.
    cap = case.newton_cap if newton == "full" else case.chord_cap
    assert 1 <= int(branch.newton_iterations[1:].max()) <= cap
    assert branch.counts["rejected_steps"] <= MAX_REJECTED_STEPS
    assert np.max(branch.residual_norms) <= 1e-10
    # Every point is an equilibrium of the source's model.
    k = run.model.parameter_index(case.vary)
    for x, value in zip(branch.states, branch.parameter_values, strict=True):
        p = np.array(branch.parameters, dtype=float)
        p[k] = value
        assert np.max(np.abs(run.model.rhs(x, p))) <= 1e-10
    assert np.all(np.diff(branch.arclength) > 0)
    # Both ends on the interval's edges (the branch leaves it), exactly.
    lo, hi = case.interval
    ends = sorted(branch.parameter_values[[0, -1]])
    assert all(end in (lo, hi) for end in ends), ends
