"""Detection and location of folds, Hopf points and branch points.

Every located value is compared with a closed form from a published source
(derived here with sympy where the source gives only the equations), to
1e-10 relative or tighter: events are refined on their defining systems,
not read off the grid of computed points.
"""

from __future__ import annotations

import json
import math
from dataclasses import replace

import numpy as np
import pytest
import scipy.sparse as sps
import scipy.sparse.linalg as spla
import sympy as sp

from branchline.events import location
from branchline.events.detection import bordered_determinant, hopf_test
from branchline.model.build import build_model
from branchline.numerics.newton import failure
from branchline.numerics.policy import LinearAlgebraPolicy
from branchline.problems.equilibrium_branch import (
    TEST_FUNCTIONS,
    equilibrium_tests,
    find_brackets,
    locate_events,
    trace_branch,
)
from branchline.scan.loader import ExpressionModelSpec, StepSettings
from reference_cases import COMBINATIONS, traced

PARAMETER_RTOL = 1e-10


def expression_model(equations: dict[str, str], parameters: dict[str, float]):
    return build_model(ExpressionModelSpec(parameters=parameters, equations=equations))


def trace(model, vary, start, interval, steps=None, **overrides):
    params = model.parameter_vector(overrides)
    return trace_branch(
        model,
        "main",
        vary,
        params,
        np.asarray(start, float),
        interval,
        "both",
        steps or StepSettings(),
    )


def of_kind(found, kind):
    return [e for e in found if e.kind == kind]


# ---------------------------------------------------------------------------
# test functions


def bialternate_product(a: np.ndarray) -> np.ndarray:
    """The bialternate product 2A (.) I, element by element (Kuznetsov, Elements of
    Applied Bifurcation Theory, section 10.2.2 (from memory); its eigenvalues are
    lambda_i + lambda_j, i < j). Rows and columns are pairs (p, q), p > q."""
    n = a.shape[0]
    pairs = [(p, q) for p in range(1, n) for q in range(p)]
    out = np.zeros((len(pairs), len(pairs)))
    for row, (p, q) in enumerate(pairs):
        for col, (r, s) in enumerate(pairs):
            if r == q:
                out[row, col] = -a[p, s]
            elif r != p and s == q:
                out[row, col] = a[p, r]
            elif r == p and s == q:
                out[row, col] = a[p, p] + a[q, q]
            elif r == p and s != q:
                out[row, col] = a[q, s]
            elif s == p:
                out[row, col] = -a[q, r]
    return out


@pytest.mark.parametrize("n", [2, 3, 4, 6, 9, 12])
def test_hopf_test_is_the_determinant_of_the_bialternate_product(n):
    rng = np.random.default_rng(n)
    a = rng.normal(size=(n, n))
    lam = np.linalg.eigvals(a).astype(complex)
    reference = np.linalg.det(bialternate_product(a))
    assert hopf_test(lam) == pytest.approx(reference, rel=1e-9)


def test_hopf_test_keeps_its_sign_where_the_product_overflows():
    # 40 eigenvalues of size ~1e3: 780 factors, the plain product overflows.
    rng = np.random.default_rng(1)
    lam = -1e3 * (1.0 + rng.random(40)).astype(complex)
    lam[0] = 1e3 * 0.5
    i, j = np.triu_indices(40, 1)
    negative_factors = np.count_nonzero((lam[i] + lam[j]).real < 0)
    value = hopf_test(lam)
    assert math.isfinite(value) and value != 0.0
    assert np.sign(value) == (-1.0) ** negative_factors


def test_hopf_test_for_long_rows_follows_the_leading_complex_pair():
    # more than BIALTERNATE_MAX_SIZE eigenvalues: the sign flips exactly when a
    # complex pair crosses, not when real ones come and go.
    base = -np.arange(1.0, 61.0).astype(complex)
    before = np.concatenate([[-0.01 + 2j, -0.01 - 2j], base])
    after = np.concatenate([[0.01 + 2j, 0.01 - 2j], base])
    assert np.sign(hopf_test(before)) == -np.sign(hopf_test(after))
    assert abs(hopf_test(after)) == pytest.approx(0.01)
    shuffled = np.concatenate([[-0.01 + 2j, -0.01 - 2j], base[:-5]])
    assert np.sign(hopf_test(shuffled)) == np.sign(hopf_test(before))


