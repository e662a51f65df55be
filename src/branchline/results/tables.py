"""Result records -> pandas tables and JSON-ready dicts (the contract's columns)."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from branchline import __version__
from branchline.problems.equilibrium_branch import stability_columns
from branchline.results.records import Branch, Event, RunResult
from branchline.results.search_records import root_trace_name
from branchline.results.search_tables import found_by, search_entry

# Models with more states than this put `norm` in the tables instead of every
# state (the contract); full state vectors then go to states.npz.
MAX_STATE_COLUMNS = 20


def varying_parameters(result: RunResult) -> list[str]:
    """Parameters that vary anywhere in the scan: continuation parameters and
    any parameter a trace overrides, in the model's parameter order."""
    names = {spec.vary for spec in result.scan.traces}
    for spec in result.scan.traces:
        names.update(spec.set)
    names.update(spec.second for spec in getattr(result.scan, "boundaries", ()))
    return [name for name in result.model.parameters if name in names]


def wide_states(result: RunResult) -> bool:
    """True when states go to states.npz instead of points.csv columns."""
    return result.model.size > MAX_STATE_COLUMNS


def _observable_rows(result: RunResult, states: np.ndarray, params: np.ndarray) -> dict:
    names = result.model.observable_names
    if not names:
        return {}
    columns = {name: np.empty(len(states)) for name in names}
    for row, (x, p) in enumerate(zip(states, params)):
        try:
            values = result.model.observables(x, p)
        except (ArithmeticError, ValueError):  # a failing observable is a gap, not a crash
            values = {}
        for name in names:
            columns[name][row] = float(values.get(name, np.nan))
    return columns


def _parameter_rows(result: RunResult, branch: Branch, values: np.ndarray) -> np.ndarray:
    params = np.tile(branch.parameters, (len(values), 1))
    params[:, result.model.parameter_index(branch.vary)] = values
    return params


def _state_columns(result: RunResult, states: np.ndarray) -> dict:
    if wide_states(result):
        return {"norm": np.linalg.norm(states, axis=1)}
    return {name: states[:, i] for i, name in enumerate(result.model.states)}


def branch_frame(result: RunResult, branch: Branch) -> pd.DataFrame:
    """The points.csv rows of one branch, in trace order."""
    k = len(branch)
    params = _parameter_rows(result, branch, branch.parameter_values)
    columns: dict[str, Any] = {
        "trace": [branch.name] * k,
        "step": np.arange(k),
        "arclength": branch.arclength,
    }
    for name in varying_parameters(result):
        columns[name] = params[:, result.model.parameter_index(name)]
    columns.update(_state_columns(result, branch.states))
    columns.update(_observable_rows(result, branch.states, params))
    columns.update(stability_columns(branch))
    return pd.DataFrame(columns)


def points_frame(result: RunResult) -> pd.DataFrame:
    """points.csv: one row per computed equilibrium, traces in run order."""
    frames = [branch_frame(result, branch) for branch in result.branches]
    if not frames:
        return pd.DataFrame(columns=["trace", "step", "arclength"])
    return pd.concat(frames, ignore_index=True)


def _optional(value):
    return None if value is None else float(value)


def events_frame(result: RunResult) -> pd.DataFrame:
    """events.csv: one row per located stability change, in trace order."""
    varying = varying_parameters(result)
    rows = []
    for event in result.events:
        row: dict[str, Any] = {"trace": event.trace, "kind": event.kind}
        for name in varying:
            row[name] = float(event.parameters[result.model.parameter_index(name)])
        row.update(
            {k: float(v[0]) for k, v in _state_columns(result, event.state[None, :]).items()}
        )
        if result.model.observable_names:
            try:
                values = result.model.observables(event.state, event.parameters)
            except (ArithmeticError, ValueError):
                values = {}
            row.update(
                {name: float(values.get(name, np.nan)) for name in result.model.observable_names}
            )
        row["frequency"] = _optional(event.frequency)
        row["period"] = _optional(event.period)
        row["lyapunov"] = _optional(event.lyapunov)
        row["fold_coefficient"] = _optional(event.fold_coefficient)
        row["criticality"] = event.criticality or ""
        row["branching"] = event.branching or ""
        row["note"] = event.note
        rows.append(row)
    columns = ["trace", "kind", *varying]
    columns += ["norm"] if wide_states(result) else list(result.model.states)
    columns += [*result.model.observable_names]
    columns += ["frequency", "period", "lyapunov", "criticality", "fold_coefficient"]
    columns += ["branching", "note"]
    return pd.DataFrame(rows, columns=columns)


def _jsonable(value):
    """Numpy scalars/arrays and complex numbers -> plain JSON types."""
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return _jsonable(value.tolist())
    if isinstance(value, (complex, np.complexfloating)):
        return [float(value.real), float(value.imag)]
    if isinstance(value, (np.floating, float)):
        value = float(value)
        return value if np.isfinite(value) else None
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.bool_):
        return bool(value)
    return value


def event_record(result: RunResult, event: Event) -> dict[str, Any]:
    """One events.json entry: the event with full detail."""
    model = result.model
    return _jsonable(
        {
            "trace": event.trace,
            "kind": event.kind,
            "vary": event.vary,
            "value": event.value,
            "state": dict(zip(model.states, event.state)),
            "parameters": dict(zip(model.parameters, event.parameters)),
            "arclength": event.arclength,
            "frequency": event.frequency,
            "period": event.period,
            "lyapunov": event.lyapunov,
            "criticality": event.criticality,
            "branching": event.branching,
            "fold_coefficient": event.fold_coefficient,
            "note": event.note,
            "details": event.details,
        }
    )


