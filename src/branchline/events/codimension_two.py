"""Codimension-two points on fold and Hopf curves: brackets, then their defining systems.

A curve problem (:class:`branchline.problems.fold_curve.FoldCurve`,
:class:`branchline.problems.hopf_curve.HopfCurve`) reports test functions at
every point; a sign change between two rows brackets a point of that kind. It
is located by Newton's method on its own defining system: the curve's
equations G(u) = 0 (exact Jacobian) together with the point's scalar
condition phi(u) = 0 (``problem.condition(kind, u)``: the fold's quadratic
coefficient for a cusp, w^T v or kappa for a Bogdanov-Takens point, l1 for a
Bautin point, an eigenvalue's real part for zero-Hopf and double-Hopf points;
Kuznetsov, Elements of Applied Bifurcation Theory, sections 8.2-8.6 and 10.3).
The gradient of phi comes from central differences of that exactly computed
scalar: the residual, and so the located point, stay exact; Newton converges
linearly with a tiny rate instead of quadratically.

Large sparse curves (``problem.sparse``) would need n + 1 evaluations of phi for
that gradient and a dense Jacobian: there the point is found along the curve
instead (:func:`locate_along_curve`), phi's root in the position between the
bracket's rows, each trial point put on the curve by Newton on G(u) = 0 and a
hyperplane across the bracket (sparse LU). The located point solves the curve's
equations to rounding and phi(u) = 0 to the root finder's tolerance in that
position (Brent's method, Brent, Algorithms for Minimization without
Derivatives, 1973, chapter 4).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

from branchline.events.defining_systems import newton
from branchline.events.hopf_coefficients import hopf_coefficients
from branchline.numerics import linalg
from branchline.numerics.newton import NewtonResult, failure

Array = np.ndarray

# Relative step of the central differences of phi: eps**(1/3) balances
# truncation (h^2) against rounding (eps/h) (Nocedal & Wright, Numerical
# Optimization, 2nd ed., section 8.1).
CONDITION_STEP = float(np.finfo(float).eps) ** (1.0 / 3.0)
# A located point farther than this many bracket lengths from its bracket was
# found on another part of the curve: not accepted.
BRACKET_REACH = 3.0


@dataclass(frozen=True)
class CurveBracket:
    """Two consecutive points of a boundary curve between which ``kind`` lies."""

    kind: str
    row: int  # index of the first row (in the order the side was traced)
    u_before: Array
    u_after: Array
    value_before: float
    value_after: float


def find_curve_brackets(problem, points: Array, tests: Array) -> list[CurveBracket]:
    """Sign changes of each of ``problem.tests`` between consecutive rows.

    Parameters
    ----------
    problem : FoldCurve or HopfCurve
    points : ndarray (k, N + 1)
    tests : ndarray (k, T), columns in the order of ``problem.tests``
    """
    brackets = []
    if len(points) < 2 or tests.ndim != 2:
        return brackets
    sparse = getattr(problem, "sparse_tests", ())
    for column, kind in enumerate(problem.tests):
        values = tests[:, column]
        if kind in sparse:
            brackets += _sparse_brackets(problem, kind, points, values)
            continue
        for row in range(len(values) - 1):
            a, b = values[row], values[row + 1]
            if np.isfinite(a) and np.isfinite(b) and a * b < 0.0:
                brackets.append(CurveBracket(kind, row, points[row], points[row + 1], a, b))
    return brackets


def _sparse_brackets(problem, kind: str, points: Array, values: Array) -> list[CurveBracket]:
    """Sign changes of a test computed at some rows only (NaN elsewhere): the ends are
    computed when missing, and each change between two computed rows is narrowed to
    neighbouring rows by bisection over the rows between, computing the test there."""
    values = np.array(values, dtype=float)
    for end in (0, len(values) - 1):
        if not np.isfinite(values[end]):
            values[end] = problem.condition(kind, points[end])
    known = [row for row in range(len(values)) if np.isfinite(values[row])]
    brackets = []
    for i, j in itertools.pairwise(known):
        if not values[i] * values[j] < 0.0:
            continue
        while j > i + 1:
            mid = (i + j) // 2
            values[mid] = problem.condition(kind, points[mid])
            if not np.isfinite(values[mid]):
                break
            i, j = (mid, j) if values[mid] * values[j] < 0.0 else (i, mid)
        brackets.append(CurveBracket(kind, i, points[i], points[j], values[i], values[j]))
    return brackets


def locate_on_curve(problem, bracket: CurveBracket) -> NewtonResult:
    """Newton on (G(u), phi(u)) = 0 from the secant guess inside ``bracket`` (large
    sparse curves: :func:`locate_along_curve`)."""
    if getattr(problem, "sparse", False):
        return locate_along_curve(problem, bracket)
    a, b = bracket.value_before, bracket.value_after
    share = a / (a - b) if np.isfinite(a) and np.isfinite(b) and a != b else 0.5
    guess = bracket.u_before + min(max(share, 0.0), 1.0) * (bracket.u_after - bracket.u_before)
    problem.reset_borders(bracket.u_before)

    def system(u: Array):
        residual, jacobian = problem.evaluate(u)
        jacobian = jacobian.toarray() if hasattr(jacobian, "toarray") else np.asarray(jacobian)
        phi = problem.condition(bracket.kind, u)
        return np.append(residual, phi), np.vstack(
            [jacobian, condition_gradient(problem, bracket.kind, u)]
        )

    outcome = newton(system, guess)
    if outcome.converged:
        reach = BRACKET_REACH * float(np.linalg.norm(bracket.u_after - bracket.u_before))
        if float(np.linalg.norm(outcome.solution - guess)) > max(reach, 1e-12):
            return failure(guess, "Newton left the bracket", residual_norms=outcome.residual_norms)
    return outcome


# Brent's method stops when the position between the bracket's rows is known to this
# (absolute, the position runs over [0, 1]) or to rounding.
POSITION_TOLERANCE = 1e-15


def locate_along_curve(problem, bracket: CurveBracket) -> NewtonResult:
    """The root of phi between the bracket's rows, on the curve (sparse LU only).

    The point at position s in [0, 1] solves G(u) = 0 and d . (u - u_s) = 0 with
    d = u_after - u_before and u_s = u_before + s d (Newton, sparse bordered LU);
    phi there is a smooth function of s whose sign change the bracket holds.
    """
    start, chord = bracket.u_before, bracket.u_after - bracket.u_before
    problem.reset_borders(start)
    found: dict[float, NewtonResult] = {}

    def on_curve(s: float) -> NewtonResult:
        if s not in found:
            target = start + s * chord
            guess = target if not found else _nearest(found, s).solution + (s - _near(found, s)) * chord

            def system(u: Array):
                residual, jacobian = problem.evaluate(u)
                return np.append(residual, chord @ (u - target)), linalg.bordered_matrix(
                    jacobian, chord
                )

            found[s] = newton(system, guess)
        return found[s]

    def phi(s: float) -> float:
        outcome = on_curve(s)
        if not outcome.converged:
            raise _OffCurve(f"no curve point between the rows ({outcome.message})")
        value = float(problem.condition(bracket.kind, outcome.solution))
        if not np.isfinite(value):
            raise _OffCurve(f"the {bracket.kind} condition is not finite between the rows")
        return value

    try:
        ends = phi(0.0), phi(1.0)
        if ends[0] == 0.0 or ends[1] == 0.0:
            root = 0.0 if ends[0] == 0.0 else 1.0
        elif ends[0] * ends[1] > 0.0:
            raise _OffCurve(f"the {bracket.kind} condition has no sign change between the rows")
        else:
            root = brentq(phi, 0.0, 1.0, xtol=POSITION_TOLERANCE, rtol=4 * np.finfo(float).eps)
    except (_OffCurve, linalg.SingularMatrixError, ArithmeticError, ValueError) as exc:
        return failure(start + 0.5 * chord, str(exc))
    return on_curve(root)


class _OffCurve(ArithmeticError):
    """Why a point of the bracket could not be put on the curve or evaluated."""


def _near(found: dict, s: float) -> float:
    return min(found, key=lambda t: abs(t - s))


def _nearest(found: dict, s: float) -> NewtonResult:
    return found[_near(found, s)]


def condition_gradient(problem, kind: str, u: Array) -> Array:
    """Central-difference gradient of ``problem.condition(kind, .)`` at u."""
    gradient = np.empty(u.shape[0])
    for i in range(u.shape[0]):
        h = CONDITION_STEP * max(1.0, abs(float(u[i])))
        up, down = u.copy(), u.copy()
        up[i] += h
        down[i] -= h
        gradient[i] = (problem.condition(kind, up) - problem.condition(kind, down)) / (
            up[i] - down[i]
        )
    return gradient


@dataclass(frozen=True)
class PointReading:
    """What a located codimension-two point means: columns and detail for its event."""

    note: str
    frequency: float | None = None
    lyapunov: float | None = None
    details: dict = None  # type: ignore[assignment]


NOTES = {
    "cusp": "the fold's quadratic coefficient vanishes: two fold curves meet here in a cusp",
    "bogdanov_takens": (
        "a double zero eigenvalue: the fold curve and the Hopf curve meet here "
        "(beyond it the Hopf curve continues as a curve of neutral saddles)"
    ),
    "bautin": "the first Lyapunov coefficient vanishes: the Hopf point changes criticality",
    "zero_hopf": "a zero eigenvalue and an imaginary pair at once: a fold and a Hopf curve meet",
    "double_hopf": "two imaginary pairs at once: two Hopf curves cross",
}


def read_point(problem, kind: str, u: Array) -> PointReading:
    """The reading of a located ``kind`` point u of ``problem``'s curve."""
    details: dict = {"condition": float(problem.condition(kind, u))}
    x, p = u[: problem.n], problem.parameters_at(u)
    eigenvalues = problem.eigenvalues(problem.state_matrix(x, p))
    if eigenvalues.size:
        details["eigenvalues"] = eigenvalues
    frequency = lyapunov = None
    note = NOTES[kind]
    if kind == "bautin":
        frequency = problem.frequency(u)
        coefficients = hopf_coefficients(problem.model, x, p, frequency)
        lyapunov = float(coefficients.lyapunov)
        l2 = float(coefficients.second_lyapunov)
        details["second_lyapunov"] = l2
        details["c2"] = complex(coefficients.c2)
        side = "stable" if l2 < 0 else "unstable"
        note += (
            f"; second Lyapunov coefficient l2 = {l2:.6g} ({'negative' if l2 < 0 else 'positive'}: "
            f"a fold of cycles leaves this point, the large cycles are {side})"
        )
    elif kind == "zero_hopf":
        frequency = problem.frequency(u)
        if not np.isfinite(frequency) and eigenvalues.size:
            pairs = eigenvalues[eigenvalues.imag > 0]
            frequency = float(pairs[int(np.argmin(np.abs(pairs.real)))].imag)
    elif kind == "double_hopf":
        frequency = problem.frequency(u)
        pairs = eigenvalues[eigenvalues.imag > 0]
        others = pairs[np.argsort(np.abs(pairs.imag - frequency))][1:]
        if others.size:
            other = others[int(np.argmin(np.abs(others.real)))]
            details["frequencies"] = [frequency, float(other.imag)]
    return PointReading(note, frequency, lyapunov, details)
