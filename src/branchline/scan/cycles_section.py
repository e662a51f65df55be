"""The ``[[cycles]]`` section: families of periodic orbits to follow from Hopf points.

Keys (``interface.md`` fixes ``name``, ``from``, ``hopf``, ``interval``; the
others are ours):

- ``name``: optional, default ``cycles1``, ``cycles2``, ... (1-based over the
  section); unique among traces and cycles; no ``.`` (kept for doubled
  families, ``<name>.2``).
- ``from``: the ``[[trace]]`` holding the Hopf point; ``hopf``: which Hopf point
  on it, in trace order (default 1).
- ``interval``: window for the trace's varied parameter.
- ``intervals``: mesh intervals (default 40, at least 4); ``points``:
  Gauss-Legendre collocation points per interval (default 4, from 2 to 7).
- ``doublings``: how many successive period doublings to switch at, each
  doubled family traced as ``<name>.2``, ``<name>.2.2``, ... (default 1; 0 to
  switch off).
- ``[cycles.steps]``: step settings as for a trace (``largest`` default 0.5 here:
  steps are measured in the orbit's L2 norm, period and parameter together).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

from branchline.scan.checks import Checker, listed, shown, suggestion

DEFAULT_INTERVALS = 40
DEFAULT_POINTS = 4
DEFAULT_DOUBLINGS = 1
# Fewer intervals cannot resolve even a sinusoid to the accuracy tests demand.
SMALLEST_INTERVALS = 4
# Gauss-Legendre points per interval: 2 is the least with superconvergence at the
# mesh points worth having; above 7 the equally spaced representation points give
# ill-conditioned interpolation (Runge's phenomenon).
POINT_RANGE = (2, 7)
MAX_DOUBLINGS = 5
# Orbit families move in larger steps than equilibria: the norm includes the period.
DEFAULT_LARGEST_CYCLE_STEP = 0.5
CYCLE_KEYS = ("name", "from", "hopf", "interval", "intervals", "points", "doublings", "steps")


@dataclass(frozen=True)
class CycleSpec:
    """One ``[[cycles]]``: the periodic orbits born at a Hopf point of a trace."""

    name: str
    source_trace: str  # the "from" key
    hopf: int
    interval: tuple[float, float]
    steps: object  # StepSettings
    intervals: int = DEFAULT_INTERVALS
    points: int = DEFAULT_POINTS
    doublings: int = DEFAULT_DOUBLINGS


def read_cycles(check: Checker, value: object, traces, steps, read_steps, read_window):
    """Validate the ``[[cycles]]`` list against the traces; a tuple of CycleSpec.

    ``read_steps(check, table, path, base)`` and ``read_window(check, value, key, hint)``
    are the loader's own step and [low, high] readers (shared, not repeated here).
    """
    if value is None:
        return ()
    if isinstance(value, dict):
        check.fail("cycles", "write [[cycles]] with double brackets: cycles are a list of tables")
    if not isinstance(value, list):
        check.fail("cycles", f"must be a list of [[cycles]] tables, got {shown(value)}")
    by_name = {trace.name: trace for trace in traces}
    used = {name: f"trace '{name}'" for name in by_name}
    specs = []
    base = replace(steps, largest=max(steps.largest, DEFAULT_LARGEST_CYCLE_STEP))
    for index, item in enumerate(value, start=1):
        path = f"cycles[{index}]"
        table = check.table(item, path)
        check.keys(table, path, CYCLE_KEYS)
        name = check.text(table.get("name", f"cycles{index}"), f"{path}.name")
        if not name.strip() or "." in name:
            check.fail(f"{path}.name", f"must be non-empty text without '.', got {shown(name)}")
        if name in used:
            check.fail(f"{path}.name", f"'{name}' is already used by {used[name]}")
        used[name] = path
        if "from" not in table:
            check.fail(f"{path}.from", "missing: name the [[trace]] holding the Hopf point")
        origin = check.text(table["from"], f"{path}.from")
        if origin not in by_name:
            check.fail(
                f"{path}.from",
                f"'{origin}' is not a trace{suggestion(origin, by_name)} (traces: {listed(by_name)})",
            )
        hopf = check.count(table.get("hopf", 1), f"{path}.hopf")
        if "interval" not in table:
            check.fail(f"{path}.interval", f"missing: give the window for {by_name[origin].vary}")
        interval = read_window(check, table["interval"], f"{path}.interval", "")
        intervals = check.count(table.get("intervals", DEFAULT_INTERVALS), f"{path}.intervals")
        if intervals < SMALLEST_INTERVALS:
            check.fail(
                f"{path}.intervals", f"must be at least {SMALLEST_INTERVALS}, got {intervals}"
            )
        points = check.count(table.get("points", DEFAULT_POINTS), f"{path}.points")
        if not POINT_RANGE[0] <= points <= POINT_RANGE[1]:
            check.fail(
                f"{path}.points", f"must be from {POINT_RANGE[0]} to {POINT_RANGE[1]}, got {points}"
            )
        doublings = table.get("doublings", DEFAULT_DOUBLINGS)
        if doublings != 0:
            doublings = check.count(doublings, f"{path}.doublings")
        if doublings > MAX_DOUBLINGS:
            check.fail(f"{path}.doublings", f"must be at most {MAX_DOUBLINGS}, got {doublings}")
        cycle_steps = base
        if "steps" in table:
            cycle_steps = read_steps(check, table["steps"], f"{path}.steps", base)
        specs.append(
            CycleSpec(name, origin, hopf, interval, cycle_steps, intervals, points, doublings)
        )
    return tuple(specs)


__all__ = ["CYCLE_KEYS", "CycleSpec", "read_cycles"]
