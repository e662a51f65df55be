"""Synthetic results tables with known answers, shared by the report and diagram tests.

Reference cases (closed forms, so the tables are exact up to the grid):

- S-shaped branch of x' = p + x - x^3. Equilibria satisfy p = x^3 - x; folds
  where dp/dx = 3x^2 - 1 = 0, i.e. x = -+1/sqrt(3), p = +-2/(3 sqrt(3))
  (elementary calculus; the same curve as the imperfect pitchfork
  x' = h + r x - x^3 at r = 1 in Strogatz, Nonlinear Dynamics and Chaos,
  section 3.6, critical h_c = (2r/3) sqrt(r/3) -- recalled from memory).
  Stability: f_x = 1 - 3x^2 < 0 for |x| > 1/sqrt(3).
- Hopf normal form x' = mu x - y + s x (x^2+y^2), y' = x + mu y + s y (x^2+y^2):
  equilibrium 0 for all mu, eigenvalues mu +- i, Hopf at mu = 0 with
  frequency 1, first Lyapunov coefficient s with the contract's scaling
  (Kuznetsov, Elements of Applied Bifurcation Theory, section 3.4).
- Transcritical x' = p x - x^2: branches x = 0 and x = p exchange stability at
  p = 0 (Strogatz, section 3.2).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

FOLD_P = 2.0 / (3.0 * math.sqrt(3.0))
FOLD_X = 1.0 / math.sqrt(3.0)


def _edge_x(p: float) -> float:
    """The real root of x^3 - x - p = 0 for |p| > FOLD_P (one real root)."""
    roots = np.roots([1.0, 0.0, -1.0, -p])
    real = roots[np.abs(roots.imag) < 1e-12].real
    assert real.size == 1
    return float(real[0])


def _polyline_arclength(columns: list[np.ndarray], start: int) -> np.ndarray:
    steps = np.sqrt(sum(np.diff(c) ** 2 for c in columns))
    s = np.concatenate([[0.0], np.cumsum(steps)])
    return s - s[start]


def s_curve_tables(start_x: float = 1.1, count: int = 401, lo: float = -1.0, hi: float = 1.0):
    """points/events/info for x' = p + x - x^3 traced over p in [lo, hi].

    The branch is parametrized by x; rows go from p = lo (lower branch) to
    p = hi (upper branch), which is the order of increasing arclength when the
    start point on the upper branch is traced towards decreasing p first.
    """
    x = np.linspace(_edge_x(lo), _edge_x(hi), count)
    x = np.sort(np.append(x, start_x))
    start = int(np.nonzero(x == start_x)[0][0])
    p = x**3 - x
    p[0], p[-1] = lo, hi  # the trace ends exactly on the interval edges
    s = _polyline_arclength([x, p], start)
    slope = 1.0 - 3.0 * x**2
    points = pd.DataFrame(
        {
            "trace": "s",
            "step": np.arange(x.size),
            "arclength": s,
            "p": p,
            "x": x,
            "stable": slope < 0,
            "unstable_count": (slope > 0).astype(int),
            "leading_real": slope,
            "leading_imag": 0.0,
        }
    )
    events = []
    for x_fold in (-FOLD_X, FOLD_X):  # in trace order (increasing x)
        value = x_fold**3 - x_fold
        events.append(
            {
                "trace": "s",
                "kind": "fold",
                "vary": "p",
                "value": value,
                "state": {"x": x_fold},
                "parameters": {"p": value},
                "arclength": float(np.interp(x_fold, x, s)),
                "frequency": None,
                "period": None,
                "lyapunov": None,
                "criticality": None,
                "branching": None,
                "fold_coefficient": -3.0 * x_fold,
                "note": "",
                "details": {},
            }
        )
    info = {
        "branchline_version": "test",
        "scan": "s_curve.toml",
        "title": "Switch with a cubic response",
        "model": {
            "kind": "expressions",
            "states": ["x"],
            "parameters": {"p": float(start_x**3 - start_x)},
            "equations": {"x": "p + x - x^3"},
            "definitions": {},
            "observables": [],
            "python_source": None,
        },
        "traces": [
            {
                "name": "s",
                "vary": "p",
                "interval": [lo, hi],
                "set": {},
                "direction": "both",
                "parent": None,
                "status": "done",
                "message": "",
                "points": int(x.size),
                "start_value": float(p[start]),
            }
        ],
        "status": "done",
        "message": "",
        "timings": {},
    }
    return points, events, info


def hopf_tables(s: float = -1.0, start_mu: float = -0.5, count: int = 200):
    """points/events/info for the Hopf normal form, mu in [-1, 1], start at start_mu."""
    mu = np.sort(np.append(np.linspace(-1.0, 1.0, count), start_mu))
    mu = np.unique(mu)
    points = pd.DataFrame(
        {
            "trace": "rest",
            "step": np.arange(mu.size),
            "arclength": mu - start_mu,
            "mu": mu,
            "x": 0.0,
            "y": 0.0,
            "stable": mu < 0,
            "unstable_count": np.where(mu > 0, 2, 0),
            "leading_real": mu,
            "leading_imag": 1.0,
        }
    )
    event = {
        "trace": "rest",
        "kind": "hopf",
        "vary": "mu",
        "value": 0.0,
        "state": {"x": 0.0, "y": 0.0},
        "parameters": {"mu": 0.0, "s": s},
        "arclength": -start_mu,
        "frequency": 1.0,
        "period": 2.0 * math.pi,
        "lyapunov": s,
        "criticality": "supercritical" if s < 0 else "subcritical",
        "branching": None,
        "fold_coefficient": None,
        "note": "",
        "details": {},
    }
    info = {
        "branchline_version": "test",
        "scan": "hopf.toml",
        "title": "Oscillator onset",
        "model": {
            "kind": "expressions",
            "states": ["x", "y"],
            "parameters": {"mu": start_mu, "s": s},
            "equations": {"x": "mu*x - y + s*x*(x^2+y^2)", "y": "x + mu*y + s*y*(x^2+y^2)"},
            "definitions": {},
            "observables": [],
            "python_source": None,
        },
        "traces": [
            {
                "name": "rest",
                "vary": "mu",
                "interval": [-1.0, 1.0],
                "set": {},
                "direction": "both",
                "parent": None,
                "status": "done",
                "message": "",
                "points": int(mu.size),
                "start_value": start_mu,
            }
        ],
        "status": "done",
        "message": "",
        "timings": {},
    }
    return points, [event], info


def transcritical_tables(count: int = 100):
    """x' = p x - x^2 on p in [-1, 1]: the trace x = 0 and the switched branch x = p."""
    p = np.linspace(-1.0, 1.0, count)
    start = count // 4  # p = -0.5
    zero = pd.DataFrame(
        {
            "trace": "zero",
            "step": np.arange(count),
            "arclength": p - p[start],
            "p": p,
            "x": 0.0,
            "stable": p < 0,
            "unstable_count": (p > 0).astype(int),
            "leading_real": p,
            "leading_imag": 0.0,
        }
    )
    child = pd.DataFrame(
        {
            "trace": "zero.1",
            "step": np.arange(count),
            "arclength": math.sqrt(2.0) * p,
            "p": p,
            "x": p,
            "stable": p > 0,
            "unstable_count": (p < 0).astype(int),
            "leading_real": -p,
            "leading_imag": 0.0,
        }
    )
    points = pd.concat([zero, child], ignore_index=True)
    event = {
        "trace": "zero",
        "kind": "branch_point",
        "vary": "p",
        "value": 0.0,
        "state": {"x": 0.0},
        "parameters": {"p": 0.0},
        "arclength": -float(p[start]),
        "frequency": None,
        "period": None,
        "lyapunov": None,
        "criticality": None,
        "branching": "transcritical",
        "fold_coefficient": None,
        "note": "",
        "details": {},
    }
    base = {"interval": [-1.0, 1.0], "set": {}, "direction": "both", "status": "done"}
    info = {
        "title": "Exchange of stability",
        "model": {
            "kind": "expressions",
            "states": ["x"],
            "parameters": {"p": -0.5},
            "equations": {"x": "p*x - x^2"},
        },
        "traces": [
            {
                **base,
                "name": "zero",
                "vary": "p",
                "parent": None,
                "points": count,
                "start_value": float(p[start]),
                "message": "",
            },
            {
                **base,
                "name": "zero.1",
                "vary": "p",
                "parent": "zero",
                "points": count,
                "start_value": 0.0,
                "message": "",
            },
        ],
        "status": "done",
        "message": "",
    }
    return points, [event], info


