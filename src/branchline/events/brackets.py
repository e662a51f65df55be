"""Problem-independent event detection and dispatch: brackets of named test functions.

A problem names its test functions (``test_names``, one column of test values
per name, evaluated at every point of a curve). A sign change of a named test
function between two consecutive rows is a :class:`Bracket` of the event of the
same name; :func:`sign_change_brackets` finds them, :func:`vanishing_end_brackets`
adds an event sitting exactly on an end row. :func:`locate_brackets` hands each
bracket to the problem's locator for its kind, in the problem's order, keeps a
bracket's event even when it cannot be refined (placed by the problem's
fallback) and drops events the problem calls duplicates. Nothing here knows
what a fold or a Hopf point is.

>>> import numpy as np
>>> tests = np.array([[1.0, -2.0], [0.5, -1.0], [-0.5, 1.0]])
>>> [(b.kind, b.row, b.fraction) for b in sign_change_brackets(tests, ("slope", "gap"))]
[('slope', 1, 0.5), ('gap', 1, 0.5)]
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, TypeVar

import numpy as np

from branchline.numerics.linalg import zero_crossing_fraction

Array = np.ndarray
Found = TypeVar("Found")

# An end row whose test value is this small relative to its neighbour's sits on
# a zero (roundoff of either sign), e.g. a trace that landed on a state limit
# exactly where another branch crosses.
END_ZERO_RTOL = 1e-9


@dataclass(frozen=True)
class Bracket:
    """Two consecutive rows of a curve between which a named test function changes sign."""

    kind: str  # the test function's name, which is the event's kind
    row: int  # the first of the two rows
    fraction: float  # linear-interpolation estimate of the crossing within the step
    hint: dict = field(default_factory=dict)  # kind-specific seed information


def sign_changes(values: Array) -> list[int]:
    """Rows r where ``values`` changes sign from r to r + 1 (both finite).

    A value exactly zero is counted once, from the row before it.
    """
    signs = np.sign(values)
    rows = []
    for row in range(values.shape[0] - 1):
        a, b = signs[row], signs[row + 1]
        if a != b and not (a == 0 and row > 0):
            if np.isfinite(values[row]) and np.isfinite(values[row + 1]):
                rows.append(row)
    return rows


def sign_change_brackets(
    test_values: Array, names: Sequence[str], wanted: Sequence[str] | None = None
) -> list[Bracket]:
    """A bracket for every sign change of the named test functions (all, or ``wanted``).

    Parameters
    ----------
    test_values : ndarray (k, T)
        Test values per row, columns in the order of ``names``.
    names : sequence of str (T,)
    wanted : sequence of str, optional
        The names to look at, in this order (default: all of ``names``).
    """
    brackets = []
    for name in names if wanted is None else wanted:
        column = test_values[:, list(names).index(name)]
        for row in sign_changes(column):
            fraction = zero_crossing_fraction(column[row], column[row + 1])
            brackets.append(Bracket(name, row, fraction))
    return brackets


def vanishing_end_brackets(values: Array, name: str) -> list[Bracket]:
    """Brackets for a curve that ends (or starts) on a zero of the test ``values``.

    A trace that lands on a state limit exactly where another branch crosses
    ends with a test value that is zero up to roundoff, of either sign: no
    sign change between rows, yet an event sits on the end point.
    """
    found = []
    if values.shape[0] < 2:
        return found
    for end, neighbour, row, fraction in ((-1, -2, values.shape[0] - 2, 1.0), (0, 1, 0, 0.0)):
        a, b = values[end], values[neighbour]
        if a != 0.0 and np.sign(a) == np.sign(b) and abs(a) <= END_ZERO_RTOL * abs(b):
            found.append(Bracket(name, row, fraction))
    return found


class LocationFailed(Exception):
    """A locator could not place its event (Newton and its fallback both failed)."""


# Errors a locator's numerics may raise; the bracket is then reported unrefined.
LOCATION_ERRORS = (LocationFailed, ArithmeticError, ValueError, RuntimeError, np.linalg.LinAlgError)


def locate_brackets(
    brackets: Sequence[Bracket],
    locators: Mapping[str, Callable[[Bracket], Found | None]],
    *,
    order: Sequence[str] = (),
    unrefined: Callable[[Bracket, str], Found | None],
    duplicates: Callable[[Found, Found], bool] = lambda new, old: False,
) -> list[Found]:
    """Hand each bracket to the locator of its kind; keep what they find, once.

    Parameters
    ----------
    brackets : sequence of Bracket
    locators : mapping {kind: locator(bracket) -> event or None}
        None means the bracket holds no event (e.g. a neutral saddle).
    order : sequence of str
        Kinds located first (a stable sort; kinds not listed come last).
    unrefined : callable(bracket, reason) -> event or None
        The event of a bracket whose locator raised (``LOCATION_ERRORS``): a
        stability change is never dropped silently.
    duplicates : callable(new, kept) -> bool
        True when ``new`` is an event already kept.
    """
    rank = {kind: position for position, kind in enumerate(order)}
    events: list[Any] = []
    for bracket in sorted(brackets, key=lambda b: rank.get(b.kind, len(rank))):
        try:
            event = locators[bracket.kind](bracket)
        except LocationFailed as failure:
            event = unrefined(bracket, str(failure))
        except LOCATION_ERRORS as exc:
            event = unrefined(bracket, f"{type(exc).__name__}: {exc}")
        except MemoryError as exc:
            # a defining system too large for the memory left: the event is still
            # reported, placed between its rows, and says why
            event = unrefined(bracket, f"out of memory ({exc or 'MemoryError'})")
        if event is not None and not any(duplicates(event, other) for other in events):
            events.append(event)
    return events
