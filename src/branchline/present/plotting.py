"""The bifurcation diagram, drawn from the saved tables alone.

Top panel: a state (or parameter, observable, ``norm``) against the varied
parameter, stable parts solid and unstable parts dashed, every located event
marked and labelled in words. Bottom panel (shared x): the real part of the
leading eigenvalue, so that each loss of stability is seen crossing zero.

Figures are built as :class:`matplotlib.figure.Figure` objects without pyplot,
so nothing here touches the global backend: rendering uses Agg and works
without a screen, and a notebook can still display the returned figure.
"""

from __future__ import annotations

import textwrap
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import matplotlib as mpl
import numpy as np
import pandas as pd
from matplotlib.backend_bases import RendererBase
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from branchline.present.curves import DrawnCurve, connected_curves, hidden_curves
from branchline.present.labels import GUIDE_GID, LABEL_FONT_SIZE, place_labels
from branchline.present.oscillations import CYCLE_COLOURS, CYCLE_MARKERS, draw_cycles, families
from branchline.present.search_strip import STRIP_HEIGHT, draw_search_strip, search_counts
from branchline.results.margins import bistable_ranges, hysteresis_windows
from branchline.results.reading import (
    BOOKKEEPING_COLUMNS,
    event_at_change,
    event_label,
    event_value,
    fmt,
    has_operating_point,
    origin_event,
    state_names,
    state_norm,
    trace_entries,
    trace_entry,
    trace_events,
    trace_names,
    trace_rows,
)
from branchline.vocabulary import EventKind

# Okabe & Ito, "Color Universal Design" (2008): distinguishable under the common
# colour-vision deficiencies. Yellow is left out (too pale on white).
TRACE_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000")
# One marker shape per event kind; unknown kinds get a plus.
EVENT_MARKERS = {EventKind.FOLD: "D", EventKind.HOPF: "s", EventKind.BRANCH_POINT: "^"}
DEFAULT_MARKER = "P"
# An event value below this fraction of its parameter's range is zero to rounding in labels.
LABEL_ZERO_RTOL = 1e-12
# Said under the event kinds whenever a Hopf point is drawn: this diagram holds
# equilibria only; the periodic orbits born there were not followed.
HOPF_CYCLES_NOTE = "cycles at Hopf points: not computed"
# Legend entries wrap at this many characters: three columns must fit the figure.
LEGEND_WRAP = 40
# Share of the viridis map used for many traces: its light yellow end is lost on white.
VIRIDIS_SPAN = 0.85
FIGURE_SIZE = (7.0, 6.5)  # inches: fits a journal page at full width
PNG_DPI = 200
FONT_SIZE = 9
STABLE_STYLE = "-"
UNSTABLE_STYLE = (0, (4.0, 2.5))  # dashes long enough to read on short runs
LINE_WIDTH = 1.6
MARKER_SIZE = 7.0
FORMATS = ("png", "svg", "pdf")
# Panel heights: the diagram gets most of the room.
HEIGHT_RATIOS = (2.3, 1.0)
# The eigenvalue panel goes to a symmetric log scale, linear up to the largest
# positive real part, when the whole range exceeds that part this many times
# (stiff models would otherwise flatten every crossing of zero into the axis).
SYMLOG_RATIO = 30.0
# The operating value given in the scan: a thin dotted vertical line.
START_COLOUR = "#666666"
START_STYLE = (0, (1.0, 2.0))
# Hysteresis windows: a grey band behind the curves, a shade darker than the
# grid lines (#DDDDDD) so that it reads as an area, light enough to keep every
# curve, label and dotted guide in front of it legible.
WINDOW_COLOUR = "#7F7F7F"
WINDOW_ALPHA = 0.2


# --------------------------------------------------------------------------- names


def available_names(points: pd.DataFrame) -> list[str]:
    """Names that can go on either axis: every numeric column plus ``norm``."""
    names = [
        c
        for c in points.columns
        if c not in BOOKKEEPING_COLUMNS and pd.api.types.is_numeric_dtype(points[c])
    ]
    if "norm" not in names:
        names.append("norm")
    return names


