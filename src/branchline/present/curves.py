"""Which drawn traces form one curve, and which curves hide under others.

Branch switching leaves one geometric curve in several traces: the two halves
of the branch crossing at a branch point (``<parent>.1`` and ``<parent>.2``),
and sometimes the parent itself when it ends at the branch point and a half
continues it. A diagram colours by *curve*, not by trace, so that one curve
is one colour. Everything is decided from the saved tables alone (points.csv,
events.json, run.json), so older results folders are grouped the same way.

Two curves drawn exactly over each other (two traces of the same branch, or
branches with the same value of the plotted quantity) would leave one of them
invisible; :func:`hidden_curves` finds them so the figure can say so.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from branchline.results.reading import origin_event, trace_entry, trace_rows

# A parent trace "ends at" its branch point when its end row lies within this
# distance of the event, relative to the spans of the drawn quantities.
ENDS_AT_EVENT_RTOL = 1e-6
# Pieces meeting at a branch point continue each other when their directions
# leaving the point are this close to opposite (cosine, in span-scaled coordinates).
CONTINUES_COSINE = -0.9
# A curve is hidden under another when every drawn point of it lies within this
# fraction of the axis spans from the other's polyline: well under a line width
# (1.6 pt on an axes about 400 pt across is 4e-3).
HIDDEN_RTOL = 2e-3
# Points of a curve compared when looking for a hidden curve (evenly subsampled).
HIDDEN_SAMPLES = 300
# Points tried first (a quick test that parts most pairs of curves).
QUICK_SAMPLES = 12


@dataclass(frozen=True)
class DrawnCurve:
    """One connected curve of the diagram.

    Attributes
    ----------
    traces : tuple of str
        Its traces, the first one first in run order.
    name : str
        The name it is shown under: the switched branch's name from the scan
        (``branch_names``) when it has one, else its traces joined.
    parent : str or None
        The trace it branches off, when all of its traces were switched onto.
    """

    traces: tuple[str, ...]
    name: str
    parent: str | None = None


def connected_curves(
    points: pd.DataFrame,
    events: Sequence[Mapping[str, Any]],
    info: Mapping[str, Any],
    traces: Sequence[str],
    columns: Sequence[str],
) -> list[DrawnCurve]:
    """Group ``traces`` (drawn in this order) into connected curves.

    The two halves started at one branch point are one curve; a half that
    continues its parent where the parent ends at that branch point (directions
    leaving the point opposite, in ``columns`` scaled by their spans) joins the
    parent's curve. ``columns`` are the quantities the geometry is judged in:
    the varied parameter and the states (or ``norm``).
    """
    group = {name: name for name in traces}

    def root(name: str) -> str:
        while group[name] != name:
            name = group[name]
        return name

    def join(a: str, b: str) -> None:
        ra, rb = root(a), root(b)
        if ra != rb:  # the earlier trace in drawing order names the group
            first, second = sorted((ra, rb), key=list(traces).index)
            group[second] = first

    try:
        scale = _spans(points, columns)
    except (TypeError, ValueError):  # damaged tables: every trace its own curve
        return [_curve([name], info) for name in traces]
    halves: dict[tuple[str, float], list[str]] = {}
    for name in traces:
        parent = trace_entry(info, name).get("parent")
        origin = origin_event(events, info, name)
        if not parent or origin is None or str(parent) not in group:
            continue
        try:
            halves.setdefault((str(parent), float(origin["value"])), []).append(name)
            if _continues(points, str(parent), name, origin, columns, scale):
                join(str(parent), name)
        except (KeyError, TypeError, ValueError):
            continue  # a damaged record: this trace stays a curve of its own
    for members in halves.values():
        for other in members[1:]:
            join(members[0], other)
    curves: dict[str, list[str]] = {}
    for name in traces:
        curves.setdefault(root(name), []).append(name)
    return [_curve(members, info) for members in curves.values()]


def _curve(members: list[str], info: Mapping[str, Any]) -> DrawnCurve:
    entries = [trace_entry(info, name) for name in members]
    parents = {str(e["parent"]) if e.get("parent") else None for e in entries}
    parent = next(iter(parents)) if len(parents) == 1 else None
    labels = {str(e["curve_name"]) if e.get("curve_name") else None for e in entries}
    if len(labels) == 1 and None not in labels:
        name = str(next(iter(labels)))
    elif len(members) == 1:
        name = members[0]
    else:
        name = " + ".join(members)
    return DrawnCurve(tuple(members), name, str(parent) if parent else None)


def _spans(points: pd.DataFrame, columns: Sequence[str]) -> np.ndarray:
    spans = []
    for column in columns:
        values = points[column].to_numpy(dtype=float) if column in points else np.zeros(1)
        finite = values[np.isfinite(values)]
        span = float(finite.max() - finite.min()) if finite.size else 0.0
        spans.append(span if span > 0 else 1.0)
    return np.array(spans)


def _coordinates(rows: pd.DataFrame, columns: Sequence[str], scale: np.ndarray) -> np.ndarray:
    present = [c for c in columns if c in rows.columns]
    keep = [i for i, c in enumerate(columns) if c in rows.columns]
    return rows[present].to_numpy(dtype=float) / scale[keep]


def _event_coordinates(event: Mapping[str, Any], columns, rows, scale) -> np.ndarray | None:
    values = []
    for i, column in enumerate(columns):
        if column not in rows.columns:
            continue
        value = (event.get("parameters") or {}).get(column, (event.get("state") or {}).get(column))
        if value is None:
            return None
        values.append(float(value) / scale[i])
    return np.array(values)


def _continues(points, parent: str, child: str, event, columns, scale) -> bool:
    """True when ``child`` continues ``parent`` through the branch point ``event``:
    the parent ends there and they leave it in opposite directions."""
    parent_rows = trace_rows(points, parent)
    child_rows = trace_rows(points, child)
    if len(parent_rows) < 2 or len(child_rows) < 2:
        return False
    at = _event_coordinates(event, columns, parent_rows, scale)
    if at is None:
        return False
    ours = _coordinates(parent_rows, columns, scale)
    theirs = _coordinates(child_rows, columns, scale)
    tolerance = ENDS_AT_EVENT_RTOL * (1.0 + float(np.linalg.norm(at)))
    ends = [e for e in (ours[0], ours[-1]) if np.linalg.norm(e - at) <= tolerance]
    if not ends:
        return False
    away = _leaving(ours, at, tolerance)
    onward = _leaving(theirs, at, tolerance)
    if away is None or onward is None:
        return False
    return float(away @ onward) <= CONTINUES_COSINE


def _leaving(rows: np.ndarray, at: np.ndarray, tolerance: float) -> np.ndarray | None:
    """Unit direction from ``at`` to the nearest row of ``rows`` not at ``at``."""
    gaps = np.linalg.norm(rows - at, axis=1)
    away = np.flatnonzero(gaps > tolerance)
    if away.size == 0:
        return None
    nearest = away[np.argmin(gaps[away])]
    return (rows[nearest] - at) / gaps[nearest]


# --------------------------------------------------------------------------- hidden curves


def hidden_curves(
    drawn: Sequence[tuple[str, np.ndarray, np.ndarray]],
) -> list[tuple[str, str]]:
    """Pairs (hidden, over): every point of curve ``hidden`` lies on curve ``over``,
    drawn after it (on top).

    ``drawn`` holds (name, x, y) per curve in drawing order (later ones on
    top), the values as plotted. Distances are measured against the polyline
    of the other curve, in fractions of the spans of all drawn values; a curve
    covered by several others is reported under the last one drawn. A curve
    drawn on top of a longer one hides nothing of itself and is not reported.
    """
    finite = [
        (name, x[np.isfinite(x) & np.isfinite(y)], y[np.isfinite(x) & np.isfinite(y)])
        for name, x, y in drawn
    ]
    if len(finite) < 2:
        return []
    all_x = np.concatenate([x for _, x, _ in finite])
    all_y = np.concatenate([y for _, _, y in finite])
    if all_x.size == 0:
        return []
    sx = float(np.ptp(all_x)) or 1.0
    sy = float(np.ptp(all_y)) or 1.0
    scaled = [(name, np.column_stack((x / sx, y / sy))) for name, x, y in finite]
    boxes = [
        (ours.min(axis=0), ours.max(axis=0)) if len(ours) else (None, None) for _, ours in scaled
    ]
    found = []
    for i, (name, ours) in enumerate(scaled):
        if len(ours) == 0:
            continue
        sample = ours[np.unique(np.linspace(0, len(ours) - 1, HIDDEN_SAMPLES).astype(int))]
        few = sample[:: max(1, len(sample) // QUICK_SAMPLES)]
        for j in range(len(scaled) - 1, i, -1):  # only a curve drawn later covers it
            other, theirs = scaled[j]
            if not len(theirs) or not _inside(boxes[i], boxes[j]):
                continue
            # a few points first: most pairs part there, before the full comparison
            if _distance_to_polyline(few, theirs) > HIDDEN_RTOL:
                continue
            if _distance_to_polyline(sample, theirs) <= HIDDEN_RTOL:
                found.append((name, other))
                break
    return found


def _inside(inner: tuple, outer: tuple) -> bool:
    """True when box ``inner`` lies within box ``outer`` (widened by the tolerance)."""
    return bool(
        np.all(inner[0] >= outer[0] - HIDDEN_RTOL) and np.all(inner[1] <= outer[1] + HIDDEN_RTOL)
    )


def _distance_to_polyline(points: np.ndarray, line: np.ndarray) -> float:
    """Largest distance from ``points`` (k, 2) to the polyline through ``line`` (m, 2)."""
    if len(line) == 1:
        return float(np.max(np.linalg.norm(points - line[0], axis=1)))
    step = max(1, len(line) // (4 * HIDDEN_SAMPLES))  # bound the work on very long curves
    line = np.vstack((line[::step], line[-1:]))
    a, b = line[:-1], line[1:]
    ab = b - a
    length2 = np.maximum(np.einsum("ij,ij->i", ab, ab), 1e-300)
    ap = points[:, None, :] - a[None, :, :]
    t = np.clip(np.einsum("kij,ij->ki", ap, ab) / length2, 0.0, 1.0)
    nearest = a[None, :, :] + t[..., None] * ab[None, :, :]
    gaps = np.linalg.norm(points[:, None, :] - nearest, axis=2)
    return float(np.max(np.min(gaps, axis=1)))


__all__ = ["DrawnCurve", "connected_curves", "hidden_curves"]