@pytest.mark.parametrize("n", [1, 2, 3, 5, 8])
def test_bordered_determinant_matches_lapack(n):
    rng = np.random.default_rng(10 + n)
    a, b, t = rng.normal(size=(n, n)), rng.normal(size=n), rng.normal(size=n + 1)
    full = np.block([[a, b[:, None]], [t[None, :]]])
    assert bordered_determinant(a, b, t) == pytest.approx(np.linalg.det(full), rel=1e-12)


def test_bordered_determinant_of_a_large_sparse_jacobian_has_the_right_sign():
    n = 80
    rng = np.random.default_rng(3)
    a = sps.diags(
        [rng.normal(size=n - 1), -2.0 + rng.random(n), rng.normal(size=n - 1)], [-1, 0, 1]
    )
    b, t = rng.normal(size=n), rng.normal(size=n + 1)
    full = np.block([[a.toarray(), b[:, None]], [t[None, :]]])
    sign, _ = np.linalg.slogdet(full)
    assert np.sign(bordered_determinant(sps.csc_matrix(a), b, t)) == sign


def test_equilibrium_tests_order():
    a = np.array([[0.0, -1.0], [1.0, -0.5]])
    values = equilibrium_tests(
        a, np.array([1.0, 0.0]), np.array([0.6, 0.0, 0.8]), np.linalg.eigvals(a).astype(complex)
    )
    assert TEST_FUNCTIONS == ("fold", "hopf", "branch_point")
    assert values[0] == 0.8
    assert values[1] == pytest.approx(-0.5)  # trace: lambda_1 + lambda_2
    assert values[2] == pytest.approx(
        np.linalg.det(np.array([[0, -1, 1], [1, -0.5, 0], [0.6, 0, 0.8]]))
    )


# ---------------------------------------------------------------------------
# folds


def test_fold_of_logistic_harvesting():
    # N' = N (1 - N) - h has a fold at h = 1/4, N = 1/2 (Strogatz, Nonlinear Dynamics
    # and Chaos, the fishery-harvesting exercise of section 3.7 (from memory);
    # elementary algebra).
    model = expression_model({"N": "N*(1 - N) - h"}, {"h": 0.1})
    branch = trace(model, "h", [0.9], (0.0, 0.4))
    found = locate_events(model, branch)
    assert [e.kind for e in found] == ["fold"]
    fold = found[0]
    assert fold.value == pytest.approx(0.25, rel=1e-14)
    assert fold.state[0] == pytest.approx(0.5, rel=1e-7)  # sqrt of the residual: 1e-16 -> 1e-8
    assert fold.parameters[0] == fold.value
    assert "two equilibria nearby for h < 0.25" in fold.note
    # (1/2) f_NN with unit eigenvectors in one state: f_NN = -2 (elementary calculus).
    assert fold.fold_coefficient == pytest.approx(-1.0, rel=1e-6)
    history = fold.details["newton_residual_norms"]
    assert history[-1] < 1e-15
    assert len(history) <= 6  # quadratic convergence: a handful of iterations
    assert fold.details["method"].startswith("Newton")
    assert branch.arclength[0] <= fold.arclength <= branch.arclength[-1]
    json.dumps(fold.details)


def test_folds_of_a_cubic_located_to_rounding():
    # x' = p + x - x^3: folds at x = +-1/sqrt(3), p = -+2/(3 sqrt(3)) (Strogatz,
    # section 3.6, the imperfect pitchfork with r = 1).
    model = expression_model({"x": "p + x - x^3"}, {"p": -1.0})
    # start guess: the real root of x^3 - x + 1 = 0 (p = -1), minus the plastic number
    branch = trace(model, "p", [-1.3247179572447460], (-1.0, 1.0))
    folds = of_kind(locate_events(model, branch), "fold")
    assert len(folds) == 2
    exact = 2.0 / (3.0 * math.sqrt(3.0))
    assert sorted(f.value for f in folds) == pytest.approx([-exact, exact], rel=1e-14)
    assert sorted(f.state[0] for f in folds) == pytest.approx(
        [-1 / math.sqrt(3), 1 / math.sqrt(3)], rel=1e-7
    )


