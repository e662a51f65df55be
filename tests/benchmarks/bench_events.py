"""Cost and accuracy of event detection and location, against a plain grid sweep.

Run by hand (not collected by pytest)::

    python3 tests/benchmarks/bench_events.py

For each reference case (a published model with a closed-form stability change)
it prints

- the share of the whole run spent on detection (the test functions evaluated
  at every point by the engine) and on location (``locate_events``: Newton on
  the defining systems plus normal forms),
- the relative error of the located parameter value against the exact one,

side by side with a plain baseline in the same run: a grid sweep in the
parameter with the same number of points as the traced branch (Newton in x
at each grid value, warm-started, eigenvalues at each point), which reports a
stability change at the midpoint between the two grid values where the count
of unstable eigenvalues changes (a fold: between the last converged value and
the first failure). Error ratios above 1 mean branchline is more accurate.
Each time is the best of ``REPEATS`` runs (shared machine).

Reference values: Brusselator Hopf b = 1 + a^2 (Prigogine & Lefever 1968);
Lorenz C+ Hopf r = sigma (sigma + b + 3)/(sigma - b - 1) (Strogatz, Nonlinear
Dynamics and Chaos, section 9.2); logistic harvesting fold h = 1/4
(elementary algebra); x' = p x - x^3 pitchfork p = 0 (Strogatz, section 3.4);
FitzHugh-Nagumo Hopf points (FitzHugh 1961) from trace = 0.
"""

from __future__ import annotations

import math
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "src"))

from branchline.model.build import build_model
from branchline.problems import equilibrium_branch
from branchline.scan.loader import ExpressionModelSpec, StepSettings

REPEATS = 5


def _fhn_hopf(a=0.7, b=0.8, eps=0.08):
    v = -math.sqrt(1.0 - eps * b)
    return v**3 / 3 - v + (v + a) / b


CASES = [
    {
        "name": "Brusselator Hopf (a = 2)",
        "equations": {"x": "a - (b + 1)*x + x^2*y", "y": "b*x - x^2*y"},
        "parameters": {"a": 2.0, "b": 2.0},
        "vary": "b",
        "start": [2.0, 1.0],
        "interval": (1.0, 8.0),
        "kind": "hopf",
        "exact": 5.0,
    },
    {
        "name": "Lorenz C+ Hopf",
        "equations": {"x": "sigma*(y - x)", "y": "r*x - y - x*z", "z": "x*y - b*z"},
        "parameters": {"sigma": 10.0, "r": 20.0, "b": 8.0 / 3.0},
        "vary": "r",
        "start": [8.0, 8.0, 20.0],
        "interval": (2.0, 30.0),
        "kind": "hopf",
        "exact": 470.0 / 19.0,
    },
    {
        "name": "FitzHugh-Nagumo first Hopf",
        "equations": {"v": "v - v^3/3 - w + I", "w": "eps*(v + a - b*w)"},
        "parameters": {"a": 0.7, "b": 0.8, "eps": 0.08, "I": 0.0},
        "vary": "I",
        "start": [-1.2, -0.6],
        "interval": (-1.0, 3.0),
        "kind": "hopf",
        "exact": _fhn_hopf(),
    },
    {
        "name": "harvesting fold",
        "equations": {"N": "N*(1 - N) - h"},
        "parameters": {"h": 0.0},
        "vary": "h",
        "start": [1.0],
        "interval": (0.0, 0.4),
        "kind": "fold",
        "exact": 0.25,
    },
    {
        "name": "pitchfork x' = p x - x^3",
        "equations": {"x": "p*x - x^3"},
        "parameters": {"p": -0.5},
        "vary": "p",
        "start": [0.0],
        "interval": (-0.5, 0.6),
        "kind": "branch_point",
        "exact": 0.0,
    },
]


def _timed_tests():
    """Wrap the engine's test functions to time them (detection cost)."""
    spent = [0.0]
    original = equilibrium_branch.equilibrium_tests

    def timed(*args):
        started = time.perf_counter()
        value = original(*args)
        spent[0] += time.perf_counter() - started
        return value

    return timed, spent, original


