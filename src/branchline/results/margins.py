"""What an operator reads off the stability of the traced branches.

Operating margins (how far the parameter may move from each scanned start value
before the first located event, on either side), jump targets (the stable
equilibria a state can fall to when its own branch ends or loses stability)
and hysteresis windows (parameter ranges between consecutive folds, and the
parts of them where two stable states coexist). Built on the table access and
stability intervals of :mod:`branchline.results.reading`, from the saved tables alone;
every analysis returns frozen records.
"""

from __future__ import annotations

import itertools
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from branchline.results.reading import (
    ARCLENGTH_SLACK,
    BOOKKEEPING_COLUMNS,
    event_arclength,
    has_operating_point,
    stability_intervals,
    state_names,
    trace_entries,
    trace_events,
    trace_names,
    trace_rows,
    vary_of,
)
from branchline.vocabulary import EventKind

# A trace end this close (relative to the interval width) to an interval edge
# counts as "reached the edge".
EDGE_TOLERANCE = 1e-7
# Two jump targets closer than this (relative to the state scale) are the same
# equilibrium found on two traces.
SAME_TARGET_TOLERANCE = 1e-4


# --------------------------------------------------------------------------- records


@dataclass(frozen=True)
class SideMargin:
    """Distance from the start point to the first event met along one side."""

    side: str  # "decreasing" or "increasing"
    traced: bool
    event: Mapping[str, Any] | None
    absolute: float | None
    relative: float | None  # absolute / |start value|; None if the start value is 0
    reach: float | None  # parameter value where the traced side ends
    reached_edge: bool


@dataclass(frozen=True)
class JumpTarget:
    """A stable equilibrium on a traced branch at a given parameter value."""

    trace: str
    state: Mapping[str, float]  # interpolated between computed points


@dataclass(frozen=True)
class OperatingMargin:
    """Stability at a trace's start value and the margins to the nearest changes."""

    trace: str
    vary: str
    start_value: float
    stable: bool
    unstable_count: int
    decreasing: SideMargin
    increasing: SideMargin
    # other stable equilibria traced at the start value (a second state to fall into)
    coexisting: tuple[JumpTarget, ...] = ()


@dataclass(frozen=True)
class HysteresisWindow:
    """Two consecutive folds on one trace."""

    trace: str
    vary: str
    low: float
    high: float
    width: float
    bistable: bool  # outer parts stable and the middle unstable: a true hysteresis loop


# --------------------------------------------------------------------------- operating margins


def _start_row(rows: pd.DataFrame) -> int:
    return int(np.argmin(np.abs(rows["arclength"].to_numpy(dtype=float))))


def _side_margin(
    side: str,
    rows: pd.DataFrame,
    located: Sequence[Mapping[str, Any]],
    vary: str,
    start_value: float,
    interval: Sequence[float] | None,
) -> SideMargin:
    start = _start_row(rows)
    s0 = float(rows["arclength"].iloc[start])
    if side == "decreasing":
        traced = start > 0
        ahead = [e for e in located if event_arclength(e) <= s0]
        event = max(ahead, key=event_arclength) if ahead else None
        reach = float(rows[vary].iloc[0])
    else:
        traced = start < len(rows) - 1
        ahead = [e for e in located if event_arclength(e) >= s0]
        event = min(ahead, key=event_arclength) if ahead else None
        reach = float(rows[vary].iloc[-1])
    reached_edge = False
    if interval is not None and len(interval) == 2:
        width = max(abs(float(interval[1]) - float(interval[0])), 1e-300)
        reached_edge = min(abs(reach - float(b)) for b in interval) <= EDGE_TOLERANCE * width
    absolute = relative = None
    if event is not None:
        absolute = abs(float(event["value"]) - start_value)
        relative = absolute / abs(start_value) if start_value != 0 else None
    return SideMargin(side, traced, event, absolute, relative, reach, reached_edge)