def _check_name(points: pd.DataFrame, name: str, axis: str) -> None:
    names = available_names(points)
    if name not in names:
        raise ValueError(
            f"cannot plot {name!r} on the {axis} axis: no such column in the results. "
            f"Available: {', '.join(names)}"
        )


def _default_names(points: pd.DataFrame, info: Mapping[str, Any]) -> tuple[str, str]:
    traces = trace_entries(info)
    x = traces[0].get("vary") if traces else None
    if not x:
        parameters = (info.get("model") or {}).get("parameters") or {}
        x = next((p for p in parameters if p in points.columns), "arclength")
    states = state_names(points, info)
    y = states[0] if states else "norm"
    return str(x), y


def _column(rows: pd.DataFrame, name: str, states: Sequence[str]) -> np.ndarray:
    if name in rows.columns:
        return rows[name].to_numpy(dtype=float)
    if name == "norm":
        return np.sqrt(sum(rows[s].to_numpy(dtype=float) ** 2 for s in states))
    raise ValueError(f"cannot plot {name!r}: no such column in the results")


def _event_coordinate(
    event: Mapping[str, Any], name: str, rows: pd.DataFrame, states: Sequence[str]
) -> float:
    """An event's coordinate: from its own record, else interpolated along its trace."""
    value = event_value(event, name)
    if value is not None:
        return value
    state = event.get("state") or {}
    if name == "norm" and state:
        return state_norm(state)
    column = _column(rows, name, states)
    position = event.get("arclength")
    if position is None or rows.empty:
        return float("nan")  # not placed along a branch: not drawn
    return float(np.interp(float(position), rows["arclength"].to_numpy(float), column))


# --------------------------------------------------------------------------- drawing pieces


def _runs(
    rows: pd.DataFrame,
    events: Sequence[Mapping[str, Any]],
    trace: str,
    vary: str,
    names: tuple[str, str],
    states: Sequence[str],
) -> list[tuple[bool, list[float], list[float], list[float], list[float]]]:
    """Split a trace into stable/unstable runs: (stable, top x, top y, bottom x, bottom y).

    At a change of stability both neighbouring runs end on the located event
    (where the leading real part is 0), so the curve stays continuous; without
    a located event the earlier run is extended to the next row.
    """
    xs = _column(rows, names[0], states)
    ys = _column(rows, names[1], states)
    lead = rows["leading_real"].to_numpy(dtype=float)
    stable = rows["stable"].to_numpy(dtype=bool)
    has_vary = vary in rows.columns

    def row(i: int) -> tuple[float, float, float, float]:
        return xs[i], ys[i], xs[i], lead[i]

    def joint(i: int) -> tuple[float, float, float, float]:
        event = event_at_change(events, rows, i - 1, vary, trace) if has_vary else None
        if event is None:
            return row(i)
        ex = _event_coordinate(event, names[0], rows, states)
        return ex, _event_coordinate(event, names[1], rows, states), ex, 0.0

    runs = []
    current: tuple[bool, list[float], list[float], list[float], list[float]]
    current = (bool(stable[0]), *([v] for v in row(0)))
    for i in range(1, len(rows)):
        if stable[i] != stable[i - 1]:
            meet = joint(i)
            for values, v in zip(current[1:], meet, strict=True):
                values.append(v)
            runs.append(current)
            current = (bool(stable[i]), *([v] for v in meet))
        for values, v in zip(current[1:], row(i), strict=True):
            values.append(v)
    runs.append(current)
    return runs


def _join_to_origin(runs, rows, origin, names, states) -> None:
    """Draw a switched branch from the branch point it was started beside.

    Its start point lies one step off the branch point; the branch passes
    through that point, so the gap is closed (in the style of the adjoining run)
    when the start point is an end of the trace.
    """
    if origin is None or not runs:
        return
    s = rows["arclength"].to_numpy(dtype=float)
    start = int(np.argmin(np.abs(s)))
    try:
        ox = _event_coordinate(origin, names[0], rows, states)
        oy = _event_coordinate(origin, names[1], rows, states)
    except ValueError:
        return
    if start == 0:
        for values, v in zip(runs[0][1:], (ox, oy, ox, 0.0), strict=True):
            values.insert(0, v)
    elif start == len(rows) - 1:
        for values, v in zip(runs[-1][1:], (ox, oy, ox, 0.0), strict=True):
            values.append(v)