def event_records(result: RunResult) -> list[dict[str, Any]]:
    """events.json entries, one JSON-ready dict per event in trace order."""
    return [event_record(result, event) for event in result.events]


def _steps_dict(steps) -> dict[str, Any]:
    return {
        "initial": steps.initial,
        "smallest": steps.smallest,
        "largest": steps.largest,
        "max_points": steps.max_points,
    }


def _trace_entry(result: RunResult, branch: Branch) -> dict[str, Any]:
    # a branch found by a search (<trace>#k) keeps its trace's settings
    spec = next((s for s in result.scan.traces if s.name == root_trace_name(branch.name)), None)
    if spec is not None and branch.parent:
        spec = None  # switched branches: no settings of their own
    start = int(np.argmin(np.abs(branch.arclength))) if len(branch) else None
    entry = {
        "name": branch.name,
        "vary": branch.vary,
        "interval": list(branch.interval),
        "set": dict(spec.set) if spec else {},
        "direction": spec.direction if spec else "both",
        "start": (spec.start if isinstance(spec.start, str) else dict(spec.start))
        if spec
        else None,
        "steps": _steps_dict(spec.steps) if spec else None,
        "switch_branches": spec.switch_branches if spec else False,
        "limits": _limits_of(result, branch),
        "parent": branch.parent,
        **_curve_name(branch),
        "status": branch.status,
        "message": branch.message,
        "points": len(branch),
        "start_value": float(branch.parameter_values[start]) if start is not None else None,
        "counts": dict(branch.counts),
        **found_by(result, branch.name),
    }
    return _jsonable(entry)


def _curve_name(branch: Branch) -> dict[str, str]:
    """``{"curve_name": name}`` for a half of a switched branch named in the scan
    (``<parent>.<name>.<k>``, see ``branch_names``), else nothing."""
    if not branch.parent or not branch.name.startswith(branch.parent + "."):
        return {}
    middle, _, number = branch.name[len(branch.parent) + 1 :].rpartition(".")
    return {"curve_name": middle} if middle and number.isdigit() else {}


def _limits_of(result: RunResult, branch: Branch) -> dict[str, list[float]]:
    """The state limits of a branch: its trace's, inherited by branches started at branch points."""
    root = root_trace_name(branch.name)  # children are <trace>.k, found ones <trace>#k
    spec = next((s for s in result.scan.traces if s.name == root), None)
    limits = getattr(spec, "limits", None) or {}
    return {name: [float(lo), float(hi)] for name, (lo, hi) in limits.items()}


def model_info(result: RunResult) -> dict[str, Any]:
    """run.json's model entry: kind, names, defaults, equations and whether derivatives are exact."""
    model = result.model
    return _jsonable(
        {
            "kind": "python" if model.python_source else "expressions",
            "states": list(model.states),
            "parameters": dict(zip(model.parameters, model.defaults)),
            "equations": dict(model.equations or {}),
            "definitions": dict(model.definitions or {}),
            "observables": list(model.observable_names),
            "python_source": model.python_source,
            "exact_derivatives": model.exact_derivatives,
        }
    )


def _confirmations(result: RunResult) -> dict[str, Any] | None:
    if not result.confirmations and not result.confirmation_note:
        return None
    from branchline.present.confirmations import confirmation_info

    return confirmation_info(result.confirmations, result.confirmation_note)


def _boundaries_entry(result: RunResult) -> dict[str, Any]:
    """run.json's ``boundaries`` key, present when the scan has any ``[[boundary]]``."""
    if not getattr(result.scan, "boundaries", ()):
        return {}
    from branchline.results.boundary_tables import boundary_entries

    return {"boundaries": boundary_entries(result)}


def _robust_margin_entry(result: RunResult) -> dict[str, Any]:
    """run.json's ``stability_maps`` (with boundaries) and ``robust_margin`` (with
    ``[robust_margin]``) keys."""
    out: dict[str, Any] = {}
    if getattr(result, "stability_maps", ()):
        from branchline.results.stability_map_tables import stability_map_entries

        out["stability_maps"] = stability_map_entries(result)
    if getattr(result, "robust_margin", None) is not None:
        from branchline.results.robust_margin_tables import robust_margin_entry

        out.update(robust_margin_entry(result))
    return out


def run_info(result: RunResult) -> dict[str, Any]:
    """run.json: package version, settings with defaults filled in, timings, counts."""
    counts: dict[str, int] = {}
    for branch in result.branches:
        for key, value in branch.counts.items():
            counts[key] = counts.get(key, 0) + int(value)
    return _jsonable(
        {
            "branchline_version": __version__,
            "scan": result.scan.source,
            "title": result.scan.title,
            "model": model_info(result),
            "steps": _steps_dict(result.scan.steps),
            "traces": [_trace_entry(result, branch) for branch in result.branches],
            **_boundaries_entry(result),
            **_robust_margin_entry(result),
            "status": result.status,
            "message": result.message,
            "warnings": list(result.warnings),
            "confirmations": _confirmations(result),
            "timings": dict(result.timings),
            "searches": [search_entry(record) for record in result.searches],
            "counts": {
                "traces": len(result.branches),
                "points": sum(len(b) for b in result.branches),
                "events": len(result.events),
                **counts,
            },
            **_cycles_info(result),
        }
    )


def _cycles_info(result: RunResult) -> dict[str, Any]:
    """run.json's ``cycles`` entry, only when the scan has [[cycles]]."""
    if not result.cycles:
        return {}
    from branchline.results.cycle_tables import cycle_entries

    return {"cycles": cycle_entries(result)}
