"""Stiff and large Python models: tolerances scaled to the problem, accurate normal forms.

The models are in ``stiff_models.py`` (with their sources): the reaction-diffusion
Brusselator and a bistable chain, both with coupling entries of about 1e7 beside
reaction terms of order one.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from branchline.continuation.engine import follow_curve
from branchline.errors import ScanError
from branchline.events.normal_forms import fold_normal_form, hopf_normal_form
from branchline.model.build import build_model
from branchline.numerics import tolerances
from branchline.numerics.differences import directional_derivative, extrapolated_derivative
from branchline.problems.equilibrium import solve_equilibrium
from branchline.problems.tracing import TraceRequest, summarize, trace_sides
from branchline.scan.loader import PythonModelSpec, StepSettings, scan_from_dict
from branchline.vocabulary import Status
from stiff_models import uniform_state
from test_normal_forms import brusselator_lyapunov_by_planar_formula

# ---------------------------------------------------------------------------
# scaled tolerances: the stiff chain at 2,000 states


CHAIN_NODES = 2000
CHAIN_COUPLING = 1e7  # k, the size of the coupling entries


def chain_model(nodes: int, coupling: float, ripple: float, **forms):
    return build_model(
        PythonModelSpec(
            parameters={"p": -1.0, "k": coupling, "ripple": ripple},
            rhs="stiff_models:chain_rhs",
            jacobian="stiff_models:chain_jacobian",
            size=nodes,
            **forms,
        )
    )


class ChainCurve:
    """The chain's equilibria (x, p) as an engine problem, observing only the tangent's p."""

    def __init__(self, model, orientation: int) -> None:
        self.model, self.orientation = model, orientation

    def _parameters(self, u):
        full = np.array(self.model.defaults)
        full[0] = u[-1]
        return full

    def residual(self, u):
        return self.model.rhs(u[:-1], self._parameters(u))

    def jacobian(self, u):
        import scipy.sparse as sp

        full = self._parameters(u)
        f_p = self.model.parameter_jacobian(u[:-1], full)[:, [0]]
        return sp.hstack([self.model.jacobian(u[:-1], full), f_p], format="csr")

    def observe(self, u, tangent, jacobian):
        return None, np.array([self.orientation * tangent[-1]])


def test_a_stiff_chain_is_traced_through_its_folds_at_two_thousand_states():
    # The failure of the large-model measurements (an update at rounding level leaves a
    # residual of about 1e-9, above an absolute 1e-10; the corrector then reports
    # "Newton's method diverges" and the trace stops): with absolute tolerances the
    # start solve of this chain stalls at residual 2.6e-8, and a trace started from a
    # solved point ended after 473 points with "the corrector failed at the smallest
    # step (1e-08) ...: Newton's method diverges" at the first fold (p = 0.3749),
    # measured on the code before this change. The rounding level of f here is about
    # eps * k |x| per row (module docstring of stiff_models).
    model = chain_model(CHAIN_NODES, CHAIN_COUPLING, 0.5)
    start = solve_equilibrium(model, np.full(CHAIN_NODES, -1.3), model.defaults)
    assert start.converged, start.message
    assert start.residual_norm > tolerances.RESIDUAL_TOL  # the case at issue: above 1e-10
    jacobian = model.jacobian(start.state, model.defaults)
    assert start.residual_norm <= tolerances.EPS * tolerances.evaluation_rounding(
        jacobian, start.state
    )
    request = TraceRequest(
        start=np.append(start.state, -1.0),
        bounds=(-1.0, 1.0),
        direction="increasing",
        steps=StepSettings(initial=0.01, largest=0.5, max_points=400),
    )
    sides = trace_sides(lambda orientation: ChainCurve(model, orientation), request)
    status, message = summarize(sides)
    (curve,) = [curve for _, curve in sides]
    assert status == Status.DONE, message
    assert curve.points[-1, -1] == 1.0  # the increasing side reached the edge
    # both folds passed: the tangent's parameter component changes sign twice
    turns = np.count_nonzero(np.diff(np.sign(curve.test_values[:, 0])))
    assert turns == 2
    assert np.max(curve.newton_iterations) <= tolerances.MAX_CORRECTOR_ITERATIONS
    assert curve.counts["rejected_steps"] <= len(curve)


def test_the_corrector_accepts_a_residual_at_the_rounding_level_of_f():
    # A point of the chain with an exact tangent step: the corrector converges there
    # although |G| stays near 1e-8 (rounding of terms of size k |x| = 1e7).
    model = chain_model(400, 1e7, 0.5)
    start = solve_equilibrium(model, np.full(400, -1.3), model.defaults)
    assert start.converged and start.residual_norm > tolerances.RESIDUAL_TOL
    problem = ChainCurve(model, 1)
    u0 = np.append(start.state, -1.0)
    tangent = np.zeros(401)
    tangent[-1] = 1.0
    curve = follow_curve(problem, u0, tangent, StepSettings(initial=0.01, max_points=3))
    assert curve.status == Status.MAX_POINTS, curve.message
    assert np.all(curve.residual_norms[1:] > tolerances.RESIDUAL_TOL)


# ---------------------------------------------------------------------------
# accurate higher derivatives of Python models


BRUSSELATOR_NODES = 200  # 400 states
STIFFNESS = 1e7  # d1 / h^2: the diffusion entries of the Jacobian
A_VALUE = 1.0

DERIVATIVE_SOURCES = {
    "user forms": dict(
        jacobian="stiff_models:jacobian",
        second_derivative="stiff_models:second",
        third_derivative="stiff_models:third",
    ),
    "jacobian only": dict(jacobian="stiff_models:jacobian"),
    "rhs only": dict(),
}


def stiff_brusselator(**forms):
    d1 = STIFFNESS / (BRUSSELATOR_NODES - 1) ** 2
    return build_model(
        PythonModelSpec(
            parameters={"a": A_VALUE, "b": 1.0 + A_VALUE**2, "d1": d1, "d2": 2.0 * d1},
            rhs="stiff_models:rhs",
            size=2 * BRUSSELATOR_NODES,
            **forms,
        )
    )


@pytest.mark.parametrize("source", sorted(DERIVATIVE_SOURCES))
def test_uniform_mode_lyapunov_coefficient_of_the_stiff_brusselator(source):
    # The uniform mode of the reaction-diffusion Brusselator is the single cell's
    # Hopf point b = 1 + a^2, frequency a (Prigogine & Lefever, J. Chem. Phys. 48 (1968)
    # 1695). With <q, q> = 1/2 over all 2N states the critical vector is the cell's
    # divided by sqrt(N) on every node, and the cubic terms of c1 then scale as 1/N:
    # l1 = l1(cell) / N (the discrete Laplacian annihilates uniform vectors, so
    # A^-1 and (2 i omega - A)^-1 act on them as on the cell's). l1(cell) from sympy
    # by the planar formula of Guckenheimer & Holmes (test_normal_forms). Measured on
    # the code before this change with the user's Jacobian: 5.3e-4 relative off.
    model = stiff_brusselator(**DERIVATIVE_SOURCES[source])
    b = 1.0 + A_VALUE**2
    x = uniform_state(BRUSSELATOR_NODES, A_VALUE, b)
    reference, omega = brusselator_lyapunov_by_planar_formula("1")
    assert omega == pytest.approx(A_VALUE, rel=1e-15)
    form = hopf_normal_form(model, x, model.defaults, A_VALUE, k=1)
    assert form.lyapunov * BRUSSELATOR_NODES == pytest.approx(reference, rel=1e-6)


@pytest.mark.parametrize("source", ["user forms", "jacobian only"])
def test_fold_coefficient_of_the_stiff_chain(source):
    # Uniform forcing: the uniform state solves x - x^3 + p = 0 with a fold at
    # x = 1/sqrt(3), p = -2/(3 sqrt(3)) (elementary). For the scalar equation the fold
    # coefficient a = <p, B(q, q)> / 2 = f_xx / 2 = -3 x (Kuznetsov, Elements of
    # Applied Bifurcation Theory, section 3.2 normal form); with |q| = 1 over N nodes,
    # q = 1/sqrt(N) per node and <p, q> = 1, it is -3 x / sqrt(N), up to q's sign.
    nodes = 400
    forms = {
        "user forms": dict(
            second_derivative="stiff_models:chain_second",
            third_derivative="stiff_models:chain_third",
        ),
        "jacobian only": {},
    }[source]
    model = chain_model(nodes, 1e7, 0.0, **forms)
    x_fold = 1.0 / math.sqrt(3.0)
    params = np.array(model.defaults)
    params[0] = -2.0 / (3.0 * math.sqrt(3.0))
    form = fold_normal_form(model, np.full(nodes, x_fold), params, 0)
    assert abs(form.coefficient) == pytest.approx(3.0 * x_fold / math.sqrt(nodes), rel=1e-6)


def test_richardson_extrapolation_recovers_a_derivative_despite_large_terms():
    # phi(s) = (1e7 (1 + s) + sin(s)) - 1e7 (1 + s): the large terms cancel but add
    # rounding of about eps * 1e7; phi'(0) = cos(0) = 1 (elementary). Measured: a fixed
    # central step eps^(1/3) is 8e-7 off here, the extrapolated step 4e-8.
    big = 1e7

    def phi(s):
        return np.array([(big * (1.0 + s) + math.sin(s)) - big * (1.0 + s)])

    value, error = extrapolated_derivative(phi, 0.25)
    assert value[0] == pytest.approx(1.0, abs=1e-7)
    assert abs(value[0] - 1.0) <= 10.0 * error  # the estimate is of the right size
    fixed = directional_derivative(lambda z: phi(z[0]), np.zeros(1), np.ones(1), 1)
    assert abs(fixed[0] - 1.0) > 5.0 * abs(value[0] - 1.0)


def scan_with_forms(**forms) -> dict:
    python = {"rhs": "stiff_models:chain_rhs", "jacobian": "stiff_models:chain_jacobian"}
    return {
        "model": {
            "parameters": {"p": -0.3849, "k": 1e7, "ripple": 0.0},
            "python": {**python, "size": 50, **forms},
        },
        "trace": [{"vary": "p", "interval": [-1.0, 1.0], "start": "stiff_models:chain_start"}],
    }


def test_scan_files_name_the_directional_derivatives_and_bad_ones_are_refused():
    # Scan-file plumbing: the keys reach the model (its B is the user's, exactly
    # -6 x v w here), and a reference to a missing function is a ScanError naming
    # the key, never a traceback.
    forms = {
        "second_derivative": "stiff_models:chain_second",
        "third_derivative": "stiff_models:chain_third",
    }
    scan = scan_from_dict(scan_with_forms(**forms), "stiff.toml")
    model = build_model(scan.model, "stiff.toml")
    x, v, w = np.full(50, 0.5), np.linspace(0.0, 1.0, 50), np.linspace(1.0, 2.0, 50)
    np.testing.assert_array_equal(model.second(x, model.defaults, v, w), -6.0 * x * v * w)
    bad = scan_from_dict(scan_with_forms(second_derivative="stiff_models:nowhere"), "s.toml")
    with pytest.raises(ScanError) as info:
        build_model(bad.model, "s.toml")
    assert info.value.key == "model.python.second_derivative"
    with pytest.raises(ScanError) as info:
        scan_from_dict(scan_with_forms(third_derivative="no colon"), "s.toml")
    assert info.value.key == "model.python.third_derivative"