def _drawn_traces(points: pd.DataFrame, info: Mapping[str, Any], x: str) -> list[str]:
    """Traces to draw against ``x``: those varying ``x`` if any does, else all."""
    names = trace_names(points, [])
    varies = {str(t.get("name")): t.get("vary") for t in trace_entries(info)}
    matching = [n for n in names if varies.get(n) == x]
    return matching or names


def _trace_legend_label(name: str, info: Mapping[str, Any]) -> str:
    entry = trace_entry(info, name)
    label = name if name.lower().startswith("trace") else f"trace {name}"
    if entry.get("parent"):
        return textwrap.fill(f"{label} (branches off {entry['parent']})", LEGEND_WRAP)
    if entry.get("found_by_search"):
        return f"{label}\n(found by the search)"
    return label


def _curve_legend_label(curve: DrawnCurve, info: Mapping[str, Any]) -> str:
    """A curve's legend entry: its name, and what its traces are when it has several,
    wrapped so that the legend's columns fit the figure's width."""
    if len(curve.traces) == 1:
        text = _trace_legend_label(curve.traces[0], info)
    elif curve.parent and curve.name != " + ".join(curve.traces):
        common = _common_prefix(curve.traces)
        text = f"{curve.name}\n(branches off {curve.parent}; traces {common})"
    elif curve.parent:
        text = f"{_common_prefix(curve.traces)}\n(one curve, branches off {curve.parent})"
    else:
        rest = ", ".join(curve.traces[1:])
        text = f"{_trace_legend_label(curve.traces[0], info)}\n(continued by {rest})"
    return "\n".join(textwrap.fill(line, LEGEND_WRAP) for line in text.split("\n"))


def _common_prefix(names: Sequence[str]) -> str:
    """``a.1, .2`` for the halves ``a.1``, ``a.2``: the shared part written once."""
    stems = {name.rpartition(".")[0] for name in names}
    if len(stems) == 1 and "" not in stems:
        return ", ".join([names[0], *("." + n.rpartition(".")[2] for n in names[1:])])
    return ", ".join(names)


def _geometry_columns(info, traces: Sequence[str], x: str, states: Sequence[str]) -> list[str]:
    """The quantities in which pieces of curves are judged to connect: the
    varied parameters of ``traces`` and the states."""
    varies = [str(trace_entry(info, name).get("vary") or x) for name in traces]
    return list(dict.fromkeys([*varies, *states]))


def settle_layout(fig: Figure) -> RendererBase:
    """Run the constrained layout once, then keep it: return the renderer it used.

    Labels are placed against this layout (so it must not move afterwards),
    and saving then draws each file once instead of laying the figure out
    again first. Positions are fractions of the figure, so the layout holds at
    any resolution. No pixels are rendered here.
    """
    renderer = fig.canvas.get_renderer()
    engine = fig.get_layout_engine()
    if engine is not None:
        engine.execute(fig)
    for ax in fig.axes:
        ax.viewLim  # noqa: B018 (reading it applies pending autoscaling, as a draw would)
    # No engine at all (a placeholder engine would still make savefig lay out again);
    # None means "from rcParams", so pin those off.
    with mpl.rc_context({"figure.autolayout": False, "figure.constrained_layout.use": False}):
        fig.set_layout_engine(None)
    return renderer


# --------------------------------------------------------------------------- the figure


def _axis_label(name: str, info: Mapping[str, Any]) -> str:
    model = info.get("model") or {}
    if name == "norm":
        return "norm of the state (Euclidean)"
    if name in (model.get("parameters") or {}):
        return f"{name} (parameter)"
    if name in (model.get("observables") or []):
        return f"{name} (observable)"
    return name