# ---------------------------------------------------------------------------
# Hopf points


BRUSSELATOR = {"x": "a - (b + 1)*x + x^2*y", "y": "b*x - x^2*y"}


@pytest.mark.parametrize("a", [0.5, 1.0, 2.0, 3.0])
def test_brusselator_hopf(a):
    # Prigogine & Lefever, J. Chem. Phys. 48 (1968) 1695: the equilibrium (a, b/a) has
    # trace b - 1 - a^2 and determinant a^2, so the Hopf point is b = 1 + a^2, omega = a.
    model = expression_model(BRUSSELATOR, {"a": a, "b": 1.0})
    branch = trace(model, "b", [a, 1.0 / a], (0.5, 2.0 + 2 * a * a))
    hopf = of_kind(locate_events(model, branch), "hopf")
    assert len(hopf) == 1
    event = hopf[0]
    assert event.value == pytest.approx(1.0 + a * a, rel=1e-14)
    assert event.frequency == pytest.approx(a, rel=1e-13)
    np.testing.assert_allclose(event.state, [a, (1 + a * a) / a], rtol=1e-14)
    # Supercritical for every a > 0 (known for the Brusselator, recalled from memory; the
    # sign is checked against an independent sympy derivation in test_normal_forms.py).
    assert event.criticality == "supercritical" and event.lyapunov < 0
    assert f"small stable cycles for b > {1 + a * a:.6g}" in event.note
    assert event.details["newton_residual_norms"][-1] < 1e-14
    assert len(event.details["newton_residual_norms"]) <= 6
    assert math.isclose(event.parameters[0], a) and event.parameters[1] == event.value
    json.dumps(event.details)


LORENZ = {"x": "sigma*(y - x)", "y": "r*x - y - x*z", "z": "x*y - b*z"}


def lorenz_hopf_reference(sigma_value, b_value):
    """r_H and omega^2 of C+ from the characteristic polynomial (Lorenz 1963;
    Strogatz, Nonlinear Dynamics and Chaos, section 9.2 and exercise 9.2.1):
    lambda^3 + c2 lambda^2 + c1 lambda + c0 has roots +-i omega iff c2 c1 = c0, omega^2 = c1."""
    sigma, b, r, lam, x, y, z = sp.symbols("sigma b r lambda x y z", positive=True)
    rhs = sp.Matrix([sigma * (y - x), r * x - y - x * z, x * y - b * z])
    c = sp.sqrt(b * (r - 1))
    jac = rhs.jacobian([x, y, z]).subs({x: c, y: c, z: r - 1})
    poly = sp.Poly(sp.expand((lam * sp.eye(3) - jac).det()), lam)
    _, c2, c1, c0 = poly.all_coeffs()
    values = {sigma: sp.nsimplify(sigma_value), b: sp.nsimplify(b_value)}
    roots = sp.solve(sp.Eq((c2 * c1).subs(values), c0.subs(values)), r)
    r_h = next(root for root in roots if root.is_positive)
    return r_h, c1.subs(values).subs(r, r_h)


def test_lorenz_pitchfork_and_subcritical_hopf():
    sigma, b = 10.0, 8.0 / 3.0
    r_h, omega_squared = lorenz_hopf_reference(10, sp.Rational(8, 3))
    # Strogatz's closed form sigma (sigma + b + 3)/(sigma - b - 1) = 470/19 (section 9.2,
    # recalled from memory; the sympy derivation above is the reference)
    assert sp.simplify(r_h - sp.Rational(470, 19)) == 0
    model = expression_model(LORENZ, {"sigma": sigma, "r": 0.5, "b": b})
    origin = trace(model, "r", [0.0, 0.0, 0.0], (0.0, 30.0))
    found = locate_events(model, origin)
    # The origin has eigenvalue 0 at r = 1, where C+- are born in a pitchfork (Strogatz,
    # section 9.2; elementary: det of the Jacobian at 0 is sigma b (1 - r)).
    assert [e.kind for e in found] == ["branch_point"]
    assert found[0].value == pytest.approx(1.0, abs=1e-14)
    assert found[0].branching == "pitchfork"
    # C+ = (sqrt(b (r - 1)), sqrt(b (r - 1)), r - 1), traced from r = 20 (guess off it)
    branch = trace(model, "r", [8.0, 8.0, 20.0], (1.5, 30.0), r=20.0)
    hopf = of_kind(locate_events(model, branch), "hopf")
    assert len(hopf) == 1
    assert hopf[0].value == pytest.approx(float(r_h), rel=PARAMETER_RTOL)
    assert hopf[0].frequency == pytest.approx(math.sqrt(float(omega_squared)), rel=PARAMETER_RTOL)
    # Subcritical (Strogatz, section 9.2, from memory; confirmed by simulation in
    # test_normal_forms.py).
    assert hopf[0].criticality == "subcritical" and hopf[0].lyapunov > 0
    assert len(hopf[0].details["newton_residual_norms"]) <= 6


