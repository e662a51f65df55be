"""Per-call cost of compiled model functions, against hand-written numpy in the same run.

Run by hand (not collected by pytest)::

    python3 tests/benchmarks/bench_model.py

For each model it prints microseconds per call of ``rhs``, ``jacobian``,
``parameter_jacobian``, ``derivatives`` (both Jacobians in one call) and the
lazily compiled ``second``/``third`` forms, next to the same functions written
by hand with numpy the way a user typically writes them (an ``np.array`` of
expressions in numpy scalars). Ratios above 1 mean the compiled function is
faster. Also prints the compile times (build, and first call of each lazily
compiled form). Times are CPU time (``time.process_time``), the best of
``REPEATS`` runs: the machine is shared.

The models are invented for the benchmark: a continuous bioreactor with
substrate inhibition (2 states) and a ring of ten saturating enzyme stages
(10 states).

Then, for chains of coupled Brusselator cells written as expressions
(``tests/cell_chains.py``) of 20, 100 and 1,000 states, it traces the uniform
branch through its Hopf points and prints, against a warm-started
``scipy.optimize.root`` sweep (hand-written numpy rhs and exact dense
Jacobian, then ``np.linalg.eigvals``) over the same parameter values, in the
same run, two tables:

- build and trace: the build time (fresh, with an empty model cache, and again
  from the cache) as a multiple of the whole sweep, and the time per point of
  the trace alone (``trace_branch``: corrector, tangent, all eigenvalues and the
  test functions at every point, like the sweep) as a multiple of the sweep's
  time per point (goal: at or below 1);
- one-off costs, each as a multiple of the whole sweep: locating and refining
  the events (crowded steps resolved, then every bracket located on its
  defining system with its normal form), their parameter sensitivities, the
  tables and report (``write_results`` without figures), and the first use of
  the lazily compiled higher derivatives (the first location pass minus a warm
  one); last, the whole warm ``run_scan`` per point against the sweep per point.

Times are CPU times of this process (``time.process_time``; BLAS runs on one
thread, so on an idle machine they equal wall times, and on the shared machine
they are much steadier), the best of ``CHAIN_REPEATS`` runs for the small
chains, one run for the 1,000-state chain.

Last, the wall time of the demo run (``branchline run scans/cooled_reactor.toml``,
confirmations and diagram included) and of ``branchline --help``, each in a
fresh interpreter, best of ``STARTUP_REPEATS``, against a bare
``python3 -c pass`` (the interpreter's own start).

``--quick`` skips the 1,000-state chain, ``--large`` runs only that one and nothing else (whose
sweep ends at b = 4.9, before the crowd of its modes' Hopf points).
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "src"))
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from branchline.cli import single_threaded_blas

# The command line's thread policy, set before numpy loads, for both sides of
# every comparison (a thread count set by hand is kept).
single_threaded_blas()

import numpy as np  # noqa: E402

from branchline.model.build import build_model  # noqa: E402
from branchline.scan.loader import ExpressionModelSpec  # noqa: E402
from cell_chains import (  # noqa: E402
    brusselator_equations,
    brusselator_jacobian,
    coupling_matrix,
)

try:  # a private cache for the benchmark; older versions have none
    from branchline.model import cache as model_cache
except ImportError:
    model_cache = None

ROOT = Path(__file__).resolve().parents[2]
REPEATS = 5
CALLS = 20_000

BIOREACTOR = ExpressionModelSpec(
    parameters={"D": 0.1, "S_in": 4.0, "mu_max": 0.5, "K_s": 0.1, "K_i": 0.5, "Y": 0.5},
    equations={"S": "D*(S_in - S) - mu*X/Y", "X": "(mu - D)*X"},
    definitions={"mu": "mu_max*S/(K_s + S + S^2/K_i)"},
)


def bioreactor_rhs(x, p):
    S, X = x
    D, S_in, mu_max, K_s, K_i, Y = p
    mu = mu_max * S / (K_s + S + S**2 / K_i)
    return np.array([D * (S_in - S) - mu * X / Y, (mu - D) * X])


def bioreactor_jacobian(x, p):
    S, X = x
    D, _, mu_max, K_s, K_i, Y = p
    den = K_s + S + S**2 / K_i
    mu = mu_max * S / den
    dmu = mu_max * (K_s - S**2 / K_i) / den**2
    return np.array([[-D - dmu * X / Y, -mu / Y], [dmu * X, mu - D]])


def _ring_spec(n: int = 10) -> ExpressionModelSpec:
    equations = {}
    for i in range(n):
        before = f"x{(i - 1) % n}"
        equations[f"x{i}"] = (
            f"v{i % 3}*{before}^2/(K^2 + {before}^2) - Vm*x{i}/(Km + x{i}) - d*x{i}"
            f" + a*exp(-x{i}*x{(i + 3) % n}) + b*sin(x{(i + 5) % n})"
        )
    parameters = {
        "v0": 1.0,
        "v1": 1.2,
        "v2": 0.8,
        "K": 0.5,
        "Vm": 0.7,
        "Km": 0.3,
        "d": 0.1,
        "a": 0.2,
        "b": 0.05,
    }
    return ExpressionModelSpec(parameters, equations)


def ring_rhs(x, p):
    v = p[:3]
    K, Vm, Km, d, a, b = p[3:]
    before = np.roll(x, 1)
    gains = v[np.arange(x.size) % 3]
    return (
        gains * before**2 / (K**2 + before**2)
        - Vm * x / (Km + x)
        - d * x
        + a * np.exp(-x * np.roll(x, -3))
        + b * np.sin(np.roll(x, -5))
    )


def _best_microseconds(function, *args) -> float:
    best = float("inf")
    for _ in range(REPEATS):
        start = time.process_time()
        for _ in range(CALLS):
            function(*args)
        best = min(best, time.process_time() - start)
    return best / CALLS * 1e6


def _report(title, spec, x, baselines) -> None:
    start = time.process_time()
    model = build_model(spec)
    built = time.process_time() - start
    p = model.defaults
    v = x + 1j * x[::-1]
    lazy = {}
    for name, args in (("second", (v, v)), ("third", (v, v, v))):
        start = time.process_time()
        getattr(model, name)(x, p, *args)
        lazy[name] = time.process_time() - start
    print(f"\n{title}: {model.size} states, {len(p)} parameters")
    print(
        f"  build {built * 1e3:.0f} ms; first call of second {lazy['second'] * 1e3:.0f} ms, "
        f"third {lazy['third'] * 1e3:.0f} ms"
    )
    print(f"  {'function':<20}{'compiled us':>12}{'hand numpy us':>15}{'ratio':>8}")
    for name in ("rhs", "jacobian", "parameter_jacobian", "derivatives"):
        compiled = _best_microseconds(getattr(model, name), x, p)
        if name in baselines:
            hand = _best_microseconds(baselines[name], x, p)
            print(f"  {name:<20}{compiled:>12.2f}{hand:>15.2f}{hand / compiled:>8.1f}")
        else:
            print(f"  {name:<20}{compiled:>12.2f}{'':>15}{'':>8}")
    for name, args in (("second", (v, v)), ("third", (v, v, v))):
        compiled = _best_microseconds(getattr(model, name), x, p, *args)
        print(f"  {name:<20}{compiled:>12.2f}")


# Chains: cells (2 states each), Brusselator a = 2, d = 0.1 swept in b across the
# uniform mode's Hopf point b = 1 + a^2 = 5 (cell_chains.py).
CHAIN_CELLS = (10, 50, 500)
CHAIN_PARAMETERS = {"a": 2.0, "b": 3.0, "d": 0.1}
CHAIN_INTERVAL = (3.0, 5.5)
# At 1,000 states the modes' Hopf points crowd just above b = 5 (hundreds of them
# before 5.5, each located at full size): the large chain's sweep stops short of
# them and measures tracing with stability at every point.
LARGE_CHAIN_INTERVAL = (3.0, 4.9)
STARTUP_REPEATS = 3
CHAIN_REPEATS = 3
# The chains' clock: CPU time of this process (see the module docstring).
CLOCK = time.process_time


def _chain_numpy(cells: int):
    """The chain's rhs and exact dense Jacobian written by hand in numpy, as a user would."""
    n = 2 * cells
    laplacian = coupling_matrix(cells)

    def rhs(x, a, b, d):
        u, v = x[0::2], x[1::2]
        f = np.empty(n)
        f[0::2] = a - (b + 1.0) * u + u * u * v + d * (laplacian @ u)
        f[1::2] = b * u - u * u * v + d * (laplacian @ v)
        return f

    def jacobian(x, a, b, d):
        return brusselator_jacobian(x, {"b": b, "d": d}, laplacian)

    return rhs, jacobian


