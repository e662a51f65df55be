"""Events that crowd together: a fold beside a branch point, Hopf points closer than one
step, chains of identical cells whose modes go unstable together, and the Hopf points of
40-state models (expression and Python models, with and without a Jacobian).

Every reference value is derived here, independently of branchline, with mpmath or sympy
from the published model's equations (sources beside each model).
"""

from __future__ import annotations

import functools
import math
import sys

import mpmath as mp
import numpy as np
import pytest
import sympy as sp

from branchline import run_scan, scan_from_dict
from cell_chains import (
    BRUSSELATOR_CELLS,
    brusselator_equations,
    cubic_equations,
    mode_rates,
)

# ---------------------------------------------------------------------------
# A fold beside a branch point: an epidemic with an imperfect vaccine
#
# Kribs-Zaleta & Velasco-Hernandez, "A simple vaccination model with multiple endemic
# states", Math. Biosci. 164 (2000) 183-201 (equations from memory): an SIS disease with
# vaccination at rate phi, vaccine waning at rate theta, vaccinated hosts infected at
# sigma times the usual rate (1 - sigma: the vaccine's efficacy), births and deaths mu,
# recovery gamma, contact rate beta, population normalized to S + I + V = 1 (S eliminated).
# The disease-free state I = 0 loses stability at the transcritical branch point
# beta* = (mu + gamma)(mu + theta + phi) / (mu + theta + sigma phi); for small sigma the
# endemic branch leaves it backwards and turns at a fold just below beta*.

EPIDEMIC = {
    "I": "beta*(1 - I - V)*I + sigma*beta*V*I - (mu + gamma)*I",
    "V": "phi*(1 - I - V) - sigma*beta*V*I - (mu + theta)*V",
}
EPIDEMIC_RATES = {"mu": 0.01, "theta": 0.01, "gamma": 1.0, "phi": 0.5}


@functools.cache
def epidemic_references(sigma: float) -> dict[str, mp.mpf]:
    """beta*, and the fold (beta_f, I_f, V_f), to 40 digits for the float ``sigma``.

    Derivation (sympy, exact rationals): for I != 0, V from V' = 0 turns I' / I = 0
    into a quadratic A I^2 + B I + C in I; the fold is where its discriminant vanishes
    (a quadratic in beta once divided by beta^2; its root next to beta*), and
    I_f = -B / (2 A) there.
    """
    mp.mp.dps = 40
    i, v, beta = sp.symbols("I V beta")
    mu, theta, gamma, phi = (
        sp.Rational(str(EPIDEMIC_RATES[k])) for k in ("mu", "theta", "gamma", "phi")
    )
    s = sp.Rational(sigma)  # the float's exact binary value
    f_i = beta * (1 - i - v) * i + s * beta * v * i - (mu + gamma) * i
    f_v = phi * (1 - i - v) - s * beta * v * i - (mu + theta) * v
    v_of_i = sp.solve(f_v, v)[0]
    quadratic = sp.Poly(sp.numer(sp.together(sp.expand(f_i / i).subs(v, v_of_i))), i)
    a_, b_, c_ = quadratic.all_coeffs()
    beta_star = (mu + gamma) * (mu + theta + phi) / (mu + theta + s * phi)
    folds = sp.solve(sp.cancel((b_**2 - 4 * a_ * c_) / beta**2), beta)
    beta_f = min(folds, key=lambda root: abs(sp.N(root - beta_star, 50)))
    i_f = (-b_ / (2 * a_)).subs(beta, beta_f)
    v_f = v_of_i.subs({beta: beta_f, i: i_f})
    return {
        name: mp.mpf(str(sp.N(value, 45)))
        for name, value in (("beta_star", beta_star), ("beta_f", beta_f), ("I_f", i_f), ("V_f", v_f))
    }


# sigma for relative gaps (beta* - beta_f) / beta* of about 1e-3, 1e-5, 1e-7 (found by
# solving for the gap with mpmath; the test recomputes the gap from sigma itself)
EPIDEMIC_CASES = [(0.615466815225362, 1e-3), (0.6389697464636525, 1e-5), (0.6412996597400484, 1e-7)]