def fitzhugh_nagumo_hopf_reference(a_value, b_value, eps_value):
    """Hopf points of v' = v - v^3/3 - w + I, w' = eps (v + a - b w) (FitzHugh,
    Biophys. J. 1 (1961) 445): trace of the Jacobian zero with positive determinant."""
    v, w, current = sp.symbols("v w I")
    a, b, eps = (sp.nsimplify(value) for value in (a_value, b_value, eps_value))
    rhs = sp.Matrix([v - v**3 / 3 - w + current, eps * (v + a - b * w)])
    jac = rhs.jacobian([v, w])
    points = []
    for v_h in sp.solve(sp.Eq(jac.trace(), 0), v):
        w_h = (v_h + a) / b
        i_h = sp.solve(rhs[0].subs({v: v_h, w: w_h}), current)[0]
        det = jac.det().subs(v, v_h)
        assert det > 0
        points.append((float(i_h), float(sp.sqrt(det)), float(v_h)))
    return sorted(points)


def test_fitzhugh_nagumo_has_two_hopf_points_on_its_branch():
    # a = 0.7, b = 0.8, eps = 0.08: FitzHugh's 1961 values (from memory). For b < 1
    # the equilibrium is unique, so both Hopf points lie on one branch.
    reference = fitzhugh_nagumo_hopf_reference(0.7, 0.8, 0.08)
    model = expression_model(
        {"v": "v - v^3/3 - w + I", "w": "eps*(v + a - b*w)"},
        {"a": 0.7, "b": 0.8, "eps": 0.08, "I": 0.0},
    )
    branch = trace(model, "I", [-1.2, -0.6], (-1.0, 3.0))
    hopf = of_kind(locate_events(model, branch), "hopf")
    assert len(hopf) == 2
    for event, (i_h, omega, v_h) in zip(hopf, reference, strict=True):
        assert event.value == pytest.approx(i_h, rel=PARAMETER_RTOL)
        assert event.frequency == pytest.approx(omega, rel=PARAMETER_RTOL)
        assert event.state[0] == pytest.approx(v_h, rel=PARAMETER_RTOL)
    # trace order: ascending arclength
    assert hopf[0].arclength < hopf[1].arclength


def test_neutral_saddle_gives_no_hopf():
    # x' = p x + y - x^3, y' = x: Jacobian [[p, 1], [1, 0]] has real eigenvalues
    # (p +- sqrt(p^2 + 4))/2 summing to p: a neutral saddle at p = 0, where the
    # bialternate test vanishes but no Hopf bifurcation occurs (Kuznetsov, section 10.2.2).
    model = expression_model({"x": "p*x + y - x^3", "y": "x"}, {"p": -1.0})
    branch = trace(model, "p", [0.0, 0.0], (-1.0, 1.0))
    hopf_column = branch.test_values[:, TEST_FUNCTIONS.index("hopf")]
    assert np.any(np.sign(hopf_column[:-1]) != np.sign(hopf_column[1:]))  # the test did fire
    assert locate_events(model, branch) == []


