"""The stability-change report: what a person reads.

Markdown rendering only: the facts come from :mod:`branchline.results.reading` and
:mod:`branchline.results.margins`, which work from the saved tables alone (``points``
as in points.csv, ``events`` as in events.json, ``info`` as in run.json), so
that ``branchline report DIR`` never recomputes.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from typing import Any

import pandas as pd

from branchline.present.boundary_report import boundaries_section, sensitivities_section
from branchline.present.confirmations import confirmation_section
from branchline.present.oscillations import oscillation_section
from branchline.present.robust_margin_report import robust_margin_section
from branchline.present.search_report import search_section
from branchline.present.stability_map import stability_map_section
from branchline.results.margins import (
    HysteresisWindow,
    JumpTarget,
    OperatingMargin,
    SideMargin,
    bistable_ranges,
    hysteresis_windows,
    jump_targets,
    operating_margins,
    side_of,
    stability_beside,
)
from branchline.results.reading import (
    VALUE_DIGITS,
    StabilityInterval,
    event_label,
    event_period,
    fmt,
    kind_words,
    origin_event,
    stability_intervals,
    state_norm,
    switched_traces,
    trace_entries,
    trace_names,
    trace_rows,
)
from branchline.vocabulary import EventKind

CAUTION = (
    "Results describe the model, not the real system it stands for: a safety decision must "
    "follow local codes and licensed practice, never these numbers alone."
)

# Significant digits of a relative margin (in %), the same wherever it is printed.
MARGIN_DIGITS = 4

# Values read off the computed points (grid accuracy only) get fewer digits than
# located events (VALUE_DIGITS).
APPROX_DIGITS = 5
# At most this many states are spelled out in a table cell; beyond, the norm.
MAX_STATES_SHOWN = 4

STATUS_WORDS = {
    "done": "reached the end of its interval",
    "max_points": "stopped at the point limit (steps.max_points)",
    "closed": "closed on itself (an isola)",
    "failed": "stopped by numerical trouble",
    "interrupted": "was interrupted (Ctrl-C or SIGTERM)",
}


# --------------------------------------------------------------------------- formatting


def _escape(text: Any) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def _table(header: Sequence[str], rows: Iterable[Sequence[Any]]) -> str:
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(_escape(cell) for cell in row) + " |" for row in rows]
    return "\n".join(lines)


def _state_text(state: Mapping[str, float], digits: int = 6) -> str:
    if not state:
        return "—"
    if len(state) > MAX_STATES_SHOWN:
        return f"norm {fmt(state_norm(state), digits)} ({len(state)} states)"
    return ", ".join(f"{name} = {fmt(value, digits)}" for name, value in state.items())


# --------------------------------------------------------------------------- readings


def _direction_words(side: float) -> str:
    return "raised above" if side > 0 else "lowered below"


def _read_fold(points, event, info) -> str:
    vary, value = str(event["vary"]), float(event["value"])
    rows = trace_rows(points, str(event["trace"]))
    head = f"**Fold at {vary} = {fmt(value)}** (trace {event['trace']}): the branch turns back here"
    if rows.empty or vary not in rows.columns:
        return head + "."
    beside = stability_beside(rows, event)
    # the equilibria exist on the side of the rows beside the fold, and are lost past it
    lost = _direction_words(-side_of(rows, next(iter(beside), None), vary, value))
    if not any(beside.values()):
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
        text += (
            f" Stable equilibria traced at this value, nearest first: {_targets_text(targets)} "
            "(read off the computed points). Which one the state reaches depends on the "
            "dynamics, which this report does not simulate."
        )
    else:
        text += (
            " No other stable equilibrium was traced at this value, so where it goes is not "
            "shown here: possibly an oscillation, an untraced equilibrium, or runaway."
        )
    return text


def _read_hopf(points, event, info) -> str:
    vary, value = str(event["vary"]), float(event["value"])
    period = event_period(event)
    rhythm = f" with period about {fmt(period, 6)}" if period else ""
    if event.get("frequency"):
        rhythm += f" (angular frequency {fmt(event['frequency'], 6)})"
    label = event_label(event)
    head = f"**{label[0].upper() + label[1:]} at {vary} = {fmt(value)}** (trace {event['trace']})"
    rows = trace_rows(points, str(event["trace"]))
    flags = stability_beside(rows, event)
    unstable_index = next((i for i, ok in flags.items() if not ok), None)
    if flags and not any(flags.values()):
        return (
            head + ": a pair of complex eigenvalues crosses the imaginary axis on a part of the "
            f"branch that is already unstable; an (unstable) oscillation{rhythm} is born, but a "
            "state resting here was not stable to begin with."
        )
    past = ""
    if unstable_index is not None and vary in rows.columns:
        side = side_of(rows, unstable_index, vary, value)
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


def _read_branch_point(points, event, info) -> str:
    vary, value = str(event["vary"]), float(event["value"])
    head = f"**Branch point at {vary} = {fmt(value)}** (trace {event['trace']})"
    branching = event.get("branching")
    rows = trace_rows(points, str(event["trace"]))
    flags = list(stability_beside(rows, event).values())
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
    kids = switched_traces(info, event)
    if kids:
        text += " The crossing branch was followed as " + ", ".join(kids) + "."
    return text


def read_event(points: pd.DataFrame, event: Mapping[str, Any], info: Mapping[str, Any]) -> str:
    """A plain-language reading of one event (markdown)."""
    kind = event.get("kind")
    if kind == EventKind.FOLD:
        return _read_fold(points, event, info)
    if kind == EventKind.HOPF:
        return _read_hopf(points, event, info)
    if kind == EventKind.BRANCH_POINT:
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


def _origin(entry: Mapping[str, Any]) -> str:
    if entry.get("parent"):
        return f"switched from {entry['parent']}"
    if entry.get("found_by_search"):
        return f"found by the search at {entry.get('vary')} = {fmt(entry.get('found_at'))}"
    return "scan file"


def _scan_section(info: Mapping[str, Any]) -> list[str]:
    out = ["## What was scanned", ""]
    rows = []
    for entry in trace_entries(info):
        interval = entry.get("interval") or [None, None]
        overrides = ", ".join(f"{k} = {fmt(v)}" for k, v in (entry.get("set") or {}).items())
        rows.append(
            (
                entry.get("name"),
                entry.get("vary"),
                f"[{fmt(interval[0])}, {fmt(interval[1])}]",
                fmt(entry.get("start_value")),
                overrides or "—",
                _origin(entry),
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
        hopf = event.get("kind") == EventKind.HOPF
        rows.append(
            (
                number,
                event.get("trace"),
                kind_words(str(event.get("kind"))),
                f"{event.get('vary')} = {fmt(event.get('value'))}",
                _state_text(event.get("state") or {}),
                fmt(event.get("frequency"), 6) if hopf else "—",
                fmt(event_period(event), 6) if hopf else "—",
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
        "hold them to full precision. Frequencies are angular (radians per time unit). "
        "The first Lyapunov coefficient is computed with the critical eigenvector scaled to "
        "<q, q> = 1/2, so that the complex amplitude is the oscillation's amplitude; with a "
        "unit-norm eigenvector it would be twice as large (only its sign is independent of the "
        "scaling).",
        "",
    ]
    return out


def _boundary_text(value: float, exact: bool, kind: str | None) -> str:
    if kind:
        return f"{fmt(value)} ({kind_words(kind)})"
    return fmt(value) if exact else f"≈ {fmt(value, APPROX_DIGITS)}"


def _interval_row(part: StabilityInterval) -> tuple[str, ...]:
    vary = part.vary
    remark = ""
    if part.folds_inside:
        remark = "turns at " + ", ".join(f"{vary} = {fmt(v)}" for v in part.folds_inside)
    counts = "–".join(str(c) for c in (part.unstable_counts[0], part.unstable_counts[-1]))
    if len(set(part.unstable_counts)) == 1:
        counts = str(part.unstable_counts[0])
    # The range covered reaches the located folds and ends, not only the computed points.
    reached = [part.low, part.high, *part.folds_inside, part.start_value, part.end_value]
    return (
        "stable" if part.stable else "unstable",
        _boundary_text(part.start_value, part.start_exact, part.start_kind),
        _boundary_text(part.end_value, part.end_exact, part.end_kind),
        f"[{fmt(min(reached))}, {fmt(max(reached))}]",
        counts,
        remark,
    )


def _intervals_section(points, events, info) -> list[str]:
    out = ["## Where each branch is stable", ""]
    traces = {
        name: stability_intervals(points, events, info, name) for name in trace_names(points, [])
    }
    for name, intervals in traces.items():
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
        header = ["", f"from {vary}", f"to {vary}", "covers", "unstable eigenvalues", "remark"]
        out += [_table(header, map(_interval_row, intervals)), ""]
    if any(not p.start_exact or not p.end_exact for parts in traces.values() for p in parts):
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
        f"{fmt(100.0 * side.relative, MARGIN_DIGITS)} % of the start value"
        if side.relative is not None
        else "start value is 0: no relative margin"
    )
    return (
        f"{event_label(side.event)} at {vary} = {fmt(side.event['value'])}: "
        f"{fmt(side.absolute, 6)} away ({relative})"
    )


def _targets_text(targets: Sequence[JumpTarget]) -> str:
    return "; ".join(f"trace {t.trace} near {_state_text(t.state, APPROX_DIGITS)}" for t in targets)


def _margins_section(margins: Sequence[OperatingMargin]) -> list[str]:
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


def _readings_section(points, events, info, windows: Sequence[HysteresisWindow]) -> list[str]:
    if not events:
        return []
    out = ["## What the stability changes mean", ""]
    for event in events:
        out += [f"- {read_event(points, event, info)}"]
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
            ranges = bistable_ranges(points, events, info, window)
            coexist = (
                "; two stable states coexist for "
                + ", ".join(f"{fmt(lo)} < {v} < {fmt(hi)}" for lo, hi in ranges)
                + " (another stability change sits beside a fold, so the loop is not clean)"
                if ranges
                else "; no two stable states coexist inside it (other stability changes "
                "sit between the folds)"
            )
            out.append(
                f"- **Hysteresis window** on trace {window.trace}: the branch folds twice, "
                f"between {v} = {fmt(window.low)} and {v} = {fmt(window.high)} "
                f"(width {fmt(window.width)}), so several equilibria coexist there{coexist}."
            )
    out.append("")
    return out


def _failure_section(points: pd.DataFrame, info: Mapping[str, Any]) -> list[str]:
    stopped = [t for t in trace_entries(info) if t.get("status") not in (None, "done", "closed")]
    if info.get("status") not in ("failed", "interrupted") and not stopped:
        return []
    title = {"failed": "## The run stopped early", "interrupted": "## The run was interrupted"}
    title = title.get(str(info.get("status")), "## Incomplete traces")
    out = [title, ""]
    if info.get("message") and (not stopped or info.get("status") == "interrupted"):
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


def _brief_section(
    events: Sequence[Mapping[str, Any]],
    info: Mapping[str, Any],
    margins: Sequence[OperatingMargin],
    windows: Sequence[HysteresisWindow],
) -> list[str]:
    """The findings at a glance: what was found, and each operating point's margin."""
    out = ["## In brief", ""]
    if events:
        out.append(f"- Stability changes located: {_count_words(events)}.")
    else:
        out.append("- No stability change was located on any trace.")
    for m in margins:
        sides = [s for s in (m.decreasing, m.increasing) if s.event is not None]
        state = "stable" if m.stable else "**unstable**"
        line = f"- At {m.vary} = {fmt(m.start_value)} (trace {m.trace}) the equilibrium is {state}"
        if sides:
            near = min(sides, key=lambda s: s.absolute)
            relative = (
                f", {fmt(100.0 * near.relative, MARGIN_DIGITS)} % of the start value"
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
                f"- At the start value {m.vary} = {fmt(m.start_value)} another stable state "
                f"exists ({_targets_text(m.coexisting)}): "
                "a disturbance or a past excursion can leave the system there."
            )
    for window in windows:
        if window.bistable:
            out.append(
                f"- Hysteresis between {window.vary} = {fmt(window.low)} and {fmt(window.high)} "
                f"(trace {window.trace}): two stable states coexist there."
            )
    if info.get("status") in ("failed", "interrupted"):
        out.append("- **The run stopped early**; see the next section for where and why.")
    out.append("")
    return out


def render_report(
    points: pd.DataFrame,
    events: Sequence[Mapping[str, Any]],
    info: Mapping[str, Any],
    *,
    cycles: pd.DataFrame | None = None,
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
    cycles : DataFrame, optional
        As in cycles.csv: adds the section on oscillations.

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
    margins = operating_margins(points, events, info)
    windows = hysteresis_windows(points, events, info)
    out += _brief_section(events, info, margins, windows)
    out += _failure_section(points, info)
    out += _model_section(info)
    out += _scan_section(info)
    out += search_section(points, events, info)
    out += _events_section(events)
    out += _intervals_section(points, events, info)
    out += _margins_section(margins)
    out += _readings_section(points, events, info, windows)
    out += confirmation_section(info)
    out += oscillation_section(events, info, cycles)
    out += boundaries_section(events, info)
    out += stability_map_section(info)
    out += sensitivities_section(events)
    out += robust_margin_section(info)
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
        if event.get("kind") == EventKind.HOPF and event_period(event):
            details.append(f"period {fmt(event_period(event), 6)}")
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


__all__ = ["CAUTION", "read_event", "render_report", "summary_table"]
