"""A new kind of curve needs no edits outside its own problem and its test.

The curve of the scalar implicit equation F(x, p) = x^3 - x + p = 0 is defined
here, in the test, as a problem of the engine's protocol with its own named
test functions: ``turning`` (the tangent's parameter component, zero where the
curve turns back in p) and ``axis`` (x itself, zero where the curve crosses
x = 0). The problem-independent code traces it to both sides
(:mod:`branchline.problems.tracing`), finds the sign changes of the named test
functions and hands each bracket to this problem's locator for that name
(:mod:`branchline.events.brackets`).

Reference values (elementary calculus): on the curve p = x - x^3, dp/dx =
1 - 3 x^2 vanishes at x = +-1/sqrt(3), where p = +-2 / (3 sqrt(3)); the curve
crosses x = 0 at p = 0.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from branchline.events.brackets import (
    Bracket,
    LocationFailed,
    locate_brackets,
    sign_change_brackets,
)
from branchline.problems.tracing import TraceRequest, in_trace_order, summarize, trace_sides
from branchline.scan.loader import StepSettings

TEST_NAMES = ("turning", "axis")
# Newton on a 2 x 2 defining system from a bracket: quadratic convergence
# reaches rounding in a handful of steps; more means something is wrong.
MAX_LOCATION_ITERATIONS = 8


class CubicCurve:
    """F(x, p) = x^3 - x + p in u = (x, p), with two named test functions."""

    test_names = TEST_NAMES

    def __init__(self, orientation: int) -> None:
        self.orientation = orientation  # -1 on the side whose rows get reversed

    def residual(self, u):
        return np.array([u[0] ** 3 - u[0] + u[1]])

    def jacobian(self, u):
        return np.array([[3.0 * u[0] ** 2 - 1.0, 1.0]])

    def observe(self, u, tangent, jacobian):
        # Test values refer to the tangent in trace order, as every problem's must.
        return None, np.array([self.orientation * tangent[-1], u[0]])


def newton_2x2(system, z, iterations_used):
    for iteration in range(1, MAX_LOCATION_ITERATIONS + 1):
        residual, jacobian = system(z)
        step = np.linalg.solve(jacobian, -residual)
        z = z + step
        if np.linalg.norm(step) <= 1e-15 * (1.0 + np.linalg.norm(z)):
            iterations_used.append(iteration)
            return z
    raise LocationFailed("no convergence")


def turning_system(z):
    x, p = z
    return np.array([x**3 - x + p, 3 * x**2 - 1]), np.array([[3 * x**2 - 1, 1.0], [6 * x, 0.0]])


def axis_system(z):
    x, p = z
    return np.array([x**3 - x + p, x]), np.array([[3 * x**2 - 1, 1.0], [1.0, 0.0]])


@pytest.mark.parametrize("newton", ["full", "chord"])
def test_a_curve_defined_in_a_test_traces_detects_and_locates(newton):
    start_x = 1.2
    request = TraceRequest(
        start=np.array([start_x, start_x - start_x**3]),
        bounds=(-1.0, 1.0),
        steps=StepSettings(initial=0.01, largest=0.05),
        newton=newton,
    )
    sides = trace_sides(CubicCurve, request)
    status, message = summarize(sides)
    assert status == "done", message
    rows = in_trace_order(sides)
    np.testing.assert_allclose(
        rows.points[:, 0] ** 3 - rows.points[:, 0] + rows.points[:, 1], 0, atol=1e-10
    )
    assert rows.points[0, 1] == -1.0 and rows.points[-1, 1] == 1.0  # on the edges exactly
    assert np.all(np.diff(rows.arclength) > 0)
    assert np.max(rows.newton_iterations) <= 4  # quadratic convergence from the predictor

    brackets = sign_change_brackets(rows.test_values, TEST_NAMES)
    assert sorted(b.kind for b in brackets) == ["axis", "turning", "turning"]

    iterations: list[int] = []

    def seed(bracket: Bracket):
        a, b = rows.points[bracket.row], rows.points[bracket.row + 1]
        return a + bracket.fraction * (b - a)

    locators = {
        "turning": lambda b: ("turning", newton_2x2(turning_system, seed(b), iterations)),
        "axis": lambda b: ("axis", newton_2x2(axis_system, seed(b), iterations)),
    }
    found = locate_brackets(
        brackets,
        locators,
        order=("axis", "turning"),
        unrefined=lambda b, why: pytest.fail(f"{b.kind} not located: {why}"),
    )
    assert [kind for kind, _ in found] == ["axis", "turning", "turning"]  # in location order
    assert max(iterations) <= 5
    turning = sorted(z[1] for kind, z in found if kind == "turning")
    exact = 2.0 / (3.0 * math.sqrt(3.0))
    assert turning == pytest.approx([-exact, exact], rel=1e-14)
    (axis,) = (z for kind, z in found if kind == "axis")
    assert abs(axis[0]) < 1e-15 and abs(axis[1]) < 1e-15


def test_a_bracket_the_locator_cannot_place_is_still_reported():
    brackets = [Bracket("turning", 3, 0.5), Bracket("axis", 7, 0.25)]

    def fails(bracket):
        raise LocationFailed("Newton diverged")

    found = locate_brackets(
        brackets,
        {"turning": fails, "axis": lambda b: ("axis", b.row)},
        unrefined=lambda b, why: (b.kind, why),
    )
    assert found == [("turning", "Newton diverged"), ("axis", 7)]