def epidemic_scan(sigma: float, from_disease_free: bool) -> dict:
    parameters = {"beta": 1.0, "sigma": sigma, **EPIDEMIC_RATES}
    if from_disease_free:
        # the disease-free state V0 = phi / (mu + theta + phi); the endemic branch is
        # reached by switching at the branch point (its fold lies between the branch
        # point and the switched branch's first point for the smaller gaps)
        trace = {"vary": "beta", "interval": [1.0, 2.5], "direction": "increasing"}
        trace["start"] = {"I": 0.0, "V": 0.5 / 0.52}
    else:
        parameters["beta"] = 2.5  # down the endemic branch, through the fold to beta*
        trace = {"vary": "beta", "interval": [1.0, 2.5], "direction": "decreasing"}
        trace.update(start={"I": 0.5, "V": 0.3}, switch_branches=False)
    return {"model": {"parameters": parameters, "equations": EPIDEMIC}, "trace": [trace]}


@pytest.mark.parametrize("from_disease_free", [False, True], ids=["endemic", "switched"])
@pytest.mark.parametrize(("sigma", "gap"), EPIDEMIC_CASES, ids=["1e-3", "1e-5", "1e-7"])
def test_fold_beside_a_transcritical_branch_point(sigma, gap, from_disease_free):
    reference = epidemic_references(sigma)
    star, beta_f = reference["beta_star"], reference["beta_f"]
    assert float((star - beta_f) / star) == pytest.approx(gap, rel=0.05)
    result = run_scan(scan_from_dict(epidemic_scan(sigma, from_disease_free)))
    folds = [e for e in result.events if e.kind == "fold"]
    branch_points = [e for e in result.events if e.kind == "branch_point"]
    assert len(folds) == 1 and len(branch_points) == 1
    (fold,), (branch_point,) = folds, branch_points
    # each located to far better than 1e-8, relative, and never taken for the other
    assert abs(branch_point.value - float(star)) <= 1e-12 * float(star)
    assert abs(fold.value - float(beta_f)) <= 1e-12 * float(star)
    assert fold.state == pytest.approx([float(reference["I_f"]), float(reference["V_f"])], abs=1e-9)
    assert fold.details["method"].startswith("Newton")
    assert branch_point.branching == "transcritical"
    if from_disease_free and gap < 1e-6:
        # the fold lies between the branch point and the switched branch's first point
        # (its start, 1e-3 away): only the check of that stretch finds it
        child = result.branch(fold.trace)
        start = int(np.argmin(np.abs(child.arclength)))
        u_bp = np.append(branch_point.state, branch_point.value)
        u_fold = np.append(fold.state, fold.value)
        u_start = np.append(child.states[start], child.parameter_values[start])
        assert np.linalg.norm(u_fold - u_bp) < np.linalg.norm(u_start - u_bp)


# ---------------------------------------------------------------------------
# Chains of identical cells (models and closed forms: tests/cell_chains.py)


