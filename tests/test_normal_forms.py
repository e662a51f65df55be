"""Normal-form coefficients of folds, Hopf points and branch points.

Reference values come from published closed forms and from independent
derivations done here with sympy (a different route than the invariant
formula the code uses), and from simulations with scipy's solve_ivp.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import sympy as sp
from scipy.integrate import solve_ivp

from branchline.events.normal_forms import (
    branch_point_normal_form,
    fold_normal_form,
    hopf_normal_form,
)
from branchline.model.build import build_model
from branchline.scan.loader import ExpressionModelSpec


def expression_model(equations: dict[str, str], parameters: dict[str, float]):
    return build_model(ExpressionModelSpec(parameters=parameters, equations=equations))


HOPF_NORMAL_FORM = {
    "x": "mu*x - omega*y + s*x*(x^2 + y^2)",
    "y": "omega*x + mu*y + s*y*(x^2 + y^2)",
}


# ---------------------------------------------------------------------------
# Hopf: the contract's normalization


@pytest.mark.parametrize("s", [-1.0, -0.3, 0.7, 2.5])
def test_lyapunov_coefficient_of_the_hopf_normal_form_is_s(s):
    # Interface contract (Kuznetsov, Elements of Applied Bifurcation Theory,
    # sections 3.4-3.5: z' = (mu + i) z + s z|z|^2 has c1 = s, l1 = Re c1 / omega):
    # with <q, q> = 1/2, l1 equals s exactly.
    model = expression_model(HOPF_NORMAL_FORM, {"mu": 0.0, "omega": 1.0, "s": s})
    form = hopf_normal_form(model, np.zeros(2), model.defaults, 1.0)
    assert form.lyapunov == pytest.approx(s, rel=1e-13)
    assert form.criticality == ("supercritical" if s < 0 else "subcritical")
    assert abs(np.vdot(form.right_vector, form.right_vector) - 0.5) < 1e-14
    assert abs(np.vdot(form.left_vector, form.right_vector) - 1.0) < 1e-14
    assert not form.near_bautin


@pytest.mark.parametrize("omega", [0.5, 3.0])
def test_lyapunov_coefficient_divides_by_the_frequency(omega):
    # z' = (mu + i omega) z + s z|z|^2: c1 = s, so l1 = s / omega (Kuznetsov,
    # section 3.5, definition of l1 = Re c1 / omega).
    model = expression_model(HOPF_NORMAL_FORM, {"mu": 0.0, "omega": omega, "s": -1.0})
    form = hopf_normal_form(model, np.zeros(2), model.defaults, omega)
    assert form.lyapunov == pytest.approx(-1.0 / omega, rel=1e-13)
    assert form.c1.real == pytest.approx(-1.0, rel=1e-13)


def test_hopf_normal_form_with_zero_cubic_term_is_flagged_near_bautin():
    # s = 0 with a small quadratic part that cancels exactly: l1 = 0 is the Bautin
    # condition (Kuznetsov, section 8.3); the criticality cannot be trusted.
    model = expression_model(HOPF_NORMAL_FORM, {"mu": 0.0, "omega": 1.0, "s": 0.0})
    form = hopf_normal_form(model, np.zeros(2), model.defaults, 1.0)
    assert form.lyapunov == 0.0
    assert form.near_bautin


def planar_hopf_coefficient(f_expr, g_expr, u, v, omega):
    """Guckenheimer & Holmes, Nonlinear Oscillations, Dynamical Systems, and
    Bifurcations of Vector Fields, eq. (3.4.11) (from memory): for
    u' = -omega v + f(u, v), v' = omega u + g(u, v), the cubic coefficient of
    r' = a r^3 is a = (1/16)(f_uuu + f_uvv + g_uuv + g_vvv)
    + 1/(16 omega) (f_uv (f_uu + f_vv) - g_uv (g_uu + g_vv) - f_uu g_uu + f_vv g_vv)."""
    d = sp.diff
    at0 = {u: 0, v: 0}
    f, g = f_expr, g_expr

    def val(e):
        return e.subs(at0)

    cubic = val(d(f, u, 3) + d(f, u, v, v) + d(g, u, u, v) + d(g, v, 3)) / 16
    quadratic = val(
        d(f, u, v) * (d(f, u, 2) + d(f, v, 2))
        - d(g, u, v) * (d(g, u, 2) + d(g, v, 2))
        - d(f, u, 2) * d(g, u, 2)
        + d(f, v, 2) * d(g, v, 2)
    ) / (16 * omega)
    return cubic + quadratic


def brusselator_lyapunov_by_planar_formula(a_value):
    """l1 of the Brusselator's Hopf point (Prigogine & Lefever, J. Chem. Phys. 48
    (1968) 1695) by an independent route: sympy moves the system to coordinates
    where the linear part is [[0, -omega], [omega, 0]] and the planar formula of
    Guckenheimer & Holmes applies. The coordinates are X = X0 + T (u, v) with
    T = [2 Re q, -2 Im q] and |q|^2 = 1/2, so that the complex amplitude u + i v
    is the contract's z and a = Re c1, l1 = a / omega."""
    a = sp.Rational(a_value)
    b = 1 + a**2
    x, y, u, v = sp.symbols("x y u v", real=True)
    rhs = sp.Matrix([a - (b + 1) * x + x**2 * y, b * x - x**2 * y])
    x0 = sp.Matrix([a, b / a])
    jac = rhs.jacobian([x, y]).subs({x: x0[0], y: x0[1]})
    omega = sp.sqrt(jac.det())
    assert sp.simplify(jac.trace()) == 0
    q = sp.Matrix([jac[0, 1], sp.I * omega - jac[0, 0]])  # (A - i omega) q = 0, first row
    assert sp.simplify((jac - sp.I * omega * sp.eye(2)) * q) == sp.zeros(2, 1)
    q = q / sp.sqrt(2 * sum(sp.Abs(c) ** 2 for c in q))
    t = sp.Matrix.hstack(2 * q.applyfunc(sp.re), -2 * q.applyfunc(sp.im))
    shifted = rhs.subs(
        {x: x0[0] + (t * sp.Matrix([u, v]))[0], y: x0[1] + (t * sp.Matrix([u, v]))[1]}
    )
    new = sp.simplify(t.inv() * shifted)
    linear = new.jacobian([u, v]).subs({u: 0, v: 0})
    assert sp.simplify(linear - sp.Matrix([[0, -omega], [omega, 0]])) == sp.zeros(2, 2)
    f = sp.expand(new[0] - (linear * sp.Matrix([u, v]))[0])
    g = sp.expand(new[1] - (linear * sp.Matrix([u, v]))[1])
    coefficient = planar_hopf_coefficient(f, g, u, v, omega)
    return float(sp.N(coefficient / omega, 30)), float(omega)