def _scipy_sweep(cells: int, values, start) -> float:
    """CPU seconds of a warm-started scipy.optimize.root sweep plus eigvals at each value."""
    from scipy.optimize import root

    rhs, jacobian = _chain_numpy(cells)
    a, d = CHAIN_PARAMETERS["a"], CHAIN_PARAMETERS["d"]
    x = np.array(start, dtype=float)
    begin = CLOCK()
    for b in values:
        solution = root(rhs, x, args=(a, b, d), jac=jacobian, method="hybr")
        x = solution.x
        np.linalg.eigvals(jacobian(x, a, b, d))
    return CLOCK() - begin


def _chain_scan(cells: int, interval: tuple[float, float]):
    from branchline.scan.loader import scan_from_dict

    a, b = CHAIN_PARAMETERS["a"], CHAIN_PARAMETERS["b"]
    start = {}
    for i in range(cells):
        start[f"u{i}"], start[f"v{i}"] = a, b / a
    return scan_from_dict(
        {
            "title": f"chain of {cells} cells",
            "model": {
                "parameters": dict(CHAIN_PARAMETERS),
                "equations": brusselator_equations(cells),
            },
            "trace": [{"name": "uniform", "vary": "b", "interval": list(interval), "start": start}],
        }
    )


def _timed_build(spec) -> tuple[float, object]:
    begin = CLOCK()
    model = build_model(spec)
    return CLOCK() - begin, model


