"""The stability-change report: what a person reads.

Everything here works from the saved tables alone (``points`` as in points.csv,
``events`` as in events.json, ``info`` as in run.json), so that
``branchline report DIR`` never recomputes. The analysis helpers
(:func:`stability_intervals`, :func:`operating_margins`,
:func:`hysteresis_windows`, :func:`jump_targets`) return frozen records and are
shared with :mod:`branchline.plotting`.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

CAUTION = (
    "Results describe the model, not the plant: a safety decision must follow local codes "
    "and licensed engineering practice, never these numbers alone."
)

# Located event values are refined to near machine precision; ten significant
# digits is what a reader can use (events.csv keeps all 17).
VALUE_DIGITS = 10
# Values read off the computed points (grid accuracy only) get fewer digits.
APPROX_DIGITS = 5
# An event belongs to the stability change between two rows when its arclength
# lies between theirs, widened by this relative slack (events are interpolated).
ARCLENGTH_SLACK = 1e-9
# A trace end this close (relative to the interval width) to an interval edge
# counts as "reached the edge".
EDGE_TOLERANCE = 1e-7
# Two jump targets closer than this (relative to the state scale) are the same
# equilibrium found on two traces.
SAME_TARGET_TOLERANCE = 1e-4
# At most this many states are spelled out in a table cell; beyond, the norm.
MAX_STATES_SHOWN = 4

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

STATUS_WORDS = {
    "done": "reached the end of its interval",
    "max_points": "stopped at the point limit (steps.max_points)",
    "closed": "closed on itself (an isola)",
    "failed": "stopped by numerical trouble",
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


# --------------------------------------------------------------------------- formatting


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


def _escape(text: Any) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def _table(header: Sequence[str], rows: Iterable[Sequence[Any]]) -> str:
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(_escape(cell) for cell in row) + " |" for row in rows]
    return "\n".join(lines)


def _period(event: Mapping[str, Any]) -> float | None:
    period = event.get("period")
    if period is not None:
        return float(period)
    frequency = event.get("frequency")
    if frequency:
        return 2.0 * math.pi / float(frequency)
    return None


def _state_text(state: Mapping[str, float], digits: int = 6) -> str:
    if not state:
        return "—"
    items = list(state.items())
    if len(items) > MAX_STATES_SHOWN:
        norm = math.sqrt(sum(float(v) ** 2 for _, v in items))
        return f"norm {fmt(norm, digits)} ({len(items)} states)"
    return ", ".join(f"{name} = {fmt(value, digits)}" for name, value in items)


# --------------------------------------------------------------------------- table access


def _traces_info(info: Mapping[str, Any]) -> list[Mapping[str, Any]]:
    return list(info.get("traces") or [])


def _trace_info(info: Mapping[str, Any], name: str) -> Mapping[str, Any]:
    return next((t for t in _traces_info(info) if t.get("name") == name), {})


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


def _vary_of(info: Mapping[str, Any], events: Sequence[Mapping[str, Any]], trace: str) -> str:
    vary = _trace_info(info, trace).get("vary")
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
            columns["norm"] = float(np.sqrt(sum(float(v) ** 2 for v in state.values())))
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
    vary = _vary_of(info, events, trace)
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
    arclength = rows["arclength"].to_numpy(dtype=float)
    start = _start_row(rows)
    s0 = arclength[start]
    if side == "decreasing":
        traced = start > 0
        ahead = [e for e in located if _arclength(e) <= s0]
        event = max(ahead, key=lambda e: _arclength(e)) if ahead else None
        reach = float(rows[vary].iloc[0])
    else:
        traced = start < len(rows) - 1
        ahead = [e for e in located if _arclength(e) >= s0]
        event = min(ahead, key=lambda e: _arclength(e)) if ahead else None
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
    for entry in _traces_info(info):
        if entry.get("parent"):
            continue
        name = str(entry["name"])
        rows = trace_rows(points, name)
        vary = str(entry.get("vary") or _vary_of(info, events, name))
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
    for name in _trace_names(points, events):
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


def _neighbours(rows: pd.DataFrame, event: Mapping[str, Any]) -> tuple[int | None, int | None]:
    """Indices of the last row before and the first row after the event (by arclength)."""
    s = rows["arclength"].to_numpy(dtype=float)
    se = _arclength(event)
    before = np.nonzero(s < se)[0]
    after = np.nonzero(s > se)[0]
    return (int(before[-1]) if before.size else None, int(after[0]) if after.size else None)


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
    for name in _trace_names(points, []):
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


def _trace_names(points: pd.DataFrame, events: Sequence[Mapping[str, Any]]) -> list[str]:
    names = list(dict.fromkeys(points["trace"].astype(str))) if "trace" in points else []
    for event in events:
        if event.get("trace") not in names:
            names.append(str(event.get("trace")))
    return names


# --------------------------------------------------------------------------- readings


def _direction_words(side: float) -> str:
    return "raised above" if side > 0 else "lowered below"


def _side_of(rows: pd.DataFrame, index: int | None, vary: str, value: float) -> float:
    if index is None:
        return 0.0
    return float(np.sign(float(rows[vary].iloc[index]) - value))


def _read_fold(points, event, info) -> str:
    vary, value = str(event["vary"]), float(event["value"])
    rows = trace_rows(points, str(event["trace"]))
    head = f"**Fold at {vary} = {fmt(value)}** (trace {event['trace']}): the branch turns back here"
    if rows.empty or vary not in rows.columns:
        return head + "."
    before, after = _neighbours(rows, event)
    existing = _side_of(rows, before if before is not None else after, vary, value)
    lost = "raised above" if existing < 0 else "lowered below"
    flags = [bool(rows["stable"].iloc[i]) for i in (before, after) if i is not None]
    if not any(flags):
        return (
            head + f"; two unstable equilibria meet and vanish when {vary} is {lost} "
            f"{fmt(value)}. No stable state is lost here."
        )
    text = (
        head + f". It is a tipping point: a stable equilibrium meets an unstable one, and both "
        f"vanish when {vary} is {lost} {fmt(value)}; a system sitting on the stable part "
        "must then jump to another state."
    )
    targets = jump_targets(points, event, info)
    if len(targets) == 1:
        (target,) = targets
        text += (
            " The only other stable equilibrium traced at this value is on trace "
            f"{target.trace}, near {_state_text(target.state, APPROX_DIGITS)} (read off the "
            "computed points): the state will most likely settle there, unless it starts to "
            "oscillate or heads for something not traced."
        )
    elif targets:
        where = "; ".join(
            f"trace {t.trace} near {_state_text(t.state, APPROX_DIGITS)}" for t in targets
        )
        text += (
            f" Stable equilibria traced at this value, nearest first: {where} (read off the "
            "computed points). Which one the state reaches depends on the dynamics, which "
            "this report does not simulate."
        )
    else:
        text += (
            " No other stable equilibrium was traced at this value, so where it goes is not "
            "shown here: possibly an oscillation, an untraced equilibrium, or runaway."
        )
    return text


def _read_hopf(points, event, info) -> str:
    vary, value = str(event["vary"]), float(event["value"])
    period = _period(event)
    rhythm = f" with period about {fmt(period, 6)}" if period else ""
    if event.get("frequency"):
        rhythm += f" (angular frequency {fmt(event['frequency'], 6)})"
    label = event_label(event)
    head = f"**{label[0].upper() + label[1:]} at {vary} = {fmt(value)}** (trace {event['trace']})"
    rows = trace_rows(points, str(event["trace"]))
    before, after = _neighbours(rows, event) if not rows.empty else (None, None)
    flags = {i: bool(rows["stable"].iloc[i]) for i in (before, after) if i is not None}
    unstable_index = next((i for i, ok in flags.items() if not ok), None)
    if flags and not any(flags.values()):
        return (
            head + ": a pair of complex eigenvalues crosses the imaginary axis on a part of the "
            f"branch that is already unstable; an (unstable) oscillation{rhythm} is born, but a "
            "state resting here was not stable to begin with."
        )
    past = ""
    if unstable_index is not None and vary in rows.columns:
        side = _side_of(rows, unstable_index, vary, value)
        past = f" when {vary} is {_direction_words(side)} {fmt(value)}"
    criticality = event.get("criticality")
    lyapunov = event.get("lyapunov")
    l1 = f" (first Lyapunov coefficient {fmt(lyapunov, 4)})" if lyapunov is not None else ""
    if criticality == "supercritical":
        return (
            head + f": soft onset{l1}. The equilibrium loses stability{past} and small "
            f"oscillations{rhythm} grow out of it gradually, their amplitude rising roughly "
            "with the square root of the distance past the onset."
        )
    if criticality == "subcritical":
        return (
            head + f": hard onset{l1}. The equilibrium loses stability{past} with no small "
            "oscillation to take over: the state jumps to large oscillations or to another "
            f"state. Before the onset an unstable oscillation{rhythm} surrounds the "
            "equilibrium, so a large enough disturbance can already push the state away."
        )
    return (
        head + f": the equilibrium loses stability{past} to oscillations{rhythm}; whether the "
        "onset is soft or hard was not determined"
        + (f" ({event['note']})." if event.get("note") else ".")
    )


def _children(info: Mapping[str, Any], event: Mapping[str, Any]) -> list[str]:
    kids = [t for t in _traces_info(info) if t.get("parent") == event.get("trace")]
    value = float(event["value"])
    scale = 1.0 + abs(value)
    matched = [
        t
        for t in kids
        if t.get("start_value") is not None and abs(float(t["start_value"]) - value) <= 1e-6 * scale
    ]
    return [str(t["name"]) for t in (matched or kids)]


def _read_branch_point(points, event, info) -> str:
    vary, value = str(event["vary"]), float(event["value"])
    head = f"**Branch point at {vary} = {fmt(value)}** (trace {event['trace']})"
    branching = event.get("branching")
    rows = trace_rows(points, str(event["trace"]))
    before, after = _neighbours(rows, event) if not rows.empty else (None, None)
    flags = [bool(rows["stable"].iloc[i]) for i in (before, after) if i is not None]
    if flags and not any(flags):
        kind = f" ({branching})" if branching else ""
        text = (
            head + f": two branches of equilibria cross{kind} on a part of this branch that "
            "is unstable on both sides; no stable state changes here."
        )
    elif branching == "transcritical":
        text = (
            head + ": an exchange of stability (transcritical). Two branches of equilibria "
            "cross here and swap stability: the one that was stable becomes unstable and the "
            "crossing one takes over, so the state moves smoothly onto the other branch."
        )
    elif branching == "pitchfork":
        text = (
            head + ": symmetry-breaking (pitchfork). A pair of new branches splits off on one "
            "side of this value; which of them the state follows is decided by small "
            "asymmetries of the real system."
        )
    else:
        text = head + ": two branches of equilibria cross here (type not determined)."
    kids = _children(info, event)
    if kids:
        text += " The crossing branch was followed as " + ", ".join(kids) + "."
    return text


def read_event(points: pd.DataFrame, event: Mapping[str, Any], info: Mapping[str, Any]) -> str:
    """A plain-language reading of one event (markdown)."""
    kind = event.get("kind")
    if kind == "fold":
        return _read_fold(points, event, info)
    if kind == "hopf":
        return _read_hopf(points, event, info)
    if kind == "branch_point":
        return _read_branch_point(points, event, info)
    return f"**{event_label(event)} at {event.get('vary')} = {fmt(event.get('value'))}**."


# --------------------------------------------------------------------------- sections


def _model_section(info: Mapping[str, Any]) -> list[str]:
    model = info.get("model") or {}
    out = ["## The model", ""]
    states = list(model.get("states") or [])
    if model.get("kind") == "python":
        out.append(
            f"Given as Python: `{model.get('python_source')}`. Its module was imported and its "
            "code ran to compute the right-hand side."
        )
        shown = states if len(states) <= 12 else [*states[:6], "…", *states[-2:]]
        out.append(f"\n{len(states)} states: {', '.join(shown)}.")
    else:
        out.append(f"States: {', '.join(states) if states else '—'}.")
    out.append("")
    parameters = model.get("parameters") or {}
    if parameters:
        out += [_table(["parameter", "default"], [(k, fmt(v)) for k, v in parameters.items()]), ""]
    equations = model.get("equations") or {}
    if equations:
        width = max(len(name) for name in equations)
        out += ["Equations, as given:", "", "```"]
        out += [
            f"d{name}/dt{' ' * (width - len(name))} = {text}" for name, text in equations.items()
        ]
        out += ["```", ""]
    definitions = model.get("definitions") or {}
    if definitions:
        out += ["Definitions:", "", "```"]
        out += [f"{name} = {text}" for name, text in definitions.items()]
        out += ["```", ""]
    observables = model.get("observables") or []
    if observables:
        out += [f"Observables: {', '.join(map(str, observables))}.", ""]
    return out


def _trace_ending(entry: Mapping[str, Any]) -> str:
    status = str(entry.get("status", ""))
    words = STATUS_WORDS.get(status, status or "—")
    message = entry.get("message")
    if message and status == "done":
        return str(message)  # it already says which edge was reached
    return f"{words}: {message}" if message else words


def _scan_section(info: Mapping[str, Any]) -> list[str]:
    out = ["## What was scanned", ""]
    rows = []
    for entry in _traces_info(info):
        interval = entry.get("interval") or [None, None]
        overrides = ", ".join(f"{k} = {fmt(v)}" for k, v in (entry.get("set") or {}).items())
        rows.append(
            (
                entry.get("name"),
                entry.get("vary"),
                f"[{fmt(interval[0])}, {fmt(interval[1])}]",
                fmt(entry.get("start_value")),
                overrides or "—",
                f"switched from {entry['parent']}" if entry.get("parent") else "scan file",
                entry.get("points", "—"),
                _trace_ending(entry),
            )
        )
    if rows:
        header = ["trace", "varies", "interval", "start", "overrides", "origin", "points", "ended"]
        out += [_table(header, rows), ""]
    else:
        out += ["No traces were run.", ""]
    return out


def _events_section(events: Sequence[Mapping[str, Any]]) -> list[str]:
    out = ["## Stability changes found", ""]
    if not events:
        return [*out, "None: no fold, Hopf point or branch point was located on any trace.", ""]
    rows = []
    for number, event in enumerate(events, start=1):
        hopf = event.get("kind") == "hopf"
        rows.append(
            (
                number,
                event.get("trace"),
                kind_words(str(event.get("kind"))),
                f"{event.get('vary')} = {fmt(event.get('value'))}",
                _state_text(event.get("state") or {}),
                fmt(event.get("frequency"), 6) if hopf else "—",
                fmt(_period(event), 6) if hopf else "—",
                event.get("criticality") or "—",
                fmt(event.get("lyapunov"), 4) if hopf else "—",
                fmt(event.get("fold_coefficient"), 4),
                event.get("branching") or "—",
                event.get("note") or "",
            )
        )
    header = [
        "#",
        "trace",
        "kind",
        "parameter",
        "state",
        "frequency",
        "period",
        "criticality",
        "Lyapunov",
        "fold coefficient",
        "branching",
        "note",
    ]
    out += [_table(header, rows), ""]
    out += [
        f"Values are shown to {VALUE_DIGITS} significant digits; events.csv and events.json "
        "hold them to full precision. Frequencies are angular (radians per time unit).",
        "",
    ]
    return out


def _boundary_text(value: float, exact: bool, kind: str | None) -> str:
    if kind:
        return f"{fmt(value)} ({kind_words(kind)})"
    return fmt(value) if exact else f"≈ {fmt(value, APPROX_DIGITS)}"


def origin_event(
    events: Sequence[Mapping[str, Any]], info: Mapping[str, Any], trace: str
) -> Mapping[str, Any] | None:
    """The parent's branch point a switched trace was started from (None for scanned traces)."""
    entry = _trace_info(info, trace)
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


