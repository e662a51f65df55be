"""Crowded steps: refine the branch until each step holds at most one event.

Two events in one step of a traced branch can hide each other: a fold and a
branch point both change sign, and the de-duplication of events would keep
only one; two branch points cancel in the bordered determinant's sign; twenty
complex pairs of a chain of identical cells cross the imaginary axis together.
So before events are located, every step whose end rows show more than one
event is split: a point on the branch at the middle of the step (Newton on
f = 0 and chord . (u - middle) = 0), its tangent, eigenvalues and test
functions, then each half is checked again, down to a floor width and within
a budget of points per branch (so that a dense cluster cannot make a run hang).
This is bisection of the interval on the curve, the step-halving rule of
event location (Allgower & Georg, Introduction to Numerical Continuation
Methods, section 9.2, from memory) applied to every event in a cluster.

A step counts as crowded when

- more than one event shows: sign changes of the fold and branch-point tests,
  plus each complex pair matched across the imaginary axis
  (:func:`branchline.events.eigenvalue_pairs.hopf_crossings`), plus a Hopf-test
  sign change no pair explains; or
- the number of unstable eigenvalues jumps by more than those events explain
  (a complex pair counts two, a fold or branch point one): two real
  eigenvalues crossing together leave the branch-point test's sign unchanged.

The points found are inserted into the branch as ordinary rows (they are
equilibria on it); ``counts`` records ``refinement_points``, ``crowded_steps``
and ``crowded_steps_unresolved`` (steps the floor or the budget left crowded),
which run.json reports.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np

from branchline.continuation import engine
from branchline.continuation.correctors import unit_tangent
from branchline.events.eigenvalue_pairs import COMPLEX_RTOL, hopf_crossings
from branchline.events.location import correct_on_branch
from branchline.numerics import linalg
from branchline.problems.equilibrium_branch import (
    TEST_FUNCTIONS,
    EquilibriumBranch,
    unstable_counts,
)
from branchline.results.records import Branch
from branchline.vocabulary import EventKind

if TYPE_CHECKING:
    from branchline.model.build import Model

Array = np.ndarray

# At most this many points are added to one branch: a cluster of n events needs
# about n log2(step / spacing) of them, a few hundred for the densest met in tests.
MAX_REFINEMENT_POINTS = 800
# A sub-step shorter than this (relative to 1 + |u|) is not split further: events
# closer than that coincide to the accuracy of the points (a pitchfork where the
# traced branch turns back, say).
SMALLEST_SUBSTEP_RTOL = 1e-11
# Columns of the test values, by the test functions' names.
FOLD, HOPF, BRANCH_POINT = (
    TEST_FUNCTIONS.index(kind) for kind in (EventKind.FOLD, EventKind.HOPF, EventKind.BRANCH_POINT)
)


@dataclass(frozen=True)
class _Point:
    """One point of the branch with what detection needs (tangent in trace order)."""

    u: Array
    tangent: Array
    eigenvalues: Array
    tests: Array
    arclength: float
    iterations: int = 0
    residual: float = 0.0

    @property
    def unstable(self) -> int:
        return int(unstable_counts(self.eigenvalues[None, :])[0])


def _strict_change(a: float, b: float) -> bool:
    return (a < 0.0 < b) or (b < 0.0 < a)


def _unstable_pairs(eigenvalues: Array) -> int:
    lam = eigenvalues[np.isfinite(eigenvalues)]
    if lam.shape[0] == 0:
        return 0
    scale = float(np.max(np.abs(lam)))
    return int(np.count_nonzero((lam.imag > COMPLEX_RTOL * scale) & (lam.real > 0.0)))


def crowded(a: _Point, b: _Point, complete: bool) -> bool:
    """True when the step a -> b shows more than one event, or more crossings than events.

    ``complete`` says the eigenvalue rows hold every eigenvalue (dense models), so
    that a jump of the unstable count can be trusted.
    """
    fold = _strict_change(a.tests[FOLD], b.tests[FOLD])
    branch_point = _strict_change(a.tests[BRANCH_POINT], b.tests[BRANCH_POINT])
    hopf_sign = _strict_change(a.tests[HOPF], b.tests[HOPF])
    pairs = 0
    if hopf_sign or _unstable_pairs(a.eigenvalues) != _unstable_pairs(b.eigenvalues):
        pairs = len(hopf_crossings(a.eigenvalues, b.eigenvalues))
    events = int(fold) + int(branch_point) + max(pairs, int(hopf_sign))
    if events >= 2:
        return True
    if not complete:
        return False
    return abs(a.unstable - b.unstable) > 2 * pairs + int(fold) + int(branch_point)


class _Refiner:
    """Puts points on the branch between two others and observes them."""

    def __init__(self, model: Model, branch: Branch) -> None:
        self.model = model
        self.k = model.parameter_index(branch.vary)
        self.parameters = np.array(branch.parameters, dtype=float)
        self.problem = EquilibriumBranch(model, self.k, self.parameters, 1)
        self.width = branch.eigenvalues.shape[1]
        self.complete = self.width == len(model.states)
        self.spent = 0
        self.unresolved = 0

    def between(self, a: _Point, b: _Point) -> _Point | None:
        """The branch point on the plane halfway between a and b, observed; None on failure."""
        chord = b.u - a.u
        outcome = correct_on_branch(self.model, self.parameters, self.k, 0.5 * (a.u + b.u), chord)
        if not outcome.converged:
            return None
        u = outcome.solution
        left, right = linalg.norm(u - a.u), linalg.norm(b.u - u)
        share = left / (left + right) if left + right > 0.0 else 0.5
        arclength = a.arclength + share * (b.arclength - a.arclength)
        return self.observe(u, a.tangent, arclength, outcome.residual_norms)

    def observe(
        self, u: Array, like: Array, arclength: float, residuals: list[float]
    ) -> _Point | None:
        """The point u of the branch with its tangent (oriented like ``like``), eigenvalues
        and test values; None when they cannot be computed."""
        try:
            with np.errstate(all="ignore"):
                jac = self.problem.jacobian(u)
                tangent = unit_tangent(jac, like, linalg.is_sparse(jac))
                eigenvalues, tests = self.problem.observe(u, tangent, jac)
        except (engine.ObservationFailed, linalg.SingularMatrixError, ArithmeticError, ValueError):
            return None
        row = np.full(self.width, complex(math.nan), dtype=complex)
        count = min(self.width, len(eigenvalues))
        row[:count] = np.asarray(eigenvalues, dtype=complex)[:count]
        return _Point(
            u=u,
            tangent=tangent,
            eigenvalues=row,
            tests=np.asarray(tests, dtype=float),
            arclength=arclength,
            iterations=max(len(residuals) - 1, 0),
            residual=residuals[-1] if residuals else 0.0,
        )

    def split(self, a: _Point, b: _Point, depth: int = 0) -> list[_Point]:
        """Points strictly between a and b, in order, leaving no crowded sub-step.

        Recursion depth is bounded by the floor width (about 40 halvings of a step).
        """
        if not crowded(a, b, self.complete):
            return []
        short = linalg.norm(b.u - a.u) <= SMALLEST_SUBSTEP_RTOL * (1.0 + linalg.norm(a.u))
        if short or self.spent >= MAX_REFINEMENT_POINTS:
            self.unresolved += 1
            return []
        middle = self.between(a, b)
        self.spent += 1
        if middle is None:
            self.unresolved += 1
            return []
        return [*self.split(a, middle, depth + 1), middle, *self.split(middle, b, depth + 1)]


def _row(branch: Branch, row: int) -> _Point:
    return _Point(
        u=np.append(branch.states[row], branch.parameter_values[row]),
        tangent=branch.tangents[row],
        eigenvalues=branch.eigenvalues[row],
        tests=branch.test_values[row],
        arclength=float(branch.arclength[row]),
        iterations=int(branch.newton_iterations[row]),
        residual=float(branch.residual_norms[row]),
    )


def _candidate_steps(branch: Branch) -> Array:
    """Steps where any test changes sign or the unstable count moves (cheap prefilter)."""
    tests = branch.test_values
    with np.errstate(invalid="ignore"):
        signs = np.sign(tests)
        changed = np.any(signs[1:] != signs[:-1], axis=1)
    moved = np.diff(branch.unstable_count) != 0
    return np.flatnonzero(changed | moved)


def resolve_crowded_steps(model: Model, branch: Branch) -> Branch:
    """The branch with points inserted until no step holds more than one event.

    Parameters
    ----------
    model : Model
    branch : Branch
        A traced branch (rows in trace order).

    Returns
    -------
    Branch
        The same branch when no step is crowded; otherwise a copy with the new
        rows and ``counts`` entries ``refinement_points``, ``crowded_steps``,
        ``crowded_steps_unresolved``.
    """
    if len(branch) < 2 or branch.test_values.shape[1] < 3:
        return branch
    refiner = _Refiner(model, branch)
    inserted: dict[int, list[_Point]] = {}
    crowded_steps = 0
    for row in _candidate_steps(branch):
        a, b = _row(branch, int(row)), _row(branch, int(row) + 1)
        if not crowded(a, b, refiner.complete):
            continue
        crowded_steps += 1
        unresolved = refiner.unresolved
        points = refiner.split(a, b)
        refiner.unresolved = unresolved + int(refiner.unresolved > unresolved)
        if points:
            inserted[int(row)] = points
    if not crowded_steps:
        return branch
    counts = dict(branch.counts)
    counts["refinement_points"] = counts.get("refinement_points", 0) + refiner.spent
    counts["crowded_steps"] = counts.get("crowded_steps", 0) + crowded_steps
    counts["crowded_steps_unresolved"] = (
        counts.get("crowded_steps_unresolved", 0) + refiner.unresolved
    )
    return _with_points(branch, inserted, counts)


def with_start_point(model: Model, branch: Branch, u: Array) -> Branch:
    """The branch with ``u`` (a point on it, beyond its start row) added before that row.

    For a branch started off a branch point: ``u``, much closer to the branch
    point than the start, makes the stretch between them an ordinary step of
    the branch, whose events detection and location then see. The start row is
    the one at arclength 0, the first row in trace order (last for a branch
    traced towards decreasing parameter); ``u`` is put on its outer side.
    Returns ``branch`` unchanged when ``u`` cannot be observed.
    """
    if len(branch) == 0:
        return branch
    start = int(np.argmin(np.abs(branch.arclength)))
    first = start == 0 and (len(branch) == 1 or branch.arclength[-1] > 0.0)
    gap = linalg.norm(u - _row(branch, start).u)
    arclength = float(branch.arclength[start]) + (-gap if first else gap)
    point = _Refiner(model, branch).observe(u, branch.tangents[start], arclength, [])
    if point is None:
        return branch
    if first:
        return _with_points(branch, {}, dict(branch.counts), before=[point])
    return _with_points(branch, {len(branch) - 1: [point]}, dict(branch.counts))


def _with_points(
    branch: Branch, inserted: dict[int, list[_Point]], counts: dict, before: list | None = None
) -> Branch:
    """A copy of ``branch`` with ``inserted[row]`` placed after each ``row``
    (and ``before`` ahead of the first row)."""
    rows: list[_Point] = list(before or [])
    for row in range(len(branch)):
        rows.append(_row(branch, row))
        rows.extend(inserted.get(row, []))
    eigenvalues = np.array([p.eigenvalues for p in rows], dtype=complex)
    points = np.array([p.u for p in rows])
    return replace(
        branch,
        parameter_values=points[:, -1].copy(),
        states=points[:, :-1].copy(),
        arclength=np.array([p.arclength for p in rows]),
        tangents=np.array([p.tangent for p in rows]),
        eigenvalues=eigenvalues,
        unstable_count=unstable_counts(eigenvalues),
        test_values=np.array([p.tests for p in rows]),
        newton_iterations=np.array([p.iterations for p in rows], dtype=int),
        residual_norms=np.array([p.residual for p in rows]),
        counts=counts,
    )


__all__ = [
    "MAX_REFINEMENT_POINTS",
    "crowded",
    "resolve_crowded_steps",
    "with_start_point",
]
