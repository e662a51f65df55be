"""Report sections for two-parameter boundaries and event sensitivities.

Facts come from the saved tables only (``events`` as in events.json, ``info``
as in run.json), like the rest of the report.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from branchline.results.reading import fmt, kind_words

# How many parameters each event's "what moves it" line names.
TOP_PARAMETERS = 3
# Codimension-two points of two boundaries this close (relative) are one point.
SAME_PLACE_RTOL = 1e-6
CODIMENSION_TWO = ("cusp", "bogdanov_takens", "bautin", "zero_hopf", "double_hopf")


def markdown_table(header: Sequence[str], rows: Sequence[Sequence[Any]]) -> list[str]:
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(str(c).replace("|", "\\|") for c in row) + " |" for row in rows]
    return [*lines, ""]


def boundaries_section(events: Sequence[Mapping[str, Any]], info: Mapping[str, Any]) -> list[str]:
    """The boundaries followed and the codimension-two points found on them."""
    entries = info.get("boundaries") or []
    if not entries:
        return []
    out = ["## Two-parameter boundaries", ""]
    rows = []
    for entry in entries:
        first, second = entry["parameters"]
        extent = "—"
        if entry.get("first_range"):
            lo1, hi1 = entry["first_range"]
            lo2, hi2 = entry["second_range"]
            extent = f"{first} in [{fmt(lo1)}, {fmt(hi1)}], {second} in [{fmt(lo2)}, {fmt(hi2)}]"
        rows.append(
            (
                entry["name"],
                kind_words(entry["kind"]),
                entry["from"],
                entry["points"],
                extent,
                entry["message"],
            )
        )
    out += markdown_table(
        ("boundary", "kind", "started from", "points", "extent", "how it ended"), rows
    )
    points = [e for e in events if e.get("kind") in CODIMENSION_TWO]
    if points:
        rows = []
        for event in points:
            details = event.get("details") or {}
            second = details.get("second")
            where = f"{event.get('vary')} = {fmt(event.get('value'))}"
            if second:
                where += f", {second} = {fmt(details.get('second_value'))}"
            rows.append(
                (
                    event.get("trace"),
                    kind_words(str(event.get("kind"))),
                    where,
                    event.get("note") or "",
                )
            )
        out += ["Points found on the boundaries:", ""]
        out += markdown_table(("boundary", "point", "where", "meaning"), rows)
        out += _other_curves(points, entries)
    else:
        out += ["No cusp, Bogdanov-Takens, Bautin, zero-Hopf or double-Hopf point was found.", ""]
    return out


def _other_curves(points, entries) -> list[str]:
    """Each Bogdanov-Takens and zero-Hopf point: the other curve through it, and whether a
    boundary follows it (or the [[boundary]] lines that would)."""
    kinds = {entry["name"]: entry["kind"] for entry in entries}
    lines = []
    for event in points:
        kind = str(event.get("kind"))
        host = str(event.get("trace"))
        if kind not in ("bogdanov_takens", "zero_hopf") or host not in kinds:
            continue
        other = "hopf" if kinds[host] == "fold" else "fold"
        root = host.split(".")[0]
        followers = [
            e["name"] for e in entries if str(e.get("from", "")).startswith(f"{root} {kind} ")
        ]
        followers += [
            str(e.get("trace"))
            for e in points
            if e.get("kind") == kind
            and kinds.get(str(e.get("trace"))) == other
            and _same_place(e, event)
            and str(e.get("trace")) not in followers
        ]
        where = f"{event.get('vary')} = {fmt(event.get('value'))}"
        if followers:
            lines.append(
                f"- the {kind_words(other)} curve through the {kind_words(kind)} point of "
                f"{host} ({where}) is followed as {', '.join(followers)}"
            )
        else:
            lines.append(
                f"- a {kind_words(other)} curve also passes through the {kind_words(kind)} point "
                f'of {host} ({where}): follow it with [[boundary]] from = "{root}", '
                f'kind = "{other}"'
            )
    return ["Curves through these points:", "", *lines, ""] if lines else []


def _same_place(one: Mapping[str, Any], other: Mapping[str, Any]) -> bool:
    """Two codimension-two points at the same two parameter values (to 1e-6, relative)."""
    pairs = [
        (one.get("value"), other.get("value")),
        (
            (one.get("details") or {}).get("second_value"),
            (other.get("details") or {}).get("second_value"),
        ),
    ]
    return all(
        a is not None and b is not None and abs(a - b) <= SAME_PLACE_RTOL * (1.0 + abs(b))
        for a, b in pairs
    )


def sensitivities_section(events: Sequence[Mapping[str, Any]]) -> list[str]:
    """For each fold and Hopf point, the parameters that move it most (by elasticity)."""
    rows = []
    for event in events:
        found = (event.get("details") or {}).get("sensitivities")
        if not found:
            continue
        ranked = sorted(
            found.items(),
            key=lambda item: (
                -abs(item[1]["elasticity"]) if item[1]["elasticity"] is not None else 0.0
            ),
        )[:TOP_PARAMETERS]
        words = ", ".join(
            f"{name} (elasticity {fmt(entry['elasticity'], 3)}, d{event.get('vary')}/d{name} = "
            f"{fmt(entry['derivative'], 4)})"
            for name, entry in ranked
        )
        rows.append(
            (
                event.get("trace"),
                kind_words(str(event.get("kind"))),
                f"{event.get('vary')} = {fmt(event.get('value'))}",
                words,
            )
        )
    if not rows:
        return []
    out = ["## What moves each stability change most", ""]
    out += [
        "Exact derivatives of each event's parameter value with respect to every other "
        "parameter (implicit function theorem on its defining system), ranked by elasticity: "
        "the percentage the event moves for a one percent change of that parameter.",
        "",
    ]
    return out + markdown_table(("trace", "event", "at", "moved most by"), rows)
