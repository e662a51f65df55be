"""Cost per point of two-parameter boundaries, as a ratio to the equilibrium branch's.

Run by hand (not collected by pytest)::

    python3 tests/benchmarks/bench_boundaries.py

For each model it times, in the same run, the equilibrium branch through the
starting event (``trace_branch``: eigenvalues and test functions at every
point) and the boundary through it (``trace_boundary``: fold or Hopf curve,
eigenvalues and codimension-two test functions at every point, location of the
points found), and prints seconds per point of each and their ratio (the aim
is under 3). Times are CPU time of this process (``time.process_time``), best
of ``REPEATS`` runs, because the machine is shared.

The Hopf curve is measured twice: with l1 on its sparse schedule (every
``hopf_curve.LYAPUNOV_EVERY``-th point, sign changes narrowed afterwards) and,
for comparison in the same run, with l1 at every point (the former behaviour).

Models: the Lorenz equations (3 states; Hopf curve of the nontrivial
equilibria in (rho, sigma); Lorenz, "Deterministic nonperiodic flow", J. Atmos.
Sci. 20, 1963) and an invented chain of 100 states driven by the cusp normal
form (fold curve in (a, b)).

Large models (``--large``; each size in its own process, so that its peak memory
is its own): the Hopf curve of the reaction-diffusion Brusselator of
tests/test_sparse_eigen.py in (a, b) (the complex bordered system,
``problems/sparse_hopf_curve.py``; exact curve b = 1 + a^2, Prigogine & Lefever
1968) and the fold curve of a chain of cusp cells in (a, b)
(tests/boundary_models.py; exact curve 27 a^2 = 4 b^3), at 2,000 and 20,000
states. Printed: CPU seconds per curve point divided by the CPU seconds of one
sparse LU of the model's Jacobian at the start (SuperLU; the plain baseline,
timed in the same process, least of several runs before and after), the
largest error against the exact curve, the number of points and the peak
resident memory (``--large STATES`` runs one size; ``--large`` runs both in
subprocesses).
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "src"))

from branchline.model.build import build_model
from branchline.problems.boundary import trace_boundary
from branchline.problems.equilibrium_branch import locate_events, trace_branch
from branchline.scan.loader import ExpressionModelSpec, StepSettings

REPEATS = 3


def lorenz():
    spec = ExpressionModelSpec(
        parameters={"rho": 20.0, "sigma": 10.0, "beta": 8.0 / 3.0},
        equations={"x": "sigma*(y - x)", "y": "x*(rho - z) - y", "z": "x*y - beta*z"},
    )
    x = np.sqrt(8.0 / 3.0 * 19.0)
    return (
        build_model(spec),
        "rho",
        (1.5, 40.0),
        np.array([x, x, 19.0]),
        "hopf",
        "sigma",
        {
            "rho": (1.5, 60.0),
            "sigma": (5.0, 20.0),
        },
    )


def chain(size: int = 100):
    equations = {"x0": "a + b*x0 - x0^3"}
    for i in range(1, size):
        equations[f"x{i}"] = f"x{i - 1} - {1.0 + i / size}*x{i}"
    spec = ExpressionModelSpec(parameters={"a": 0.0, "b": 1.0}, equations=equations)
    start = np.array(
        [1.0 / np.prod([1.0 + j / size for j in range(1, i + 1)]) for i in range(size)]
    )
    return (
        build_model(spec),
        "a",
        (-1.0, 1.0),
        start,
        "fold",
        "b",
        {"a": (-1.0, 1.0), "b": (0.2, 2.0)},
    )


def best(function):
    times = []
    for _ in range(REPEATS):
        started = time.process_time()
        value = function()
        times.append(time.process_time() - started)
    return min(times), value


def measure(name, setup, steps):
    model, vary, interval, start, kind, second, window = setup()
    params = model.defaults.copy()

    def branch():
        return trace_branch(model, "t", vary, params, start, interval, "both", steps)

    branch_time, traced = best(branch)
    event = next(e for e in locate_events(model, traced) if e.kind == kind)

    def boundary():
        return trace_boundary(model, "b", event, second, window, steps)

    boundary_time, outcome = best(boundary)
    per_branch = branch_time / len(traced)
    per_boundary = boundary_time / len(outcome.boundary)
    print(
        f"{name}: branch {len(traced)} points, {per_branch * 1e3:.3f} ms/point; "
        f"{kind} curve {len(outcome.boundary)} points, {per_boundary * 1e3:.3f} ms/point; "
        f"ratio {per_boundary / per_branch:.2f} (codimension-two points: "
        f"{[e.kind for e in outcome.events]})"
    )


LARGE_SIZES = (2000, 20000)


def lu_seconds(matrix) -> float:
    import scipy.sparse.linalg as spla

    return min(best(lambda: spla.splu(matrix))[0] for _ in range(3))


def large_curves(states: int, kinds=("hopf", "fold")) -> dict:
    """The Hopf and fold curves of the large models at ``states`` states (this process)."""
    import resource


    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    from test_sparse_boundaries import python_model

    out: dict = {"states": states}
    if "hopf" in kinds:
        out["hopf"] = _large_hopf(states)
    if "fold" in kinds:
        out["fold"] = _large_fold(states, python_model)
    out["peak_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    return out


def _large_hopf(states: int) -> dict:
    import scipy.sparse as sps

    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    from test_sparse_boundaries import hopf_event
    from test_sparse_eigen import brusselator_model, uniform_state

    nodes = states // 2
    model = brusselator_model(nodes, 2.0)
    jacobian = sps.csc_matrix(model.jacobian(uniform_state(nodes, 2.0), model.defaults))
    lu = lu_seconds(jacobian)
    event = hopf_event(model, "b", 2.0, uniform_state(nodes, 2.0), 1.0)
    scale = float(np.sqrt(nodes))  # |du| per unit of a on the uniform state
    steps = StepSettings(0.05 * scale, 1e-8, 0.1 * scale, 2000)
    start = time.process_time()
    outcome = trace_boundary(model, "b", event, "a", {"b": (1.0, 5.0), "a": (0.5, 1.5)}, steps)
    seconds = time.process_time() - start
    lu = min(lu, lu_seconds(jacobian))
    curve = outcome.boundary
    a, b = curve.second_values, curve.first_values
    return {
        "points": len(a),
        "seconds": seconds,
        "lu_per_point": seconds / len(a) / lu,
        "error": float(np.max(np.abs(b - 1.0 - a * a))),
        "status": str(curve.status),
        "lu_seconds": lu,
    }


def _large_fold(states: int, python_model) -> dict:
    import scipy.sparse as sps

    from branchline.results.records import Event

    model = python_model({"a": 0.0, "b": 1.0, "d": 0.5}, "cusp_cells", states)
    x0 = 1.0 / np.sqrt(3.0)
    fold = Event(
        trace="line", kind="fold", vary="a", value=-2.0 * x0**3, state=np.full(states, x0),
        parameters=np.array([-2.0 * x0**3, 1.0, 0.5]), arclength=0.0,
    )
    jacobian = sps.csc_matrix(model.jacobian(fold.state, fold.parameters))
    lu = lu_seconds(jacobian)
    scale = float(np.sqrt(states))
    steps = StepSettings(0.05 * scale, 1e-8, 0.1 * scale, 2000)
    start = time.process_time()
    outcome = trace_boundary(model, "f", fold, "b", {"a": (-1.0, 1.0), "b": (-1.0, 2.0)}, steps)
    seconds = time.process_time() - start
    lu = min(lu, lu_seconds(jacobian))
    curve = outcome.boundary
    a, b = curve.first_values, curve.second_values
    return {
        "points": len(a),
        "seconds": seconds,
        "lu_per_point": seconds / len(a) / lu,
        "error": float(np.max(np.abs(27.0 * a * a - 4.0 * b**3))),
        "status": str(curve.status),
        "lu_seconds": lu,
        "events": [e.kind for e in outcome.events],
    }


def print_large(out: dict) -> None:
    for kind in ("hopf", "fold"):
        if kind not in out:
            continue
        row = out[kind]
        print(
            f"{out['states']} states, {kind} curve: {row['points']} points, "
            f"{row['seconds']:.1f} CPU s, {row['lu_per_point']:.1f} LU per point "
            f"(one LU {row['lu_seconds'] * 1e3:.2f} ms), error {row['error']:.1e}, "
            f"{row['status']}{', ' + str(row['events']) if row.get('events') else ''}"
        )
    print(f"{out['states']} states: peak memory {out['peak_mb']:.0f} MB")


if __name__ == "__main__" and "--large" in sys.argv:
    import json
    import os
    import subprocess

    os.environ["OPENBLAS_NUM_THREADS"] = "1"
    given = sys.argv[sys.argv.index("--large") + 1 :]
    if given:  # --large STATES [hopf|fold]
        print(json.dumps(large_curves(int(given[0]), tuple(given[1:]) or ("hopf", "fold"))))
    else:
        for size in LARGE_SIZES:
            done = subprocess.run(
                [sys.executable, __file__, "--large", str(size)],
                capture_output=True, text=True, env={**os.environ, "OPENBLAS_NUM_THREADS": "1"},
            )
            if done.returncode:
                print(f"{size} states failed: {done.stderr[-1500:]}")
                continue
            print_large(json.loads(done.stdout.splitlines()[-1]))
elif __name__ == "__main__":
    from branchline.problems import hopf_curve

    hopf_steps = StepSettings(0.05, 1e-8, 1.0, 2000)
    sparse = hopf_curve.LYAPUNOV_EVERY
    hopf_curve.LYAPUNOV_EVERY = 1
    measure("Lorenz, 3 states, Hopf curve, l1 at every point", lorenz, hopf_steps)
    hopf_curve.LYAPUNOV_EVERY = sparse
    measure(f"Lorenz, 3 states, Hopf curve, l1 at every {sparse}th point", lorenz, hopf_steps)
    measure("chain, 100 states, fold curve", chain, StepSettings(0.05, 1e-8, 0.5, 2000))
