"""Step-length rules of the continuation engine: small pure functions.

Steps are pseudo-arclength lengths between ``smallest`` and ``largest`` of the
curve's step settings. The engine (:func:`branchline.continuation.engine.follow_curve`)
applies these rules after each corrector run:

- Grow the step by ``GROW_FACTOR`` after a corrector that converged in at most
  ``EASY_ITERATIONS`` iterations (:func:`grown`); shrink it by
  ``SHRINK_FACTOR`` and retry when the corrector fails (no convergence,
  divergence, singular bordered matrix, non-finite residual;
  :func:`shrunk`). At the smallest step a failure stops the curve with
  status ``failed``.
- Shrink and retry when the tangent turns by more than ``MAX_TANGENT_ANGLE``
  in one step (:func:`tangent_turns_too_far`): the predictor would be poor,
  and a sharp turn may hide a fold pair.
- Test-function rule, so that two events close together are not stepped
  over (:func:`tests_unresolved`): with the slope of each test function from
  the last step, the value at the new point is predicted linearly. If a test
  function deviates from that prediction by more than ``TEST_CHANGE_LIMIT``
  times its local size (the larger of its magnitudes at the two ends of the
  step, plus ``TEST_SCALE_FLOOR`` times the largest magnitude seen on the
  curve), the step is rejected and shrunk. A test function that dips through
  zero and back within one step must curve strongly relative to its size,
  which this rule catches. The rule never shrinks below ``TEST_STEP_FLOOR``
  times the largest step (nor below the smallest step).
- Leaving the parameter bounds (:func:`crossed_edge`): the last point is put
  exactly on the edge, starting from :func:`edge_guess`; status ``done``.
- Leaving the limits of a state component (:class:`Limit`, :func:`first_limit`,
  only when limits are given): the same, with that component fixed at the
  limit. A value beyond a limit by less than ``LIMIT_SLACK`` (relative) is
  roundoff, not a crossing, so that a branch lying on a limit (a washout
  branch with zero biomass and the limit ``X >= 0``, say) is followed.
- Passing by the start point again with the same orientation closes the curve
  (an isola, :func:`closes_loop`); status ``closed``.

Test values are handled as lists of plain floats: for a few values that is
cheaper than numpy, and these rules run at every step.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from branchline.numerics import linalg

Array = np.ndarray

EASY_ITERATIONS = 2  # converged this fast: the step may grow
# The same for the chord iteration on the last point's factorization (engine,
# ``newton="reuse"``, large sparse Jacobians): it converges linearly, and each of its
# iterations costs one residual and one pair of triangular solves, about a twentieth
# of a factorization at 20,000 states (tests/benchmarks/bench_sparse.py); so the step
# is held back only when the chord nears its cap (MAX_CHORD_ITERATIONS = 10).
EASY_CHORD_ITERATIONS = 8
GROW_FACTOR = 1.5
SHRINK_FACTOR = 0.5
# Largest angle between successive tangents (radians); ~17 degrees keeps the
# predictor error well inside Newton's convergence region (common practice).
MAX_TANGENT_ANGLE = 0.3
MIN_TANGENT_COSINE = math.cos(MAX_TANGENT_ANGLE)
# Test-function rule (module docstring): a deviation from the linear prediction
# of half the function's local size means the step does not resolve it.
TEST_CHANGE_LIMIT = 0.5
# Part of the largest magnitude seen that counts as "size" where the function
# is near zero, so that roundoff around a zero does not shrink the step.
TEST_SCALE_FLOOR = 1e-3
# The rule stops shrinking at this fraction of the largest step: it resolves
# events, it must not stall a trace on a test function that is not smooth.
TEST_STEP_FLOOR = 1e-4
# A point closer to the start than this fraction of the step (measured from the
# chord of the step) counts as the start point again (closing an isola).
LOOP_DISTANCE_FRACTION = 0.25
# A state within this distance (relative to 1 + |limit|) beyond one of its limits still
# counts as inside: corrected points carry errors of about RESIDUAL_TOL (1e-10), and a
# branch lying on a limit (zero biomass) must not stop on the sign of its roundoff.
LIMIT_SLACK = 1e-10


@dataclass(frozen=True)
class Limit:
    """The window [lo, hi] of the component ``index`` of u (a state), named ``name``."""

    index: int
    lo: float
    hi: float
    name: str


def first_step(initial: float, smallest: float, largest: float) -> float:
    """The initial step, clipped to [smallest, largest]."""
    return min(max(initial, smallest), largest)


def tests_step_floor(smallest: float, largest: float) -> float:
    """The step below which the test-function rule no longer shrinks."""
    return max(smallest, TEST_STEP_FLOOR * largest)


def shrunk(step: float, floor: float) -> float:
    """The step after a rejection, not below ``floor``."""
    return max(step * SHRINK_FACTOR, floor)


def grown(step: float, iterations: int, largest: float, easy: int = EASY_ITERATIONS) -> float:
    """The step after an accepted point whose corrector took ``iterations`` (``easy``
    or fewer let it grow)."""
    if iterations <= easy:
        return min(step * GROW_FACTOR, largest)
    return step


def tangent_turns_too_far(new: Array, old: Array, step: float, smallest: float) -> bool:
    """True when unit tangents ``old`` -> ``new`` turn by more than ``MAX_TANGENT_ANGLE``
    and the step can still shrink."""
    return float(new.dot(old)) < MIN_TANGENT_COSINE and step > smallest


# What the test-function rule remembers of the accepted points, the tuple
# (values, slopes, largest): the test values at the last accepted point; their change
# per unit arclength over the last accepted step (None before the first step); the
# largest magnitude of each seen on the curve so far. All lists of float. A plain tuple:
# it is rebuilt at every accepted point.
TrackedTests = tuple[list[float], "list[float] | None", list[float]]


def track_tests(values: list[float]) -> TrackedTests:
    """What the rule remembers at the start point."""
    return values, None, [abs(value) for value in values]


def tracked_after(tracked: TrackedTests, values: list[float], chord_length: float) -> TrackedTests:
    """What the rule remembers after accepting a step of length ``chord_length`` to ``values``.

    A zero-length step keeps the previous slopes.
    """
    previous, slopes, largest = tracked
    if chord_length > 0.0:
        slopes = [(new - old) / chord_length for new, old in zip(values, previous, strict=True)]
    largest = [max(top, abs(value)) for top, value in zip(largest, values, strict=True)]
    return values, slopes, largest


def tests_unresolved(
    tracked: TrackedTests,
    values: list[float],
    chord_length: float,
    step: float,
    floor: float,
    change_limit: float = TEST_CHANGE_LIMIT,
) -> bool:
    """The test-function rule (module docstring): True means shrink the step.

    True when a test value deviates from its linear prediction by more than
    ``change_limit`` times its local size (``math.inf`` switches the rule
    off). Applies once there is a slope to predict with and while ``step`` is
    above ``floor`` (:func:`tests_step_floor`).
    """
    previous, slopes, largest = tracked
    if slopes is None or step <= floor:
        return False
    for old, new, rate, top in zip(previous, values, slopes, largest, strict=True):
        predicted = old + chord_length * rate
        local = max(abs(old), abs(new)) + TEST_SCALE_FLOOR * top
        if abs(new - predicted) > change_limit * local:
            return True
    return False


def crossed_edge(parameter: float, lo: float, hi: float) -> float | None:
    """The interval edge a point with this parameter lies beyond, or None (also for NaN)."""
    if parameter < lo:
        return lo
    if parameter > hi:
        return hi
    return None


def edge_guess(u_in: Array, u_out: Array, edge: float, index: int = -1) -> Array:
    """Start for the point on the edge: the chord u_in -> u_out cut where component
    ``index`` (the parameter by default) equals ``edge``."""
    fraction = (edge - u_in[index]) / (u_out[index] - u_in[index])
    guess = u_in + fraction * (u_out - u_in)
    guess[index] = edge
    return guess


def edge_fraction(u_in: Array, u_out: Array, edge: float, index: int = -1) -> float:
    """Where along the chord u_in -> u_out component ``index`` reaches ``edge`` (0 to 1)."""
    return (edge - u_in[index]) / (u_out[index] - u_in[index])


def beyond_limit(value: float, limit: Limit) -> float | None:
    """The bound of ``limit`` that ``value`` lies beyond (by more than the slack), or None."""
    lo, hi = limit.lo, limit.hi
    if value < lo - LIMIT_SLACK * (1.0 + abs(lo)):
        return lo
    if value > hi + LIMIT_SLACK * (1.0 + abs(hi)):
        return hi
    return None


def first_limit(
    u_in: Array, u_out: Array, limits: Sequence[Limit]
) -> tuple[Limit, float, float] | None:
    """(limit, bound, fraction) of the first limit the chord u_in -> u_out leaves, or None.

    ``limits`` is a sequence of :class:`Limit`; ``fraction`` (0 to 1) says where
    along the chord the component reaches ``bound``. Several limits left in one step:
    the one reached first along the chord.
    """
    first = None
    for limit in limits:
        bound = beyond_limit(u_out[limit.index], limit)
        if bound is None:
            continue
        fraction = edge_fraction(u_in, u_out, bound, limit.index)
        if first is None or fraction < first[2]:
            first = (limit, bound, fraction)
    return first


def closes_loop(
    u_start: Array,
    t_start: Array,
    u: Array,
    t: Array,
    chord: Array,
    chord_length: float,
    accepted: int,
) -> bool:
    """True when the step u -> u + chord (tangent ``t`` at u) passes by the start point
    in the start's direction, after more than two ``accepted`` points."""
    return (
        abs(u[-1] - u_start[-1]) <= chord_length
        and accepted > 2
        and passes_start(u_start, t_start, u, chord, chord_length, t)
    )


def passes_start(
    u_start: Array, t_start: Array, u: Array, chord: Array, chord_length: float, t: Array
) -> bool:
    """True when the step u -> u + chord passes by the start point in its direction."""
    if chord_length == 0.0 or float(t_start @ t) <= 0.0:
        return False
    offset = u_start - u
    along = float(offset @ chord) / (chord_length * chord_length)
    if not 0.0 < along <= 1.0:
        return False
    distance = linalg.norm(offset - along * chord)
    return distance <= LOOP_DISTANCE_FRACTION * chord_length
