"""Python models without a Jacobian: grouped differences (with a pattern) against dense ones.

Run by hand (not collected by pytest)::

    python3 tests/benchmarks/bench_python_model.py

The model is the 1-D Brusselator with no-flux ends of tests/test_sparse_eigen.py
(Prigogine & Lefever 1968; a = 1, d1 = 0.001, d2 = 0.002) at 1000 nodes, 2,000
states, given as a Python model without a Jacobian. It prints, in one run:

- seconds for one Jacobian by grouped central differences
  (``model.python.jacobian_pattern``: 2 calls of f per column group, Curtis,
  Powell & Reid 1974) against the plain baseline, the Jacobian by central
  differences column by column (2 calls of f per state, what a Python model
  without a Jacobian or a pattern gets), the ratio, and the calls of f each made;
- seconds per traced point of the uniform state's branch through its Hopf point
  (b in [1.97, 2.02], ``trace_uniform_through_hopf``) with the pattern, without
  it (the baseline), and with the exact sparse Jacobian for scale, and the error
  of each located Hopf point against b = 1 + a^2. The stability of every point
  (leading eigenvalues by shift-invert Arnoldi, the same for all three) is the
  same work with or without a pattern, so the time besides it is printed too.

Each Jacobian time is the best of ``REPEATS`` runs (shared machine); each trace
runs once.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "src"))
sys.path.insert(0, str(ROOT / "tests"))

from branchline.model.build import build_model  # noqa: E402
from branchline.problems import equilibrium_branch  # noqa: E402
from branchline.problems.equilibrium_branch import locate_events  # noqa: E402
from branchline.scan.loader import PythonModelSpec  # noqa: E402
from test_sparse_eigen import (  # noqa: E402
    D1,
    D2,
    A,
    trace_uniform_through_hopf,
    uniform_state,
)
from test_sparse_eigen import brusselator_rhs as plain_rhs  # noqa: E402

NODES = 1000  # 2,000 states
REPEATS = 3
PARAMETERS = {"a": A, "b": 1.97, "d1": D1, "d2": D2}


CALLS = [0]


def counting_rhs(x, p):
    """test_sparse_eigen's rhs, counting its calls (a model names it as this module's)."""
    CALLS[0] += 1
    return plain_rhs(x, p)


def model(**python):
    spec = PythonModelSpec(
        parameters=dict(PARAMETERS),
        rhs="bench_python_model:counting_rhs",
        size=2 * NODES,
        **python,
    )
    return build_model(spec, "bench.toml")


def best_jacobian(built, x):
    times = []
    for _ in range(REPEATS):
        CALLS[0] = 0
        start = time.perf_counter()
        built.jacobian(x, built.defaults)
        times.append(time.perf_counter() - start)
    return min(times), CALLS[0]


def trace(built):
    """Seconds per point in all, and without the eigenvalue work; calls of f; Hopf error."""
    CALLS[0] = 0
    eigen = [0.0]
    track = equilibrium_branch.track_leading_eigenvalues

    def timed(*args, **kwargs):
        start = time.perf_counter()
        try:
            return track(*args, **kwargs)
        finally:
            eigen[0] += time.perf_counter() - start

    equilibrium_branch.track_leading_eigenvalues = timed
    try:
        start = time.perf_counter()
        branch = trace_uniform_through_hopf(built, NODES)
        seconds = time.perf_counter() - start
    finally:
        equilibrium_branch.track_leading_eigenvalues = track
    points = len(branch)
    calls = CALLS[0]
    events = locate_events(built, branch)
    hopf = [e.value for e in events if e.kind == "hopf"]
    error = abs(hopf[0] - (1.0 + A * A)) if hopf else float("nan")
    return seconds / points, (seconds - eigen[0]) / points, points, calls / points, error, branch


def main() -> None:
    # the models import "bench_python_model": let that be this script, so its CALLS count
    sys.modules.setdefault("bench_python_model", sys.modules[__name__])
    pattern = "test_jacobian_pattern:brusselator_pattern"
    grouped = model(jacobian_pattern=pattern)
    dense = model()
    exact = model(jacobian="test_sparse_eigen:brusselator_jacobian")
    x = uniform_state(NODES, 1.97) + 0.01 * np.sin(np.arange(2 * NODES))
    grouped_seconds, grouped_calls = best_jacobian(grouped, x)
    dense_seconds, dense_calls = best_jacobian(dense, x)
    groups = grouped.jacobian_pattern.groups.count
    print(f"Brusselator chain, {2 * NODES} states, Python model without a Jacobian")
    print(
        f"one Jacobian, grouped differences ({groups} groups): {grouped_seconds:.4f} s, "
        f"{grouped_calls} calls of f"
    )
    print(
        f"one Jacobian, dense differences (baseline):    {dense_seconds:.4f} s, "
        f"{dense_calls} calls of f"
    )
    print(f"ratio grouped / dense: {grouped_seconds / dense_seconds:.4f}")
    print()
    print("trace through the Hopf point, b in [1.97, 2.02]:")
    rows = [("with the pattern", grouped), ("without (baseline)", dense), ("exact Jacobian", exact)]
    per_point, besides = {}, {}
    for label, built in rows:
        seconds, other, points, calls, error, branch = trace(built)
        per_point[label], besides[label] = seconds, other
        print(
            f"  {label:<20} {seconds:.4f} s per point, {other:.4f} s of it besides the "
            f"eigenvalues ({points} points, {branch.status}), {calls:.0f} calls of f per "
            f"point, Hopf error {error:.1e}"
        )
    baseline = "without (baseline)"
    ratio = per_point["with the pattern"] / per_point[baseline]
    print(f"ratio per point, pattern / no pattern: {ratio:.4f}")
    ratio = besides["with the pattern"] / besides[baseline]
    print(f"ratio per point besides the eigenvalues, pattern / no pattern: {ratio:.4f}")


if __name__ == "__main__":
    main()