@pytest.mark.parametrize("a_value", ["1", "2", "3/2"])
def test_brusselator_lyapunov_coefficient_matches_the_planar_formula(a_value):
    l1_reference, omega_reference = brusselator_lyapunov_by_planar_formula(a_value)
    a = float(sp.Rational(a_value))
    b = 1.0 + a * a
    model = expression_model({"x": "a - (b + 1)*x + x^2*y", "y": "b*x - x^2*y"}, {"a": a, "b": b})
    form = hopf_normal_form(model, np.array([a, b / a]), model.defaults, a)
    assert omega_reference == pytest.approx(a, rel=1e-15)  # omega = a (Prigogine & Lefever)
    assert form.lyapunov < 0  # supercritical
    assert form.lyapunov == pytest.approx(l1_reference, rel=1e-10)


def test_planar_formula_reproduces_the_normal_form():
    # Sanity check of the reference itself: G&H's formula on the normal form gives s.
    u, v, s = sp.symbols("u v s")
    value = planar_hopf_coefficient(s * u * (u**2 + v**2), s * v * (u**2 + v**2), u, v, 1)
    assert sp.simplify(value - s) == 0


# ---------------------------------------------------------------------------
# Hopf: cycle amplitudes and escapes, cross-checked by simulation


def settled_half_ranges(model, x0, params, t_settle, t_record):
    def rhs(_t, z):
        return model.rhs(z, params)

    def jac(_t, z):
        return model.jacobian(z, params)

    settle = solve_ivp(rhs, (0, t_settle), x0, method="LSODA", jac=jac, rtol=1e-10, atol=1e-12)
    record = solve_ivp(
        rhs,
        (0, t_record),
        settle.y[:, -1],
        method="LSODA",
        jac=jac,
        rtol=1e-10,
        atol=1e-12,
        dense_output=True,
    )
    samples = record.sol(np.linspace(0, t_record, 20001))
    return 0.5 * (samples.max(axis=1) - samples.min(axis=1))