@functools.cache
def brusselator_cell_lyapunov(a: float) -> float:
    """First Lyapunov coefficient of one Brusselator cell at its Hopf point b = 1 + a^2.

    Independent of branchline: sympy moves the cell into coordinates w with
    x = x* + T w, T = [Re v, -Im v] (A v = i omega v), where the linear part is
    [[0, -omega], [omega, 0]], and applies the planar formula of Guckenheimer & Holmes,
    Nonlinear Oscillations, Dynamical Systems, and Bifurcations of Vector Fields,
    eq. (3.4.11), which gives Re c1. The contract's l1 = Re c1 / omega with
    <q, q> = 1/2 for q = T (1, -i) / 2 = v / 2 (docs/interface: Kuznetsov's l1), so the
    value is rescaled by (1/2) / <v/2, v/2> (c1 grows with |q|^2).
    """
    u, v, w1, w2 = sp.symbols("u v w1 w2")
    a_ = sp.nsimplify(a)
    b_ = 1 + a_**2
    f = sp.Matrix([a_ - (b_ + 1) * u + u**2 * v, b_ * u - u**2 * v])
    star = {u: a_, v: b_ / a_}
    jac = f.jacobian([u, v]).subs(star)
    omega = sp.sqrt(jac.det())
    (_, _, (vector,)) = next(e for e in jac.eigenvects() if sp.im(e[0]) > 0)
    vector = sp.Matrix([sp.simplify(c) for c in vector])
    t = sp.Matrix.hstack(vector.applyfunc(sp.re), -vector.applyfunc(sp.im))
    shifted = sp.Matrix([star[u], star[v]]) + t * sp.Matrix([w1, w2])
    g = sp.simplify(t.inv() * f.subs({u: shifted[0], v: shifted[1]}))
    d = lambda h, *xs: sp.diff(h, *xs).subs({w1: 0, w2: 0})  # noqa: E731
    f1, f2 = g
    re_c1 = sp.Rational(1, 16) * (
        d(f1, w1, 3) + d(f1, w1, w2, w2) + d(f2, w1, w1, w2) + d(f2, w2, 3)
    ) + 1 / (16 * omega) * (
        d(f1, w1, w2) * (d(f1, w1, 2) + d(f1, w2, 2))
        - d(f2, w1, w2) * (d(f2, w1, 2) + d(f2, w2, 2))
        - d(f1, w1, 2) * d(f2, w1, 2)
        + d(f1, w2, 2) * d(f2, w2, 2)
    )
    q_norm = sum(abs(c) ** 2 for c in vector) / 4
    return float(sp.N(re_c1 / omega * sp.Rational(1, 2) / q_norm, 30))


def brusselator_chain_scan(cells: int, d: float, interval, a: float = 1.0) -> dict:
    lo = interval[0]
    start = {}
    for i in range(cells):
        start.update({f"u{i}": a, f"v{i}": lo / a})
    trace = {"vary": "b", "interval": list(interval), "start": start, "direction": "increasing"}
    model = {"parameters": {"a": a, "b": lo, "d": d}, "equations": brusselator_equations(cells)}
    return {"model": model, "trace": [trace]}


def test_mode_rates_are_the_coupling_eigenvalues():
    # the closed form the chain references rest on, checked against numpy
    for cells in (2, 7, 20):
        coupling = np.zeros((cells, cells))
        for i in range(cells):
            coupling[i, max(i - 1, 0)] += 1.0
            coupling[i, min(i + 1, cells - 1)] += 1.0
            coupling[i, i] -= 2.0
        assert np.sort(-np.linalg.eigvalsh(coupling)) == pytest.approx(
            sorted(mode_rates(cells)), abs=1e-12
        )


def test_brusselator_cell_lyapunov_reference():
    # Sanity of the independent derivation: a supercritical Hopf point (Prigogine &
    # Lefever's Brusselator has a stable limit cycle past b = 1 + a^2; from memory).
    assert brusselator_cell_lyapunov(1.0) < 0.0


@pytest.mark.parametrize("d", [1e-4, 1e-6])
def test_two_hopf_points_closer_than_one_step(d):
    # Two Brusselator cells: modes mu = 0, 2, Hopf points at b = 2 and 2 + 4 d (a = 1),
    # gaps of 4e-4 and 4e-6 against steps of up to 0.05; frequencies sqrt(1 - 4 d^2), 1.
    result = run_scan(scan_from_dict(brusselator_chain_scan(2, d, (1.9, 2.1))))
    hopf = sorted((e for e in result.events if e.kind == "hopf"), key=lambda e: e.value)
    assert [e.value for e in hopf] == pytest.approx([2.0, 2.0 + 4.0 * d], abs=1e-12)
    assert [e.frequency for e in hopf] == pytest.approx([1.0, math.sqrt(1 - 4 * d * d)], abs=1e-12)
    assert all(e.details["method"].startswith("Newton") for e in hopf)
    # the in-phase mode: l1 of one cell, halved (q spread over two cells, <q, q> = 1/2)
    assert hopf[0].lyapunov == pytest.approx(brusselator_cell_lyapunov(1.0) / 2, rel=1e-9)


