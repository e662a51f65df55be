"""The words every stage shares: the kinds of event and the status of a computation.

Both are ``str``-valued enumerations, so a member compares equal to its value
(``EventKind.FOLD == "fold"``), prints as its value and is written to tables as
its value: the strings of the interface contract stay exactly as they were.
This module imports nothing from branchline, so any stage may use it.

>>> EventKind.HOPF == "hopf", f"{EventKind.BRANCH_POINT}"
(True, 'branch_point')
>>> Status("max_points").hint
'raise steps.max_points, or steps.largest to cover the interval in fewer points'
"""

from __future__ import annotations

from enum import Enum


class _Word(str, Enum):
    """A str-valued member that prints, formats and shows as its value (on every Python)."""

    def __str__(self) -> str:
        return str(self.value)

    def __format__(self, spec: str) -> str:
        return format(str(self.value), spec)

    def __repr__(self) -> str:
        # Lists of kinds and statuses read as the strings they stand for.
        return repr(str(self.value))


class EventKind(_Word):
    """The ``kind`` column of ``events.csv``: the trade's full names, never codes.

    One-parameter points of equilibrium branches: ``fold``, ``hopf``,
    ``branch_point``. Two-parameter points found on boundaries: ``cusp``,
    ``bogdanov_takens``, ``bautin``, ``zero_hopf``, ``double_hopf``. Events of
    periodic orbits: ``cycle_fold``, ``period_doubling``, ``torus``.
    (Kuznetsov, Elements of Applied Bifurcation Theory, chapters 3, 5, 8.)
    """

    FOLD = "fold"
    HOPF = "hopf"
    BRANCH_POINT = "branch_point"
    CUSP = "cusp"
    BOGDANOV_TAKENS = "bogdanov_takens"
    BAUTIN = "bautin"
    ZERO_HOPF = "zero_hopf"
    DOUBLE_HOPF = "double_hopf"
    CYCLE_FOLD = "cycle_fold"
    PERIOD_DOUBLING = "period_doubling"
    TORUS = "torus"


class Status(_Word):
    """How a computation ended; :attr:`hint` suggests the fix when it did not end well.

    Curves and branches end ``done``, ``closed``, ``max_points``, ``failed`` or
    ``interrupted``;
    a single equilibrium solve ends ``converged``, ``not_converged``,
    ``singular_jacobian`` or ``non_finite``.
    """

    DONE = "done"  # reached the interval edge or a state limit (or direction not requested)
    CLOSED = "closed"  # the curve closed on itself (an isola)
    MAX_POINTS = "max_points"  # stopped at steps.max_points
    FAILED = "failed"  # numerical trouble; the message says where and why
    INTERRUPTED = "interrupted"  # stopped by Ctrl-C or SIGTERM; the points so far are kept
    CONVERGED = "converged"
    NOT_CONVERGED = "not_converged"
    SINGULAR_JACOBIAN = "singular_jacobian"
    NON_FINITE = "non_finite"

    @property
    def hint(self) -> str:
        """What to try next (empty when nothing needs fixing)."""
        return _HINTS.get(self, "")


_HINTS = {
    Status.MAX_POINTS: "raise steps.max_points, or steps.largest to cover the interval in "
    "fewer points",
    Status.FAILED: "try a smaller steps.smallest or steps.initial, or narrow the interval "
    "to stop before the trouble",
    Status.INTERRUPTED: "run the scan again to compute the rest",
    Status.NOT_CONVERGED: "give a start guess closer to an equilibrium (branchline inspect "
    "shows the residual there)",
    Status.SINGULAR_JACOBIAN: "start the trace at another parameter value, away from a fold "
    "or branch point",
    Status.NON_FINITE: "check the model near the start guess for division by zero or "
    "logarithms of non-positive values",
}