@pytest.mark.parametrize("sign", [1, -1])
def test_node_turning_into_a_focus_gives_no_hopf(sign):
    # Jacobian [[s, 1], [-p, s]] at the origin: eigenvalues s +- sqrt(-p), two real
    # ones meeting at p = 0 and leaving as a complex pair with real part s != 0 (an
    # unstable or stable node turning into a focus; Strogatz, section 5.2). The count
    # of complex unstable eigenvalues changes, but nothing crosses the imaginary axis.
    model = expression_model(
        {"x": f"{sign}*x + y - x^3", "y": f"-p*x + {sign}*y - y^3"}, {"p": -0.5}
    )
    branch = trace(model, "p", [0.0, 0.0], (-0.5, 0.5))
    assert locate_events(model, branch) == []


TWO_OSCILLATORS = {
    "x1": "p*x1 - y1 - x1*(x1^2 + y1^2)",
    "y1": "x1 + p*y1 - y1*(x1^2 + y1^2)",
    "x2": "(p - d)*x2 - 2*y2 - x2*(x2^2 + y2^2)",
    "y2": "2*x2 + (p - d)*y2 - y2*(x2^2 + y2^2)",
}


@pytest.mark.parametrize("gap", [1e-3, 1e-6])
def test_two_pairs_crossing_close_together_are_both_found(gap):
    # Two uncoupled Hopf normal forms (Kuznetsov, section 3.4): pairs 0 +- i at p = 0
    # and 0 +- 2i at p = gap. With steps much longer than the gap, the bialternate
    # test changes sign twice within a step; both crossings are still found. Each block
    # z' = (mu + i omega) z - z|z|^2 has c1 = -1, so l1 = Re c1 / omega = -1/omega
    # (Kuznetsov, Elements of Applied Bifurcation Theory, section 3.5; with the contract's
    # <q, q> = 1/2 over all states, the other block's zero components leave it unchanged).
    model = expression_model(TWO_OSCILLATORS, {"p": -0.5, "d": gap})
    branch = trace(model, "p", [0, 0, 0, 0], (-0.5, 0.5), StepSettings(initial=0.05, largest=0.1))
    hopf = of_kind(locate_events(model, branch), "hopf")
    assert [h.frequency for h in hopf] == pytest.approx([1.0, 2.0], rel=1e-13)
    assert [h.value for h in hopf] == pytest.approx([0.0, gap], abs=1e-14)
    assert all(h.criticality == "supercritical" for h in hopf)
    assert [h.lyapunov for h in hopf] == pytest.approx([-1.0, -0.5], rel=1e-12)


# ---------------------------------------------------------------------------
# branch points


def test_pitchfork_met_along_the_turning_branch_is_one_branch_point():
    # On p = x^2 (x' = p x - x^3, Strogatz section 3.4) the branch turns back at the
    # pitchfork: the fold test and the branch-point test both change sign there. One
    # event, a branch point.
    model = expression_model({"x": "p*x - x^3"}, {"p": 0.25})
    branch = trace(model, "p", [0.5], (-1.0, 1.0), StepSettings(initial=0.013))
    kinds = {b.kind for b in find_brackets(branch)}
    assert {"fold", "branch_point"} <= kinds
    found = locate_events(model, branch)
    assert [e.kind for e in found] == ["branch_point"]
    assert found[0].branching == "pitchfork"
    assert abs(found[0].value) < 1e-14 and abs(found[0].state[0]) < 1e-7


def test_transcritical_branch_point():
    # x' = p x - x^2 (Strogatz, section 3.2): the trivial branch meets x = p at p = 0.
    model = expression_model({"x": "p*x - x^2"}, {"p": -0.5})
    branch = trace(model, "p", [0.0], (-0.5, 0.5))
    found = locate_events(model, branch)
    assert [(e.kind, e.branching) for e in found] == [("branch_point", "transcritical")]
    assert found[0].value == pytest.approx(0.0, abs=1e-15)
    tangents = np.array(found[0].details["tangents"])
    traced = found[0].details["traced_tangent_index"]
    np.testing.assert_allclose(np.abs(tangents[traced]), [0.0, 1.0], atol=1e-14)
    np.testing.assert_allclose(np.abs(tangents[1 - traced]), [2**-0.5, 2**-0.5], atol=1e-14)