def test_cluster_of_branch_points_beside_a_fold():
    # Twenty cubic cells, d = 1e-3: on the uniform branch p = x^3 - x each fold has the
    # nineteen other modes crossing zero within 3e-6 (relative) of it, so the unstable
    # count jumps 0 -> 20 within one step. Every fold and branch point is located.
    cells, d = 20, 1e-3
    lower = min(r.real for r in np.roots([-1.0, 0.0, 1.0, -0.5]) if abs(r.imag) < 1e-12)
    trace = {"vary": "p", "interval": [-0.5, 0.5], "direction": "increasing"}
    trace.update(start={f"x{i}": lower for i in range(cells)}, switch_branches=False)
    model = {"parameters": {"p": -0.5, "d": d}, "equations": cubic_equations(cells)}
    result = run_scan(scan_from_dict({"model": model, "trace": [trace]}))
    mp.mp.dps = 30
    expected = []
    for k, rate in enumerate(mode_rates(cells)):
        for sign in (1, -1):  # lower fold side (x < 0) and upper (x > 0)
            x = sign * -mp.sqrt((1 - mp.mpf(d) * mp.mpf(rate)) / 3)
            expected.append(("fold" if k == 0 else "branch_point", float(x**3 - x)))
    found = sorted((e.kind, e.value) for e in result.events)
    assert len(found) == len(expected) == 2 * cells
    for kind, value in expected:
        nearest = min(found, key=lambda item: abs(item[1] - value))
        assert nearest[0] == kind
        assert abs(nearest[1] - value) <= 1e-12
    counts = result.branches[0].counts
    assert counts["refinement_points"] > 0 and counts["crowded_steps_unresolved"] == 0
    assert result.info()["counts"]["refinement_points"] == counts["refinement_points"]  # run.json


def test_refinement_is_capped_and_says_so(monkeypatch):
    # A budget of 4 points cannot separate 8 cells' modes: the run still ends, within the
    # budget, and run.json counts the steps left crowded. (The cap is what keeps a dense
    # cluster from hanging a run.)
    from branchline import runner

    crowding = sys.modules[runner.resolve_crowded_steps.__module__]  # wherever it lives
    monkeypatch.setattr(crowding, "MAX_REFINEMENT_POINTS", 4)
    cells = 8
    lower = min(r.real for r in np.roots([-1.0, 0.0, 1.0, -0.5]) if abs(r.imag) < 1e-12)
    trace = {"vary": "p", "interval": [-0.5, 0.5], "direction": "increasing"}
    trace.update(start={f"x{i}": lower for i in range(cells)}, switch_branches=False)
    model = {"parameters": {"p": -0.5, "d": 1e-3}, "equations": cubic_equations(cells)}
    result = run_scan(scan_from_dict({"model": model, "trace": [trace]}))
    counts = result.info()["counts"]
    assert counts["refinement_points"] <= 4
    assert counts["crowded_steps_unresolved"] >= 1
    assert result.status == "done"


HOPF_MODEL_D = 0.05
HOPF_INTERVAL = (1.95, 2.03)  # holds the Hopf points of modes k = 0 .. 3 of 20 cells


def hopf_chain_scan(kind: str) -> dict:
    """The 20-cell Brusselator chain (40 states) as expressions or as a Python model."""
    if kind == "expressions":
        scan = brusselator_chain_scan(BRUSSELATOR_CELLS, HOPF_MODEL_D, HOPF_INTERVAL)
        scan["trace"][0]["switch_branches"] = False
        return scan
    python = {"rhs": "cell_chains:brusselator_rhs", "size": 2 * BRUSSELATOR_CELLS}
    if kind == "python with Jacobian":
        python["jacobian"] = "cell_chains:brusselator_jacobian"
    trace = {"vary": "b", "interval": list(HOPF_INTERVAL), "direction": "increasing"}
    trace.update(start="cell_chains:brusselator_start", switch_branches=False)
    parameters = {"a": 1.0, "b": HOPF_INTERVAL[0], "d": HOPF_MODEL_D}
    return {"model": {"parameters": parameters, "python": python}, "trace": [trace]}


