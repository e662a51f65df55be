"""Codimension-two points on boundaries, against independently derived values.

Sources and derivations:
- Bautin normal form x' = b1 x - y + b2 x r^2 + s x r^4 (and its mirror in y),
  r^2 = x^2 + y^2: the Hopf curve b1 = 0 has l1 = b2, so the Bautin point is
  b2 = 0, with l2 = s (Kuznetsov, Elements of Applied Bifurcation Theory,
  3rd ed., section 8.3, in the interface contract's scaling).
- A planar model with quadratic terms, whose focal values are computed here
  with sympy by the Lyapunov-function method (a formal V = r^2/2 + V3 + ... + V6
  with dV/dt = L1 r^4 + L2 r^6; Andronov et al., Theory of Bifurcations of
  Dynamic Systems on a Plane, the method of Lyapunov quantities; from memory):
  L1(k) = 19/80 - k/4, so the Bautin point is k = 19/20, where L2 = l2.
- Zero-Hopf: x' = a - x^2 with an oscillator whose damping is b + x; zero
  eigenvalue and imaginary pair together where sympy solves the defining
  conditions (a = b = 0, x = 0, omega = 1).
- Double-Hopf: two oscillators with real parts a + b - 1 and a - b^2 and
  frequencies 1 and 2; sympy solves both real parts zero: b = (sqrt 5 - 1)/2.
"""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp

import branchline


def hopf_scan(equations, parameters, vary, second, start, interval, window, index=None):
    boundary = {"name": "curve", "from": "line", "kind": "hopf", "second": second, "window": window}
    if index:
        boundary["index"] = index
    return {
        "model": {"parameters": parameters, "equations": equations},
        "trace": [{"name": "line", "vary": vary, "interval": interval, "start": start}],
        "boundary": [boundary],
    }


def only(result, kind):
    found = [e for e in result.events if e.kind == kind]
    assert len(found) == 1, [(e.trace, e.kind) for e in result.events]
    return found[0]


def test_bautin_normal_form():
    r2 = "(x^2 + y^2)"
    result = branchline.run(
        hopf_scan(
            {"x": f"b1*x - y + b2*x*{r2} + s*x*{r2}^2", "y": f"x + b1*y + b2*y*{r2} + s*y*{r2}^2"},
            {"b1": -0.5, "b2": -0.4, "s": -0.7},
            "b1",
            "b2",
            {"x": 0, "y": 0},
            [-1, 1],
            {"b1": [-1, 1], "b2": [-1, 1]},
        )
    )
    event = only(result, "bautin")
    assert event.trace == "curve"
    assert abs(event.parameters[0]) < 1e-8 and abs(event.parameters[1]) < 1e-8  # b1 = b2 = 0
    assert abs(event.details["second_lyapunov"] - (-0.7)) < 1e-8  # l2 = s (sec. 8.3)
    assert "negative" in event.note
    assert abs(event.frequency - 1.0) < 1e-8


