"""Speed of periodic-orbit continuation: sparse against dense Jacobian assembly.

Run by hand (not collected by pytest)::

    python3 tests/benchmarks/bench_cycles.py

A 3-state model (the Hopf normal form with a decaying third state, z' = -z; an
exact test case, see tests/test_cycles.py) is followed from its Hopf point for
200 orbits at 50 mesh intervals and 4 Gauss-Legendre points per interval
(603 unknowns), once with the sparse Jacobian (SuperLU) and once with the same
entries assembled into a dense matrix (LAPACK): the dense run is the plain
baseline. Each family includes Floquet multipliers and test functions at every
orbit. Printed: orbits per second, seconds per 200-orbit family (target: under
10 s on a 2-core machine) and the ratio sparse / dense speed. Times are CPU time
of this process (``time.process_time``), best of ``REPEATS`` runs: the machine is
shared.
"""

from __future__ import annotations

import time

from branchline.problems.cycle_family import trace_cycles
from branchline.runner import run_scan
from branchline.scan.loader import StepSettings, scan_from_dict

REPEATS = 3
ORBITS = 200
INTERVALS = 50
POINTS = 4

SCAN = {
    "model": {
        "parameters": {"mu": -0.5},
        "equations": {
            "x": "mu*x - y - x*(x^2 + y^2)",
            "y": "x + mu*y - y*(x^2 + y^2)",
            "z": "-z + 0.1*x*y",
        },
    },
    "trace": [{"vary": "mu", "interval": [-1.0, 50.0], "start": {"x": 0, "y": 0, "z": 0}}],
}


def family_seconds(model, hopf, dense: bool) -> tuple[float, int]:
    steps = StepSettings(initial=0.01, smallest=1e-8, largest=0.05, max_points=ORBITS)
    best, count = float("inf"), 0
    for _ in range(REPEATS):
        started = time.process_time()
        family = trace_cycles(
            model,
            "bench",
            hopf,
            (-1.0, 50.0),
            steps,
            intervals=INTERVALS,
            degree=POINTS,
            dense=dense,
        )
        best = min(best, time.process_time() - started)
        count = len(family)
    return best, count


def main() -> None:
    result = run_scan(scan_from_dict(SCAN))
    hopf = next(e for e in result.events if e.kind == "hopf")
    sparse, count = family_seconds(result.model, hopf, dense=False)
    dense, count_dense = family_seconds(result.model, hopf, dense=True)
    print(f"3 states, {INTERVALS} intervals x {POINTS} points, {count} orbits per family")
    print(
        f"sparse assembly + SuperLU : {count / sparse:8.1f} orbits/s  ({sparse:.2f} s per family)"
    )
    print(
        f"dense assembly + LAPACK   : {count_dense / dense:8.1f} orbits/s  ({dense:.2f} s per family)"
    )
    print(f"ratio sparse / dense speed: {dense / sparse * count / count_dense:8.2f}")


if __name__ == "__main__":
    main()
