"""The bundled demo scans run cleanly and their events sit where elementary
analysis of each model puts them. The scenarios are invented; the checks are
closed forms derived from the model equations as written in each scan."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

import branchline

SCANS = Path(__file__).resolve().parents[1] / "scans"


def _run(name: str):
    result = branchline.run(SCANS / f"{name}.toml")
    assert result.status == "done", result.message
    return result


def _values(result, kind: str) -> list[float]:
    return sorted(e.value for e in result.events if e.kind == kind)


@pytest.mark.parametrize("path", sorted(SCANS.glob("*.toml")), ids=lambda p: p.stem)
def test_every_demo_scan_runs_and_finds_stability_changes(path, tmp_path):
    result = branchline.run(path, out=tmp_path / path.stem)
    assert result.status == "done", result.message
    assert result.events
    assert (tmp_path / path.stem / "report.md").read_text().count("Caution") == 1


def test_harvested_stock_folds_match_the_quartic():
    # Equilibria off B = 0 satisfy F = r (1 - B/K) - m B / (h^2 + B^2); the folds are
    # where dF/dB = 0, i.e. r/K (h^2 + B^2)^2 + m (h^2 - B^2) = 0 (elementary calculus),
    # a quartic in B solved here with numpy.roots.
    r, K, m, h = 0.6, 1.0, 0.11, 0.12
    c = r / K
    quartic = [c, 0.0, 2 * c * h**2 - m, 0.0, c * h**4 + m * h**2]
    roots = [z.real for z in np.roots(quartic) if abs(z.imag) < 1e-12 and z.real > 0]
    expected = sorted(r * (1 - b / K) - m * b / (h**2 + b**2) for b in roots)
    found = _values(_run("harvested_stock"), "fold")
    assert len(found) == 2
    for value, exact in zip(found, expected):
        assert value == pytest.approx(exact, rel=1e-9)


def test_toggle_switch_pitchfork_at_a_equals_two():
    # Symmetric states u = v = s with s (1 + s^2) = a; the antisymmetric mode's
    # eigenvalue -1 + 2 a s / (1 + s^2)^2 vanishes where 2 s^2 = 1 + s^2, so s = 1, a = 2
    # (elementary algebra on the scan's equations with n = 2).
    result = _run("toggle_switch")
    (event,) = [e for e in result.events if e.kind == "branch_point"]
    assert event.value == pytest.approx(2.0, rel=1e-12)
    assert event.branching == "pitchfork"
    children = [b for b in result.branches if b.parent == "symmetric"]
    assert len(children) == 2 and all(b.stable.all() for b in children)


def test_enriched_pond_hopf_and_invasion_points():
    # Prey-predator model with a Holling type II response (Rosenzweig & MacArthur,
    # American Naturalist 97, 1963; closed forms from memory, re-derived by elementary
    # algebra): the coexistence state has A* = m / (a (e - m h)); grazers invade where
    # K = A*, and the Hopf point sits where A* is the hump of the prey isocline,
    # K = 2 A* + 1 / (a h). Its supercriticality is the known result for this model
    # (the "paradox of enrichment", Rosenzweig, Science 171, 1971; from memory).
    a, h, e, m = 2.0, 0.5, 0.4, 0.3
    a_star = m / (a * (e - m * h))
    result = _run("enriched_pond")
    (hopf,) = [ev for ev in result.events if ev.kind == "hopf"]
    assert hopf.value == pytest.approx(2 * a_star + 1 / (a * h), rel=1e-10)
    assert hopf.criticality == "supercritical"
    invasion = [ev for ev in result.events if ev.kind == "branch_point"]
    assert invasion and invasion[0].value == pytest.approx(a_star, rel=1e-10)
    assert invasion[0].branching == "transcritical"


def reactor_reference():
    """Folds and Hopf points of the cooled-reactor scan, derived independently with
    sympy and scipy.optimize.brentq (elementary calculus on the scan's equations): the
    equilibria, parametrized by T, have C(T) from dC/dt = 0 and T_c(T) from dT/dt = 0.
    Folds are the extrema of T_c(T); Hopf points are where the Jacobian's trace
    vanishes with positive determinant (frequency sqrt(det))."""
    import sympy as sp
    import tomllib
    from scipy.optimize import brentq

    data = tomllib.loads((SCANS / "cooled_reactor.toml").read_text())
    values = {sp.Symbol(k): v for k, v in data["model"]["parameters"].items() if k != "T_c"}
    C, T, T_c = sp.symbols("C T T_c")
    q, V, C_in, T_in, k0, Ea_R, heat, rho_cp, UA = sp.symbols(
        "q V C_in T_in k0 Ea_R heat rho_cp UA"
    )
    k = k0 * sp.exp(-Ea_R / T)
    f_c = q / V * (C_in - C) - k * C
    f_t = q / V * (T_in - T) + heat / rho_cp * k * C - UA / (V * rho_cp) * (T - T_c)
    c_of_t = sp.solve(f_c, C)[0]
    tc_of_t = sp.solve(f_t, T_c)[0].subs(C, c_of_t)
    jac = sp.Matrix([f_c, f_t]).jacobian([C, T]).subs(C, c_of_t).subs(T_c, tc_of_t)

    def along(expr):
        return sp.lambdify(T, expr.subs(values))

    slope, coolant = along(sp.diff(tc_of_t, T)), along(tc_of_t)
    trace, det = along(jac.trace()), along(jac.det())
    grid = np.linspace(280.0, 500.0, 2201)

    def zeros(f):
        v = np.array([f(t) for t in grid])
        rows = np.nonzero(np.diff(np.sign(v)))[0]
        return [brentq(f, grid[i], grid[i + 1], xtol=1e-13) for i in rows]

    folds = sorted(float(coolant(t)) for t in zeros(slope))
    hopf = [(float(coolant(t)), math.sqrt(det(t))) for t in zeros(trace) if det(t) > 0]
    return folds, hopf


def test_cooled_reactor_has_a_hysteresis_window_and_a_subcritical_hopf():
    folds_exact, hopf_exact = reactor_reference()
    result = _run("cooled_reactor")
    folds = _values(result, "fold")
    assert len(folds) == 2
    assert folds == pytest.approx(folds_exact, rel=1e-10)
    (hopf,) = [e for e in result.events if e.kind == "hopf"]
    ((hopf_value, hopf_frequency),) = hopf_exact
    assert hopf.value == pytest.approx(hopf_value, rel=1e-10)
    assert hopf.frequency == pytest.approx(hopf_frequency, rel=1e-8)
    # The criticality has no independent reference here (the plant is invented); it is
    # branchline's own l1 sign, checked on published models in test_normal_forms.py.
    assert hopf.criticality == "subcritical"
    assert folds[0] < hopf.value < folds[1]
    # On the located fold the Jacobian is singular: its determinant vanishes to roundoff.
    for event in (e for e in result.events if e.kind == "fold"):
        jac = result.model.jacobian(event.state, event.parameters)
        scale = np.abs(jac).max() ** 2
        assert abs(np.linalg.det(jac)) <= 1e-9 * scale
    assert math.isfinite(hopf.frequency) and hopf.frequency > 0


def test_cooled_reactor_hopf_onset_is_hard_in_simulation():
    # Independent check of the subcritical sign with scipy.integrate.solve_ivp (LSODA):
    # just past the Hopf point (T_c 0.05 K lower) a 1 mK disturbance of the hot
    # steady state does not settle on a small cycle; the state leaves for the cold
    # sheet, tens of kelvin away (a hard onset; Kuznetsov, Elements of Applied
    # Bifurcation Theory, section 3.5: no small stable cycle when l1 > 0).
    from scipy.integrate import solve_ivp

    from branchline.problems.equilibrium import solve_equilibrium

    result = _run("cooled_reactor")
    (hopf,) = [e for e in result.events if e.kind == "hopf"]
    model = result.model
    p = hopf.parameters.copy()
    p[model.parameter_index("T_c")] = hopf.value - 0.05
    steady = solve_equilibrium(model, hopf.state, p)
    assert steady.converged
    orbit = solve_ivp(
        lambda t, x: model.rhs(x, p),
        (0.0, 3000.0),
        steady.state + np.array([0.0, 1e-3]),
        method="LSODA",
        rtol=1e-10,
        atol=1e-12,
    )
    assert orbit.success
    assert abs(orbit.y[1, -1] - steady.state[1]) > 20.0
    cold = [e for e in result.events if e.kind == "fold"]
    assert orbit.y[1, -1] < min(e.state[1] for e in cold)
