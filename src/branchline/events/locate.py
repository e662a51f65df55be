"""Stability changes along equilibrium branches: detection, then location.

The work is split by idea:

- :mod:`branchline.events.detection`: the test functions evaluated at every accepted
  point (``fold``, ``hopf``, ``branch_point``, in the order of
  :data:`TEST_FUNCTIONS`) and the brackets where they change sign;
- :mod:`branchline.events.eigenvalue_pairs`: matching complex eigenvalues between
  consecutive rows, so that two pairs crossing within one step (which leave the
  Hopf test's sign unchanged) are both found;
- :mod:`branchline.events.defining_systems`: the fold, Hopf and branch-point defining
  systems and Newton's method on them;
- :mod:`branchline.events.location`: refining one bracket on its defining system
  (bisection on the test function as the fallback) and describing it, with its
  normal form, as an :class:`~branchline.results.records.Event`.

This module runs them over a traced branch (:func:`locate_events`) and keeps
the names other modules import from it.

Example
-------
>>> import numpy as np
>>> from branchline.problems.equilibrium_branch import trace_branch
>>> from branchline.model.build import build_model
>>> from branchline.scan.loader import ExpressionModelSpec, StepSettings
>>> model = build_model(ExpressionModelSpec(parameters={"h": 0.1},
...                                         equations={"N": "N*(1 - N) - h"}))
>>> branch = trace_branch(model, "t", "h", model.defaults, np.array([0.9]),
...                       (0.0, 0.4), "both", StepSettings())
>>> [(e.kind, e.value) for e in locate_events(model, branch)]
[('fold', 0.25)]
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from branchline.events.defining_systems import NewtonOutcome, newton
from branchline.events.detection import (
    TEST_FUNCTIONS,
    Bracket,
    bordered_determinant,
    equilibrium_tests,
    find_brackets,
    hopf_test,
)
from branchline.events.location import LOCATORS, LocationFailed, correct_on_branch, unrefined_event
from branchline.results.records import Branch, Event

if TYPE_CHECKING:
    from branchline.model.build import Model

__all__ = [
    "TEST_FUNCTIONS",
    "Bracket",
    "NewtonOutcome",
    "bordered_determinant",
    "correct_on_branch",
    "equilibrium_tests",
    "find_brackets",
    "hopf_test",
    "locate_events",
    "newton",
]

# Two located events of one kind closer than this (relative) are one event.
SAME_EVENT_RTOL = 1e-7
# A fold located at a branch point solves a singular system: the state is then
# only good to about the square root of rounding, so a looser match.
FOLD_AT_BRANCH_POINT_RTOL = 1e-5

# Brackets are located in this order, so that a fold that is really a branch
# point is met after the branch point and dropped as its duplicate.
LOCATION_ORDER = {"branch_point": 0, "hopf": 1, "fold": 2}


def _same_point(a: Event, b: Event, rtol: float = SAME_EVENT_RTOL) -> bool:
    scale = 1.0 + abs(a.value) + float(np.linalg.norm(a.state))
    gap = abs(a.value - b.value) + float(np.linalg.norm(a.state - b.state))
    return gap <= rtol * scale


def _duplicates(event: Event, other: Event) -> bool:
    """The same event met twice, or a fold at a branch point already reported.

    A fold is the branch point itself when its normal form says so (f_p in the
    range of f_x), or when it could not be refined on its own system and lies at
    the branch point (or shares its bracket). A fold refined by Newton beside a
    branch point, however close, is its own event: never dropped for sharing a step.
    """
    if event.kind == other.kind:
        return _same_point(event, other)
    if event.kind == "fold" and other.kind == "branch_point":
        form = event.details.get("normal_form", {})
        if form.get("degenerate") == "branch point":
            return _same_point(event, other, FOLD_AT_BRANCH_POINT_RTOL)
        if str(event.details.get("method", "")).startswith("Newton"):
            return _same_point(event, other)
        same_bracket = event.details["bracket_rows"] == other.details["bracket_rows"]
        return same_bracket or _same_point(event, other, FOLD_AT_BRANCH_POINT_RTOL)
    return False


def locate_events(model: Model, branch: Branch) -> list[Event]:
    """Locate every stability change along a traced branch.

    Each sign change of a test function between consecutive rows is refined by
    Newton's method on the event's defining system (see
    :mod:`branchline.events.defining_systems`); bisection on the test function is the
    fallback, and says so in ``note``. An event neither can place is still
    reported, placed by interpolation between its rows, with the reason in
    ``note``. Folds that coincide with a branch point (the traced branch
    turning back through a pitchfork) are reported once, as the branch point;
    an event met from two brackets is reported once.

    Parameters
    ----------
    model : Model
    branch : Branch

    Returns
    -------
    list of Event, in trace order (by arclength).
    """
    if len(branch) < 2:
        return []
    k = model.parameter_index(branch.vary)
    brackets = sorted(find_brackets(branch), key=lambda b: LOCATION_ORDER[b.kind])
    events: list[Event] = []
    for bracket in brackets:
        try:
            event = LOCATORS[bracket.kind](model, branch, k, bracket)
        except LocationFailed as failure:
            event = unrefined_event(model, branch, k, bracket, str(failure))
        except (ArithmeticError, ValueError, RuntimeError, np.linalg.LinAlgError) as exc:
            event = unrefined_event(model, branch, k, bracket, f"{type(exc).__name__}: {exc}")
        if event is None:
            continue
        duplicate = any(_duplicates(event, other) for other in events)
        if not duplicate:
            events.append(event)
    events.sort(
        key=lambda e: e.arclength if branch.arclength[-1] >= branch.arclength[0] else -e.arclength
    )
    return events