def _intervals_section(points, events, info) -> list[str]:
    out = ["## Where each branch is stable", ""]
    for name in _trace_names(points, []):
        intervals = stability_intervals(points, events, info, name)
        if not intervals:
            continue
        vary = intervals[0].vary
        origin = origin_event(events, info, name)
        started = ""
        if origin is not None:
            started = (
                f"; started beside the branch point at {vary} = {fmt(origin['value'])} "
                f"on {origin['trace']}"
            )
        out.append(f"Trace **{name}** (along the branch, in trace order{started}):")
        out.append("")
        rows = []
        for part in intervals:
            remarks = []
            if part.folds_inside:
                remarks.append(
                    "turns at " + ", ".join(f"{vary} = {fmt(v)}" for v in part.folds_inside)
                )
            passes = "; ".join(remarks)
            counts = "–".join(str(c) for c in (part.unstable_counts[0], part.unstable_counts[-1]))
            if len(set(part.unstable_counts)) == 1:
                counts = str(part.unstable_counts[0])
            rows.append(
                (
                    "stable" if part.stable else "unstable",
                    _boundary_text(part.start_value, part.start_exact, part.start_kind),
                    _boundary_text(part.end_value, part.end_exact, part.end_kind),
                    f"[{fmt(part.low)}, {fmt(part.high)}]",
                    counts,
                    passes,
                )
            )
        header = ["", f"from {vary}", f"to {vary}", "covers", "unstable eigenvalues", "remark"]
        out += [_table(header, rows), ""]
    if any(
        not p.start_exact or not p.end_exact
        for n in _trace_names(points, [])
        for p in stability_intervals(points, events, info, n)
    ):
        out += [
            "A value marked ≈ is a change of stability with no located event; it is estimated "
            "between two computed points.",
            "",
        ]
    return out


