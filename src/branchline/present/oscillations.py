"""Periodic orbits in the diagram and the report, from the saved cycles table alone.

The diagram gets each family's min/max envelope of the plotted state (stable
orbits solid, unstable dashed, as for equilibria) and a period panel; the
report a section on oscillations: where they appear and vanish, amplitude and
period at the ends of the window, soft or hard onset, and the width of the
window where a stable rest state and a stable oscillation coexist (between a
subcritical Hopf point and its cycle fold).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from branchline.results.reading import fmt
from branchline.vocabulary import EventKind

CYCLE_COLOURS = ("#7A3E9D", "#8C564B", "#117733", "#882255")
CYCLE_MARKERS = {EventKind.CYCLE_FOLD: "v", EventKind.PERIOD_DOUBLING: "P", EventKind.TORUS: "*"}
CYCLE_WORDS = {
    EventKind.CYCLE_FOLD: "cycle fold",
    EventKind.PERIOD_DOUBLING: "period doubling",
    EventKind.TORUS: "torus (quasi-periodic onset)",
}


def families(cycles: pd.DataFrame | None) -> list[str]:
    """Family names in table order."""
    if cycles is None or cycles.empty:
        return []
    return list(dict.fromkeys(cycles["cycles"].astype(str)))


def _runs(rows: pd.DataFrame):
    """Consecutive runs of equal stability: (stable, row positions), adjacent runs sharing a row."""
    stable = rows["stable"].to_numpy(dtype=bool)
    runs, start = [], 0
    for i in range(1, len(stable) + 1):
        if i == len(stable) or stable[i] != stable[start]:
            runs.append((bool(stable[start]), np.arange(start, min(i + 1, len(stable)))))
            start = i
    return runs


def draw_cycles(top, period_axis, cycles, events, x: str, y: str, styles) -> list[tuple]:
    """Envelopes in ``top``, periods in ``period_axis``; returns event marks to label.

    ``styles`` is (stable line style, unstable line style, line width, marker size).
    """
    stable_style, unstable_style, width, marker_size = styles
    marks = []
    for k, name in enumerate(families(cycles)):
        colour = CYCLE_COLOURS[k % len(CYCLE_COLOURS)]
        rows = cycles[cycles["cycles"].astype(str) == name]
        if x not in rows.columns:
            continue
        for j, (stable, where) in enumerate(_runs(rows)):
            part = rows.iloc[where]
            style = stable_style if stable else unstable_style
            gid = f"cycles-{name}-{j}"
            for bound in ("min", "max"):
                column = f"{y}_{bound}"
                if column in part.columns:
                    top.plot(
                        part[x],
                        part[column],
                        color=colour,
                        ls=style,
                        lw=width,
                        zorder=3,
                        gid=f"{gid}-{bound}",
                    )
            period_axis.plot(
                part[x],
                part["period"],
                color=colour,
                ls=style,
                lw=width,
                zorder=3,
                gid=f"{gid}-period",
            )
        period_axis.plot([], [], color=colour, lw=width, label=f"orbits {name}")
        for event in events:
            if str(event.get("trace")) != name or event.get("kind") not in CYCLE_MARKERS:
                continue
            ex = float(event["value"])
            period = (event.get("details") or {}).get("period")
            nearest = rows.iloc[int(np.argmin(np.abs(rows[x].to_numpy(float) - ex)))]
            ey = float(nearest.get(f"{y}_max", np.nan))
            for ax, yy in ((top, ey), (period_axis, period)):
                if yy is None:
                    continue
                ax.plot(
                    ex,
                    yy,
                    marker=CYCLE_MARKERS[event["kind"]],
                    ms=marker_size,
                    mfc="white",
                    mec=colour,
                    mew=1.5,
                    ls="none",
                    zorder=5,
                )
            marks.append((ex, ey, f"{CYCLE_WORDS[event['kind']]}\n{x} = {fmt(ex, 5)}", colour))
    period_axis.set_ylabel("period of the\noscillation")
    period_axis.margins(x=0.03, y=0.1)
    return marks


# --------------------------------------------------------------------------- report


def _hopf_of(events, family_rows: pd.DataFrame, vary: str):
    """The Hopf event nearest the family's first orbit, or None."""
    first = float(family_rows[vary].iloc[0])
    hopfs = [e for e in events if e.get("kind") == EventKind.HOPF and e.get("value") is not None]
    if not hopfs:
        return None
    return min(hopfs, key=lambda e: abs(float(e["value"]) - first))


def _amplitudes(row: pd.Series, states: Sequence[str]) -> str:
    parts = []
    for state in states[:4]:
        low, high = row.get(f"{state}_min"), row.get(f"{state}_max")
        if low is None or high is None:
            continue
        parts.append(f"{state} from {fmt(float(low), 5)} to {fmt(float(high), 5)}")
    return "; ".join(parts)


