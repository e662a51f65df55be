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
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "src"))

from branchline.model.build import build_model
from branchline.scan.loader import ExpressionModelSpec

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


def main() -> None:
    _report(
        "bioreactor",
        BIOREACTOR,
        np.array([0.5, 1.7]),
        {"rhs": bioreactor_rhs, "jacobian": bioreactor_jacobian},
    )
    _report("enzyme ring", _ring_spec(), np.linspace(0.2, 1.2, 10), {"rhs": ring_rhs})


if __name__ == "__main__":
    main()