@pytest.mark.parametrize("kind", ["expressions", "python with Jacobian", "python without Jacobian"])
def test_every_hopf_point_of_a_40_state_model_is_refined(kind):
    # Hopf points b_k = 1 + a^2 + 2 d mu_k, omega_k = sqrt(a^2 - d^2 mu_k^2) (closed forms in
    # tests/cell_chains.py); each must come from Newton on the extended Hopf system (no
    # fallback) with its criticality; the in-phase mode's l1 is one cell's over 20.
    result = run_scan(scan_from_dict(hopf_chain_scan(kind)))
    rates = [r for r in mode_rates(BRUSSELATOR_CELLS) if 2 + 2 * HOPF_MODEL_D * r < HOPF_INTERVAL[1]]
    hopf = sorted((e for e in result.events if e.kind == "hopf"), key=lambda e: e.value)
    assert len(hopf) == len(rates) == 4
    # finite-difference Jacobians (no Jacobian given) leave errors of about eps^(2/3)
    tolerance = 1e-12 if kind != "python without Jacobian" else 1e-8
    for event, rate in zip(hopf, rates, strict=True):
        assert event.details["method"].startswith("Newton on the extended Hopf system")
        assert event.value == pytest.approx(2.0 + 2.0 * HOPF_MODEL_D * rate, abs=tolerance)
        assert event.frequency == pytest.approx(math.sqrt(1 - (HOPF_MODEL_D * rate) ** 2), abs=tolerance)
        assert event.criticality in ("supercritical", "subcritical")
        assert "not refined" not in event.note and "bisection" not in event.note
    expected_l1 = brusselator_cell_lyapunov(1.0) / BRUSSELATOR_CELLS
    # third derivatives: exact for expressions; differences of the given Jacobian, or of
    # the rhs, for Python models (common practice: h ~ eps^(1/3) leaves ~1e-6 and worse)
    rel = {"expressions": 1e-10, "python with Jacobian": 1e-7}.get(kind, 1e-4)
    assert hopf[0].lyapunov == pytest.approx(expected_l1, rel=rel)
    assert hopf[0].criticality == "supercritical"


def test_switching_stops_after_a_fixed_number_of_branches():
    # x' = x sin(p) - x^2: the trivial branch meets x = sin(p) at every p = k pi
    # (transcritical branch points, elementary calculus), nine of them in [0.5, 29];
    # at most eight branches are started, and a warning says how many points were left.
    scan = {
        "model": {"parameters": {"p": 0.5}, "equations": {"x": "x*sin(p) - x^2"}},
        "trace": [{"vary": "p", "interval": [0.5, 29.0], "start": {"x": 0.0}}],
    }
    result = run_scan(scan_from_dict(scan))
    points = sorted(e.value for e in result.events if e.trace == "trace1")
    assert points == pytest.approx([k * math.pi for k in range(1, 10)], abs=1e-12)
    assert len(result.branches) - 1 <= 8
    assert any("were not followed (at most 8 branches" in w for w in result.warnings)


def test_newton_on_a_defining_system_stops_once_converged():
    # A system whose residual carries noise of 1e-11 (as a finite-difference Jacobian
    # leaves in a Hopf system) cannot get its update below 1e-13: it must stop as
    # converged within a few iterations, at the root to the noise level, not run on
    # to "no convergence". Root of z^2 = 2 (elementary).
    from branchline.events.defining_systems import newton
    from branchline.numerics.tolerances import NEWTON_MAX_ITERATIONS

    calls = iter([1e-11 * (-1) ** k for k in range(NEWTON_MAX_ITERATIONS + 2)])

    def noisy(z):
        return np.array([z[0] ** 2 - 2.0 + next(calls)]), np.array([[2.0 * z[0]]])

    outcome = newton(noisy, np.array([1.0]))
    assert outcome.converged
    assert len(outcome.residual_norms) <= 10
    assert abs(outcome.solution[0] - math.sqrt(2.0)) <= 1e-11
    # A singular root is not taken for converged on a tiny residual alone: z^2 = 0 from 1e-3
    # has residual 1e-6 at once, but Newton halves its distance each time (linear rate).
    outcome = newton(lambda z: (np.array([z[0] ** 2]), np.array([[2.0 * z[0]]])), np.array([1e-3]))
    assert not outcome.converged or abs(outcome.solution[0]) <= 1e-8
