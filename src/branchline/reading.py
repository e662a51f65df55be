"""Facts read off the saved tables: what the report says and the diagram shows.

Everything here works from the saved tables alone (``points`` as in points.csv,
``events`` as in events.json, ``info`` as in run.json), so that neither
``branchline report DIR`` nor ``branchline plot DIR`` recomputes anything.
The analyses (:func:`stability_intervals`, :func:`operating_margins`,
:func:`hysteresis_windows`, :func:`jump_targets`) return frozen records; the
names of events and the way numbers are written live here too, so that the
report (:mod:`branchline.report`) and the diagram (:mod:`branchline.plotting`)
use the same words for the same thing.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

# Located event values are refined to near machine precision; ten significant
# digits is what a reader can use (events.csv keeps all 17).
VALUE_DIGITS = 10
# An event belongs to the stability change between two rows when its arclength
# lies between theirs, widened by this relative slack (events are interpolated).
ARCLENGTH_SLACK = 1e-9
# A trace end this close (relative to the interval width) to an interval edge
# counts as "reached the edge".
EDGE_TOLERANCE = 1e-7
# Two jump targets closer than this (relative to the state scale) are the same
# equilibrium found on two traces.
SAME_TARGET_TOLERANCE = 1e-4
# A switched trace whose start value lies this close (relative) to a branch point's
# value was started there (start values are copied from the located event).
SAME_START_TOLERANCE = 1e-6

KIND_WORDS = {
    "fold": "fold",
    "hopf": "Hopf",
    "branch_point": "branch point",
    "cusp": "cusp",
    "bogdanov_takens": "Bogdanov-Takens",
    "bautin": "Bautin",
    "zero_hopf": "zero-Hopf",
    "double_hopf": "double Hopf",
    "cycle_fold": "fold of cycles",
    "period_doubling": "period doubling",
    "torus": "torus",
}

# Columns of points.csv that are bookkeeping, not quantities of the model.
BOOKKEEPING_COLUMNS = ("trace", "step", "stable", "unstable_count")


# --------------------------------------------------------------------------- records


@dataclass(frozen=True)
class StabilityInterval:
    """A maximal run of rows of one trace with the same stability.

    ``start_value``/``end_value`` are the parameter values at the run's ends in
    trace order: a located event's value where the run meets one, the edge
    point where the trace ends, otherwise an estimate between rows
    (``start_exact``/``end_exact`` False). ``low``/``high`` span every value the
    run covers (they differ from the ends when the run passes a fold).
    """

    trace: str
    vary: str
    stable: bool
    start_value: float
    end_value: float
    start_exact: bool
    end_exact: bool
    low: float
    high: float
    unstable_counts: tuple[int, ...]
    start_kind: str | None = None  # event kind at the start boundary, if any
    end_kind: str | None = None
    folds_inside: tuple[float, ...] = ()


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


# --------------------------------------------------------------------------- names and numbers


def fmt(value: Any, digits: int = VALUE_DIGITS) -> str:
    """A number with ``digits`` significant digits; missing values as an em dash."""
    if value is None:
        return "—"
    try:
        number = float(value)
    except (TypeError, ValueError):
        return str(value)
    if math.isnan(number):
        return "—"
    text = f"{number:.{digits}g}"
    return "0" if text == "-0" else text


def kind_words(kind: str) -> str:
    """The trade name of an event kind, in words."""
    return KIND_WORDS.get(kind, kind.replace("_", " "))


def event_label(event: Mapping[str, Any]) -> str:
    """Short label of an event: ``fold``, ``Hopf (subcritical)``, ``branch point (pitchfork)``."""
    words = kind_words(str(event.get("kind", "")))
    qualifier = event.get("criticality") or event.get("branching")
    return f"{words} ({qualifier})" if qualifier else words


def event_period(event: Mapping[str, Any]) -> float | None:
    """Period of the oscillation born at a Hopf point (from its angular frequency if needed)."""
    period = event.get("period")
    if period is not None:
        return float(period)
    frequency = event.get("frequency")
    if frequency:
        return 2.0 * math.pi / float(frequency)
    return None


def state_norm(state: Mapping[str, float]) -> float:
    """Euclidean norm of a state given as name -> value (the ``norm`` column's quantity)."""
    return math.sqrt(sum(float(v) ** 2 for v in state.values()))


# --------------------------------------------------------------------------- table access


def trace_entries(info: Mapping[str, Any]) -> list[Mapping[str, Any]]:
    """The traces of run.json, in run order."""
    return list(info.get("traces") or [])


def trace_entry(info: Mapping[str, Any], name: str) -> Mapping[str, Any]:
    """The run.json entry of one trace (empty when the trace is not listed)."""
    return next((t for t in trace_entries(info) if t.get("name") == name), {})


def trace_names(points: pd.DataFrame, events: Sequence[Mapping[str, Any]]) -> list[str]:
    """Traces in the points table (in order of appearance), then those with events only."""
    names = list(dict.fromkeys(points["trace"].astype(str))) if "trace" in points else []
    for event in events:
        if event.get("trace") not in names:
            names.append(str(event.get("trace")))
    return names


def trace_rows(points: pd.DataFrame, trace: str) -> pd.DataFrame:
    """The rows of one trace in trace order, index reset."""
    rows = points[points["trace"].astype(str) == trace]
    if "step" in rows.columns:
        rows = rows.sort_values("step", kind="stable")
    rows = rows.reset_index(drop=True)
    if "stable" in rows.columns and rows["stable"].dtype != bool:
        # read from CSV without conversion: "true"/"false" text
        rows["stable"] = rows["stable"].astype(str).str.strip().str.lower().eq("true")
    return rows


def _arclength(event: Mapping[str, Any]) -> float:
    """An event's position along its branch (NaN when it has none)."""
    value = event.get("arclength")
    return np.nan if value is None else float(value)


def trace_events(events: Sequence[Mapping[str, Any]], trace: str) -> list[Mapping[str, Any]]:
    """The events of one trace, ordered by arclength."""
    found = [e for e in events if e.get("trace") == trace]
    return sorted(found, key=lambda e: (np.isnan(_arclength(e)), _arclength(e)))


def vary_of(info: Mapping[str, Any], events: Sequence[Mapping[str, Any]], trace: str) -> str:
    """The parameter a trace varies (from run.json, else from its events; "" if unknown)."""
    vary = trace_entry(info, trace).get("vary")
    if vary:
        return str(vary)
    return str(next((e["vary"] for e in events if e.get("trace") == trace), ""))


def state_names(points: pd.DataFrame, info: Mapping[str, Any]) -> list[str]:
    """State columns present in the points table (``norm`` for large models)."""
    names = [s for s in (info.get("model") or {}).get("states", []) if s in points.columns]
    if not names and "norm" in points.columns:
        names = ["norm"]
    return names


def event_value(event: Mapping[str, Any], name: str) -> float | None:
    """The value of a parameter or state at an event (None when the event does not hold it)."""
    for key in ("parameters", "state"):
        table = event.get(key) or {}
        if name in table:
            return float(table[name])
    if name == event.get("vary"):
        return float(event["value"])
    return None


# --------------------------------------------------------------------------- stability intervals


def _matching_event(
    events: Sequence[Mapping[str, Any]], s0: float, s1: float, p0: float, p1: float
) -> Mapping[str, Any] | None:
    """The located event at a stability change between two rows, if any."""
    slack = ARCLENGTH_SLACK * max(1.0, abs(s0), abs(s1))
    lo, hi = min(s0, s1) - slack, max(s0, s1) + slack
    candidates = [e for e in events if lo <= _arclength(e) <= hi]
    if not candidates:
        plo, phi = min(p0, p1), max(p0, p1)
        pslack = ARCLENGTH_SLACK * max(1.0, abs(plo), abs(phi))
        candidates = [e for e in events if plo - pslack <= float(e["value"]) <= phi + pslack]
    if not candidates:
        return None
    middle = 0.5 * (s0 + s1)
    return min(candidates, key=lambda e: abs(_arclength(e) - middle))


def _crossing_event(
    events: Sequence[Mapping[str, Any]], rows: pd.DataFrame, i: int, vary: str, trace: str
) -> Mapping[str, Any] | None:
    """An event located on another trace that lies between rows i and i+1 of this one.

    A branch switched at a branch point changes stability at its parent's
    event, which is recorded on the parent only; it is recognized here by its
    parameter value and state lying between the two rows.
    """
    pair = rows.iloc[[i, i + 1]]
    for event in events:
        if event.get("trace") == trace or event.get("vary") != vary:
            continue
        state = event.get("state") or {}
        columns = {vary: float(event["value"]), **state}
        if "norm" in pair.columns and "norm" not in state and state:
            columns["norm"] = state_norm(state)
        if not any(name in pair.columns for name in columns if name != vary):
            continue  # a parameter value alone does not place the event on this branch
        inside = True
        for name, value in columns.items():
            if name not in pair.columns:
                continue
            lo, hi = float(pair[name].min()), float(pair[name].max())
            slack = ARCLENGTH_SLACK * max(1.0, abs(lo), abs(hi))
            inside &= lo - slack <= float(value) <= hi + slack
        if inside:
            return {**event, "arclength": float(pair["arclength"].mean())}
    return None


def event_at_change(
    events: Sequence[Mapping[str, Any]], rows: pd.DataFrame, i: int, vary: str, trace: str
) -> Mapping[str, Any] | None:
    """The located event between rows ``i`` and ``i + 1`` of a trace, if any.

    First an event of the trace itself (by arclength, then by parameter value),
    else one of another trace passing through the same point (a switched branch
    meets its parent's branch point).
    """
    s = rows["arclength"].to_numpy(dtype=float)
    p = rows[vary].to_numpy(dtype=float)
    own = trace_events(events, trace)
    return _matching_event(own, s[i], s[i + 1], p[i], p[i + 1]) or _crossing_event(
        events, rows, i, vary, trace
    )


def _estimated_crossing(rows: pd.DataFrame, i: int, vary: str) -> float:
    """Parameter value where the leading real part crosses zero between rows i, i+1."""
    p0, p1 = float(rows[vary].iloc[i]), float(rows[vary].iloc[i + 1])
    if "leading_real" in rows.columns:
        r0, r1 = float(rows["leading_real"].iloc[i]), float(rows["leading_real"].iloc[i + 1])
        if np.isfinite(r0) and np.isfinite(r1) and r0 != r1 and r0 * r1 <= 0:
            return p0 + (p1 - p0) * r0 / (r0 - r1)
    return 0.5 * (p0 + p1)


def stability_intervals(
    points: pd.DataFrame, events: Sequence[Mapping[str, Any]], info: Mapping[str, Any], trace: str
) -> list[StabilityInterval]:
    """Split one trace into maximal stable / unstable runs along the branch.

    Parameters
    ----------
    points, events, info
        The saved tables (points.csv, events.json, run.json).
    trace : str
        Trace name.

    Returns
    -------
    list of StabilityInterval
        In trace order. A boundary between runs takes the value of the located
        event that sits between the two rows (matched by arclength, then by
        parameter value); without one it is estimated where the leading real
        part crosses zero, and flagged inexact.
    """
    rows = trace_rows(points, trace)
    vary = vary_of(info, events, trace)
    if rows.empty or vary not in rows.columns:
        return []
    located = trace_events(events, trace)
    stable = rows["stable"].to_numpy(dtype=bool)
    values = rows[vary].to_numpy(dtype=float)
    arclength = rows["arclength"].to_numpy(dtype=float)
    counts = rows["unstable_count"].to_numpy() if "unstable_count" in rows else np.zeros(len(rows))
    changes = [i for i in range(len(rows) - 1) if stable[i] != stable[i + 1]]
    edges: list[tuple[float, bool, str | None, float]] = []  # value, exact, kind, arclength
    for i in changes:
        event = event_at_change(events, rows, i, vary, trace)
        if event is not None:
            edges.append((float(event["value"]), True, event["kind"], _arclength(event)))
        else:
            mid = 0.5 * (arclength[i] + arclength[i + 1])
            edges.append((_estimated_crossing(rows, i, vary), False, None, mid))
    starts = [0, *(i + 1 for i in changes)]
    ends = [*changes, len(rows) - 1]
    intervals = []
    for k, (a, b) in enumerate(zip(starts, ends, strict=True)):
        start = (values[a], True, None, arclength[a]) if k == 0 else edges[k - 1]
        end = (values[b], True, None, arclength[b]) if k == len(ends) - 1 else edges[k]
        covered = [start[0], end[0], *values[a : b + 1]]
        folds = tuple(
            float(e["value"])
            for e in located
            if e["kind"] == "fold" and start[3] < _arclength(e) < end[3]
        )
        intervals.append(
            StabilityInterval(
                trace=trace,
                vary=vary,
                stable=bool(stable[a]),
                start_value=float(start[0]),
                end_value=float(end[0]),
                start_exact=start[1],
                end_exact=end[1],
                low=float(min(covered)),
                high=float(max(covered)),
                unstable_counts=tuple(sorted({int(c) for c in counts[a : b + 1]})),
                start_kind=start[2],
                end_kind=end[2],
                folds_inside=folds,
            )
        )
    return intervals


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
        ahead = [e for e in located if _arclength(e) <= s0]
        event = max(ahead, key=_arclength) if ahead else None
        reach = float(rows[vary].iloc[0])
    else:
        traced = start < len(rows) - 1
        ahead = [e for e in located if _arclength(e) >= s0]
        event = min(ahead, key=_arclength) if ahead else None
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
    points: pd.DataFrame, events: Sequence[Mapping[str, Any]], info: Mapping[str, Any]
) -> list[OperatingMargin]:
    """Stability at each scanned trace's start value and the distance to the
    first event met along the branch in each direction.

    Switched branches (traces with a parent) have no operating point and are
    skipped. The start point is the row with arclength 0; the negative-arclength
    side is the side traced with decreasing parameter first (the contract).
    Distances are in the parameter's units; ``relative`` divides by the start
    value's magnitude.
    """
    margins = []
    for entry in trace_entries(info):
        if entry.get("parent"):
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
                coexisting=_coexisting(points, rows, start, name, vary, start_value, info),
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
        folds = [e for e in trace_events(events, name) if e["kind"] == "fold"]
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
    s1, s2 = _arclength(first), _arclength(second)
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
    se = _arclength(event)
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
        se = _arclength(event)
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


