"""Speed of equilibrium-branch tracing, against two plain baselines in the same run.

Run by hand (not collected by pytest)::

    python3 tests/benchmarks/bench_trace.py

For each model it prints accepted points per second and Newton iterations per
point of ``branchline.problems.equilibrium_branch.trace_branch`` (full Newton and chord
correctors; eigenvalues and test functions at every point), next to

(a) a bare numpy pseudo-arclength loop over the same compiled model functions
    (tangent predictor, full Newton on the bordered system, no eigenvalues, no
    test functions, no step control, no bookkeeping), and
(b) a plain ``scipy.optimize.root`` sweep (hybrid Powell method with the exact
    Jacobian, warm-started from the previous solution) over the same
    parameter range with the same number of points. A sweep cannot pass a
    turning point, so it only times the per-point cost.

Ratios above 1 mean branchline is faster. Times are CPU time of this process
(``time.process_time``), the best of ``REPEATS`` runs: the machine is shared,
and wall-clock figures swing with the load of other jobs.

The models are invented for the benchmark: a cooled stirred-tank reactor
with a first-order exothermic reaction in dimensionless form (2 states, two
folds and Hopf points on its branch) and a cascade of three such tanks (6 states).
"""

from __future__ import annotations

import math
import sys
import time
from pathlib import Path

import numpy as np
from scipy.optimize import root

sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "src"))

from branchline.problems.equilibrium_branch import trace_branch
from branchline.scan.loader import StepSettings

REPEATS = 5
# The project's speed target for a 2-state model with stability at every point.
TARGET_RATE = 10_000

TANK = {
    "parameters": {"Da": 0.0, "B": 14.0, "beta": 2.0},
    "equations": {
        "y": "-y + Da*(1 - y)*exp(T)",
        "T": "-T + B*Da*(1 - y)*exp(T) - beta*T",
    },
}

CASCADE = {
    "parameters": {"Da": 0.0, "B": 12.0, "beta": 2.0},
    "equations": {
        "y1": "-y1 + Da*(1 - y1)*exp(T1)",
        "T1": "-T1 + B*Da*(1 - y1)*exp(T1) - beta*T1",
        "y2": "y1 - y2 + Da*(1 - y2)*exp(T2)",
        "T2": "T1 - T2 + B*Da*(1 - y2)*exp(T2) - beta*T2",
        "y3": "y2 - y3 + Da*(1 - y3)*exp(T3)",
        "T3": "T2 - T3 + B*Da*(1 - y3)*exp(T3) - beta*T3",
    },
}


def build(definition):
    """The model through branchline.model.build.build_model (exact sympy derivatives)."""
    from branchline.model.build import build_model
    from branchline.scan.loader import ExpressionModelSpec

    return build_model(ExpressionModelSpec(**definition))


def time_trace(model, interval, steps, newton):
    best, branch = math.inf, None
    for _ in range(REPEATS):
        start = time.process_time()
        branch = trace_branch(
            model,
            "bench",
            "Da",
            model.defaults,
            np.zeros(len(model.states)),
            interval,
            "increasing",
            steps,
            newton=newton,
        )
        best = min(best, time.process_time() - start)
    iterations = branch.newton_iterations[1:].mean()
    return len(branch), len(branch) / best, iterations, branch


