"""The report's section on equilibria found without a start guess.

Markdown from the saved tables alone (points.csv rows and the ``searches`` and
``traces`` entries of run.json): what each search covered, the count of
distinct equilibria at each searched value, the branches only the search
found, and the shape of every branch in the window (isola, leaves the window,
ends inside it). No search can prove that a model has no other equilibria,
and the section says so.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import pandas as pd

from branchline.results.reading import fmt, trace_entries, trace_events, trace_rows
from branchline.results.search_records import root_trace_name

# A trace end this close to an interval edge (relative to the interval's width)
# lies on the edge: traces end exactly on it, up to rounding.
EDGE_RTOL = 1e-9
# Searched values listed in a sentence before it abbreviates.
VALUES_SHOWN = 12


def searches_of(info: Mapping[str, Any]) -> list[Mapping[str, Any]]:
    """The ``searches`` entries of run.json (empty for runs without a search)."""
    return list(info.get("searches") or [])


def found_traces(info: Mapping[str, Any], search: str) -> list[Mapping[str, Any]]:
    """Trace entries of branches a search found, with the branches switched off them."""
    found = {str(t["name"]) for t in trace_entries(info) if t.get("found_by_search") == search}
    return [
        t
        for t in trace_entries(info)
        if str(t.get("name")) in found or str(t.get("name")).split(".")[0] in found
    ]


def branch_shape(
    rows: pd.DataFrame, entry: Mapping[str, Any], events: Sequence[Mapping[str, Any]] = ()
) -> str:
    """How a branch lies in its window, in words: isola, leaves the window, ends inside.

    An isola's extent is read off its located folds when it has them (exact), else
    off its rows.
    """
    vary = str(entry.get("vary"))
    if entry.get("status") == "closed":
        folds = [
            float(e["value"])
            for e in trace_events(events, str(entry.get("name")))
            if e.get("kind") == "fold"
        ]
        if folds or (not rows.empty and vary in rows.columns):
            values = folds or rows[vary].to_numpy(dtype=float).tolist()
            ends = " (its folds)" if folds else ""
            return (
                f"an isola: a closed branch, {vary} from {fmt(min(values))} to "
                f"{fmt(max(values))}{ends}, meeting no other branch"
            )
        return "an isola: a closed branch"
    if rows.empty or vary not in rows.columns or not entry.get("interval"):
        return "no points"
    lo, hi = (float(v) for v in entry["interval"])
    values = rows[vary].to_numpy(dtype=float)
    ends = [_edge(values[0], lo, hi), _edge(values[-1], lo, hi)]
    if ends[0] and ends[1]:
        if ends[0] == ends[1]:
            return (
                f"both ends leave the window at {vary} = {fmt(ends[0])}: the branch turns "
                "back inside it and joins the rest of the diagram, if at all, outside it"
            )
        return f"leaves the window at {vary} = {fmt(lo)} and at {vary} = {fmt(hi)}"
    inside = [fmt(v) for v, edge in zip((values[0], values[-1]), ends) if not edge]
    left = [fmt(edge) for edge in ends if edge]
    where = f"leaves the window at {vary} = {left[0]}; " if left else ""
    return (
        f"{where}ends inside the window at {vary} = {' and '.join(inside)} "
        f"({entry.get('status')}: a state limit, the point limit or numerical trouble)"
    )


def _edge(value: float, lo: float, hi: float) -> float | None:
    width = hi - lo
    for edge in (lo, hi):
        if abs(value - edge) <= EDGE_RTOL * width:
            return edge
    return None


def _covered(search: Mapping[str, Any]) -> str:
    vary = search.get("vary")
    box = ", ".join(
        f"{name} in [{fmt(lo)}, {fmt(hi)}]" for name, (lo, hi) in (search.get("box") or {}).items()
    )
    values = [fmt(v["value"]) for v in search.get("values") or []]
    shown = ", ".join(values[:VALUES_SHOWN]) + (
        f", ... ({len(values)} values)" if len(values) > VALUES_SHOWN else ""
    )
    return (
        f"Trace **{search.get('trace')}** searched the box {box} by Newton's method with "
        "deflation (Farrell, Birkisson and Funke, SIAM J. Sci. Comput. 2015), from "
        f"{search.get('samples')} starts of a scrambled Sobol sample (seed {search.get('seed')}) "
        f"at each of {len(values)} values of {vary}: {shown} (the start value first). At each "
        "value the branches already traced were deflated and Newton also started from the "
        "equilibria of the value searched before (deflated continuation, Farrell, Beentjes "
        "and Birkisson 2016); every root was polished by undeflated Newton, and roots closer "
        f"than {fmt(search.get('deflation', {}).get('same_root_rtol'))} (relative, in box "
        "units) count as one."
    )


def _counts_table(search: Mapping[str, Any]) -> list[str]:
    vary = str(search.get("vary"))
    header = f"| {vary} | equilibria in the box | stable | new at this value | on traces |"
    lines = [header, "|---|---|---|---|---|"]
    for v in search.get("values") or []:
        traces = ", ".join(v.get("traces") or []) or "—"
        if v.get("untraced"):
            traces += f" (+{v['untraced']} not traced)"
        lines.append(
            f"| {fmt(v['value'])} | {v['equilibria']} | {v['stable']} | "
            f"{v['found_by_search']} | {traces} |"
        )
    return lines


def search_section(
    points: pd.DataFrame, events: Sequence[Mapping[str, Any]], info: Mapping[str, Any]
) -> list[str]:
    """Markdown lines of the search section (none when no trace searched)."""
    searches = searches_of(info)
    if not searches:
        return []
    out = ["## Equilibria found without a start guess", ""]
    for search in searches:
        name = str(search.get("trace"))
        out += [_covered(search), "", *_counts_table(search), ""]
        found = found_traces(info, name)
        if found:
            out.append("Branches found only by the search:")
            out.append("")
            for entry in found:
                origin = (
                    f"switched from {entry['parent']}"
                    if entry.get("parent")
                    else f"found at {search.get('vary')} = {fmt(entry.get('found_at'))}"
                )
                rows = trace_rows(points, str(entry["name"]))
                shape = branch_shape(rows, entry, events)
                out.append(f"- **{entry['name']}** ({origin}): {shape}.")
            out.append("")
        else:
            out += ["The search found no branch that was not traced already.", ""]
        others = [
            t
            for t in trace_entries(info)
            if root_trace_name(str(t.get("name"))) == name and t not in found
        ]
        if others:
            out += ["Branches traced from the start guess:", ""]
        for entry in others:
            rows = trace_rows(points, str(entry["name"]))
            out.append(f"- Trace **{entry['name']}**: {branch_shape(rows, entry, events)}.")
        if others:
            out.append("")
        incomplete = [v for v in search.get("values") or [] if not v.get("complete", True)]
        if incomplete:
            out += [
                f"The search stopped at its root limit at {len(incomplete)} value(s): the model "
                "may have a continuum of equilibria there.",
                "",
            ]
        out += [_statement(search), ""]
    return out


def _statement(search: Mapping[str, Any]) -> str:
    outside = search.get("roots_outside_box") or 0
    beyond = (
        f" Newton also reached {outside} root(s) outside the box; they are not counted or traced."
        if outside
        else ""
    )
    return (
        "**What this search covers.** Only the box and the values of "
        f"{search.get('vary')} listed above, from the starts listed. No search can prove that "
        "a nonlinear model has no other equilibria: one outside the box, one that Newton's "
        "method reaches from none of the starts, or a branch lying wholly between two searched "
        "values would be missed. Widen the box, add samples (search_samples) or values "
        f"(search_at) to search further.{beyond}"
    )


__all__ = ["branch_shape", "found_traces", "search_section", "searches_of"]