def test_shifted_transcritical_located_to_rounding():
    # x' = (p - 0.3) (x - 1) - (x - 1)^2: the branch x = 1 meets x = p + 0.7 at p = 0.3.
    model = expression_model({"x": "(p - 0.3)*(x - 1) - (x - 1)^2"}, {"p": 0.0})
    branch = trace(model, "p", [1.0], (0.0, 1.0), StepSettings(initial=0.0371))
    found = locate_events(model, branch)
    assert len(found) == 1
    assert found[0].value == pytest.approx(0.3, rel=1e-14)
    assert found[0].state[0] == pytest.approx(1.0, rel=1e-14)


# ---------------------------------------------------------------------------
# fallback


def test_bisection_fallback_is_announced(monkeypatch):
    # Force Newton on the defining systems to give up: the events are then placed by
    # bisection on the test function along the branch, and the note says so.
    model = expression_model(BRUSSELATOR, {"a": 1.0, "b": 1.0})
    branch = trace(model, "b", [1.0, 1.0], (0.5, 3.0))
    real_newton = location.newton

    def failing_on_large_systems(system, z0, scale=1.0):
        if z0.shape[0] > 3:
            return failure(z0, "forced failure")
        return real_newton(system, z0, scale)

    monkeypatch.setattr(location, "newton", failing_on_large_systems)
    hopf = of_kind(locate_events(model, branch), "hopf")
    assert len(hopf) == 1
    assert "bisection" in hopf[0].note and "forced failure" in hopf[0].note
    assert hopf[0].value == pytest.approx(2.0, rel=1e-12)  # b = 1 + a^2 (Prigogine & Lefever)
    assert hopf[0].details["method"].startswith("bisection")


# ---------------------------------------------------------------------------
# large models: the sparse linear-algebra path agrees with the dense one


def reaction_diffusion_brusselator(cells: int, b: str = "b") -> dict[str, str]:
    """The Brusselator in `cells` cells coupled by diffusion, no-flux ends (Prigogine &
    Lefever 1968). Equal diffusion of both species: the uniform state has its Hopf
    point at b = 1 + a^2 as in one cell, and each spatial mode crosses later."""
    equations = {}
    for i in range(cells):
        left = i - 1 if i > 0 else 1
        right = i + 1 if i < cells - 1 else cells - 2
        equations[f"u{i}"] = f"a - ({b} + 1)*u{i} + u{i}^2*v{i} + D*(u{left} - 2*u{i} + u{right})"
        equations[f"v{i}"] = f"{b}*u{i} - u{i}^2*v{i} + D*(v{left} - 2*v{i} + v{right})"
    return equations


SPARSE_CASES = {
    # name: equations, start, interval
    "pitchfork": (
        {"x": "p*x - x^3 + 0.3*x*z", "y": "-y + x^2", "z": "-2*z + y", "w": "-w + x"},
        [0.0, 0.0, 0.0, 0.0],
        (-0.5, 0.5),
    ),
    "transcritical": (
        {"x": "p*x - x^2 + 0.3*x*z", "y": "-y + x^2", "z": "-2*z + y", "w": "-w + x"},
        [0.0, 0.0, 0.0, 0.0],
        (-0.5, 0.5),
    ),
    "fold": (
        {"x": "x*(1 - x) - p + 0.1*y", "y": "-y + x^2", "z": "-2*z + y", "w": "-w + x"},
        [0.9, 0.81, 0.4, 0.9],
        (0.0, 0.5),
    ),
    "hopf": (
        reaction_diffusion_brusselator(4, "p"),
        [1.0] * 4 + [1.5] * 4,
        (1.5, 2.5),
    ),
}