def bifurcation_figure(
    points: pd.DataFrame,
    events: Sequence[Mapping[str, Any]],
    info: Mapping[str, Any],
    x: str | None = None,
    y: str | None = None,
    cycles: pd.DataFrame | None = None,
) -> Figure:
    """The bifurcation diagram of a results folder's tables.

    Parameters
    ----------
    points, events, info
        The saved tables (points.csv, events.json, run.json).
    x : str, optional
        Quantity on the horizontal axis; default the first trace's varied
        parameter. When some traces vary ``x``, only those are drawn.
    y : str, optional
        Quantity on the vertical axis of the top panel: a state, parameter,
        observable or ``norm``; default the first state (``norm`` for models
        whose tables hold no individual states).
    cycles : DataFrame, optional
        As in cycles.csv: each family's min/max envelope of ``y`` is added to the
        diagram and a period panel below it (:mod:`branchline.present.oscillations`).

    Returns
    -------
    matplotlib.figure.Figure
        Two panels sharing x: the diagram, and the leading eigenvalue's real part.

    Raises
    ------
    ValueError
        If ``x`` or ``y`` is not a quantity of the results (the message lists those that are).

    Notes
    -----
    The layout is settled once, when the figure is built: the event labels are
    placed against it, so it is kept as it is (no layout engine is left on the
    figure). Draw another figure rather than resizing this one. Every text is
    drawn literally (no mathtext): titles and names come from the user, and a
    ``$`` in them must not be parsed as a formula.
    """
    with mpl.rc_context({"text.parse_math": False}):
        return _diagram(points, events, info, x, y, cycles)


def _diagram(points, events, info, x, y, cycles) -> Figure:
    """:func:`bifurcation_figure`'s body (under its rc settings)."""
    if points.empty or "trace" not in points.columns:
        return _empty_figure(info)
    default_x, default_y = _default_names(points, info)
    x = x or default_x
    y = y or default_y
    _check_name(points, x, "x")
    _check_name(points, y, "y")
    states = state_names(points, info)
    if "norm" in (x, y) and "norm" not in points.columns and not states:
        raise ValueError("cannot compute 'norm': the results hold no state columns")
    with mpl.rc_context(_STYLE):
        strip = search_counts(info, x)  # equilibria found by a search: a panel below
        orbit_families = families(cycles)  # periodic orbits: a period panel below the diagram
        ratios = (HEIGHT_RATIOS[0],)
        ratios += (HEIGHT_RATIOS[1],) if orbit_families else ()
        ratios += (HEIGHT_RATIOS[1],)
        ratios += (STRIP_HEIGHT,) if strip else ()
        size = (FIGURE_SIZE[0], FIGURE_SIZE[1] * sum(ratios) / sum(HEIGHT_RATIOS))
        fig = Figure(figsize=size, layout="constrained")
        FigureCanvasAgg(fig)
        axes = list(fig.subplots(len(ratios), 1, sharex=True, height_ratios=ratios))
        top = axes.pop(0)
        period_axis = axes.pop(0) if orbit_families else None
        bottom, *rest = axes
        context = _context(points, events, info, x)
        drawn_names = _drawn_traces(points, info, x)
        curves = connected_curves(
            points, events, info, drawn_names, _geometry_columns(info, drawn_names, x, states)
        )
        marks, hidden = _draw(top, bottom, points, events, info, (x, y), states, curves)
        if orbit_families:
            styles = (STABLE_STYLE, UNSTABLE_STYLE, LINE_WIDTH, MARKER_SIZE)
            marks += draw_cycles(top, period_axis, cycles, events, x, y, styles)
        _draw_context(top, bottom, *context)
        top.set_ylabel(_axis_label(y, info))
        bottom.set_ylabel(
            "leading eigenvalue,\nreal part (> 0: unstable)\nmarks at 0: the crossing one"
        )
        drawn = points[points["trace"].astype(str).isin(_drawn_traces(points, info, x))]
        _eigenvalue_scale(bottom, drawn["leading_real"].to_numpy(dtype=float))
        _shade_unstable(bottom)
        if strip:
            draw_search_strip(rest[0], strip)
        (rest or [bottom])[-1].set_xlabel(_axis_label(x, info))
        title = info.get("title")
        if title:
            fig.suptitle(str(title), fontsize=FONT_SIZE + 2)
        _legend(fig, events, info, curves, context, orbit_families, hidden)
        _note_hidden_traces(top, points, info, x)
        place_labels(fig, top, marks, settle_layout(fig), MARKER_SIZE)
    return fig