def _coexistence(rows: pd.DataFrame, vary: str, hopf: float, fold: float) -> str:
    """Words on the window between a subcritical Hopf point and its cycle fold."""
    width = abs(fold - hopf)
    window = (
        f"between the Hopf point at {vary} = {fmt(hopf, 8)} and the cycle fold at "
        f"{vary} = {fmt(fold, 8)} (width {fmt(width, 6)})"
    )
    if rows["stable"].to_numpy(dtype=bool).any():
        return (
            f"- **Hidden hysteresis** {window}: a stable rest state and a stable oscillation "
            "coexist there; a large disturbance can start the oscillation before the rest state "
            "loses stability, and once started it persists back to the cycle fold."
        )
    return (
        f"- The unstable orbits fold back {window}, but no orbit of the family is stable: no "
        "stable oscillation coexists with the rest state here; past the Hopf point the state "
        "leaves for another attractor (a jump)."
    )


def _stable_span(rows: pd.DataFrame, vary: str, event_values: list[float]):
    """(low, high) of the stable orbits' parameter, or None; each end moved to a located
    event of the family lying between the last stable orbit and its unstable neighbour."""
    stable = rows["stable"].to_numpy(dtype=bool)
    if not stable.any():
        return None
    values = rows[vary].to_numpy(dtype=float)
    which = np.flatnonzero(stable)
    ends = []
    for inside, outside in ((which[0], which[0] - 1), (which[-1], which[-1] + 1)):
        end = values[inside]
        if 0 <= outside < len(values):
            low, high = sorted((values[inside], values[outside]))
            between = [v for v in event_values if low <= v <= high]
            if between:
                end = between[0]
        ends.append(end)
    return min(ends), max(ends)


def _family_lines(name, rows, entry, events, states) -> list[str]:
    vary = str(entry.get("vary"))
    first, last = rows.iloc[0], rows.iloc[-1]
    out = [f"### Oscillations `{name}`", ""]
    hopf = _hopf_of(events, rows, vary) if not entry.get("parent") else None
    if entry.get("parent"):
        out.append(f"- Start: {entry.get('origin')} (orbits of twice the period).")
    elif hopf is not None:
        onset = (
            "hard (subcritical: the small orbits are unstable)"
            if hopf.get("criticality") == "subcritical"
            else "soft (supercritical: the small orbits are stable)"
        )
        out.append(
            f"- Appear at the Hopf point {vary} = {fmt(float(hopf['value']), 8)}; onset {onset}."
        )
    out.append(
        f"- First orbit: {vary} = {fmt(float(first[vary]), 8)}, period {fmt(float(first['period']), 6)}; "
        f"{_amplitudes(first, states)}."
    )
    out.append(
        f"- Last orbit: {vary} = {fmt(float(last[vary]), 8)}, period {fmt(float(last['period']), 6)}; "
        f"{_amplitudes(last, states)}."
    )
    ending = str(entry.get("message") or entry.get("status")).rstrip(".")
    out.append(f"- How the family ends: {ending}.")
    mine = [e for e in events if str(e.get("trace")) == name]
    span = _stable_span(rows, vary, [float(e["value"]) for e in mine])
    if span is not None:
        out.append(
            f"- Stable orbits for {vary} between {fmt(span[0], 8)} and {fmt(span[1], 8)} "
            "(on this family; ends at located events where they lie next to it)."
        )
    else:
        out.append("- No orbit of this family is stable.")
    for event in mine:
        out.append(
            f"- {CYCLE_WORDS.get(str(event.get('kind')), event.get('kind'))} at "
            f"{vary} = {fmt(float(event['value']), 10)}: {event.get('note', '')}."
        )
    folds = [e for e in mine if e.get("kind") == EventKind.CYCLE_FOLD]
    if hopf is not None and hopf.get("criticality") == "subcritical" and folds:
        out.append(_coexistence(rows, vary, float(hopf["value"]), float(folds[0]["value"])))
    out.append("")
    return out


def oscillation_section(
    events: Sequence[Mapping[str, Any]], info: Mapping[str, Any], cycles: pd.DataFrame | None
) -> list[str]:
    """The report's section on oscillations (empty without cycles)."""
    names = families(cycles)
    if not names:
        return []
    entries = {str(e.get("name")): e for e in info.get("cycles") or []}
    states = list((info.get("model") or {}).get("states") or [])
    out = ["## Oscillations", ""]
    for name in names:
        rows = cycles[cycles["cycles"].astype(str) == name]
        entry = entries.get(name, {"vary": rows.columns[2]})
        out += _family_lines(name, rows, entry, events, states)
    return out


__all__ = ["CYCLE_MARKERS", "draw_cycles", "families", "oscillation_section"]
