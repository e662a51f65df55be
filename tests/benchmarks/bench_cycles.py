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

Large models::

    python3 tests/benchmarks/bench_cycles.py --large

A chain of Brusselator cells (tests/sparse_chain.py, a Python model with a
sparse Jacobian) standing for a line of unit length with diffusion
``LINE_DIFFUSION`` (coupling d = D c^2 for c cells, so the slow modes, and
with them the leading Floquet multipliers, do not depend on the size), at
100, 1,000 and 2,000 states (2,000 only when the machine has
``LARGE_MEMORY_GB`` available), followed from its uniform Hopf point for
``LARGE_ORBITS`` orbits on 40 x 4 points, each size in its own process (its
peak memory is its own). Printed per size: CPU seconds per orbit, the same as
a multiple of one sparse LU (SuperLU) of the bordered collocation matrix (the
plain baseline, timed in the same process), the Floquet step alone (one
factorization of the cut-open system plus Arnoldi) in the same units, and at
100 states the ratio to the dense-block path (the collocation blocks as dense
(N, m, n, m + 1, n) arrays and the dense monodromy matrix: the path below the
policy's thresholds), infeasible at 1,000 states (6.4 GB of blocks).
"""

from __future__ import annotations

import json
import resource
import subprocess
import sys
import time
from dataclasses import replace
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "src"))
sys.path.insert(0, str(ROOT / "tests"))

import scipy.sparse as sp  # noqa: E402
import scipy.sparse.linalg as spla  # noqa: E402

from branchline.numerics import linalg  # noqa: E402
from branchline.numerics.policy import DEFAULT  # noqa: E402
from branchline.problems.cycle_family import corrected_start, hopf_start, trace_cycles  # noqa: E402
from branchline.runner import run_scan  # noqa: E402
from branchline.scan.loader import StepSettings, scan_from_dict  # noqa: E402
from sparse_chain import chain_model, uniform_hopf  # noqa: E402

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


LARGE_SIZES = (100, 1000, 2000)
LARGE_ORBITS = 4
LINE_DIFFUSION = 0.002
LARGE_MEMORY_GB = 10.0
LARGE_WINDOW = (1.9, 2.5)
DENSE_BLOCKS = replace(DEFAULT, cycle_blocks_dense_up_to=10**9, floquet_dense_up_to=10**9)


def large_run(states: int, dense_blocks: bool) -> dict:
    """One size, one path: seconds per orbit, one LU, the Floquet step, peak memory."""
    cells = states // 2
    policy = DENSE_BLOCKS if dense_blocks else DEFAULT
    model = chain_model(cells, 2.0, LINE_DIFFUSION * cells**2, 0.0, policy)
    hopf = uniform_hopf(model, cells)
    steps = StepSettings(initial=0.5, smallest=1e-8, largest=5.0, max_points=LARGE_ORBITS)
    started = time.process_time()
    family = trace_cycles(model, "bench", hopf, LARGE_WINDOW, steps, intervals=INTERVALS)
    per_orbit = (time.process_time() - started) / max(len(family), 1)
    # the baseline: one sparse LU of the bordered collocation matrix at the first orbit
    problem, guess, direction = hopf_start(model, hopf, LARGE_WINDOW, INTERVALS, POINTS, 0.5)
    u, _ = corrected_start(problem, guess, direction)
    _, jacobian = problem.evaluate(u)
    square = sp.csc_matrix(linalg.append_row(sp.csc_matrix(jacobian), direction))
    started = time.process_time()
    spla.splu(square)
    one_lu = time.process_time() - started
    result = {"states": states, "dense_blocks": dense_blocks, "orbits": len(family)}
    result.update(status=family.status, per_orbit=per_orbit, one_lu=one_lu)
    if problem.sparse_floquet:
        started = time.process_time()
        floquet = problem.leading_floquet(u, jacobian)
        result["floquet"] = time.process_time() - started
        result["products"] = floquet.products
        result["multipliers"] = [round(abs(z), 6) for z in floquet.multipliers[:4]]
    result["peak_gb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1e6
    return result


def _available_gb() -> float:
    for line in Path("/proc/meminfo").read_text().splitlines():
        if line.startswith("MemAvailable:"):
            return int(line.split()[1]) / 1e6
    return 0.0


def _in_process(states: int, dense_blocks: bool) -> dict | None:
    command = [sys.executable, __file__, "--large-one", str(states), str(int(dense_blocks))]
    done = subprocess.run(command, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        print(f"  {states} states: the run failed: {done.stderr.strip().splitlines()[-1:]}")
        return None
    return json.loads(done.stdout.strip().splitlines()[-1])


def main_large() -> None:
    print(
        f"Brusselator chain, line diffusion {LINE_DIFFUSION}, {INTERVALS} intervals x {POINTS}"
        f" points, {LARGE_ORBITS} orbits; CPU seconds"
    )
    header = "states  path          s/orbit  one LU  orbit/LU  Floquet/LU  products  peak GB"
    print(header)
    for states in LARGE_SIZES:
        if states >= 2000 and _available_gb() < LARGE_MEMORY_GB:
            print(f"{states:6d}  skipped: less than {LARGE_MEMORY_GB:g} GB available")
            continue
        sparse = _in_process(states, False)
        if sparse is None:
            continue
        floquet = sparse.get("floquet", float("nan")) / sparse["one_lu"]
        print(
            f"{states:6d}  sparse      {sparse['per_orbit']:9.2f}  {sparse['one_lu']:6.2f}"
            f"  {sparse['per_orbit'] / sparse['one_lu']:8.2f}  {floquet:10.2f}"
            f"  {sparse.get('products', 0):8d}  {sparse['peak_gb']:7.2f}"
            f"   ({sparse['orbits']} orbits, {sparse['status']}; |mu| {sparse.get('multipliers')})"
        )
        blocks_gb = INTERVALS * POINTS * (POINTS + 1) * states**2 * 8 / 1e9
        if blocks_gb > 1.0:
            print(f"{states:6d}  dense blocks  infeasible ({blocks_gb:.1f} GB of blocks)")
            continue
        dense = _in_process(states, True)
        if dense is not None:
            print(
                f"{states:6d}  dense blocks{dense['per_orbit']:9.2f}  {dense['one_lu']:6.2f}"
                f"  {dense['per_orbit'] / dense['one_lu']:8.2f}  {'':10}  {'':8}"
                f"  {dense['peak_gb']:7.2f}   sparse / dense time per orbit: "
                f"{sparse['per_orbit'] / dense['per_orbit']:.3f}"
            )


if __name__ == "__main__":
    if len(sys.argv) == 4 and sys.argv[1] == "--large-one":
        print(json.dumps(large_run(int(sys.argv[2]), bool(int(sys.argv[3])))))
    elif len(sys.argv) == 2 and sys.argv[1] == "--large":
        main_large()
    else:
        main()