def _empty_figure(info: Mapping[str, Any]) -> Figure:
    """A figure that says no point was computed (so that a results folder is still whole)."""
    with mpl.rc_context(_STYLE):
        fig = Figure(figsize=FIGURE_SIZE, layout="constrained")
        FigureCanvasAgg(fig)
        ax = fig.subplots()
        ax.set_axis_off()
        message = "No equilibrium was computed"
        if info.get("message"):
            message += f":\n{info['message']}"
        ax.text(0.5, 0.5, message, ha="center", va="center", wrap=True, transform=ax.transAxes)
        if info.get("title"):
            fig.suptitle(str(info["title"]), fontsize=FONT_SIZE + 2)
        settle_layout(fig)
    return fig


def _note_hidden_traces(ax, points: pd.DataFrame, info: Mapping[str, Any], x: str) -> None:
    """Say which traces are not drawn because they vary another parameter."""
    drawn = set(_drawn_traces(points, info, x))
    hidden = [t for t in trace_entries(info) if t.get("name") not in drawn]
    if not hidden:
        return
    names = ", ".join(str(t.get("name")) for t in hidden)
    others = ", ".join(dict.fromkeys(str(t.get("vary")) for t in hidden))
    ax.set_title(
        f"Not shown: {names} (varying {others}; draw them with x = {others.split(', ')[0]})",
        loc="left",
        fontsize=LABEL_FONT_SIZE,
        color="#555555",
    )


_STYLE = {
    "font.size": FONT_SIZE,
    "axes.labelsize": FONT_SIZE + 0.5,
    "axes.titlesize": FONT_SIZE + 1,
    "xtick.labelsize": FONT_SIZE - 0.5,
    "ytick.labelsize": FONT_SIZE - 0.5,
    "legend.fontsize": FONT_SIZE - 1,
    "axes.grid": True,
    "grid.color": "#DDDDDD",
    "grid.linewidth": 0.6,
    "axes.edgecolor": "#444444",
    "axes.linewidth": 0.8,
    "svg.fonttype": "none",  # keep text as text in SVG
    "svg.hashsalt": "branchline",  # fixed element ids: the same run gives the same SVG
}


def trace_colour(k: int, count: int) -> Any:
    """The colour of the k-th of ``count`` traces: the fixed palette while it lasts,
    else evenly spaced hues of a perceptually ordered map, so that no two repeat."""
    if count <= len(TRACE_COLOURS):
        return TRACE_COLOURS[k]
    return mpl.colormaps["viridis"](VIRIDIS_SPAN * k / max(count - 1, 1))


def _draw(top, bottom, points, events, info, names, states, curves):
    """Draw every curve (runs and event markers) in both panels, one colour per
    connected curve; return the event marks still to be labelled (x, y, text,
    colour) and the curves hidden under others (:func:`hidden_curves`)."""
    marks = []
    bottom.axhline(0.0, color="#333333", lw=0.9, zorder=1)
    shown = []
    for k, curve in enumerate(curves):
        colour = trace_colour(k, len(curves))
        xs, ys = [], []
        for name in curve.traces:
            drawn = _draw_trace(top, bottom, points, events, info, names, states, name, colour)
            if drawn is None:
                continue
            marks += drawn[0]
            xs.append(drawn[1])
            ys.append(drawn[2])
        if xs:
            shown.append((curve.name, np.concatenate(xs), np.concatenate(ys)))
    top.margins(x=0.03, y=0.08)
    bottom.margins(x=0.03)  # shared x: both panels must ask for the same room
    return marks, hidden_curves(shown)