@pytest.mark.parametrize("case", sorted(SPARSE_CASES))
def test_sparse_location_agrees_with_dense(case):
    # Large models (more than location_sparse_above states) are located with SuperLU and
    # shift-invert Arnoldi; forcing that path on small models must give the same events.
    # A consistency check between two code paths (no external reference): the dense path
    # is itself checked against closed forms above.
    equations, start, interval = SPARSE_CASES[case]
    parameters = {"p": interval[0], "a": 1.0, "D": 0.3} if case == "hopf" else {"p": interval[0]}
    model = expression_model(equations, parameters)
    branch = trace(model, "p", np.asarray(start) + 1e-3, interval)
    dense_events = locate_events(model, branch)
    sparse_location = LinearAlgebraPolicy(location_sparse_above=3)
    sparse_events = locate_events(replace(model, linear_algebra=sparse_location), branch)
    assert len(dense_events) == len(sparse_events) >= 1
    for d, s in zip(dense_events, sparse_events, strict=True):
        assert (d.kind, d.branching, d.criticality) == (s.kind, s.branching, s.criticality)
        assert s.value == pytest.approx(d.value, rel=1e-12, abs=1e-14)
        np.testing.assert_allclose(s.state, d.state, rtol=1e-7, atol=1e-7)
        if d.kind == "hopf":
            assert s.frequency == pytest.approx(d.frequency, rel=1e-12)
            assert s.lyapunov == pytest.approx(d.lyapunov, rel=1e-9)
        if d.kind == "fold":
            assert s.fold_coefficient == pytest.approx(d.fold_coefficient, rel=1e-9)
        if d.kind == "branch_point":
            np.testing.assert_allclose(
                np.sort(np.abs(s.details["tangents"]), axis=0),
                np.sort(np.abs(d.details["tangents"]), axis=0),
                atol=1e-9,
            )


SPARSE_MODULE = """
import numpy as np
import scipy.sparse as sp


def _laplacian(cells):
    main = -2.0 * np.ones(cells)
    off = np.ones(cells - 1)
    lap = sp.diags([off, main, off], [-1, 0, 1], format="lil")
    lap[0, 1] = 2.0
    lap[cells - 1, cells - 2] = 2.0
    return lap.tocsr()


def rhs(x, p):
    cells = x.shape[0] // 2
    lap = _laplacian(cells)
    u, v = x[:cells], x[cells:]
    a, b, d = p["a"], p["b"], p["D"]
    return np.concatenate(
        [a - (b + 1) * u + u * u * v + d * (lap @ u), b * u - u * u * v + d * (lap @ v)]
    )


def jac(x, p):
    cells = x.shape[0] // 2
    lap = _laplacian(cells)
    u, v = x[:cells], x[cells:]
    b, d = p["b"], p["D"]
    return sp.bmat(
        [
            [sp.diags(-(b + 1) + 2 * u * v) + d * lap, sp.diags(u * u)],
            [sp.diags(b - 2 * u * v), sp.diags(-u * u) + d * lap],
        ],
        format="csc",
    )
"""


def test_hopf_of_a_large_sparse_python_model(tmp_path, monkeypatch):
    # 200 diffusively coupled Brusselator cells (400 states, sparse Jacobian, second
    # and third derivatives by finite differences): the uniform state (a, b/a)
    # oscillates first, at b = 1 + a^2 with omega = a (Prigogine & Lefever 1968), and
    # its l1 is the single cell's divided by the number of cells (uniform
    # oscillations solve the single-cell equations; l1 scales as 1/|x|^2 under the
    # contract's normalization <q, q> = 1/2 over all states).
    from branchline.numerics.eigenvalues import sort_by_real_part
    from branchline.results.records import Branch
    from branchline.scan.loader import PythonModelSpec

    (tmp_path / "coupled_cells.py").write_text(SPARSE_MODULE)
    monkeypatch.syspath_prepend(str(tmp_path))
    cells, a = 200, 1.0
    model = build_model(
        PythonModelSpec(
            parameters={"a": a, "b": 1.9, "D": 0.3 * (cells / 20) ** 2},
            rhs="coupled_cells:rhs",
            jacobian="coupled_cells:jac",
            size=2 * cells,
        )
    )
    assert model.linear_algebra.sparse_location(model.size) and model.sparse
    # a two-row branch bracketing the Hopf point; rows as the engine records them
    values = np.array([1.995, 2.004])
    states, tangents, eigenvalues, tests = [], [], [], []
    for b in values:
        params = model.parameter_vector({"b": b})
        x = np.concatenate([np.full(cells, a), np.full(cells, b / a)])
        t = np.concatenate([np.zeros(cells), np.full(cells, 1.0 / a), [1.0]])
        t /= np.linalg.norm(t)
        jac = model.jacobian(x, params)
        lam = sort_by_real_part(
            spla.eigs(sps.csc_matrix(jac, dtype=complex), k=6, sigma=1j, return_eigenvectors=False)
        )
        fp = model.parameter_jacobian(x, params)[:, 1]
        states.append(x)
        tangents.append(t)
        eigenvalues.append(lam)
        tests.append(equilibrium_tests(jac, fp, t, lam))
    branch = Branch(
        name="cells",
        vary="b",
        parameters=model.defaults,
        parameter_values=values,
        states=np.array(states),
        arclength=np.array([0.0, 1.0]),
        tangents=np.array(tangents),
        eigenvalues=np.array(eigenvalues),
        unstable_count=np.array([0, 2]),
        test_values=np.array(tests),
        newton_iterations=np.zeros(2, int),
        residual_norms=np.zeros(2),
        status="done",
        message="",
        interval=(1.9, 2.1),
        test_names=TEST_FUNCTIONS,
    )
    (hopf,) = locate_events(model, branch)
    assert hopf.value == pytest.approx(1.0 + a * a, rel=1e-12)
    assert hopf.frequency == pytest.approx(a, rel=1e-12)
    # The single cell's l1 from an independent sympy derivation (Guckenheimer & Holmes's
    # planar formula, see test_normal_forms.py), not from branchline.
    from test_normal_forms import brusselator_lyapunov_by_planar_formula

    l1_single, _ = brusselator_lyapunov_by_planar_formula("1")
    assert a == 1.0
    # the large model's derivatives are finite differences: 1e-6 relative
    assert hopf.lyapunov == pytest.approx(l1_single / cells, rel=1e-6)