def predicted_half_ranges(form, growth_rate, distance):
    """Leading-order cycle size from the normal form r' = r (alpha'(0) dmu + Re(c1) r^2)
    (Kuznetsov, section 3.5): r^2 = -alpha' dmu / (omega l1); with x = x0 + 2 Re(z q),
    component j oscillates with half-range 2 r |q_j|."""
    radius = math.sqrt(-growth_rate * distance / (form.frequency * form.lyapunov))
    return 2.0 * radius * np.abs(form.right_vector)


def test_brusselator_cycle_amplitude_matches_the_normal_form():
    # Supercritical Hopf at b = 1 + a^2; Re lambda = (b - 1 - a^2)/2, so alpha' = 1/2
    # (Prigogine & Lefever 1968; from the trace of the Jacobian).
    a = 1.0
    b_c = 1.0 + a * a
    model = expression_model({"x": "a - (b + 1)*x + x^2*y", "y": "b*x - x^2*y"}, {"a": a, "b": b_c})
    form = hopf_normal_form(model, np.array([a, b_c / a]), model.defaults, a, k=1)
    assert form.growth_rate == pytest.approx(0.5, rel=1e-12)  # d/db (b - 1 - a^2)/2
    assert form.cycle_side == "above"  # supercritical, unstable equilibrium for b > b_c
    distance = 1e-3
    params = model.parameter_vector({"b": b_c + distance})
    predicted = predicted_half_ranges(form, 0.5, distance)
    assert form.amplitude_coefficient * math.sqrt(distance) == pytest.approx(
        math.sqrt(-0.5 * distance / (form.frequency * form.lyapunov)), rel=1e-12
    )
    start = np.array([a + predicted[0], (b_c + distance) / a])
    measured = settled_half_ranges(model, start, params, 20000, 60)
    # the next order is O(distance) relative (measured: 5e-4); allow 1 %
    np.testing.assert_allclose(measured, predicted, rtol=0.01)


def test_three_state_cycle_amplitude_includes_the_stable_direction():
    # The Hopf normal form coupled quadratically to a stable third state: the
    # quadratic terms feed back through z and change l1 (the -2<p, B(q, A^-1 B(q, qbar))>
    # and (2 i omega - A)^-1 terms of Kuznetsov's eq. (5.39)). Checked against
    # simulation only (no closed form used): the settled cycle's size.
    equations = {
        "x": "mu*x - y - 0.2*x*(x^2 + y^2) + x*z",
        "y": "x + mu*y - 0.2*y*(x^2 + y^2) + y*z",
        "z": "-2*z - 0.5*(x^2 + y^2) + 0.3*x*y",
    }
    model = expression_model(equations, {"mu": 0.0})
    form = hopf_normal_form(model, np.zeros(3), model.defaults, 1.0, k=0)
    assert form.lyapunov < 0
    assert form.growth_rate == pytest.approx(1.0, rel=1e-12)  # eigenvalues mu +- i, -2
    distance = 1e-3
    params = model.parameter_vector({"mu": distance})
    predicted = predicted_half_ranges(form, 1.0, distance)
    measured = settled_half_ranges(model, np.array([predicted[0], 0.0, 0.0]), params, 10000, 60)
    np.testing.assert_allclose(measured[:2], predicted[:2], rtol=0.01)


LORENZ = {"x": "sigma*(y - x)", "y": "r*x - y - x*z", "z": "x*y - b*z"}


def test_lorenz_hopf_is_subcritical_and_trajectories_leave():
    # Lorenz, J. Atmos. Sci. 20 (1963) 130; Strogatz, Nonlinear Dynamics and Chaos,
    # section 9.2: the Hopf bifurcation of C+ at r_H = sigma (sigma + b + 3)/(sigma - b - 1)
    # is subcritical.
    sigma, b = 10.0, 8.0 / 3.0
    r_h = sigma * (sigma + b + 3) / (sigma - b - 1)
    c = math.sqrt(b * (r_h - 1))
    model = expression_model(LORENZ, {"sigma": sigma, "r": r_h, "b": b})
    # from the characteristic polynomial at r_H (c1 = b (r + sigma); elementary algebra)
    omega = math.sqrt(b * (r_h + sigma))
    form = hopf_normal_form(model, np.array([c, c, r_h - 1]), model.defaults, omega, k=1)
    assert form.criticality == "subcritical"
    assert form.lyapunov > 0
    assert form.growth_rate > 0  # C+ loses stability as r grows (Strogatz, section 9.2)
    assert form.cycle_side == "below"  # the unstable cycles exist for r < r_H
    # past r_H the equilibrium is unstable with no small cycle around it (the
    # unstable cycle exists below r_H): a trajectory started 1e-4 away leaves its
    # neighbourhood (distance > 1). Growth rate there ~0.03, so 1000 time units.
    r = r_h + 1.0
    params = model.parameter_vector({"r": r})
    c = math.sqrt(b * (r - 1))
    centre = np.array([c, c, r - 1])
    start = centre + 1e-4 * np.real(form.right_vector)

    def left(_t, z):
        return float(np.linalg.norm(z - centre)) - 1.0

    left.terminal = True
    trajectory = solve_ivp(
        lambda _t, z: model.rhs(z, params), (0, 1000), start, rtol=1e-9, atol=1e-12, events=left
    )
    assert trajectory.status == 1  # the distance 1 was reached
    assert len(trajectory.t_events[0]) == 1


