"""Leading eigenvalues of large sparse Jacobians: cost per point against dense LAPACK.

Run by hand (not collected by pytest)::

    python3 tests/benchmarks/bench_sparse.py

The model is the 1-D Brusselator with no-flux ends of tests/test_sparse_eigen.py
(Prigogine & Lefever 1968), d1 = 0.001, d2 = 0.002, a = 1, at 200 and 1000
nodes (400 and 2000 states): a clustered spectrum near +-i, where shift-invert
Arnoldi at the origin alone misses the rightmost pair. It prints, in one run,

- seconds per call of ``eigenvalues.search_leading_eigenvalues`` (the multi-shift
  search the engine runs at every point of a large sparse model), over
  Jacobians at several b, and its largest error against the exact mode
  eigenvalues;
- the plain baseline: all eigenvalues of the same matrix by dense LAPACK
  (``numpy.linalg.eigvals`` of the densified matrix), and its ratio;
- one shift-invert Arnoldi run at the origin (the former method) for scale;
- seconds per point of a whole trace in b through the uniform state's Hopf
  point (``trace_branch``), and the share spent on eigenvalues (tracked from
  point to point, the full search as fallback).

Each time is the best of ``REPEATS`` runs (shared machine).

Then the large runs, each in its own process (``--large STATES``, so that its
peak memory is its own): the same model at 20,000 and 100,000 states traced
over b in [1.95, 2.02] in about ``LARGE_POINTS`` points with stability at every
point, and its Hopf point located (``--large STATES POINTS`` caps the points).
Printed, in CPU seconds of that process: seconds per traced point divided by
the seconds of one sparse LU of the Jacobian (SuperLU, the plain baseline, timed
in the same process, the least of ``LU_REPEATS`` runs before and after the
trace; goal under 6), the trace's and the location's seconds (goal
for both together at 20,000 states: under 60 s), how the Hopf point was placed
and its error against b = 1 + a^2, the eigenvalue work (tracked points and full
searches), and the peak resident memory (goal under 2 GB). A run that fails
(a MemoryError included) prints where. BLAS runs single-threaded there
(``SINGLE_THREAD``); run the whole file with OPENBLAS_NUM_THREADS=1 for the same
in the small-size table.
"""

from __future__ import annotations

import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "src"))
sys.path.insert(0, str(ROOT / "tests"))

import scipy.sparse.linalg as spla  # noqa: E402

from branchline.numerics import eigenvalues  # noqa: E402
from branchline.problems import equilibrium_branch  # noqa: E402
from branchline.scan.loader import StepSettings  # noqa: E402
from test_sparse_eigen import (  # noqa: E402
    D1,
    D2,
    A,
    brusselator_jacobian,
    brusselator_model,
    exact_leading,
    locate_events,
    trace_branch,
    trace_uniform_through_hopf,
    uniform_state,
)

REPEATS = 3
# Timings of the one sparse LU (the large runs' baseline): the least CPU time of this
# many, before and after the trace.
LU_REPEATS = 10
NODES = (200, 1000)
B_VALUES = (1.8, 1.95, 2.0, 2.05, 2.2)
LARGE_STATES = (20_000, 100_000)
LARGE_POINTS = 200
LARGE_INTERVAL = (1.95, 2.02)
# Address-space cap of a large run's process (bytes): far above the 2 GB goal
# for resident memory (libraries reserve virtual memory they never touch), far
# below what a dense N x N temporary at 100,000 states would need (80 GB).
LARGE_ADDRESS_CAP = 8 * 2**30
# BLAS threads of the large runs' processes: one. On this shared 2-core machine
# threaded BLAS inside ARPACK's reverse-communication loop was measured 10x
# slower (threads spinning against each other and other users' work).
SINGLE_THREAD = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}


def best(function, *args, repeats=REPEATS):
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        result = function(*args)
        times.append(time.perf_counter() - start)
    return min(times), result


