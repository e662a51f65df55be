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


if __name__ == "__main__":
    from branchline.problems import hopf_curve

    hopf_steps = StepSettings(0.05, 1e-8, 1.0, 2000)
    sparse = hopf_curve.LYAPUNOV_EVERY
    hopf_curve.LYAPUNOV_EVERY = 1
    measure("Lorenz, 3 states, Hopf curve, l1 at every point", lorenz, hopf_steps)
    hopf_curve.LYAPUNOV_EVERY = sparse
    measure(f"Lorenz, 3 states, Hopf curve, l1 at every {sparse}th point", lorenz, hopf_steps)
    measure("chain, 100 states, fold curve", chain, StepSettings(0.05, 1e-8, 0.5, 2000))
