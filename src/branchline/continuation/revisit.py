"""Points rejected by the test-function rule, kept and offered again as the next point.

Why: the engine judges a step by the test-function rule
(:func:`branchline.continuation.step_control.tests_unresolved`) after the problem's
``observe``, so a rejected step has already paid for its observation. On a dense
equilibrium branch that is all eigenvalues of f_x, most of a point's cost above a
few dozen states (np.linalg.eigvals: ~2.5 ms at 100 states against ~0.5 ms for the
rest of a point; tests/benchmarks/bench_model.py). Yet the rejected point w is a
converged point of the curve: the rule rejected the *step* u -> w as too long to
resolve the test functions, not the point.

What the engine does with it (``follow_curve``, for problems that allow it): after the
rule rejects u -> w, the point w is kept with its observation (:class:`ObservedPoint`);
the shorter step u -> m follows as usual; once m is accepted, w is offered as the next
point before any new prediction, when it lies ahead of m and its tangent turns by at
most the engine's angle limit (:func:`offered`). It is then judged like a new point
(test-function rule with the slopes of the step u -> m and the chord m -> w as the
step, closing an isola) and recorded as is. When the rule declines it, that is no step
(not counted, the step length unchanged, so that a kept point never holds the steps
down): a new step from m follows at once, and w stays kept, to be offered after the
next accepted point (never again from the point it was judged from), until a point
beyond it is accepted. So a rejected step is bisected on the curve with its far end
reused, and an observation is computed at most once per point, accepted or rejected. Every recorded point is still a corrected point
of the curve whose step passed the same rules; only where the points lie changes (the
far end of a rejected step instead of a new prediction from m).

Which problems: only those whose ``observe`` is a pure function of its arguments
(no state carried from one call to the next, such as eigenvalues tracked point to
point), declared by the attribute ``revisit_rejected = True``. The equilibrium branch
sets it for dense Jacobians above ``LinearAlgebraPolicy.reuse_rejected_points_above``
states (:mod:`branchline.numerics.policy`), where the saving is measurable; below
it the points stay exactly where they were.
"""

from __future__ import annotations

from typing import Any, NamedTuple

import numpy as np

from branchline.continuation.step_control import MIN_TANGENT_COSINE
from branchline.numerics.newton import NewtonResult

Array = np.ndarray

# Kept points at most (each holds a Jacobian): the rule halves the step at each
# rejection from one point, so a handful covers any stretch the rule resolves.
MAX_KEPT = 8


class ObservedPoint(NamedTuple):
    """A corrected and observed point, not yet judged by the test-function rule.

    Attributes
    ----------
    u : ndarray (N + 1,)
        The corrected point.
    tangent : ndarray (N + 1,)
        Its unit tangent, oriented like the tangent of the point it was reached from.
    correction : NewtonResult
        The corrector's run that gave ``u`` (iterations, residual norm, Jacobian).
    factors : tuple or None
        The engine's tangent factorization at ``u`` (sparse ``reuse`` corrector), or None.
    chord_on_factors : bool
        Whether the corrector was the chord iteration on the previous point's factors.
    payload : Any
        What ``observe`` returned for the point.
    tests : ndarray (K,)
        Its test values.
    """

    u: Array
    tangent: Array
    correction: NewtonResult
    factors: Any
    chord_on_factors: bool
    payload: Any
    tests: Array


def kept_with(
    kept: tuple[ObservedPoint, ...], rejected: ObservedPoint, u: Array, tangent: Array
) -> tuple[ObservedPoint, ...]:
    """The kept points with ``rejected`` added, ordered by their distance ahead of ``u``
    along ``tangent`` (the point the rule judged them from); beyond ``MAX_KEPT`` the
    farthest are dropped."""
    ordered = sorted((rejected, *kept), key=lambda point: float(tangent.dot(point.u - u)))
    return tuple(ordered[:MAX_KEPT])


def offered(
    kept: tuple[ObservedPoint, ...], u: Array, tangent: Array
) -> tuple[ObservedPoint | None, tuple[ObservedPoint, ...]]:
    """(the kept point to judge next from ``u`` or None, the points kept after it).

    The nearest kept point is offered when it lies ahead of ``u`` along ``tangent``
    and its own tangent turns by at most the engine's angle limit
    (``step_control.MAX_TANGENT_ANGLE``) from ``tangent``; otherwise all are dropped
    (the farther ones lie beyond it).
    """
    if not kept:
        return None, ()
    nearest = kept[0]
    ahead = float(tangent.dot(nearest.u - u)) > 0.0
    if ahead and float(tangent.dot(nearest.tangent)) >= MIN_TANGENT_COSINE:
        return nearest, kept[1:]
    return None, ()
