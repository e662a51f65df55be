"""Search records -> ``search.csv`` and the ``searches`` entry of run.json.

``search.csv`` has one row per distinct equilibrium at each searched value:
``search`` (the scan-file trace that searched), the varying parameters under
their own names, the states (or ``norm`` for wide models), ``trace`` (the
branch the equilibrium lies on; empty when it was not traced), ``found_by_search``
(true: on no branch traced before the search at this value), ``in_box`` (inside
the search box), ``stable``, ``unstable_count``. The report and the diagram's
strip read the ``searches`` entry of run.json (what was covered, counts per value).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from branchline.problems.deflation import MAX_ROOTS, POWER, SAME_ROOT_RTOL, SHIFT

if TYPE_CHECKING:
    from branchline.results.records import RunResult
    from branchline.results.search_records import SearchRecord

SEARCH_COLUMNS = ("search", "trace", "found_by_search", "in_box", "stable", "unstable_count")


def search_frame(result: RunResult) -> pd.DataFrame:
    """search.csv as a DataFrame (empty, with its columns, when nothing was searched)."""
    from branchline.results.tables import varying_parameters, wide_states

    model = result.model
    varying = varying_parameters(result)
    state_columns = ["norm"] if wide_states(result) else list(model.states)
    columns = ["search", *varying, *state_columns, *SEARCH_COLUMNS[1:]]
    rows = []
    spec_of = {spec.name: spec for spec in result.scan.traces}
    for record in result.searches:
        parameters = model.parameter_vector(spec_of[record.trace].set)
        for searched in record.values:
            parameters[model.parameter_index(record.vary)] = searched.value
            for k, root in enumerate(searched.roots):
                row: dict[str, Any] = {"search": record.trace}
                row.update({name: parameters[model.parameter_index(name)] for name in varying})
                if wide_states(result):
                    row["norm"] = float(np.linalg.norm(root))
                else:
                    row.update(zip(model.states, map(float, root)))
                row["trace"] = searched.traces[k]
                row["found_by_search"] = bool(searched.new[k])
                row["in_box"] = bool(searched.in_box[k])
                row["stable"] = searched.unstable[k] == 0
                row["unstable_count"] = int(searched.unstable[k])
                rows.append(row)
    return pd.DataFrame(rows, columns=columns)


def search_entry(record: SearchRecord) -> dict[str, Any]:
    """One run.json ``searches`` entry: what was covered and what was found."""
    return {
        "trace": record.trace,
        "vary": record.vary,
        "box": {name: list(bounds) for name, bounds in record.box.items()},
        "samples": record.samples,
        "seed": record.seed,
        "method": "Newton's method with deflation from a scrambled Sobol sample",
        "deflation": {
            "power": POWER,
            "shift": SHIFT,
            "same_root_rtol": SAME_ROOT_RTOL,
            "max_roots": MAX_ROOTS,
        },
        "values": [
            {
                "value": v.value,
                "equilibria": v.count,
                "found_by_search": int(sum(n and b for n, b in zip(v.new, v.in_box))),
                "stable": int(sum(u == 0 and b for u, b in zip(v.unstable, v.in_box))),
                "outside_box": int(len(v.in_box) - sum(v.in_box)),
                "traces": sorted({t for t, b in zip(v.traces, v.in_box) if t and b}),
                "untraced": int(sum(1 for t, b in zip(v.traces, v.in_box) if b and not t)),
                "starts": v.starts,
                "newton_iterations": v.iterations,
                "seconds": v.seconds,
                "complete": v.complete,
            }
            for v in record.values
        ],
        "found": dict(record.found),
        "roots_outside_box": record.outside,
        "seconds": record.seconds,
    }


def found_by(result: RunResult, name: str) -> dict[str, Any]:
    """For a trace entry of run.json: the search that found it and where, if any."""
    for record in result.searches:
        if name in record.found:
            value = record.found[name]
            return {
                "found_by_search": record.trace,
                "found_at": value,
                "at_start_value": value == record.values[0].value,  # the scan's start value
                "direction": "both",  # found branches are traced to both sides
                "start": "search",  # from a root the search found, not the trace's guess
            }
    return {}


__all__ = ["SEARCH_COLUMNS", "found_by", "search_entry", "search_frame"]