def _best_wall(function, repeats: int) -> tuple[float, object]:
    """(best CPU seconds over ``repeats`` calls, the last call's result)."""
    best, result = float("inf"), None
    for _ in range(repeats):
        begin = CLOCK()
        result = function()
        best = min(best, CLOCK() - begin)
    return best, result


def _events_one_off(model, branch) -> tuple[float, float, list]:
    """(seconds, sensitivity seconds, events): crowded steps resolved, events located
    and refined (the runner's order), then their parameter sensitivities."""
    from branchline.events.sensitivities import with_sensitivities
    from branchline.problems.crowding import resolve_crowded_steps
    from branchline.problems.equilibrium_branch import locate_events

    begin = CLOCK()
    events = locate_events(model, resolve_crowded_steps(model, branch))
    located = CLOCK()
    with_sensitivities(model, events)
    return located - begin, CLOCK() - located, events


def _report_seconds(result) -> float:
    """CPU seconds of writing the tables and report (no figures) of a run."""
    from branchline.results.writers import write_results

    with tempfile.TemporaryDirectory() as folder:
        begin = CLOCK()
        write_results(result, Path(folder) / "run", figures=False)
        return CLOCK() - begin


def _chain_report(cells: int) -> tuple[str, str]:
    """The chain's two table rows: build and trace, one-off costs."""
    from branchline.problems.equilibrium_branch import trace_branch
    from branchline.runner import run_scan

    scan = _chain_scan(cells, CHAIN_INTERVAL if cells < 500 else LARGE_CHAIN_INTERVAL)
    repeats = CHAIN_REPEATS if cells < 500 else 1
    if model_cache is not None:
        model_cache.clear(scan.model)
    fresh, model = _timed_build(scan.model)
    cached = _timed_build(scan.model)[0] if model_cache is not None else float("nan")
    spec = scan.traces[0]
    start = np.array([spec.start[name] for name in model.states])

    def trace():
        return trace_branch(
            model, spec.name, spec.vary, model.defaults, start, spec.interval,
            spec.direction, spec.steps, limits=spec.limits,
        )

    traced, branch = _best_wall(trace, repeats)
    points = len(branch)
    order = np.argsort(branch.parameter_values)
    values = branch.parameter_values[order]
    sweep = min(
        _scipy_sweep(cells, values, branch.states[order[0]]) for _ in range(repeats)
    )
    per_point, per_sweep_point = traced / points, sweep / points
    first_locate, first_sensitivities, _ = _events_one_off(model, branch)
    locate, sensitivities, events = first_locate, first_sensitivities, []
    for _ in range(repeats):
        again = _events_one_off(model, branch)
        locate, sensitivities = min(locate, again[0]), min(sensitivities, again[1])
        events = again[2]
    lazy = max(first_locate + first_sensitivities - locate - sensitivities, 0.0)
    whole, result = _best_wall(lambda: run_scan(scan, model=model, confirm=False), repeats)
    report = min(_report_seconds(result) for _ in range(repeats))
    run_points = sum(len(b.parameter_values) for b in result.branches)
    hopf = sum("hopf" in str(e.kind).lower() for e in events)
    trace_row = (
        f"  {2 * cells:>6}{fresh:>9.2f}{cached:>9.2f}{fresh / sweep:>9.2f}{cached / sweep:>9.2f}"
        f"{points:>7}{per_point * 1e3:>10.3f}{per_sweep_point * 1e3:>10.3f}"
        f"{per_point / per_sweep_point:>8.2f}"
    )
    one_off_row = (
        f"  {2 * cells:>6}{len(events):>7}{hopf:>6}{locate / sweep:>9.2f}"
        f"{sensitivities / sweep:>9.2f}{report / sweep:>9.2f}{lazy / sweep:>9.2f}"
        f"{whole / run_points / per_sweep_point:>10.2f}   {result.status}"
    )
    return trace_row, one_off_row