def eigen_costs(nodes):
    search_time = dense_time = single_time = 0.0
    worst = 0.0
    for b in B_VALUES:
        params = {"a": A, "b": b, "d1": D1, "d2": D2}
        jacobian = brusselator_jacobian(uniform_state(nodes, b), params).tocsc()
        seconds, search = best(eigenvalues.search_leading_eigenvalues, jacobian, 6)
        search_time += seconds
        worst = max(worst, float(np.max(np.abs(search.values - exact_leading(nodes, b)))))
        seconds, _ = best(eigenvalues._shift_invert_run, jacobian, 0.0, 12, 1.0)
        single_time += seconds
        dense = jacobian.toarray()
        seconds, _ = best(np.linalg.eigvals, dense, repeats=1 if nodes > 500 else REPEATS)
        dense_time += seconds
    count = len(B_VALUES)
    return search_time / count, dense_time / count, single_time / count, worst


def trace_cost(nodes):
    model = brusselator_model(nodes, 1.97)
    calls = {"seconds": 0.0, "count": 0}
    track = equilibrium_branch.track_leading_eigenvalues

    def timed(matrix, previous, count=eigenvalues.SPARSE_EIGEN_COUNT, policy=eigenvalues.DEFAULT,
              determinant_sign=None):
        start = time.perf_counter()
        result = track(matrix, previous, count, policy, determinant_sign)
        calls["seconds"] += time.perf_counter() - start
        calls["count"] += 1
        return result

    equilibrium_branch.track_leading_eigenvalues = timed
    try:
        start = time.perf_counter()
        branch = trace_uniform_through_hopf(model, nodes)
        seconds = time.perf_counter() - start
    finally:
        equilibrium_branch.track_leading_eigenvalues = track
    return seconds / len(branch), calls["seconds"] / seconds, len(branch), branch.status


def cpu_best(function, *args, repeats=5):
    """Least CPU seconds of this process over ``repeats`` calls (BLAS is single-threaded
    here, so CPU time is the work done, whatever else the shared machine runs)."""
    times = []
    for _ in range(repeats):
        start = time.process_time()
        function(*args)
        times.append(time.process_time() - start)
    return min(times)


