"""Boundary records -> boundaries.csv rows and run.json entries (the contract's columns)."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from branchline.results.records import Boundary, RunResult
from branchline.results.tables import (
    _jsonable,
    _observable_rows,
    _state_columns,
    varying_parameters,
    wide_states,
)


def boundary_parameter_rows(result: RunResult, boundary: Boundary) -> np.ndarray:
    """The full parameter vector of every row of a boundary, shape (k, m)."""
    model = result.model
    params = np.tile(boundary.parameters, (len(boundary), 1))
    params[:, model.parameter_index(boundary.first)] = boundary.first_values
    params[:, model.parameter_index(boundary.second)] = boundary.second_values
    return params


def boundary_frame(result: RunResult, boundary: Boundary) -> pd.DataFrame:
    """The boundaries.csv rows of one boundary, in boundary order."""
    k = len(boundary)
    params = boundary_parameter_rows(result, boundary)
    columns: dict[str, Any] = {
        "boundary": [boundary.name] * k,
        "kind": [boundary.kind] * k,
        "step": np.arange(k),
    }
    for name in varying_parameters(result):
        columns[name] = params[:, result.model.parameter_index(name)]
    columns.update(_state_columns(result, boundary.states))
    columns.update(_observable_rows(result, boundary.states, params))
    columns["frequency"] = boundary.frequency if boundary.kind == "hopf" else np.full(k, np.nan)
    return pd.DataFrame(columns)


def boundaries_frame(result: RunResult) -> pd.DataFrame:
    """boundaries.csv: one row per computed boundary point, boundaries in run order."""
    frames = [boundary_frame(result, b) for b in result.boundaries if len(b)]
    if frames:
        return pd.concat(frames, ignore_index=True)
    columns = ["boundary", "kind", "step", *varying_parameters(result)]
    columns += ["norm"] if wide_states(result) else list(result.model.states)
    return pd.DataFrame(columns=[*columns, *result.model.observable_names, "frequency"])


def boundary_entries(result: RunResult) -> list[dict[str, Any]]:
    """run.json's ``boundaries``: what each boundary was, how it ended, its extent."""
    entries = []
    for boundary in result.boundaries:
        entries.append(
            {
                "name": boundary.name,
                "kind": boundary.kind,
                "from": boundary.source,
                "parameters": [boundary.first, boundary.second],
                "status": boundary.status,
                "message": boundary.message,
                "points": len(boundary),
                "first_range": _range(boundary.first_values),
                "second_range": _range(boundary.second_values),
                "counts": dict(boundary.counts),
            }
        )
    return _jsonable(entries)


def _range(values: np.ndarray) -> list[float] | None:
    return [float(np.min(values)), float(np.max(values))] if len(values) else None