def run_branchline(model, case):
    k = model.parameter_index(case["vary"])
    params = model.parameter_vector()
    params[k] = case["parameters"][case["vary"]]
    timed, spent, original = _timed_tests()
    equilibrium_branch.equilibrium_tests = timed
    try:
        started = time.perf_counter()
        branch = equilibrium_branch.trace_branch(
            model,
            "b",
            case["vary"],
            params,
            np.array(case["start"], float),
            case["interval"],
            "both",
            StepSettings(),
        )
        traced = time.perf_counter()
        found = equilibrium_branch.locate_events(model, branch)
        located = time.perf_counter()
    finally:
        equilibrium_branch.equilibrium_tests = original
    total = located - started
    wanted = [e for e in found if e.kind == case["kind"]]
    error = min((abs(e.value - case["exact"]) for e in wanted), default=math.nan)
    return {
        "points": len(branch),
        "total": total,
        "detect": spent[0],
        "locate": located - traced,
        "error": error,
    }


def run_grid(model, case, points):
    k = model.parameter_index(case["vary"])
    hi = case["interval"][1]
    start_value = case["parameters"][case["vary"]]
    x = np.array(case["start"], float)
    params = model.parameter_vector()
    started = time.perf_counter()
    estimates = []
    # sweep up from the start value (the reference events lie above it)
    grid = np.linspace(start_value, hi, points)
    previous_unstable = None
    for index, value in enumerate(grid):
        params[k] = value
        for _ in range(50):
            step = np.linalg.solve(model.jacobian(x, params), -model.rhs(x, params))
            x = x + step
            if np.linalg.norm(step) <= 1e-12 * (1 + np.linalg.norm(x)):
                break
        if not np.all(np.isfinite(x)) or np.linalg.norm(model.rhs(x, params)) > 1e-8:
            if case["kind"] == "fold" and index > 0:
                estimates.append(0.5 * (grid[index - 1] + value))
            break
        unstable = int(np.count_nonzero(np.linalg.eigvals(model.jacobian(x, params)).real > 0))
        if previous_unstable is not None and unstable != previous_unstable:
            estimates.append(0.5 * (grid[index - 1] + value))
        previous_unstable = unstable
    elapsed = time.perf_counter() - started
    error = min((abs(v - case["exact"]) for v in estimates), default=math.nan)
    return {"total": elapsed, "error": error}


def best(function, *args):
    runs = [function(*args) for _ in range(REPEATS)]
    return min(runs, key=lambda r: r["total"])


def main() -> None:
    header = (
        f"{'case':28s} {'pts':>5s} {'total ms':>9s} {'detect %':>9s} {'us/pt':>6s} {'locate %':>9s} "
        f"{'error':>9s} | {'grid ms':>8s} {'grid error':>10s} {'error ratio':>11s}"
    )
    print(header)
    print("-" * len(header))
    for case in CASES:
        model = build_model(
            ExpressionModelSpec(parameters=case["parameters"], equations=case["equations"])
        )
        ours = best(run_branchline, model, case)
        grid = best(run_grid, model, case, ours["points"])
        scale = max(abs(case["exact"]), 1.0)
        if ours["error"] > 0:
            ratio = f"{grid['error'] / ours['error']:11.1e}"
        else:
            ratio = f"{'exact hit':>11s}"
        print(
            f"{case['name']:28s} {ours['points']:5d} {1e3 * ours['total']:9.2f} "
            f"{100 * ours['detect'] / ours['total']:9.1f} {1e6 * ours['detect'] / ours['points']:6.1f} "
            f"{100 * ours['locate'] / ours['total']:9.1f} "
            f"{ours['error'] / scale:9.1e} | {1e3 * grid['total']:8.2f} "
            f"{grid['error'] / scale:10.1e} {ratio}"
        )
    print(
        "\nerrors are relative to max(|exact|, 1); 'error ratio' = grid error / branchline "
        "error ('exact hit': branchline's value equals the exact one in floating point);\n"
        "detect % and locate %: shares of branchline's total run time (tracing included);\n"
        "us/pt: test-function time per computed point (equilibrium_tests)."
    )


if __name__ == "__main__":
    main()