# --------------------------------------------------------------------------- switched branches


def origin_event(
    events: Sequence[Mapping[str, Any]], info: Mapping[str, Any], trace: str
) -> Mapping[str, Any] | None:
    """The parent's branch point a switched trace was started from (None for scanned traces)."""
    entry = trace_entry(info, trace)
    parent = entry.get("parent")
    if not parent:
        return None
    points = [e for e in trace_events(events, str(parent)) if e.get("kind") == "branch_point"]
    if not points:
        return None
    start = entry.get("start_value")
    if start is None:
        return points[0]
    return min(points, key=lambda e: abs(float(e["value"]) - float(start)))


def switched_traces(info: Mapping[str, Any], event: Mapping[str, Any]) -> list[str]:
    """Names of the traces switched onto at a branch point (all children of its trace
    when none started at the event's value)."""
    kids = [t for t in trace_entries(info) if t.get("parent") == event.get("trace")]
    value = float(event["value"])
    scale = 1.0 + abs(value)
    matched = [
        t
        for t in kids
        if t.get("start_value") is not None
        and abs(float(t["start_value"]) - value) <= SAME_START_TOLERANCE * scale
    ]
    return [str(t["name"]) for t in (matched or kids)]


__all__ = [
    "BOOKKEEPING_COLUMNS",
    "HysteresisWindow",
    "JumpTarget",
    "OperatingMargin",
    "SideMargin",
    "StabilityInterval",
    "bistable_ranges",
    "event_at_change",
    "event_label",
    "event_period",
    "event_value",
    "fmt",
    "hysteresis_windows",
    "jump_targets",
    "kind_words",
    "operating_margins",
    "origin_event",
    "side_of",
    "stability_beside",
    "stability_intervals",
    "state_names",
    "state_norm",
    "switched_traces",
    "trace_entries",
    "trace_entry",
    "trace_events",
    "trace_names",
    "trace_rows",
    "vary_of",
]