def bare_loop(model, count, step):
    """Pseudo-arclength without bookkeeping: predictor, full Newton, tangent; nothing else."""
    n = len(model.states)
    rhs, derivatives = model.rhs, model.derivatives
    p = model.defaults.copy()
    u = np.zeros(n + 1)
    t = np.zeros(n + 1)
    t[-1] = 1.0
    square = np.empty((n + 1, n + 1))
    e = np.zeros(n + 1)
    e[-1] = 1.0
    points = []
    iterations = 0
    for _ in range(count):
        v = u + step * t
        for _ in range(8):
            p[0] = v[-1]
            g = rhs(v[:-1], p)
            fx, fp = derivatives(v[:-1], p)
            square[:n, :n] = fx
            square[:n, n] = fp[:, 0]
            square[n] = t
            rhs_vector = np.append(g, 0.0)
            delta = np.linalg.solve(square, rhs_vector)
            v = v - delta
            iterations += 1
            # The engine's convergence test (tolerances.RESIDUAL_TOL, CORRECTOR_UPDATE_RTOL).
            if np.linalg.norm(delta) <= 1e-6 * (1.0 + np.linalg.norm(v)):
                p[0] = v[-1]
                if np.linalg.norm(rhs(v[:-1], p)) <= 1e-10:
                    break
        p[0] = v[-1]
        fx, fp = derivatives(v[:-1], p)
        square[:n, :n] = fx
        square[:n, n] = fp[:, 0]
        square[n] = t
        z = np.linalg.solve(square, e)
        t = z / np.linalg.norm(z)
        u = v
        points.append(u)
    return iterations / count


def time_bare(model, count, step):
    best = math.inf
    for _ in range(REPEATS):
        start = time.process_time()
        iterations = bare_loop(model, count, step)
        best = min(best, time.process_time() - start)
    return count / best, iterations


def time_scipy_sweep(model, lo, hi, count):
    n = len(model.states)
    p = model.defaults.copy()

    def fun(x, value):
        p[0] = value
        return model.rhs(x, p)

    def jac(x, value):
        p[0] = value
        return model.jacobian(x, p)

    best = math.inf
    for _ in range(REPEATS):
        x = np.zeros(n)
        start = time.process_time()
        for value in np.linspace(lo, hi, count):
            x = root(fun, x, args=(value,), jac=jac, method="hybr").x
        best = min(best, time.process_time() - start)
    return count / best


def report(title, model, interval, steps, bare_step):
    print(f"\n{title}: {len(model.states)} states, Da in {list(interval)}, steps {steps}")
    rows = []
    for newton in ("full", "chord"):
        points, rate, iterations, branch = time_trace(model, interval, steps, newton)
        rows.append((newton, points, rate, iterations, branch))
        print(
            f"  branchline ({newton:5s}): {points:6d} points, {rate:9.0f} points/s, "
            f"{iterations:.2f} Newton iterations/point, status {branch.status}"
        )
    points = rows[0][1]
    bare_rate, bare_iterations = time_bare(model, points, bare_step)
    print(
        f"  bare numpy loop     : {points:6d} points, {bare_rate:9.0f} points/s, "
        f"{bare_iterations:.2f} Newton iterations/point (no eigenvalues, no step control)"
    )
    sweep_rate = time_scipy_sweep(model, interval[0], interval[1], points)
    print(f"  scipy.optimize.root : {points:6d} points, {sweep_rate:9.0f} points/s (grid sweep)")
    if len(model.states) == 2:
        verdict = "met" if rows[0][2] >= TARGET_RATE else "NOT met"
        print(f"  target {TARGET_RATE} points/s (2 states, full Newton): {verdict}")
    for newton, _, rate, _, _ in rows:
        print(
            f"  ratio ({newton:5s})       : {rate / bare_rate:5.2f} x bare loop, "
            f"{rate / sweep_rate:5.2f} x scipy sweep"
        )


def main():
    tank = build(TANK)
    cascade = build(CASCADE)
    # Warm up the compiled functions and the LAPACK paths once.
    time_trace(tank, (0.0, 0.05), StepSettings(), "full")
    report("stirred tank", tank, (0.0, 0.5), StepSettings(largest=0.01, max_points=100_000), 0.01)
    report(
        "stirred tank, long branch",
        tank,
        (0.0, 50.0),
        StepSettings(largest=0.05, max_points=100_000),
        0.05,
    )
    report(
        "stirred tank, fine steps",
        tank,
        (0.0, 0.5),
        StepSettings(initial=0.001, largest=0.002, max_points=100_000),
        0.002,
    )
    report(
        "three-tank cascade",
        cascade,
        (0.0, 0.5),
        StepSettings(largest=0.01, max_points=100_000),
        0.01,
    )


if __name__ == "__main__":
    main()
