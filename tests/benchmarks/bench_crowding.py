"""Extra cost of the finer event detection (issue 15), as ratios to the plain detection.

Run by hand (not collected by pytest)::

    python3 tests/benchmarks/bench_crowding.py

Each case is run whole (``run_scan``: trace, refinement of crowded steps, location,
branch switching) twice in this process: as branchline does it, and with the
finer detection switched off (no splitting of crowded steps, no check of the
stretch next to a branch point): the plain detection that came before. It prints
the best of ``REPEATS`` wall times of each, their ratio, the points added by
refinement and the events each way. Cases: the four demo scans, a chain of 20
cubic bistable cells whose 38 branch points crowd beside its two folds, and the
20-cell Brusselator chain whose Hopf points crowd within 0.016 of b = 2 (models
of tests/cell_chains.py; switching off for the chains).
"""

from __future__ import annotations

import sys
import time
from contextlib import contextmanager
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "src"))
sys.path.insert(0, str(ROOT / "tests"))

import numpy as np  # noqa: E402

from branchline import runner  # noqa: E402
from branchline.problems import switching  # noqa: E402
from branchline.scan.loader import load_scan, scan_from_dict  # noqa: E402
from cell_chains import brusselator_equations, cubic_equations  # noqa: E402

REPEATS = 3


@contextmanager
def plain_detection():
    """Switch the finer detection off: crowded steps are not split, gaps not checked."""
    saved = runner.resolve_crowded_steps, switching.near_point
    runner.resolve_crowded_steps = lambda model, branch: branch
    switching.near_point = lambda *args: None
    try:
        yield
    finally:
        runner.resolve_crowded_steps, switching.near_point = saved


def cubic_chain(cells: int = 20, d: float = 1e-3) -> dict:
    lower = min(r.real for r in np.roots([-1.0, 0.0, 1.0, -0.5]) if abs(r.imag) < 1e-12)
    trace = {"vary": "p", "interval": [-0.5, 0.5], "direction": "increasing"}
    trace.update(start={f"x{i}": lower for i in range(cells)}, switch_branches=False)
    model = {"parameters": {"p": -0.5, "d": d}, "equations": cubic_equations(cells)}
    return {"model": model, "trace": [trace]}


def brusselator_chain(cells: int = 20, d: float = 0.002) -> dict:
    start = {}
    for i in range(cells):
        start.update({f"u{i}": 1.0, f"v{i}": 1.9})
    trace = {"vary": "b", "interval": [1.9, 2.1], "direction": "increasing"}
    trace.update(start=start, switch_branches=False)
    model = {"parameters": {"a": 1.0, "b": 1.9, "d": d}, "equations": brusselator_equations(cells)}
    return {"model": model, "trace": [trace]}


def cases():
    for path in sorted((ROOT / "scans").glob("*.toml")):
        yield path.stem, load_scan(path)
    yield "cubic chain (20 cells)", scan_from_dict(cubic_chain())
    yield "Brusselator chain (20 cells)", scan_from_dict(brusselator_chain())


def best_run(scan):
    best, result = float("inf"), None
    for _ in range(REPEATS):
        started = time.perf_counter()
        result = runner.run_scan(scan)
        best = min(best, time.perf_counter() - started)
    return best, result


def main() -> None:
    print(f"{'case':30} {'plain s':>9} {'finer s':>9} {'ratio':>6} {'added':>6} events plain/finer")
    for name, scan in cases():
        runner.run_scan(scan)  # compile and warm caches once
        with plain_detection():
            plain, before = best_run(scan)
        finer, after = best_run(scan)
        added = sum(b.counts.get("refinement_points", 0) for b in after.branches)
        print(
            f"{name:30} {plain:9.3f} {finer:9.3f} {finer / plain:6.2f} {added:6d} "
            f"{len(before.events)}/{len(after.events)}"
        )


if __name__ == "__main__":
    main()
