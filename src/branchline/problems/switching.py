"""Branch switching at a located branch point.

At a simple branch point two equilibrium branches cross. The traced one is
already known; :func:`branch_starts` gives a start point on each half of the
other one, a small distance ``SWITCH_OFFSET`` from the branch point along the
tangent found from the algebraic branching equation (stored by
:mod:`branchline.events.location` in ``event.details["tangents"]``), corrected onto the
new branch by Newton on f = 0, t . (u - u_0) = 0 (Keller's method of branch
switching; Allgower & Georg, Introduction to Numerical Continuation Methods,
section 8.3; Kuznetsov, Elements of Applied Bifurcation Theory, section 10.2;
section numbers from memory).
:func:`trace_switched` follows each half-branch with the continuation engine.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import TYPE_CHECKING

import numpy as np

from branchline.events.defining_systems import newton, on_branch_system, with_value
from branchline.events.location import correct_on_branch
from branchline.events.normal_forms import branch_point_normal_form, branch_tangent
from branchline.problems.crowding import with_start_point
from branchline.problems.equilibrium_branch import state_limits_of, trace_branch, within_limits
from branchline.results.records import Branch, Event
from branchline.vocabulary import EventKind

if TYPE_CHECKING:
    from branchline.model.build import Model
    from branchline.scan.loader import StepSettings

Array = np.ndarray

# Distance (relative to 1 + |u| at the branch point, in (state, parameter)
# space) from the branch point to the first point of a new branch: small
# enough that the tangent predicts the branch well (error ~ curvature * d^2),
# large enough that the bordered Jacobian there is far from singular (its
# smallest singular value grows like d).
SWITCH_OFFSET = 1e-3
# Near an interval edge the offset is cut by this factor, at most OFFSET_TRIES - 1
# times, until the start point lies inside the window.
OFFSET_CUT = 10.0
OFFSET_TRIES = 4

# The stretch between the branch point and the start is checked for events from a
# point this fraction of the offset from the branch point (1e-5 relative). Closer, the
# point's tangent is unreliable: [f_x, f_p] is singular at the branch point, so a
# point at distance s is found to about eps / s and its tangent to about eps / s^2
# (relative), while a pitchfork's turning tangent has a parameter component of only
# about s: at 1e-5 these are 1e-6 against 1e-5.
NEAR_FRACTION = 1e-2

# The corrected start must keep this cosine with the predicted tangent;
# otherwise Newton slid back onto the traced branch and the start is dropped.
SMALLEST_TANGENT_COSINE = 0.9


def _new_tangent(model: Model, branch: Branch, event: Event, k: int) -> Array | None:
    """The unit tangent of the crossing branch that is not the traced one."""
    tangents = event.details.get("tangents")
    traced = event.details.get("traced_tangent_index")
    if tangents is None or traced is None:
        traced_tangent = event.details.get("tangent")
        form = branch_point_normal_form(
            model, event.state, event.parameters, k, traced_tangent=traced_tangent
        )
        if not form.branching:
            return None
        tangents = form.tangents
        traced_tangent = np.asarray(event.details.get("tangent", tangents[0]), dtype=float)
        traced = int(np.argmax(np.abs(tangents @ traced_tangent)))
    tangents = np.asarray(tangents, dtype=float)
    if tangents.shape[0] != 2:
        return None
    return tangents[1 - int(traced)]


def branch_starts(
    model: Model,
    branch: Branch,
    event: Event,
    limits: Mapping[str | int, tuple[float, float]] | None = None,
) -> list[tuple[Array, float, Array]]:
    """Start points for the two halves of the branch crossing the traced one.

    Parameters
    ----------
    model : Model
    branch : Branch
        The traced branch the event lies on.
    event : Event
        A ``branch_point`` event from
        :func:`branchline.problems.equilibrium_branch.locate_events`.
    limits : mapping {state: (lo, hi)}, optional
        The trace's state limits: a half-branch starting outside them is dropped.

    Returns
    -------
    list of (x0 (n,), p0 float, tangent (n + 1,))
        One entry per half-branch (usually two): an equilibrium on the new
        branch near the branch point (residual at rounding level), the varied
        parameter's value there, and the unit tangent pointing away from the
        branch point. Empty for other events or a degenerate branch point.
    """
    if event.kind != EventKind.BRANCH_POINT or not event.branching:
        return []
    k = model.parameter_index(branch.vary)
    try:
        direction = _new_tangent(model, branch, event, k)
    except (ValueError, ArithmeticError, np.linalg.LinAlgError):
        return []  # no usable crossing direction: nothing to switch to
    if direction is None:
        return []
    u_event = np.append(event.state, event.value)
    offset = SWITCH_OFFSET * (1.0 + float(np.linalg.norm(u_event)))
    lo, hi = min(branch.interval), max(branch.interval)
    state_limits = state_limits_of(model, limits)
    starts = []
    for sign in (1.0, -1.0):
        tangent = sign * direction
        u = _first_start_inside(model, event, k, u_event, tangent, offset, (lo, hi))
        if u is None or not within_limits(u[:-1], state_limits):
            continue
        full = with_value(event.parameters, k, u[-1])
        t = branch_tangent(model, u[:-1], full, k, tangent)
        if float(t @ tangent) < SMALLEST_TANGENT_COSINE:
            continue
        starts.append((u[:-1].copy(), float(u[-1]), t))
    return starts


def near_point(model: Model, event: Event, k: int, start: Array) -> Array | None:
    """A point of the new half-branch between the branch point and its ``start`` (n + 1,).

    It lies ``NEAR_FRACTION`` of the way from the branch point to the start along
    the start's direction, corrected onto the branch (None when that fails or
    lands elsewhere): the child branch gets it as an extra row, so that the
    stretch next to the branch point is checked for events like any step.
    """
    u_event = np.append(event.state, event.value)
    reach = start - u_event
    guess = u_event + NEAR_FRACTION * reach
    system = on_branch_system(model, event.parameters, k, guess, reach)
    # Newton's own tests relative to |u| alone (scale 0), not "any nearby solution":
    # the point may be tiny (a branch point at the origin), and is kept as a row.
    outcome = newton(lambda z: system(z), guess, scale=0.0)
    if not outcome.converged:
        return None
    u = outcome.solution
    along = float((u - u_event) @ reach) / float(reach @ reach)
    if not 0.0 < along < 1.0 or np.linalg.norm(u - guess) > 0.5 * np.linalg.norm(reach):
        return None
    return u


def _first_start_inside(model: Model, event, k, u_event, tangent, offset, window):
    """A corrected start point on the new half-branch inside the parameter window.

    A branch point close to the window's edge may put the usual start point
    beyond it; the offset is then cut (by OFFSET_CUT, a few times) so that the
    half-branch is still followed to the edge.
    """
    lo, hi = window
    for _ in range(OFFSET_TRIES):
        guess = u_event + offset * tangent
        outcome = correct_on_branch(model, event.parameters, k, guess, tangent)
        if outcome.converged and lo <= outcome.solution[-1] <= hi:
            return outcome.solution
        offset /= OFFSET_CUT
    return None


def trace_switched(
    model: Model,
    parent_branch: Branch,
    event: Event,
    steps: StepSettings,
    interval: tuple[float, float],
    progress: Callable[[int], None] | None = None,
    first_number: int = 1,
    limits: Mapping[str | int, tuple[float, float]] | None = None,
    prefix: str | None = None,
) -> list[Branch]:
    """Follow each half of the branch crossing ``parent_branch`` at ``event``.

    Parameters
    ----------
    model : Model
    parent_branch : Branch
    event : Event
        A ``branch_point`` event on ``parent_branch``.
    steps : branchline.scan.loader.StepSettings
    interval : (lo, hi)
        Window of the varied parameter.
    progress : callable(int), optional
        Passed on to :func:`branchline.problems.equilibrium_branch.trace_branch`.
    first_number : int
        Number of the first child: a parent with several branch points numbers
        its children on from the ones already started.
    limits : mapping {state: (lo, hi)}, optional
        The parent trace's state limits; the children inherit them (see
        :func:`branchline.problems.equilibrium_branch.trace_branch`).
    prefix : str, optional
        The name put before the numbers instead of the parent's (a named
        switched branch: ``<parent>.<name>``).

    Returns
    -------
    list of Branch
        Named ``<prefix>.<first_number>``, ... in the order started, each
        traced from its start point away from the branch point only.
    """
    k = model.parameter_index(parent_branch.vary)
    children = []
    for x0, p0, tangent in branch_starts(model, parent_branch, event, limits):
        name = f"{prefix or parent_branch.name}.{first_number + len(children)}"
        child = trace_branch(
            model,
            name,
            parent_branch.vary,
            with_value(event.parameters, k, p0),
            x0,
            interval,
            "increasing" if tangent[-1] >= 0 else "decreasing",
            steps,
            parent=parent_branch.name,
            start_tangent=tangent,
            progress=progress,
            limits=limits,
        )
        near = near_point(model, event, k, np.append(x0, p0))
        if near is not None and within_limits(near[:-1], state_limits_of(model, limits)):
            child = with_start_point(model, child, near)
        children.append(child)
    return children
