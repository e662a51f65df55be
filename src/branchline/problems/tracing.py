"""Problem-independent tracing: follow a curve to one or both sides of a start point.

Any problem of the engine's protocol (:mod:`branchline.continuation.engine`) is
traced the same way: the equilibrium branch, a fold or Hopf curve, a family of
cycles. :func:`trace_sides` follows the curve from a converged start point to
the sides a :class:`TraceRequest` asks for; :func:`in_trace_order` joins the
sides into one table of rows in trace order (the decreasing side reversed, the
start point once, the increasing side), with signed arclength and tangents
oriented in that order; :func:`summarize` says how the trace ended.

Example: the unit circle x^2 + p^2 = 1 from (1, 0), both sides, p in [-0.5, 0.5]:

>>> import numpy as np
>>> class Circle:
...     def __init__(self, orientation): self.orientation = orientation
...     def residual(self, u): return np.array([u[0] ** 2 + u[1] ** 2 - 1.0])
...     def jacobian(self, u): return np.array([[2 * u[0], 2 * u[1]]])
...     def observe(self, u, t, jac): return None, np.array([t[-1]])
>>> request = TraceRequest(start=np.array([1.0, 0.0]), bounds=(-0.5, 0.5))
>>> sides = trace_sides(Circle, request)
>>> rows = in_trace_order(sides)
>>> float(rows.points[0, -1]), float(rows.points[-1, -1]), summarize(sides)[0]
(-0.5, 0.5, 'done')
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np

from branchline.continuation.correctors import COUNT_KEYS
from branchline.continuation.engine import (
    Curve,
    CurveProblem,
    CurveRows,
    failed_curve,
    follow_curve,
)
from branchline.continuation.step_control import Limit
from branchline.numerics import linalg
from branchline.numerics.tolerances import StepSettings
from branchline.vocabulary import Status

Array = np.ndarray

DIRECTIONS = ("both", "increasing", "decreasing")
# Which status wins when the two sides of a trace end differently.
_STATUS_ORDER = {Status.FAILED: 3, Status.MAX_POINTS: 2, Status.CLOSED: 1, Status.DONE: 0}
_SIDE_NAMES = {-1: "decreasing side", 1: "increasing side"}


@dataclass(frozen=True)
class TraceRequest:
    """What to trace: from where, which sides, within which window, with which steps.

    Attributes
    ----------
    start : ndarray (N + 1,)
        A converged point of the curve (its last component the curve's parameter).
    bounds : (lo, hi)
        Window for the parameter; each side ends exactly on its edge.
    direction : {"both", "increasing", "decreasing"}
        Sides to trace ("both": the decreasing-parameter side first).
    steps : StepSettings
        Step lengths; ``max_points`` applies to each side separately.
    newton : {"full", "chord", "reuse"}
        The engine's corrector.
    limits : tuple of Limit
        Windows for other components (states); a side stops on one.
    start_tangent : ndarray (N + 1,), optional
        Follow only this direction, with this exact tangent (branch switching,
        where the bordered matrix at the start is singular); ``direction`` is
        then ignored.
    progress : callable(int), optional
        Called with the number of points computed so far (both sides together).
    """

    start: Array
    bounds: tuple[float, float]
    direction: str = "both"
    steps: StepSettings = field(default_factory=StepSettings)
    newton: str = "full"
    limits: Sequence[Limit] = ()
    start_tangent: Array | None = None
    progress: Callable[[int], None] | None = None


def trace_sides(
    make_problem: Callable[[int], CurveProblem], request: TraceRequest
) -> list[tuple[int, Curve]]:
    """Follow the curve through ``request.start`` to the sides asked for.

    Parameters
    ----------
    make_problem : callable(orientation) -> problem
        The problem for one side; ``orientation`` is -1 on the side traced with
        decreasing parameter first (whose rows are reversed), else 1, so that a
        problem can orient what it observes in trace order.
    request : TraceRequest

    Returns
    -------
    list of (orientation, Curve), in the order traced. A side whose start
    direction is undefined is a failed curve with no points. A closed curve
    (an isola) ends the trace: the other side is the same curve.
    """
    if request.direction not in DIRECTIONS:
        raise ValueError(f"direction must be one of {DIRECTIONS}, not {request.direction!r}")
    u0 = np.asarray(request.start, dtype=float)
    curves: list[tuple[int, Curve]] = []
    done_points = 0
    for orientation, tangent0, exact in _sides(request, u0.shape[0]):
        problem = make_problem(orientation)
        if tangent0 is None:
            # One tangent for both sides, reversed for the decreasing one, so that
            # the two sides leave in opposite directions even at a turning point.
            base = _initial_direction(problem, u0)
            if isinstance(base, str):
                curves.append((orientation, failed_curve(u0, base)))
                continue
            tangent0 = orientation * base
        curve = follow_curve(
            problem,
            u0,
            tangent0,
            request.steps,
            request.bounds,
            newton=request.newton,
            progress=_side_progress(request.progress, max(done_points - 1, 0)),
            start_tangent_exact=exact,
            limits=request.limits,
        )
        curves.append((orientation, curve))
        done_points += len(curve)
        if curve.status == Status.CLOSED:
            break  # the other side is the same closed curve
    return curves


def _side_progress(progress, offset: int):
    """The progress callback of one side: counts continue from the sides before
    (the second side's start row is the first's, hence ``offset``)."""

    def report(count: int) -> None:
        if progress is not None:
            progress(offset + count)

    return report


def _sides(request: TraceRequest, size: int):
    """(orientation, tangent0 or None, exact) for each side to trace, in trace order."""
    if request.start_tangent is not None:
        tangent = np.array(request.start_tangent, dtype=float).reshape(-1)
        if tangent.shape[0] != size:
            raise ValueError(f"start_tangent must have {size} components, not {tangent.shape[0]}")
        return [(1, tangent / linalg.norm(tangent), True)]
    if request.direction == "both":
        return [(-1, None, False), (1, None, False)]
    if request.direction == "decreasing":
        return [(-1, None, False)]
    return [(1, None, False)]


def _initial_direction(problem: CurveProblem, u0: Array) -> Array | str:
    """The unit tangent at the start with non-negative parameter component, or a message."""
    with np.errstate(all="ignore"):
        jac = problem.jacobian(u0)
    try:
        return linalg.initial_tangent(jac, 1.0)
    except linalg.SingularMatrixError:
        describe = getattr(problem, "describe", None)
        where = describe(u0) if describe is not None else f"at parameter {u0[-1]:.10g}"
        return (
            f"the branch direction is undefined at the start {where}: "
            "the Jacobian [f_x, f_p] has rank below n (a branch point?)"
        )


def summarize(curves: list[tuple[int, Curve]]) -> tuple[Status, str]:
    """(status, message) of a trace: the worst side's status, each side's message."""
    if not curves:
        return Status.DONE, ""
    status = max((curve.status for _, curve in curves), key=lambda s: _STATUS_ORDER.get(s, 3))
    if len(curves) == 1:
        return status, curves[0][1].message
    parts = [
        f"{_SIDE_NAMES[orientation]}: {curve.message or curve.status}"
        for orientation, curve in curves
    ]
    return status, "; ".join(parts)


def total_counts(curves: list[tuple[int, Curve]], before: dict[str, int] | None = None) -> dict:
    """The work counts of all sides added up (to ``before``, e.g. a start solve's)."""
    counts = dict.fromkeys(COUNT_KEYS, 0)
    for key, value in (before or {}).items():
        counts[key] = counts.get(key, 0) + value
    for _, curve in curves:
        for key, value in curve.counts.items():
            counts[key] = counts.get(key, 0) + value
    return counts


def in_trace_order(curves: list[tuple[int, Curve]]) -> CurveRows | None:
    """The sides' rows joined in trace order; None when no side has a point.

    ``arclength`` is signed (negative on the decreasing side) and ``tangents``
    point in trace order; ``payloads`` is stacked as the engine stacked it.
    """
    pieces = [(orientation, curve) for orientation, curve in curves if len(curve)]
    if not pieces:
        return None
    columns: dict[str, list] = {key: [] for key in CurveRows.__dataclass_fields__}
    for index, (orientation, curve) in enumerate(pieces):
        rows = slice(None)
        if orientation < 0:
            order, sign = slice(None, None, -1), -1.0
        else:
            order, sign = slice(None), 1.0
            # The start row is already there when the decreasing side came first.
            if index > 0 and pieces[index - 1][0] < 0:
                rows = slice(1, None)
        select = np.arange(len(curve))[rows][order]
        columns["points"].append(curve.points[select])
        columns["tangents"].append(sign * curve.tangents[select])
        columns["arclength"].append(sign * curve.arclength[select])
        columns["newton_iterations"].append(curve.newton_iterations[select])
        columns["residual_norms"].append(curve.residual_norms[select])
        columns["test_values"].append(curve.test_values[select])
        columns["payloads"].append(np.asarray(curve.payloads)[select])
    joined = {key: np.concatenate(values) for key, values in columns.items()}
    joined["newton_iterations"] = joined["newton_iterations"].astype(int)
    return CurveRows(**joined)


__all__ = [
    "DIRECTIONS",
    "TraceRequest",
    "in_trace_order",
    "summarize",
    "total_counts",
    "trace_sides",
]