def test_an_event_that_cannot_be_refined_is_still_reported(monkeypatch):
    # Newton and bisection both forced to fail: the fold is kept, placed by
    # interpolation between its two rows, and the note says why.
    model = expression_model({"N": "N*(1 - N) - h"}, {"h": 0.1})
    branch = trace(model, "h", [0.9], (0.0, 0.4))

    def failing(system, z0, scale=1.0):
        return failure(z0, "forced failure")

    monkeypatch.setattr(location, "newton", failing)
    (fold,) = locate_events(model, branch)
    assert fold.kind == "fold"
    assert "not refined" in fold.note and "forced failure" in fold.note
    row = fold.details["bracket_rows"][0]
    low, high = sorted(branch.parameter_values[row : row + 2])
    assert low <= fold.value <= high
    json.dumps(fold.details)


# ---------------------------------------------------------------------------
# Every published reference case (tests/reference_cases.py), dense and sparse, both
# correctors: exactly the source's events, at its values, refined on their defining
# systems (the sources are named in each record).
# ---------------------------------------------------------------------------


@pytest.mark.parametrize(("case", "policy", "newton"), COMBINATIONS)
def test_reference_case_events(case, policy, newton):
    found = traced(case, policy, newton).events
    assert sorted((e.kind, round(e.value, 6)) for e in found) == sorted(
        (e.kind, round(e.value, 6)) for e in case.events
    ), case.source
    assert [e.arclength for e in found] == sorted(e.arclength for e in found)
    for expected in case.events:
        (event,) = [
            e for e in found if e.kind == expected.kind and abs(e.value - expected.value) <= 1e-6
        ]
        assert event.value == pytest.approx(expected.value, rel=case.value_rtol, abs=1e-12)
        assert "bisection" not in event.note and "not refined" not in event.note
        if expected.frequency is not None:
            assert event.frequency == pytest.approx(expected.frequency, rel=1e-10)
        if expected.lyapunov is not None:
            assert event.lyapunov == pytest.approx(expected.lyapunov, rel=1e-8)
        if expected.branching is not None:
            assert event.branching == expected.branching


def test_permutation_parity_memo_agrees_with_sympy():
    # The parity behind the sign of a sparse determinant (numerics/linalg.py), memoized
    # per permutation, against sympy's Permutation.signature (a reference library),
    # each permutation asked twice (the second answer comes from the memo).
    from sympy.combinatorics import Permutation

    from branchline.numerics import linalg

    rng = np.random.default_rng(11)
    for size in (2, 3, 17, 250, 251):
        for _ in range(3):
            permutation = rng.permutation(size)
            expected = float(Permutation(permutation.tolist()).signature())
            assert linalg._permutation_sign(permutation) == expected
            assert linalg._permutation_sign(permutation) == expected