def _draw_trace(top, bottom, points, events, info, names, states, name, colour):
    """One trace's runs and event markers: (marks, drawn x, drawn y), None when empty."""
    rows = trace_rows(points, name)
    if rows.empty:
        return None
    vary = str(trace_entry(info, name).get("vary") or names[0])
    runs = _runs(rows, events, name, vary, names, states)
    _join_to_origin(runs, rows, origin_event(events, info, name), names, states)
    for j, (stable, tx, ty, bx, by) in enumerate(runs):
        style = STABLE_STYLE if stable else UNSTABLE_STYLE
        gid = f"branch-{name}-{j}"  # element ids in SVG, for people who edit the file
        top.plot(tx, ty, color=colour, ls=style, lw=LINE_WIDTH, zorder=3, gid=gid)
        bottom.plot(bx, by, color=colour, ls=style, lw=LINE_WIDTH * 0.8, zorder=3, gid=gid + "-eig")
    marks = []
    for event in trace_events(events, name):
        ex = _event_coordinate(event, names[0], rows, states)
        ey = _event_coordinate(event, names[1], rows, states)
        marker = EVENT_MARKERS.get(str(event.get("kind")), DEFAULT_MARKER)
        for ax, yy in ((top, ey), (bottom, 0.0)):
            ax.plot(
                ex,
                yy,
                marker=marker,
                ms=MARKER_SIZE if ax is top else MARKER_SIZE - 1.5,
                mfc="white",
                mec=colour,
                mew=1.5,
                ls="none",
                zorder=5,
            )
        marks.append((ex, ey, _mark_text(event, rows), colour))
    xs = np.concatenate([np.asarray(run[1], dtype=float) for run in runs])
    ys = np.concatenate([np.asarray(run[2], dtype=float) for run in runs])
    return marks, xs, ys


def _mark_text(event: Mapping[str, Any], rows: pd.DataFrame) -> str:
    """An event's label: its kind and the varied parameter's value (whatever the x axis is).

    A value within rounding of zero (relative to the parameter's range on the
    trace) prints as 0, not as 7.7e-33.
    """
    text = event_label(event)
    vary, value = event.get("vary"), event.get("value")
    if vary is None or value is None:
        return text
    value = float(value)
    if vary in rows.columns and len(rows):
        scale = float(np.nanmax(np.abs(rows[vary].to_numpy(dtype=float))))
        if abs(value) <= LABEL_ZERO_RTOL * scale:
            value = 0.0
    return f"{text}\n{vary} = {fmt(value, 5)}"


def _context(points, events, info, x) -> tuple[list[float], list[tuple[float, float]]]:
    """Start values of the scanned traces drawn against ``x``, and the parameter ranges
    where their hysteresis lets two stable states coexist (:func:`bistable_ranges`)."""
    drawn = set(_drawn_traces(points, info, x))
    starts = [
        float(t["start_value"])
        for t in trace_entries(info)
        if t.get("name") in drawn
        and has_operating_point(t)
        and t.get("vary") == x
        and t.get("start_value") is not None
    ]
    bands = [
        band
        for window in hysteresis_windows(points, events, info)
        if window.trace in drawn and window.vary == x
        for band in bistable_ranges(points, events, info, window)
    ]
    return list(dict.fromkeys(starts)), list(dict.fromkeys(bands))


def _draw_context(top, bottom, starts: Sequence[float], bands: Sequence[tuple[float, float]]):
    """Mark the operating (start) values and shade the hysteresis windows."""
    for value in starts:
        for ax in (top, bottom):
            ax.axvline(value, color=START_COLOUR, ls=START_STYLE, lw=1.0, zorder=2, gid=GUIDE_GID)
    for low, high in bands:
        top.axvspan(low, high, color=WINDOW_COLOUR, alpha=WINDOW_ALPHA, lw=0, zorder=0)


def _eigenvalue_scale(ax, values: np.ndarray) -> None:
    """Switch the eigenvalue panel to a symmetric log scale when strongly damped
    parts (large negative real parts, stiff models) would squash the unstable
    side into a sliver: the crossings of zero must stay visible."""
    finite = values[np.isfinite(values)]
    positive = finite[finite > 0]
    if positive.size == 0:
        return
    span = float(finite.max() - finite.min())
    if float(positive.max()) * SYMLOG_RATIO >= span:
        return
    ax.set_yscale("symlog", linthresh=float(positive.max()))
    ax.set_ylabel(ax.get_ylabel() + "\n(linear near 0, log beyond)")


def _shade_unstable(ax) -> None:
    """Tint the half-plane Re > 0 of the eigenvalue panel: the unstable side."""
    lo, hi = ax.get_ylim()
    if hi > 0:
        ax.axhspan(0.0, hi, color="#D55E00", alpha=0.06, lw=0, zorder=0)
    ax.set_ylim(lo, hi)