def _wall(command: list[str], env: dict, cwd: str) -> float:
    best = float("inf")
    for _ in range(STARTUP_REPEATS):
        begin = time.perf_counter()
        subprocess.run(command, env=env, cwd=cwd, check=True, capture_output=True)
        best = min(best, time.perf_counter() - begin)
    return best


def _startup_report() -> None:
    env = dict(os.environ, PYTHONPATH=str(ROOT / "src"), MPLBACKEND="Agg")
    with tempfile.TemporaryDirectory() as folder:
        bare = _wall([sys.executable, "-c", "pass"], env, folder)
        helped = _wall([sys.executable, "-m", "branchline", "--help"], env, folder)
        scan = str(ROOT / "scans" / "cooled_reactor.toml")
        demo = _wall(
            [sys.executable, "-m", "branchline", "run", scan, "--out", "demo"], env, folder
        )
    print("\nstart-up (wall, best of 3; model cache warm after the first run)")
    print(f"  python3 -c pass          {bare:6.2f} s")
    print(f"  branchline --help        {helped:6.2f} s  ({helped / bare:.1f} x bare interpreter)")
    print(f"  demo run with diagram    {demo:6.2f} s  ({demo / bare:.1f} x bare interpreter)")


def main() -> None:
    quick, large = "--quick" in sys.argv, "--large" in sys.argv
    chosen = CHAIN_CELLS[:2] if quick else CHAIN_CELLS[2:] if large else CHAIN_CELLS
    rows = [_chain_report(cells) for cells in chosen]
    print("expression chains (Brusselator cells) against a scipy.optimize.root + eigvals sweep")
    print("build and trace alone (stability at every point, like the sweep)")
    print(
        f"  {'states':>6}{'build s':>9}{'cached':>9}{'/sweep':>9}{'cached/':>9}"
        f"{'points':>7}{'ms/pt':>10}{'scipy':>10}{'ratio':>8}"
    )
    for trace_row, _ in rows:
        print(trace_row)
    print("one-off costs, in whole sweeps; last, the whole warm run per point against the sweep")
    print(
        f"  {'states':>6}{'events':>7}{'Hopf':>6}{'locate':>9}{'sensit.':>9}{'report':>9}"
        f"{'lazy':>9}{'run/pt':>10}"
    )
    for _, one_off_row in rows:
        print(one_off_row)
    if large:
        return
    _startup_report()
    _report(
        "bioreactor",
        BIOREACTOR,
        np.array([0.5, 1.7]),
        {"rhs": bioreactor_rhs, "jacobian": bioreactor_jacobian},
    )
    _report("enzyme ring", _ring_spec(), np.linspace(0.2, 1.2, 10), {"rhs": ring_rhs})


if __name__ == "__main__":
    main()