# ---------------------------------------------------------------------------
# fold


def test_fold_coefficient_of_the_fold_normal_form():
    # x' = p - x^2 (Kuznetsov, section 3.2: x' = beta + s x^2 with s = -1): a = -1,
    # beta = 1, two equilibria x = +-sqrt(p) for p > 0.
    model = expression_model({"x": "p - x^2"}, {"p": 0.0})
    form = fold_normal_form(model, np.zeros(1), model.defaults, 0)
    assert form.coefficient == pytest.approx(-1.0, rel=1e-15)
    assert form.parameter_sensitivity == pytest.approx(1.0, rel=1e-15)
    assert form.two_equilibria_side == "above"
    assert form.degenerate == ""


def test_fold_side_of_logistic_harvesting():
    # N' = N (1 - N) - h: the two equilibria N = (1 +- sqrt(1 - 4h))/2 exist for
    # h < 1/4 and meet at the fold h = 1/4, N = 1/2 (Strogatz, Nonlinear Dynamics and
    # Chaos, the fishery-harvesting exercise of section 3.7 (from memory); elementary
    # algebra).
    model = expression_model({"N": "N*(1 - N) - h"}, {"h": 0.25})
    form = fold_normal_form(model, np.array([0.5]), model.defaults, 0)
    assert form.two_equilibria_side == "below"
    assert form.coefficient == pytest.approx(-1.0, rel=1e-15)  # (1/2) f_NN q^2, q = 1


# ---------------------------------------------------------------------------
# branch point


def test_transcritical_tangents():
    # x' = p x - x^2: the branches x = 0 and x = p cross at the origin
    # (Strogatz, section 3.2), tangents (0, 1) and (1, 1)/sqrt(2) in (x, p).
    model = expression_model({"x": "p*x - x^2"}, {"p": 0.0})
    form = branch_point_normal_form(model, np.zeros(1), model.defaults, 0)
    assert form.branching == "transcritical"
    expected = np.array([[0.0, 1.0], [1.0, 1.0]]) / np.array([[1.0], [math.sqrt(2.0)]])
    for t in expected:
        assert np.max(np.abs(np.abs(form.tangents @ t))) == pytest.approx(1.0, abs=1e-13)
    assert form.discriminant > 0


def test_pitchfork_tangents():
    # x' = p x - x^3 (Strogatz, section 3.4): x = 0 and p = x^2 cross at the origin;
    # the second turns back in p: tangent (1, 0).
    model = expression_model({"x": "p*x - x^3"}, {"p": 0.0})
    form = branch_point_normal_form(model, np.zeros(1), model.defaults, 0)
    assert form.branching == "pitchfork"
    for t in (np.array([0.0, 1.0]), np.array([1.0, 0.0])):
        assert np.max(np.abs(form.tangents @ t)) == pytest.approx(1.0, abs=1e-13)


def test_lorenz_pitchfork_tangents():
    # Lorenz origin at r = 1 (Strogatz, section 9.2): C+- = (+-sqrt(b(r-1)), ..., r-1)
    # leave along (1, 1, 0) at fixed r, the origin branch along r.
    model = expression_model(LORENZ, {"sigma": 10.0, "r": 1.0, "b": 8.0 / 3.0})
    form = branch_point_normal_form(model, np.zeros(3), model.defaults, 1)
    assert form.branching == "pitchfork"
    for t in (np.array([0, 0, 0, 1.0]), np.array([1.0, 1.0, 0, 0]) / math.sqrt(2.0)):
        assert np.max(np.abs(form.tangents @ t)) == pytest.approx(1.0, abs=1e-12)
