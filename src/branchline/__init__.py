"""branchline: follow equilibria of ODE models through a parameter, and locate,
classify and report where their stability changes.

The public API, for scripts and notebooks::

    import branchline
    scan = branchline.load_scan("scans/harvested_stock.toml")   # or scan_from_dict({...})
    result = branchline.run_scan(scan)                          # a RunResult record
    result.points_frame(), result.events_frame()                # pandas tables
    result.figure(); print(result.report())
    branchline.write_results(result, "runs/stock")              # the results folder
    saved = branchline.read_results("runs/stock")               # read back
    batch = branchline.run_batch(["grid.toml"], "runs/grid")     # ensembles: .members, .events

Names are imported lazily so that ``import branchline`` stays fast.
"""

from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.1.0"

_EXPORTS = {
    "load_scan": "branchline.scan.loader",
    "scan_from_dict": "branchline.scan.loader",
    "Scan": "branchline.scan.loader",
    "ScanError": "branchline.errors",
    "build_model": "branchline.model.build",
    "Model": "branchline.model.build",
    "run_scan": "branchline.runner",
    "run": "branchline.api",
    "run_batch": "branchline.batch.execute",
    "read_batch": "branchline.batch.execute",
    "BatchResult": "branchline.batch.execute",
    "write_results": "branchline.results.writers",
    "read_results": "branchline.results.writers",
    "SavedRun": "branchline.results.writers",
    "RunResult": "branchline.results.records",
    "Branch": "branchline.results.records",
    "Event": "branchline.results.records",
    "solve_equilibrium": "branchline.problems.equilibrium",
    "linearize": "branchline.problems.equilibrium",
    "render_report": "branchline.present.report",
    "bifurcation_figure": "branchline.present.plotting",
    "phase_portrait": "branchline.api",
    "compute_portrait": "branchline.portrait.build",
    "portrait_figure": "branchline.present.portrait",
    "write_portrait": "branchline.present.portrait",
    "confirm_events": "branchline.simulation.confirm",
    "Confirmation": "branchline.simulation.records",
}

__all__ = [*sorted(_EXPORTS), "__version__"]


def __getattr__(name: str) -> Any:
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'branchline' has no attribute {name!r}")
    return getattr(importlib.import_module(module), name)


def __dir__() -> list[str]:
    return __all__
