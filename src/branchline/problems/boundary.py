"""Follow a located fold or Hopf point in two parameters: ``trace_boundary``.

The curve problems (:mod:`branchline.problems.fold_curve`,
:mod:`branchline.problems.hopf_curve`) are handed to the same engine as
equilibrium branches (:func:`branchline.continuation.engine.follow_curve`),
once to each side of the starting event; the sides are joined in boundary
order (the side traced first reversed, then the other), and the
codimension-two points found on them are located
(:mod:`branchline.events.codimension_two`) and returned as events.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass, replace

import numpy as np

from branchline.continuation import engine as continuation
from branchline.continuation.step_control import Limit
from branchline.events.codimension_two import (
    CurveBracket,
    find_curve_brackets,
    locate_on_curve,
    read_point,
)
from branchline.numerics import linalg
from branchline.problems.boundary_switching import SWITCH_POINTS, start_event
from branchline.problems.equilibrium_branch import state_limits_of, unstable_counts
from branchline.problems.fold_curve import FoldCurve
from branchline.problems.hopf_curve import NEUTRAL_SADDLE, HopfCurve
from branchline.problems.sparse_hopf_curve import SparseHopfCurve
from branchline.results.records import STATUS_DONE, STATUS_FAILED, Boundary, Event

Array = np.ndarray

PROBLEMS = {"fold": FoldCurve, "hopf": HopfCurve}
_SIDE_NAMES = {-1: "first side", 1: "second side"}
_STATUS_ORDER = {STATUS_FAILED: 3, "max_points": 2, "closed": 1, STATUS_DONE: 0}


@dataclass(frozen=True)
class BoundaryOutcome:
    """A traced boundary and the codimension-two events located on it (boundary order)."""

    boundary: Boundary
    events: list[Event]


def curve_class(model, kind: str):
    """The curve problem for a ``kind`` ("fold" or "hopf") boundary of ``model``: the Hopf
    curve of a large sparse model is the complex bordered system
    (:class:`SparseHopfCurve`, above ``LinearAlgebraPolicy.hopf_curve_sparse_above``
    states), every other curve the one in :data:`PROBLEMS`."""
    if kind == "hopf":
        policy = model.linear_algebra
        if policy.sparse_hopf_curve(len(model.states), bool(getattr(model, "sparse", False))):
            return SparseHopfCurve
    return PROBLEMS[kind]


def start_point(problem_class, event: Event, first: int, second: int) -> Array:
    """u of the curve problem at a located fold or Hopf event."""
    omega = float(event.frequency or 0.0)
    extra = ()
    if problem_class is not FoldCurve:
        extra = (omega,) if getattr(problem_class, "unknown", "") == "omega" else (omega**2,)
    return np.concatenate(
        [event.state, [event.parameters[second]], extra, [event.parameters[first]]]
    )


def trace_boundary(
    model,
    name: str,
    event: Event,
    second: str,
    window: Mapping[str, tuple[float, float]],
    steps,
    *,
    source: str = "",
    limits: Mapping[str, tuple[float, float]] | None = None,
    progress: Callable[[int], None] | None = None,
) -> BoundaryOutcome:
    """Follow the fold or Hopf point ``event`` in (event.vary, ``second``) inside ``window``.

    Parameters
    ----------
    model : branchline.model.build.Model
    name : str
        The boundary's name (the ``trace`` of its events).
    event : Event
        A located ``fold`` or ``hopf`` event of an equilibrium branch.
    second : str
        The second parameter.
    window : {parameter: (lo, hi)}
        Both parameters' windows; each side ends exactly on their edge.
    steps : StepSettings
        Step lengths (pseudo-arclength in states and both parameters).
    limits : {state: (lo, hi)}, optional
        State limits (the starting trace's): a side ends exactly on one.

    Returns
    -------
    BoundaryOutcome
        Never raises for numerical trouble: the record's ``status`` and ``message``
        say how each side ended.
    """
    problem_class = curve_class(model, event.kind)
    first_index = model.parameter_index(event.vary)
    second_index = model.parameter_index(second)
    lo1, hi1 = window[event.vary]
    lo2, hi2 = window[second]
    n = len(model.states)
    engine_limits = (Limit(n, float(lo2), float(hi2), second), *state_limits_of(model, limits))
    u0 = start_point(problem_class, event, first_index, second_index)
    sides, borders = [], None
    for orientation in (-1, 1):
        # the second side starts from the first one's start borders (no second eigen-solve)
        problem = problem_class(model, first_index, second_index, event.parameters, u0, borders)
        borders = (problem.right, problem.left)
        with np.errstate(all="ignore"):
            try:
                base = linalg.initial_tangent(problem.jacobian(u0), 1.0)
            except linalg.SingularMatrixError:
                message = (
                    f"the boundary's direction is undefined at its start {problem.describe(u0)}"
                )
                sides.append((orientation, problem, continuation.failed_curve(u0, message)))
                continue
        curve = continuation.follow_curve(
            problem,
            u0,
            orientation * base,
            steps,
            (float(lo1), float(hi1)),
            progress=progress,
            limits=engine_limits,
        )
        sides.append((orientation, problem, _ended_at_neutral_saddle(problem, curve)))
    outcome = _assemble(model, name, event, second, source, sides)
    extent = {event.vary: (float(lo1), float(hi1)), second: (float(lo2), float(hi2))}
    return BoundaryOutcome(replace(outcome.boundary, window=extent), outcome.events)


def _ended_at_neutral_saddle(problem, curve: continuation.Curve) -> continuation.Curve:
    """A Hopf curve stopped where omega -> 0 ended cleanly (at a Bogdanov-Takens point)."""
    if getattr(problem, "neutral", None) is None or NEUTRAL_SADDLE not in curve.message:
        return curve
    return replace(
        curve,
        status=STATUS_DONE,
        message=f"reached a Bogdanov-Takens point, where {NEUTRAL_SADDLE}; "
        "it is not followed as a Hopf curve",
    )


def _side_brackets(problem, curve) -> list[CurveBracket]:
    brackets = find_curve_brackets(problem, curve.points, curve.test_values)
    neutral = getattr(problem, "neutral", None)
    if neutral is not None and len(curve) and curve.status == STATUS_DONE:
        last = curve.points[-1]
        kappa = problem.n + 1
        brackets.append(
            CurveBracket(
                "bogdanov_takens", len(curve) - 1, last, neutral, last[kappa], neutral[kappa]
            )
        )
    return brackets


def _codimension_two_events(model, name, event, second, problem, curve, sign):
    """Locate every bracket of one side: (events with signed boundary arclength, the
    located Bogdanov-Takens point that ends a Hopf curve or None)."""
    found, end = [], None
    for bracket in _side_brackets(problem, curve):
        outcome = locate_on_curve(problem, bracket)
        u = outcome.solution
        row = bracket.row
        along = curve.arclength[row] + float(np.linalg.norm(u - curve.points[row]))
        if row + 1 < len(curve):
            along = min(along, curve.arclength[row + 1])
        elif outcome.converged:
            end = u
        note = "" if outcome.converged else f"not refined on its defining system: {outcome.message}"
        found.append(
            _event(
                model, name, event, second, problem, bracket.kind, u, sign * along, note, outcome
            )
        )
    return found, end


def _event(model, name, event, second, problem, kind, u, arclength, note, outcome) -> Event:
    p = problem.parameters_at(u)
    x = u[: problem.n]
    extra = read_point(problem, kind, u)
    details = {
        "boundary": name,
        "second": second,
        "second_value": float(p[model.parameter_index(second)]),
        "defining_system": f"{problem.kind} curve equations and the {kind} condition",
        "residual_history": list(outcome.residual_norms),
        **extra.details,
    }
    words = "; ".join(part for part in (extra.note, note) if part)
    return Event(
        trace=name,
        kind=kind,
        vary=event.vary,
        value=float(u[-1]),
        state=np.array(x),
        parameters=p,
        arclength=float(arclength),
        frequency=extra.frequency,
        lyapunov=extra.lyapunov,
        note=words,
        details=details,
    )


def _assemble(model, name, event, second, source, sides) -> BoundaryOutcome:
    """Join the sides in boundary order and locate the codimension-two points."""
    n = len(model.states)
    pieces, events, counts = [], [], {}
    for orientation, problem, curve in sides:
        for key, value in curve.counts.items():
            counts[key] = counts.get(key, 0) + value
        if len(curve) == 0:
            continue
        found, end = _codimension_two_events(
            model, name, event, second, problem, curve, orientation
        )
        events += found
        points, arclength = curve.points, curve.arclength
        unstable = _unstable_off_axis(curve.payloads, 1 if problem.kind == "fold" else 2)
        if end is not None:  # the Hopf curve's last point: exactly the Bogdanov-Takens point
            points = np.vstack([points, end])
            arclength = np.append(arclength, arclength[-1] + np.linalg.norm(end - points[-2]))
            unstable = np.append(unstable, unstable[-1])
        rows = np.arange(len(points))
        if orientation < 0:
            rows = rows[::-1]
        elif pieces:
            rows = rows[1:]  # the start point is already the first side's last row
        frequency = np.array([problem.frequency(u) for u in points[rows]])
        pieces.append((points[rows], orientation * arclength[rows], frequency, unstable[rows]))
    events.sort(key=lambda e: e.arclength)
    if pieces:
        points = np.concatenate([p[0] for p in pieces])
        arclength = np.concatenate([p[1] for p in pieces])
        frequency = np.concatenate([p[2] for p in pieces])
        unstable = np.concatenate([p[3] for p in pieces])
    else:
        points = np.empty((0, n + 2))
        arclength = frequency = np.empty(0)
        unstable = np.empty(0, dtype=int)
    status = max((c.status for _, _, c in sides), key=lambda s: _STATUS_ORDER.get(s, 3))
    message = "; ".join(
        f"{_SIDE_NAMES[o]}: {_window_words(c.message or c.status, event.vary, second)}"
        for o, _, c in sides
    )
    boundary = Boundary(
        name=name,
        kind=event.kind,
        first=event.vary,
        second=second,
        source=source,
        parameters=np.array(event.parameters, dtype=float),
        first_values=points[:, -1].copy(),
        second_values=points[:, n].copy() if len(points) else np.empty(0),
        states=points[:, :n].copy(),
        frequency=frequency,
        arclength=arclength,
        unstable_count=unstable.astype(int),
        status=status,
        message=message,
        counts=counts,
    )
    return BoundaryOutcome(boundary, events)


def _window_words(message: str, first: str, second: str) -> str:
    """The engine's edge and limit words said in terms of the boundary's window."""
    message = message.replace("of the parameter interval", f"of the {first} window")
    message = message.replace(f"the limit {second} = ", f"the {second} edge ")
    message = re.sub(
        rf"(the {re.escape(second)} edge \S+) of trace limits", r"\1 of the window", message
    )
    return message.replace("of trace limits", "of the state limits")


def _unstable_off_axis(eigenvalues, critical: int) -> Array:
    """Unstable eigenvalues per row, the ``critical`` ones nearest the axis excluded."""
    values = np.asarray(eigenvalues)
    if values.ndim != 2 or values.shape[1] == 0:
        return np.zeros(len(values) if values.ndim else 0, dtype=int)
    order = np.argsort(np.abs(values.real), axis=1)
    kept = np.take_along_axis(values, order[:, critical:], axis=1)
    return unstable_counts(kept)


def follow_boundaries(model, scan, events: list[Event], progress=None):
    """Every ``[[boundary]]`` of a scan: (boundaries, their events, warnings).

    A boundary whose starting event does not exist, or lies outside its window,
    is skipped with a warning (the run itself is not numerical trouble). A
    boundary ``from`` another boundary starts at each Bogdanov-Takens and zero-Hopf
    point located on it (:mod:`branchline.problems.boundary_switching`).
    """
    boundaries, found, warnings = [], [], []
    traces = {trace.name: trace for trace in scan.traces}
    for spec in scan.boundaries:
        starts, words = _starts(spec, events + found)
        chosen = list(enumerate(starts, start=1))
        if spec.index is not None:
            chosen = [(spec.index, starts[spec.index - 1])] if spec.index <= len(starts) else []
        if not chosen:
            wanted = f"number {spec.index}" if spec.index else "any"
            warnings.append(
                f"boundary {spec.name}: {words} ({wanted} asked, {len(starts)} found); "
                "nothing to follow"
            )
            continue
        for number, event in chosen:
            name = (
                spec.name if spec.index is not None or len(chosen) == 1 else f"{spec.name}.{number}"
            )
            start, why = _start_of(model, spec, event)
            if start is None:
                warnings.append(f"boundary {name}: {why}; nothing to follow")
                continue
            outside = [
                key
                for key, (lo, hi) in spec.window.items()
                if not lo <= start.parameters[model.parameter_index(key)] <= hi
            ]
            if outside:
                warnings.append(
                    f"boundary {name}: the {event.kind.replace('_', '-')} point {number} of "
                    f"{spec.source} lies outside the window in {', '.join(outside)}; nothing to "
                    "follow"
                )
                continue
            callback = (lambda count, n=name: progress(n, count)) if progress else None
            outcome = trace_boundary(
                model,
                name,
                start,
                spec.second,
                spec.window,
                spec.steps,
                source=f"{spec.source} {event.kind} {number}",
                limits=traces[spec.trace or spec.source].limits,
                progress=callback,
            )
            boundaries.append(outcome.boundary)
            found.extend(outcome.events)
    return boundaries, found, warnings


def _starts(spec, events: list[Event]) -> tuple[list[Event], str]:
    """The events that start ``spec``'s curves, and what is missing in words."""
    if not spec.from_boundary:
        starts = [e for e in events if e.trace == spec.source and e.kind == spec.kind]
        return starts, f"trace {spec.source} has no {spec.kind} point"
    on_it = [
        e
        for e in events
        if (e.trace == spec.source or e.trace.startswith(spec.source + "."))
        and e.kind in SWITCH_POINTS
    ]
    return on_it, f"boundary {spec.source} has no Bogdanov-Takens or zero-Hopf point"


def _start_of(model, spec, event: Event) -> tuple[Event | None, str]:
    """The fold or Hopf event the curve starts from."""
    if not spec.from_boundary:
        return event, ""
    return start_event(model, event, spec.kind, spec.second, spec.steps.initial)
