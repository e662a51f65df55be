"""Facts read off the saved tables: what the report says and the diagram shows.

Everything here works from the saved tables alone (``points`` as in points.csv,
``events`` as in events.json, ``info`` as in run.json), so that neither
``branchline report DIR`` nor ``branchline plot DIR`` recomputes anything.
This module holds access to the tables, the stability intervals of a trace
(:func:`stability_intervals`, frozen records) and the switched branches; the
names of events and the way numbers are written live here too, so that the
report (:mod:`branchline.present.report`) and the diagram (:mod:`branchline.present.plotting`)
use the same words for the same thing. What an operator reads off those
intervals (operating margins, jump targets, hysteresis windows) is in
:mod:`branchline.results.margins`.
"""

from __future__ import annotations

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


def has_operating_point(entry: Mapping[str, Any]) -> bool:
    """True for a trace started at the scan's start value: not a switched branch,
    nor a branch a search found at another value of the parameter."""
    return not entry.get("parent") and entry.get("at_start_value", True)


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


def event_arclength(event: Mapping[str, Any]) -> float:
    """An event's position along its branch (NaN when it has none)."""
    value = event.get("arclength")
    return np.nan if value is None else float(value)


def trace_events(events: Sequence[Mapping[str, Any]], trace: str) -> list[Mapping[str, Any]]:
    """The events of one trace, ordered by arclength."""
    found = [e for e in events if e.get("trace") == trace]
    return sorted(found, key=lambda e: (np.isnan(event_arclength(e)), event_arclength(e)))


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
    candidates = [e for e in events if lo <= event_arclength(e) <= hi]
    if not candidates:
        plo, phi = min(p0, p1), max(p0, p1)
        pslack = ARCLENGTH_SLACK * max(1.0, abs(plo), abs(phi))
        candidates = [e for e in events if plo - pslack <= float(e["value"]) <= phi + pslack]
    if not candidates:
        return None
    middle = 0.5 * (s0 + s1)
    return min(candidates, key=lambda e: abs(event_arclength(e) - middle))


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
            edges.append((float(event["value"]), True, event["kind"], event_arclength(event)))
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
            if e["kind"] == "fold" and start[3] < event_arclength(e) < end[3]
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


# --------------------------------------------------------------------------- moved names

__all__ = [
    "BOOKKEEPING_COLUMNS",
    "StabilityInterval",
    "event_arclength",
    "event_at_change",
    "event_label",
    "event_period",
    "event_value",
    "fmt",
    "kind_words",
    "origin_event",
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