def operating_margins(
    points: pd.DataFrame,
    events: Sequence[Mapping[str, Any]],
    info: Mapping[str, Any],
    *,
    coexisting: bool = True,
) -> list[OperatingMargin]:
    """Stability at each scanned trace's start value and the distance to the
    first event met along the branch in each direction.

    Switched branches (traces with a parent) have no operating point and are
    skipped. The start point is the row with arclength 0; the negative-arclength
    side is the side traced with decreasing parameter first (the contract).
    Distances are in the parameter's units; ``relative`` divides by the start
    value's magnitude. ``coexisting=False`` skips the search for other stable
    equilibria at the start value (the costly part; a batch needs only distances).
    """
    margins = []
    for entry in trace_entries(info):
        if not has_operating_point(entry):
            continue
        name = str(entry["name"])
        rows = trace_rows(points, name)
        vary = str(entry.get("vary") or vary_of(info, events, name))
        if rows.empty or vary not in rows.columns:
            continue
        start = _start_row(rows)
        start_value = entry.get("start_value")
        start_value = float(rows[vary].iloc[start] if start_value is None else start_value)
        located = trace_events(events, name)
        interval = entry.get("interval")
        count = int(rows["unstable_count"].iloc[start]) if "unstable_count" in rows else 0
        margins.append(
            OperatingMargin(
                trace=name,
                vary=vary,
                start_value=start_value,
                stable=bool(rows["stable"].iloc[start]),
                unstable_count=count,
                decreasing=_side_margin("decreasing", rows, located, vary, start_value, interval),
                increasing=_side_margin("increasing", rows, located, vary, start_value, interval),
                coexisting=_coexisting(points, rows, start, name, vary, start_value, info)
                if coexisting
                else (),
            )
        )
    return margins


def _coexisting(points, rows, start, name, vary, start_value, info) -> tuple[JumpTarget, ...]:
    """Stable equilibria at the start value other than the start point itself."""
    here = {
        "trace": name,
        "vary": vary,
        "value": start_value,
        "arclength": float(rows["arclength"].iloc[start]),
        "state": {c: float(rows[c].iloc[start]) for c in state_names(points, info)},
    }
    return tuple(jump_targets(points, here, info))


# --------------------------------------------------------------------------- folds and jumps


def hysteresis_windows(
    points: pd.DataFrame, events: Sequence[Mapping[str, Any]], info: Mapping[str, Any]
) -> list[HysteresisWindow]:
    """Parameter windows bounded by consecutive folds on one trace.

    ``bistable`` is True when the branch between the folds is unstable and the
    parts just outside are stable: the classical hysteresis loop, with two
    stable states coexisting over the whole window.
    """
    windows = []
    for name in trace_names(points, events):
        folds = [e for e in trace_events(events, name) if e["kind"] == EventKind.FOLD]
        rows = trace_rows(points, name)
        for first, second in itertools.pairwise(folds):
            a, b = float(first["value"]), float(second["value"])
            windows.append(
                HysteresisWindow(
                    trace=name,
                    vary=str(first["vary"]),
                    low=min(a, b),
                    high=max(a, b),
                    width=abs(a - b),
                    bistable=_is_bistable(rows, first, second),
                )
            )
    return windows


def _is_bistable(rows: pd.DataFrame, first: Mapping[str, Any], second: Mapping[str, Any]) -> bool:
    if rows.empty:
        return False
    s = rows["arclength"].to_numpy(dtype=float)
    stable = rows["stable"].to_numpy(dtype=bool)
    s1, s2 = event_arclength(first), event_arclength(second)
    middle = stable[(s > s1) & (s < s2)]
    before, after = stable[s < s1], stable[s > s2]
    return (
        middle.size > 0
        and not middle.any()
        and before.size > 0
        and bool(before[-1])
        and after.size > 0
        and bool(after[0])
    )


def bistable_ranges(
    points: pd.DataFrame,
    events: Sequence[Mapping[str, Any]],
    info: Mapping[str, Any],
    window: HysteresisWindow,
) -> list[tuple[float, float]]:
    """The parts of a fold pair's window where two stable parts of its trace coexist.

    For a clean hysteresis loop (``window.bistable``) this is the whole window.
    When another stability change sits next to a fold (a Hopf point between the
    lower fold and the stable branch, as in a cooled reactor's ignition and
    extinction), the state still depends on its history, but only between that
    change and the other fold. Overlaps of the stable intervals
    (:func:`stability_intervals`) inside the window, merged, in increasing order.
    """
    stable = [p for p in stability_intervals(points, events, info, window.trace) if p.stable]
    pieces = []
    for a, b in itertools.combinations(stable, 2):
        low, high = max(a.low, b.low, window.low), min(a.high, b.high, window.high)
        if low < high:
            pieces.append((low, high))
    merged: list[tuple[float, float]] = []
    for low, high in sorted(pieces):
        if merged and low <= merged[-1][1]:
            merged[-1] = (merged[-1][0], max(merged[-1][1], high))
        else:
            merged.append((low, high))
    return merged