def _focal_values(p_text, q_text):
    """L1, L2 of x' = -y + P, y' = x + Q by a formal Lyapunov function (sympy)."""
    x, y, k = sp.symbols("x y k", real=True)
    names = {"x": x, "y": y, "k": k}
    p_poly, q_poly = sp.sympify(p_text, locals=names), sp.sympify(q_text, locals=names)
    v_total = (x**2 + y**2) / 2
    values = []
    for degree in range(3, 7):
        coefficients = sp.symbols(f"v{degree}_0:{degree + 1}")
        part_v = sum(c * x ** (degree - i) * y**i for i, c in enumerate(coefficients))
        trial = v_total + part_v
        derivative = sp.expand(sp.diff(trial, x) * (-y + p_poly) + sp.diff(trial, y) * (x + q_poly))
        part = sum(
            t for t in sp.Add.make_args(derivative) if sp.Poly(t, x, y).total_degree() == degree
        )
        unknowns, extra = list(coefficients), []
        if degree % 2 == 0:
            quantity = sp.Symbol(f"L{degree}")
            part -= quantity * (x**2 + y**2) ** (degree // 2)
            unknowns.append(quantity)
            extra = [coefficients[0]]  # fixes the kernel r^degree of the linear part
        equations = sp.Poly(sp.expand(part), x, y).coeffs() + extra
        solution = sp.solve(equations, unknowns, dict=True)[0]
        v_total += part_v.subs(solution)
        if degree % 2 == 0:
            values.append(sp.simplify(solution[quantity]))
    return k, values


def test_bautin_point_with_quadratic_terms_against_lyapunov_quantities():
    p_text = "x**2 - x*y + k*y**2 + 3*x**3/10"
    q_text = "2*x*y - y**2/2 + x**2*y"
    k, (first, second) = _focal_values(p_text, q_text)
    (k_bautin,) = sp.solve(first, k)
    l2 = float(second.subs(k, k_bautin))
    result = branchline.run(
        hopf_scan(
            {
                "x": "mu*x - y + x^2 - x*y + k*y^2 + 0.3*x^3",
                "y": "x + mu*y + 2*x*y - 0.5*y^2 + x^2*y",
            },
            {"mu": -0.5, "k": 0.4},
            "mu",
            "k",
            {"x": 0, "y": 0},
            [-1, 1],
            {"mu": [-1, 1], "k": [0, 2]},
        )
    )
    hopf = only(result, "hopf")
    assert abs(hopf.lyapunov - float(first.subs(k, 0.4))) < 1e-12  # L1 = l1 at k = 0.4
    event = only(result, "bautin")
    assert abs(event.parameters[1] - float(k_bautin)) < 1e-8
    assert abs(event.value) < 1e-8
    assert abs(event.details["second_lyapunov"] - l2) < 1e-8 * abs(l2)


ZERO_HOPF = {
    "x": "a - x^2",
    "y": "(b + x)*y - z - y*(y^2 + z^2)",
    "z": "y + (b + x)*z - z*(y^2 + z^2)",
}


def test_zero_hopf_on_fold_and_hopf_curves():
    a, b, x = sp.symbols("a b x", real=True)
    # f = 0 with a zero eigenvalue (-2 x = 0) and the pair (b + x) +- i on the axis
    solution = sp.solve([a - x**2, -2 * x, b + x], [a, b, x], dict=True)[0]
    scan = hopf_scan(
        ZERO_HOPF,
        {"a": 0.25, "b": -0.5},
        "a",
        "b",
        {"x": 0.5, "y": 0, "z": 0},
        [-0.5, 1.5],
        {"a": [-0.5, 1.5], "b": [-1, 1]},
    )
    scan["boundary"].append({**scan["boundary"][0], "name": "folds", "kind": "fold"})
    result = branchline.run(scan)
    found = [e for e in result.events if e.kind == "zero_hopf"]
    assert sorted(e.trace for e in found) == ["curve", "folds"]
    for event in found:
        assert abs(event.parameters[0] - float(solution[a])) < 1e-8
        assert abs(event.parameters[1] - float(solution[b])) < 1e-8
        assert np.max(np.abs(event.state)) < 1e-8
        assert abs(event.frequency - 1.0) < 1e-8
    frame = result.boundaries_frame().query("boundary == 'curve'")
    # the Hopf curve: b = -x and a = x^2, i.e. a = b^2
    assert np.max(np.abs(frame["a"] - frame["b"] ** 2)) < 1e-8


def test_double_hopf():
    a, b = sp.symbols("a b", real=True)
    roots = sp.solve([a + b - 1, a - b**2], [a, b], dict=True)
    root = next(r for r in roots if r[b] > 0)
    equations = {
        "y1": "(a + b - 1)*y1 - z1 - y1*(y1^2 + z1^2)",
        "z1": "y1 + (a + b - 1)*z1 - z1*(y1^2 + z1^2)",
        "y2": "(a - b^2)*y2 - 2*z2 - y2*(y2^2 + z2^2)",
        "z2": "2*y2 + (a - b^2)*z2 - z2*(y2^2 + z2^2)",
    }
    start = {"y1": 0, "z1": 0, "y2": 0, "z2": 0}
    result = branchline.run(
        hopf_scan(
            equations,
            {"a": 0.0, "b": 0.5},
            "a",
            "b",
            start,
            [-1, 2],
            {"a": [-1, 2], "b": [-0.2, 1.5]},
            index=2,
        )
    )
    event = only(result, "double_hopf")
    assert abs(event.parameters[0] - float(root[a])) < 1e-8
    assert abs(event.parameters[1] - float(root[b])) < 1e-8
    assert sorted(event.details["frequencies"]) == pytest.approx([1.0, 2.0], abs=1e-8)


def test_hopf_curve_started_at_the_zero_hopf_point_of_a_fold_curve():
    """Only the fold curve (a = 0, x = 0) is followed; its zero-Hopf point starts the Hopf
    curve through it, a = b^2 with omega = 1 (derived above with sympy: b = -x, a = x^2)."""
    scan = hopf_scan(
        ZERO_HOPF,
        {"a": 0.25, "b": -0.5},
        "a",
        "b",
        {"x": 0.5, "y": 0, "z": 0},
        [-0.5, 1.5],
        {"a": [-0.5, 1.5], "b": [-1, 1]},
    )
    scan["boundary"] = [
        {**scan["boundary"][0], "name": "folds", "kind": "fold"},
        {"name": "onset", "from": "folds", "kind": "hopf"},
    ]
    result = branchline.run(scan, confirm=False)
    onset = next(b for b in result.boundaries if b.name == "onset")
    assert onset.source == "folds zero_hopf 1" and onset.status == "done"
    frame = result.boundaries_frame().query("boundary == 'onset'")
    assert np.max(np.abs(frame["a"] - frame["b"] ** 2)) < 1e-8
    assert frame["b"].min() < -0.5 and frame["b"].max() > 0.5  # both sides of the point
    x = frame["x"].to_numpy()
    assert np.max(np.abs(x + frame["b"].to_numpy())) < 1e-8  # x = -b on the Hopf curve
