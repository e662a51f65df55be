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
  point (``trace_branch``), and the share spent on eigenvalues.

Each time is the best of ``REPEATS`` runs (shared machine).
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "src"))
sys.path.insert(0, str(ROOT / "tests"))

from branchline.numerics import eigenvalues  # noqa: E402
from branchline.problems import equilibrium_branch  # noqa: E402
from test_sparse_eigen import (  # noqa: E402
    D1,
    D2,
    A,
    brusselator_jacobian,
    brusselator_model,
    exact_leading,
    trace_uniform_through_hopf,
    uniform_state,
)

REPEATS = 3
NODES = (200, 1000)
B_VALUES = (1.8, 1.95, 2.0, 2.05, 2.2)


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
    search = equilibrium_branch.search_leading_eigenvalues

    def timed(matrix, count=eigenvalues.SPARSE_EIGEN_COUNT, policy=eigenvalues.DEFAULT):
        start = time.perf_counter()
        result = search(matrix, count, policy)
        calls["seconds"] += time.perf_counter() - start
        calls["count"] += 1
        return result

    equilibrium_branch.search_leading_eigenvalues = timed
    try:
        start = time.perf_counter()
        branch = trace_uniform_through_hopf(model, nodes)
        seconds = time.perf_counter() - start
    finally:
        equilibrium_branch.search_leading_eigenvalues = search
    return seconds / len(branch), calls["seconds"] / seconds, len(branch), branch.status


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
    main()