def s_curve_with_hopf_tables(hopf_p: float = 0.2):
    """The S-curve tables with the lower branch made unstable between p = hopf_p and its fold.

    Not the output of a model (x' = p + x - x^3 has one state and no Hopf point):
    a table shaped like a cooled reactor's ignition and extinction curve, where a
    Hopf point on the lower sheet sits before the fold that ends it. Built for the
    logic that reads the tables; every expected value follows from the
    construction: two stable states coexist exactly for p in [-FOLD_P, hopf_p].
    """
    points, events, info = s_curve_tables()
    x, p, s = (points[c].to_numpy(dtype=float) for c in ("x", "p", "arclength"))
    lost = (x < -FOLD_X) & (p > hopf_p)  # the end of the lower branch, next to its fold
    points.loc[lost, "stable"] = False
    points.loc[lost, "unstable_count"] = 2
    points.loc[lost, "leading_real"] = p[lost] - hopf_p
    points.loc[lost, "leading_imag"] = 1.0
    x_hopf = float(np.min(np.roots([1.0, 0.0, -1.0, -hopf_p]).real))  # on the lower branch
    hopf = {
        **events[0],
        "kind": "hopf",
        "value": hopf_p,
        "state": {"x": x_hopf},
        "parameters": {"p": hopf_p},
        "arclength": float(np.interp(x_hopf, x, s)),
        "frequency": 1.0,
        "period": 2.0 * math.pi,
        "lyapunov": 0.1,
        "criticality": "subcritical",
        "fold_coefficient": None,
    }
    return points, [hopf, *events], info