def _margin_side_text(margin: OperatingMargin, side: SideMargin) -> str:
    vary = margin.vary
    if not side.traced:
        return "not traced"
    if side.event is None:
        where = "the edge of the interval" if side.reached_edge else "where the trace ended"
        return f"none within the traced part (followed to {vary} = {fmt(side.reach)}, {where})"
    relative = (
        f"{fmt(100.0 * side.relative, 4)} % of the start value"
        if side.relative is not None
        else "start value is 0: no relative margin"
    )
    return (
        f"{event_label(side.event)} at {vary} = {fmt(side.event['value'])}: "
        f"{fmt(side.absolute, 6)} away ({relative})"
    )


def _targets_text(targets: Sequence[JumpTarget]) -> str:
    return "; ".join(f"trace {t.trace} near {_state_text(t.state, APPROX_DIGITS)}" for t in targets)


def _margins_section(points, events, info) -> list[str]:
    margins = operating_margins(points, events, info)
    if not margins:
        return []
    out = ["## Operating margin", ""]
    out.append(
        "At each scanned trace's start value (the operating value given in the scan): is the "
        "equilibrium stable there, and how far is the first stability change met along the "
        "branch, lowering and raising the parameter?"
    )
    out.append("")
    for m in margins:
        state = "stable" if m.stable else f"UNSTABLE ({m.unstable_count} unstable eigenvalue(s))"
        out.append(f"- Trace **{m.trace}** at {m.vary} = {fmt(m.start_value)}: {state}.")
        out.append(f"  - lowering {m.vary}: {_margin_side_text(m, m.decreasing)}")
        out.append(f"  - raising {m.vary}: {_margin_side_text(m, m.increasing)}")
        if m.coexisting:
            out.append(f"  - other stable states at this value: {_targets_text(m.coexisting)}")
    out.append("")
    return out


