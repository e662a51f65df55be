"""When two located equilibrium events are one: the duplicate rules.

An event may be met from two brackets (a Hopf point from a test-function sign
change and from a complex pair crossing), and a fold located where the traced
branch turns back through a pitchfork is the branch point itself. The
equilibrium-branch problem (:mod:`branchline.problems.equilibrium_branch`)
hands :func:`same_event` to the generic dispatch
(:func:`branchline.events.brackets.locate_brackets`), which keeps the first.
"""

from __future__ import annotations

import numpy as np

from branchline.results.records import Event
from branchline.vocabulary import EventKind

# Two located events of one kind closer than this (relative) are one event.
SAME_EVENT_RTOL = 1e-7
# A fold located at a branch point solves a singular system: the state is then
# only good to about the square root of rounding, so a looser match.
FOLD_AT_BRANCH_POINT_RTOL = 1e-5


def _same_point(a: Event, b: Event, rtol: float = SAME_EVENT_RTOL) -> bool:
    scale = 1.0 + abs(a.value) + float(np.linalg.norm(a.state))
    gap = abs(a.value - b.value) + float(np.linalg.norm(a.state - b.state))
    return gap <= rtol * scale


def same_event(event: Event, other: Event) -> bool:
    """The same event met twice, or a fold at a branch point already reported.

    A fold is the branch point itself when its normal form says so (f_p in the
    range of f_x), or when it could not be refined on its own system and lies at
    the branch point (or shares its bracket). A fold refined by Newton beside a
    branch point, however close, is its own event: never dropped for sharing a step.
    """
    if event.kind == other.kind:
        return _same_point(event, other)
    if event.kind == EventKind.FOLD and other.kind == EventKind.BRANCH_POINT:
        form = event.details.get("normal_form", {})
        if form.get("degenerate") == "branch point":
            return _same_point(event, other, FOLD_AT_BRANCH_POINT_RTOL)
        if str(event.details.get("method", "")).startswith("Newton"):
            return _same_point(event, other)
        same_bracket = event.details["bracket_rows"] == other.details["bracket_rows"]
        return same_bracket or _same_point(event, other, FOLD_AT_BRANCH_POINT_RTOL)
    return False