def _legend(fig, events, info, curves, context: tuple[list, list], orbits=(), hidden=()):
    """One legend under the figure, in three columns: curves, line styles, event kinds
    (with the notes: cycles not computed, curves hidden under others)."""
    drawn = [name for curve in curves for name in curve.traces]
    traces = [
        Line2D(
            [],
            [],
            color=trace_colour(k, len(curves)),
            lw=LINE_WIDTH,
            label=_curve_legend_label(curve, info),
        )
        for k, curve in enumerate(curves)
    ] + [
        Line2D(
            [],
            [],
            color=CYCLE_COLOURS[k % len(CYCLE_COLOURS)],
            lw=LINE_WIDTH,
            label=f"orbits {name} (min/max)",
        )
        for k, name in enumerate(orbits)
    ]
    grey = "#555555"
    styles = [
        Line2D([], [], color=grey, lw=LINE_WIDTH, ls=STABLE_STYLE, label="stable"),
        Line2D([], [], color=grey, lw=LINE_WIDTH, ls=UNSTABLE_STYLE, label="unstable"),
    ]
    starts, windows = context
    if starts:
        styles.append(
            Line2D([], [], color=START_COLOUR, ls=START_STYLE, lw=1.0, label="start value (scan)")
        )
    if windows:
        styles.append(
            Patch(color=WINDOW_COLOUR, alpha=WINDOW_ALPHA, lw=0, label="two stable states coexist")
        )
    kinds: dict[str, Line2D] = {}
    for event in events:
        label = event_label(event)
        if event.get("trace") not in drawn or label in kinds:
            continue
        marker = {**EVENT_MARKERS, **CYCLE_MARKERS}.get(str(event.get("kind")), DEFAULT_MARKER)
        kinds[label] = Line2D(
            [],
            [],
            marker=marker,
            ms=MARKER_SIZE - 1,
            mfc="white",
            mec=grey,
            mew=1.3,
            ls="none",
            label=label,
        )
    notes = []
    if any(str(e.get("kind")) == "hopf" and e.get("trace") in drawn for e in events):
        notes.append(HOPF_CYCLES_NOTE)
    notes += [hidden_note(under, over) for under, over in hidden]
    for note in notes:
        kinds[note] = Line2D([], [], alpha=0.0, label=note)
    groups = [g for g in (traces, styles, list(kinds.values())) if g]
    rows = max(len(g) for g in groups)
    handles = []
    for group in groups:  # legends fill column by column: pad each group to a full column
        handles += group + [Line2D([], [], alpha=0.0, label=" ")] * (rows - len(group))
    # Outside the axes, under the figure: it never hides a curve or a label.
    fig.legend(
        handles=handles,
        loc="outside lower center",
        ncols=len(groups),
        frameon=False,
        handlelength=2.6,
        columnspacing=1.5,
    )


def hidden_note(under: str, over: str) -> str:
    """The legend's note for a curve drawn exactly under another."""
    return textwrap.fill(f"{under} lies under {over}: the same points in this view", LEGEND_WRAP)


def save_figure(fig: Figure, path: str | Path) -> Path:
    """Write a figure; the format follows the suffix (png at 200 dpi, svg, pdf).

    Raises
    ------
    ValueError
        For a suffix other than .png, .svg or .pdf.
    """
    path = Path(path)
    fmt_name = path.suffix.lower().lstrip(".")
    if fmt_name not in FORMATS:
        raise ValueError(
            f"{path}: cannot write a figure as {path.suffix or 'no suffix'!r}; "
            f"use one of {', '.join('.' + f for f in FORMATS)}"
        )
    with mpl.rc_context(_STYLE):
        fig.savefig(
            path,
            format=fmt_name,
            dpi=PNG_DPI if fmt_name == "png" else "figure",
            metadata=_metadata(fmt_name),
        )
    return path


def _metadata(fmt_name: str) -> dict[str, Any]:
    # Reproducible files: no creation dates stamped in.
    if fmt_name == "svg":
        return {"Date": None}
    if fmt_name == "pdf":
        return {"CreationDate": None}
    return {}


__all__ = [
    "TRACE_COLOURS",
    "available_names",
    "bifurcation_figure",
    "hidden_note",
    "save_figure",
    "settle_layout",
]