def _readings_section(points, events, info) -> list[str]:
    if not events:
        return []
    out = ["## What the stability changes mean", ""]
    for event in events:
        out += [f"- {read_event(points, event, info)}"]
    windows = hysteresis_windows(points, events, info)
    loops = {w.trace for w in windows if w.bistable}
    for window in windows:
        v = window.vary
        if window.trace in loops and not window.bistable:
            continue  # the overlap of two hysteresis loops says nothing new
        if window.bistable:
            out.append(
                f"- **Hysteresis window** on trace {window.trace}: between {v} = "
                f"{fmt(window.low)} and {v} = {fmt(window.high)} (width {fmt(window.width)}) "
                "two stable states coexist. Which one the system sits in depends on its "
                f"history: raising {v} it jumps at the upper fold, lowering it jumps back at "
                "the lower fold."
            )
        else:
            out.append(
                f"- **Fold pair** on trace {window.trace}: between {v} = {fmt(window.low)} and "
                f"{v} = {fmt(window.high)} (width {fmt(window.width)}) the branch folds twice, "
                "so several equilibria coexist there."
            )
    out.append("")
    return out


def _failure_section(points: pd.DataFrame, info: Mapping[str, Any]) -> list[str]:
    stopped = [t for t in _traces_info(info) if t.get("status") not in (None, "done", "closed")]
    if info.get("status") != "failed" and not stopped:
        return []
    title = "## The run stopped early" if info.get("status") == "failed" else "## Incomplete traces"
    out = [title, ""]
    if info.get("message") and not stopped:
        out += [str(info["message"]), ""]
    for entry in stopped:
        name = str(entry.get("name"))
        rows = trace_rows(points, name) if "trace" in points else pd.DataFrame()
        vary = entry.get("vary")
        reach = ""
        if not rows.empty and vary in rows.columns:
            values = rows[vary].to_numpy(dtype=float)
            reach = (
                f" The {len(rows)} points computed (all kept) run along the branch from "
                f"{vary} = {fmt(values[0])} to {vary} = {fmt(values[-1])}, spanning "
                f"[{fmt(values.min())}, {fmt(values.max())}]."
            )
        out.append(f"- Trace **{name}** {_trace_ending(entry)}.{reach}")
    out += [
        "",
        "Everything computed before the stop is in the tables and in this report; beyond it, "
        "stability changes were not searched. Smaller steps (the [steps] table), a narrower "
        "interval or a better start guess often get past such a point.",
        "",
    ]
    return out