def large_run(states: int, points: int = LARGE_POINTS) -> dict:
    """One large trace and its event location, in this process (see the module docstring).

    Times are CPU seconds of this process (``time.process_time``), wall seconds beside.
    """
    resource.setrlimit(resource.RLIMIT_AS, (LARGE_ADDRESS_CAP, LARGE_ADDRESS_CAP))
    nodes = states // 2
    lo, hi = LARGE_INTERVAL
    model = brusselator_model(nodes, lo)
    params = {"a": A, "b": lo, "d1": D1, "d2": D2}
    jacobian = brusselator_jacobian(uniform_state(nodes, lo), params).tocsc()
    lu_seconds = cpu_best(spla.splu, jacobian, repeats=LU_REPEATS)
    # the branch is the uniform state: |d(x, b)/db| = sqrt(nodes / a^2 + 1)
    span = (hi - lo) * float(np.sqrt(nodes / A**2 + 1.0))
    step = span / (LARGE_POINTS - 1)
    steps = StepSettings(initial=step, largest=step, max_points=points)
    out: dict = {"states": states, "lu_seconds": lu_seconds}
    start, wall = time.process_time(), time.perf_counter()
    try:
        branch = trace_branch(
            model, "uniform", "b", model.defaults, uniform_state(nodes, lo), (lo, hi),
            "increasing", steps,
        )
        out["trace_seconds"] = time.process_time() - start
        out["trace_wall"] = time.perf_counter() - wall
        # the baseline again after the trace: the least of both is the LU's cost on
        # this shared machine (other users' work only ever slows it down)
        out["lu_seconds"] = min(lu_seconds, cpu_best(spla.splu, jacobian, repeats=LU_REPEATS))
        out["points"] = len(branch)
        out["status"] = str(branch.status)
        out["all_stability"] = bool(np.all(np.isfinite(branch.eigenvalues)))
        out["counts"] = {key: int(value) for key, value in branch.counts.items()}
        start, wall = time.process_time(), time.perf_counter()
        events = locate_events(model, branch)
        out["locate_seconds"] = time.process_time() - start
        out["locate_wall"] = time.perf_counter() - wall
        hopf = [event for event in events if event.kind == "hopf"]
        if hopf:
            out["hopf_error"] = abs(hopf[0].value - (1.0 + A * A))
            out["hopf_method"] = hopf[0].details.get("method", "")
            out["hopf_note"] = hopf[0].note
    except MemoryError as exc:
        out["failure"] = f"MemoryError after {time.process_time() - start:.1f} CPU s: {exc}"
    out["peak_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    return out


def print_large(out: dict) -> None:
    states = out["states"]
    if "trace_seconds" not in out:
        print(f"{states:>7} states: {out.get('failure', 'failed')}; peak {out['peak_mb']:.0f} MB")
        return
    per_point = out["trace_seconds"] / max(out["points"], 1)
    total = out["trace_seconds"] + out.get("locate_seconds", 0.0)
    print(
        f"{states:>7} states: LU {out['lu_seconds']:.4f} s, {out['points']} points "
        f"({out['status']}, stability at every point: {out['all_stability']}), "
        f"{per_point:.3f} s/point = {per_point / out['lu_seconds']:.1f} LU per point"
    )
    print(
        f"{'':>15} trace {out['trace_seconds']:.1f} s + location "
        f"{out.get('locate_seconds', float('nan')):.1f} s = {total:.1f} CPU s "
        f"(wall {out['trace_wall']:.1f} + {out.get('locate_wall', float('nan')):.1f} s); "
        f"peak memory {out['peak_mb']:.0f} MB"
    )
    if "hopf_error" in out:
        print(f"{'':>15} Hopf |b - (1 + a^2)| = {out['hopf_error']:.1e} by {out['hopf_method']}")
        if out["hopf_note"]:
            print(f"{'':>15} note: {out['hopf_note']}")
    else:
        print(f"{'':>15} no Hopf point located {out.get('failure', '')}")
    print(f"{'':>15} counts: {out['counts']}")


def main_large() -> None:
    print(f"\nlarge runs ({LARGE_POINTS} points over b in {LARGE_INTERVAL}, one process each):")
    for states in LARGE_STATES:
        done = subprocess.run(
            [sys.executable, __file__, "--large", str(states)],
            capture_output=True,
            text=True,
            env={**os.environ, **SINGLE_THREAD},
        )
        lines = [line for line in done.stdout.splitlines() if line.startswith("{")]
        if not lines:
            tail = (done.stderr or done.stdout).strip().splitlines()[-3:]
            print(f"{states:>7} states: the process failed (exit {done.returncode}): {tail}")
            continue
        print_large(json.loads(lines[-1]))


def main() -> None:
    header = (
        f"{'states':>6} {'search s':>9} {'dense s':>8} {'dense/search':>12} "
        f"{'1 run s':>8} {'max error':>9} | {'trace s/pt':>10} {'eig share':>9} {'points':>6}"
    )
    print(header)
    print("-" * len(header))
    for nodes in NODES:
        search_s, dense_s, single_s, worst = eigen_costs(nodes)
        per_point, share, points, status = trace_cost(nodes)
        print(
            f"{2 * nodes:>6} {search_s:>9.4f} {dense_s:>8.4f} {dense_s / search_s:>12.1f} "
            f"{single_s:>8.4f} {worst:>9.1e} | {per_point:>10.4f} {share:>9.0%} {points:>6}"
            + ("" if status == "done" else f"  ({status})")
        )


if __name__ == "__main__":
    if len(sys.argv) in (3, 4) and sys.argv[1] == "--large":
        print(json.dumps(large_run(*[int(value) for value in sys.argv[2:]])))
    elif len(sys.argv) == 2 and sys.argv[1] == "--large-only":
        main_large()
    else:
        main()
        main_large()
