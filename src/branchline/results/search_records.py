"""Records of a search for equilibria without a start guess (frozen dataclasses).

Made by :mod:`branchline.problems.window_search`; turned into ``search.csv``
and the ``searches`` entry of run.json by :mod:`branchline.results.search_tables`.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

Array = np.ndarray

# Branches found by a search are named <trace>#1, <trace>#2, ... in the order found.
SEARCH_SEPARATOR = "#"


def root_trace_name(name: str) -> str:
    """The scan-file trace a branch belongs to: ``a`` for ``a``, ``a.2``, ``a#3``, ``a#3.1``."""
    return name.split(".")[0].split(SEARCH_SEPARATOR)[0]


@dataclass(frozen=True)
class SearchedValue:
    """The distinct equilibria known at one searched parameter value.

    Attributes
    ----------
    value : float
        The varied parameter's value.
    roots : ndarray (k, n)
        Every distinct equilibrium: crossings of branches traced before (polished
        by Newton at this value) and the roots the deflated search found.
    traces : tuple of str
        The trace each root lies on ("" when it was not traced: outside the
        trace's state limits, or its trace failed at the start).
    new : tuple of bool
        True for a root found by the deflated search that lay on no branch traced
        before this value.
    in_box : tuple of bool
        True for roots inside the search box (crossings of traced branches may lie outside).
    unstable : tuple of int
        Eigenvalues with positive real part at each root.
    starts, iterations : int
        Start points and Newton iterations (deflated and polishing) of the search here.
    seconds : float
    complete : bool
        False when the search stopped at its root limit.
    """

    value: float
    roots: Array
    traces: tuple[str, ...]
    new: tuple[bool, ...]
    in_box: tuple[bool, ...]
    unstable: tuple[int, ...]
    starts: int
    iterations: int
    seconds: float
    complete: bool = True

    @property
    def count(self) -> int:
        """Distinct equilibria found in the box at this value."""
        return int(sum(self.in_box))


@dataclass(frozen=True)
class SearchRecord:
    """One trace's search: what was covered and what was found.

    Attributes
    ----------
    trace : str
        The scan-file trace that asked for the search.
    vary : str
    box : dict {state: (lo, hi)}
    samples, seed : int
        Sobol start points per value and their scrambling seed.
    values : tuple of SearchedValue
        In the order searched: the start value first, then ``search_at`` ascending.
    found : dict {trace name: parameter value}
        Branches started from a root the search found, and where it was found.
    outside : int
        Roots Newton reached outside the box (not counted, not traced).
    seconds : float
        Time of the searches (tracing the branches found not included).
    """

    trace: str
    vary: str
    box: dict[str, tuple[float, float]]
    samples: int
    seed: int
    values: tuple[SearchedValue, ...]
    found: dict[str, float] = field(default_factory=dict)
    outside: int = 0
    seconds: float = 0.0


__all__ = ["SEARCH_SEPARATOR", "SearchRecord", "SearchedValue", "root_trace_name"]
