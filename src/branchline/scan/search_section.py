"""The search keys of a ``[[trace]]``: finding equilibria without a start guess.

``start = "search"`` (or any trace with a ``search_box``) asks for every
equilibrium in a box of states, found by Newton's method with deflation
(:mod:`branchline.problems.deflation`), at the start value and at further
values along the interval (:mod:`branchline.problems.window_search`). Keys:

- ``search_box = { X = [lo, hi], ... }``: a range for every state (required
  with ``start = "search"``; lo < hi).
- ``search_samples``: start points drawn from the box (scrambled Sobol
  sample), default :data:`DEFAULT_SAMPLES`.
- ``search_seed``: the sample's scrambling seed (an integer >= 0), default 0;
  the same seed gives the same run.
- ``search_at``: where along the interval to search besides the start value:
  a list of values inside the interval, or a count N of evenly spaced values
  from edge to edge (N = 1: the midpoint; N = 0: only the start value).
  Default :data:`DEFAULT_VALUES`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from branchline.scan.checks import Checker, key_path, listed, shown, suggestion

SEARCH_START = "search"
SEARCH_KEYS = ("search_box", "search_samples", "search_seed", "search_at")
# 32 Sobol points (a power of two: balanced in every dyadic sub-box) find every
# root of the reference problems in tests/test_search.py with room to spare;
# deflation restarts from each start, so few starts go a long way.
DEFAULT_SAMPLES = 32
# Nine values along the interval: edges, quarters and eighths, enough to meet
# a branch that spans an eighth of the window; more for narrower ones.
DEFAULT_VALUES = 9
# Guards against a typo that would run for hours.
MAX_SAMPLES = 100_000
MAX_VALUES = 10_000


@dataclass(frozen=True)
class SearchSpec:
    """A trace's search settings (see the module docstring).

    ``box`` maps each state, in the model's order, to (lo, hi); ``at`` holds
    the parameter values to search besides the start value, ascending.
    """

    box: dict[str, tuple[float, float]]
    samples: int = DEFAULT_SAMPLES
    seed: int = 0
    at: tuple[float, ...] = ()


def read_search(
    check: Checker,
    table: dict,
    path: str,
    states: list[str],
    interval: tuple[float, float],
    wanted: bool,
) -> SearchSpec | None:
    """The search settings of a trace table, or None when it asks for no search.

    Parameters
    ----------
    wanted : bool
        True for ``start = "search"`` (then ``search_box`` is required).

    Raises
    ------
    ScanError
        Naming the key: a missing or partial box, a reversed range, a bad
        count or seed, a search value outside the interval, search keys
        without a box.
    """
    if "search_box" not in table:
        if wanted:
            check.fail(
                f"{path}.search_box",
                'missing: start = "search" needs a range for every state, '
                f"e.g. search_box = {{ {states[0]} = [0.0, 10.0] }}",
            )
        for key in SEARCH_KEYS:
            if key in table:
                check.fail(f"{path}.{key}", "is only used with a search_box (add one)")
        return None
    box = _box(check, table["search_box"], f"{path}.search_box", states)
    samples = _bounded_count(
        check,
        table.get("search_samples", DEFAULT_SAMPLES),
        f"{path}.search_samples",
        1,
        MAX_SAMPLES,
    )
    seed = table.get("search_seed", 0)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        check.fail(f"{path}.search_seed", f"must be a whole number >= 0, got {shown(seed)}")
    at = _values(check, table.get("search_at", DEFAULT_VALUES), f"{path}.search_at", interval)
    return SearchSpec(box=box, samples=samples, seed=seed, at=at)


def _box(check: Checker, value: object, path: str, states: list[str]) -> dict:
    table = check.table(value, path, "a table of state ranges, e.g. { X = [0.0, 10.0] }")
    state_set = set(states)
    for name in table:
        if name not in state_set:
            check.fail(
                key_path(path, name),
                f"'{name}' is not a state{suggestion(str(name), states)} (states: {listed(states)})",
            )
    missing = [name for name in states if name not in table]
    if missing:
        check.fail(path, f"needs a range for every state; missing {listed(missing)}")
    box = {}
    for name in states:
        key = key_path(path, name)
        bounds = table[name]
        if not isinstance(bounds, list) or len(bounds) != 2:
            check.fail(key, f"must be two numbers [low, high], got {shown(bounds)}")
        low = check.number(bounds[0], f"{key}[1]")
        high = check.number(bounds[1], f"{key}[2]")
        if not low < high:
            check.fail(key, f"needs low < high, got [{low:g}, {high:g}]")
        box[name] = (low, high)
    return box


def _bounded_count(check: Checker, value: object, key: str, low: int, high: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
        check.fail(key, f"must be a whole number from {low} to {high}, got {shown(value)}")
    return int(value)


def _values(
    check: Checker, value: object, key: str, interval: tuple[float, float]
) -> tuple[float, ...]:
    lo, hi = interval
    if isinstance(value, int) and not isinstance(value, bool):
        count = _bounded_count(check, value, key, 0, MAX_VALUES)
        if count == 1:
            return (0.5 * (lo + hi),)
        return tuple(float(v) for v in np.linspace(lo, hi, count)) if count else ()
    if not isinstance(value, list):
        check.fail(
            key,
            f"must be a count of values or a list of values in [{lo:g}, {hi:g}], got {shown(value)}",
        )
    if len(value) > MAX_VALUES:
        check.fail(key, f"lists {len(value)} values; at most {MAX_VALUES}")
    values = []
    for index, item in enumerate(value, start=1):
        number = check.number(item, f"{key}[{index}]")
        if not lo <= number <= hi:
            check.fail(
                f"{key}[{index}]",
                f"{number:g} lies outside the trace's interval [{lo:g}, {hi:g}]",
            )
        values.append(number)
    return tuple(sorted(set(values)))


__all__ = [
    "DEFAULT_SAMPLES",
    "DEFAULT_VALUES",
    "SEARCH_KEYS",
    "SEARCH_START",
    "SearchSpec",
    "read_search",
]
