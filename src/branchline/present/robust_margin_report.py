"""The report section on the robust margin (from run.json's ``robust_margin`` entry only)."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from branchline.present.boundary_report import markdown_table
from branchline.results.reading import fmt, kind_words

MARGIN_CAUTION = (
    "These distances describe the model, not the real system: they hold only as far as the "
    "equations, the nominal values and the scales do, and say nothing of drifts the model "
    "leaves out. Safety decisions follow local codes and licensed practice."
)


def _shift_words(entry: Mapping[str, Any]) -> str:
    shifts = entry.get("shift") or {}
    return ", ".join(
        f"{name} {'+' if value >= 0 else ''}{fmt(value, 4)}" for name, value in shifts.items()
    )


def robust_margin_section(info: Mapping[str, Any]) -> list[str]:
    """How many scales of combined drift separate the nominal point from each boundary."""
    entry = info.get("robust_margin")
    if not entry:
        return []
    scales = entry.get("scales") or {}
    nominal = entry.get("nominal") or {}
    setting = ", ".join(
        f"{name} = {fmt(nominal.get(name))} (scale {fmt(scale, 4)})"
        for name, scale in scales.items()
    )
    out = ["## Robust margin", "", f"Nominal point and scales: {setting}.", ""]
    points = entry.get("points") or []
    done = [p for p in points if p.get("status") == "done"]
    if done:
        nearest = done[0]
        out += [
            f"The nearest stability boundary is the {kind_words(nearest['kind'])} surface reached "
            f"from {nearest['start']}: {fmt(nearest['distance'], 4)} scales of combined drift "
            f"away, in the direction {_shift_words(nearest)} (all of them moving together). "
            "It is the nearest of "
            "the points located from the traces' events; a part of a boundary that no trace "
            "reached can lie nearer.",
            "",
        ]
        rows = []
        for point in points:
            where = ", ".join(f"{k} = {fmt(v)}" for k, v in (point.get("point") or {}).items())
            status = point["status"] if point["status"] != "done" else ""
            if point.get("same_as"):
                status = f"same point as from {point['same_as']}"
            if point.get("message"):
                status = point["message"]
            direction = ", ".join(
                f"{k} {fmt(v, 3)}" for k, v in (point.get("direction") or {}).items()
            )
            rows.append(
                (
                    point["start"],
                    kind_words(point["kind"]),
                    fmt(point["distance"], 6) if point["status"] == "done" else "—",
                    where if point["status"] == "done" else "—",
                    direction if point["status"] == "done" else "—",
                    status,
                )
            )
        out += markdown_table(
            (
                "started from",
                "boundary",
                "distance (scales)",
                "nearest point",
                "critical direction (scaled)",
                "note",
            ),
            rows,
        )
        out += [
            "Each nearest point solves the boundary's defining system together with the "
            "normal-vector condition (Dobson 1993; Mönnigmann and Marquardt 2002): a local "
            "minimum of the scaled distance on the surface reached from that event. A surface "
            "no trace crossed is not measured.",
            "",
        ]
    elif points:
        out += ["No nearest point could be located:", ""]
        out += [f"- {p['start']}: {p.get('message')}" for p in points] + [""]
    else:
        out += [
            "No fold or Hopf point of the traces lies at the nominal values of the "
            "parameters that are not uncertain, so no margin was measured.",
            "",
        ]
    out += [f"- {reason}" for reason in entry.get("skipped") or []]
    if entry.get("skipped"):
        out.append("")
    return [*out, f"*{MARGIN_CAUTION}*", ""]
