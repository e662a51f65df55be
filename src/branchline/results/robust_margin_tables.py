"""The robust margin -> robust_margin.csv rows and run.json's ``robust_margin`` entry.

robust_margin.csv (ours; the contract is silent): one row per fold or Hopf event
that started a search, nearest first: ``trace``, ``kind``, ``number`` (which event
of that kind on the trace, from 1), ``status``, ``distance`` (in units of the
scales), each uncertain parameter at the nearest point under its own name,
``direction_<parameter>`` (the unit critical direction in scaled parameters),
the states (or ``norm``), ``frequency`` (Hopf), ``same_as`` (an earlier start
that reached the same point), ``message``.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from branchline.results.records import RunResult
from branchline.results.robust_margin_records import NearestPoint
from branchline.results.tables import _jsonable, _state_columns, wide_states


def _ordered(points) -> list[NearestPoint]:
    """Located points nearest first, then the failed ones in run order."""
    done = sorted((p for p in points if p.status == "done"), key=lambda p: p.distance)
    return done + [p for p in points if p.status != "done"]


def robust_margin_frame(result: RunResult) -> pd.DataFrame:
    """robust_margin.csv as a DataFrame (no rows when the scan has no [robust_margin])."""
    margin = result.robust_margin
    model = result.model
    names = list(margin.names) if margin else []
    states = ["norm"] if wide_states(result) else list(model.states)
    columns = ["trace", "kind", "number", "status", "distance", *names]
    columns += [f"direction_{name}" for name in names] + states
    columns += ["frequency", "same_as", "message"]
    if margin is None or not margin.points:
        return pd.DataFrame(columns=columns)
    points = _ordered(margin.points)
    indices = [model.parameter_index(name) for name in names]
    data: dict[str, Any] = {
        "trace": [p.trace for p in points],
        "kind": [p.kind for p in points],
        "number": [p.number for p in points],
        "status": [p.status for p in points],
        "distance": [p.distance for p in points],
    }
    for name, index in zip(names, indices, strict=True):
        data[name] = [float(p.parameters[index]) for p in points]
    for column, name in enumerate(names):
        data[f"direction_{name}"] = [float(p.direction[column]) for p in points]
    data.update(_state_columns(result, np.array([p.state for p in points])))
    data["frequency"] = [np.nan if p.frequency is None else p.frequency for p in points]
    data["same_as"] = [p.same_as for p in points]
    data["message"] = [p.message for p in points]
    return pd.DataFrame(data, columns=columns)


def robust_margin_entry(result: RunResult) -> dict[str, Any]:
    """run.json's ``robust_margin``: setting, every nearest point, the nearest of all."""
    margin = result.robust_margin
    if margin is None:
        return {}
    model = result.model
    nearest = margin.nearest()
    entry = {
        "parameters": list(margin.names),
        "scales": dict(zip(margin.names, margin.scales, strict=True)),
        "nominal": dict(zip(model.parameters, margin.nominal, strict=True)),
        "ellipse": bool(getattr(result.scan.robust_margin, "ellipse", True)),
        "nearest": nearest.label if nearest else None,
        "distance": nearest.distance if nearest else None,
        "points": [_point_entry(model, margin, p) for p in _ordered(margin.points)],
        "skipped": list(margin.skipped),
    }
    return {"robust_margin": _jsonable(entry)}


def _point_entry(model, margin, point: NearestPoint) -> dict[str, Any]:
    indices = [model.parameter_index(name) for name in margin.names]
    shift = point.parameters[indices] - margin.nominal[indices]
    return {
        "start": point.label,
        "trace": point.trace,
        "kind": point.kind,
        "number": point.number,
        "status": point.status,
        "message": point.message,
        "distance": point.distance,
        "direction": dict(zip(margin.names, point.direction, strict=True)),
        "point": dict(zip(margin.names, point.parameters[indices], strict=True)),
        "shift": dict(zip(margin.names, shift, strict=True)),
        "state": dict(zip(model.states, point.state, strict=True))
        if model.size <= 20
        else {"norm": float(np.linalg.norm(point.state))},
        "frequency": point.frequency,
        "same_as": point.same_as,
        "residual_history": list(point.residual_norms),
    }