def _count_words(events: Sequence[Mapping[str, Any]]) -> str:
    counts: dict[str, int] = {}
    for event in events:
        label = event_label(event)
        counts[label] = counts.get(label, 0) + 1
    return ", ".join(f"{n} × {label}" for label, n in counts.items())


def _brief_section(points, events, info) -> list[str]:
    """The findings at a glance: what was found, and each operating point's margin."""
    out = ["## In brief", ""]
    if events:
        out.append(f"- Stability changes located: {_count_words(events)}.")
    else:
        out.append("- No stability change was located on any trace.")
    for m in operating_margins(points, events, info):
        sides = [s for s in (m.decreasing, m.increasing) if s.event is not None]
        state = "stable" if m.stable else "**unstable**"
        line = f"- At {m.vary} = {fmt(m.start_value)} (trace {m.trace}) the equilibrium is {state}"
        if sides:
            near = min(sides, key=lambda s: s.absolute)
            relative = (
                f", {fmt(100.0 * near.relative, 3)} % of the start value"
                if near.relative is not None
                else ""
            )
            line += (
                f"; the nearest change along the branch is a {event_label(near.event)} at "
                f"{m.vary} = {fmt(near.event['value'])} ({fmt(near.absolute, 4)} away{relative})"
            )
        else:
            line += "; no stability change was found along its traced branch"
        out.append(line + ".")
        if m.coexisting:
            out.append(
                f"- At that value another stable state exists ({_targets_text(m.coexisting)}): "
                "a disturbance or a past excursion can leave the system there."
            )
    for window in hysteresis_windows(points, events, info):
        if window.bistable:
            out.append(
                f"- Hysteresis between {window.vary} = {fmt(window.low)} and {fmt(window.high)} "
                f"(trace {window.trace}): two stable states coexist there."
            )
    if info.get("status") == "failed":
        out.append("- **The run stopped early**; see the next section for where and why.")
    out.append("")
    return out