def _neighbours(rows: pd.DataFrame, event: Mapping[str, Any]) -> tuple[int | None, int | None]:
    """Indices of the last row before and the first row after the event (by arclength)."""
    s = rows["arclength"].to_numpy(dtype=float)
    se = event_arclength(event)
    before = np.nonzero(s < se)[0]
    after = np.nonzero(s > se)[0]
    return (int(before[-1]) if before.size else None, int(after[0]) if after.size else None)


def stability_beside(rows: pd.DataFrame, event: Mapping[str, Any]) -> dict[int, bool]:
    """Stability of the computed rows just before and just after an event on its trace.

    Row index -> stable, the row before first (by arclength); a side with no row
    is left out, and an empty trace gives an empty dict.
    """
    if rows.empty:
        return {}
    stable = rows["stable"]
    return {i: bool(stable.iloc[i]) for i in _neighbours(rows, event) if i is not None}


def side_of(rows: pd.DataFrame, index: int | None, vary: str, value: float) -> float:
    """+1 when row ``index`` lies above ``value`` in the varied parameter, -1 below, 0 if none."""
    if index is None:
        return 0.0
    return float(np.sign(float(rows[vary].iloc[index]) - value))


def jump_targets(
    points: pd.DataFrame, event: Mapping[str, Any], info: Mapping[str, Any] | None = None
) -> list[JumpTarget]:
    """Stable equilibria on the traced branches at the event's parameter value.

    Scans every pair of consecutive stable rows (on traces varying the same
    parameter) whose parameter values bracket the event value, excluding the
    pair on the event's own trace that contains the event, and interpolates
    the states linearly there (grid accuracy).
    """
    vary = str(event["vary"])
    value = float(event["value"])
    names = (
        state_names(points, info or {})
        or [c for c in points.columns if c not in (*BOOKKEEPING_COLUMNS, "arclength", vary)][:1]
    )
    targets: list[JumpTarget] = []
    if vary not in points.columns:
        return targets
    for name in trace_names(points, []):
        rows = trace_rows(points, name)
        if rows.empty or not _varies(rows, vary):
            continue
        p = rows[vary].to_numpy(dtype=float)
        s = rows["arclength"].to_numpy(dtype=float)
        stable = rows["stable"].to_numpy(dtype=bool)
        se = event_arclength(event)
        slack = ARCLENGTH_SLACK * max(1.0, abs(se)) if np.isfinite(se) else 0.0
        for i in range(len(rows) - 1):
            if not (stable[i] and stable[i + 1]):
                continue
            if (p[i] - value) * (p[i + 1] - value) > 0 or p[i] == p[i + 1]:
                continue
            if name == event.get("trace") and s[i] - slack <= se <= s[i + 1] + slack:
                continue
            weight = (value - p[i]) / (p[i + 1] - p[i])
            state = {
                c: float(rows[c].iloc[i] + weight * (rows[c].iloc[i + 1] - rows[c].iloc[i]))
                for c in names
            }
            if not any(_same_state(state, t.state) for t in targets):
                targets.append(JumpTarget(name, state))
    origin = event.get("state") or {}

    def distance(target: JumpTarget) -> float:
        shared = [k for k in target.state if k in origin]
        return float(np.hypot.reduce([target.state[k] - float(origin[k]) for k in shared] or [0.0]))

    return sorted(targets, key=distance)


def _varies(rows: pd.DataFrame, column: str) -> bool:
    values = rows[column].to_numpy(dtype=float)
    return values.size > 1 and float(np.ptp(values)) > 0


def _same_state(a: Mapping[str, float], b: Mapping[str, float]) -> bool:
    va = np.array([a[k] for k in a])
    vb = np.array([b.get(k, np.nan) for k in a])
    scale = 1.0 + max(float(np.max(np.abs(va))), float(np.max(np.abs(vb))))
    return bool(np.all(np.abs(va - vb) <= SAME_TARGET_TOLERANCE * scale))


__all__ = [
    "HysteresisWindow",
    "JumpTarget",
    "OperatingMargin",
    "SideMargin",
    "bistable_ranges",
    "hysteresis_windows",
    "jump_targets",
    "operating_margins",
    "side_of",
    "stability_beside",
]