def render_report(
    points: pd.DataFrame, events: Sequence[Mapping[str, Any]], info: Mapping[str, Any]
) -> str:
    """The stability-change report (markdown), from the saved tables alone.

    Parameters
    ----------
    points : DataFrame
        As in points.csv.
    events : list of dict
        As in events.json.
    info : dict
        As in run.json.

    Returns
    -------
    str
        Markdown: model, traces, table of events, stable/unstable intervals,
        readings, operating margins, failure section if any, and :data:`CAUTION`.
    """
    title = info.get("title") or "Untitled scan"
    out = [f"# {title}", ""]
    version = info.get("branchline_version")
    out.append(
        "Stability-change report written by branchline"
        + (f" {version}" if version else "")
        + (f" from `{info['scan']}`." if info.get("scan") else ".")
    )
    out.append("")
    out += _brief_section(points, events, info)
    out += _failure_section(points, info)
    out += _model_section(info)
    out += _scan_section(info)
    out += _events_section(events)
    out += _intervals_section(points, events, info)
    out += _margins_section(points, events, info)
    out += _readings_section(points, events, info)
    for warning in info.get("warnings") or []:
        out += [f"> Warning: {warning}", ""]
    out += ["---", "", f"**Caution.** {CAUTION}", ""]
    return "\n".join(out)


def summary_table(events: Sequence[Mapping[str, Any]]) -> str:
    """A compact plain-text table of the events for the terminal."""
    if not events:
        return "No stability changes found."
    header = ("trace", "kind", "parameter", "value", "details")
    rows = []
    for event in events:
        details = []
        if event.get("kind") == "hopf" and _period(event):
            details.append(f"period {fmt(_period(event), 6)}")
        if event.get("fold_coefficient") is not None:
            details.append(f"coefficient {fmt(event['fold_coefficient'], 4)}")
        if event.get("note"):
            details.append(str(event["note"]))
        rows.append(
            (
                str(event.get("trace")),
                event_label(event),
                str(event.get("vary")),
                fmt(event.get("value")),
                "; ".join(details),
            )
        )
    widths = [max(len(r[k]) for r in (header, *rows)) for k in range(len(header))]

    def line(cells: Sequence[str]) -> str:
        return "  ".join(c.ljust(w) for c, w in zip(cells, widths, strict=True)).rstrip()

    return "\n".join([line(header), "  ".join("-" * w for w in widths), *map(line, rows)])


__all__ = [
    "CAUTION",
    "HysteresisWindow",
    "JumpTarget",
    "OperatingMargin",
    "SideMargin",
    "StabilityInterval",
    "event_label",
    "hysteresis_windows",
    "jump_targets",
    "kind_words",
    "operating_margins",
    "read_event",
    "render_report",
    "stability_intervals",
    "summary_table",
]
