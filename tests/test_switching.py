"""Branch switching at located branch points, traced with the real engine."""

from __future__ import annotations

import math

import numpy as np
import pytest

from branchline.model.build import build_model
from branchline.problems.equilibrium_branch import locate_events, trace_branch
from branchline.problems.switching import SWITCH_OFFSET, branch_starts, trace_switched
from branchline.scan.loader import ExpressionModelSpec, StepSettings
from reference_cases import COMBINATIONS, switched

INTERVAL = (-0.5, 0.5)


def expression_model(equations, parameters):
    return build_model(ExpressionModelSpec(parameters=parameters, equations=equations))


def traced_with_branch_point(equation, start=0.0):
    model = expression_model({"x": equation}, {"p": -0.5})
    branch = trace_branch(
        model, "trivial", "p", model.defaults, np.array([start]), INTERVAL, "both", StepSettings()
    )
    found = [e for e in locate_events(model, branch) if e.kind == "branch_point"]
    assert len(found) == 1
    return model, branch, found[0]


def test_pitchfork_switching_traces_both_stable_halves():
    # x' = p x - x^3 (supercritical pitchfork; Strogatz, Nonlinear Dynamics and Chaos,
    # section 3.4): x = +-sqrt(p) exist for p > 0 and are stable (f_x = -2p < 0); the
    # trivial branch is stable for p < 0 and unstable for p > 0.
    model, branch, event = traced_with_branch_point("p*x - x^3")
    assert event.branching == "pitchfork"
    assert np.all(branch.stable[branch.parameter_values < -1e-9])
    assert not np.any(branch.stable[branch.parameter_values > 1e-9])
    children = trace_switched(model, branch, event, StepSettings(), INTERVAL)
    assert [c.name for c in children] == ["trivial.1", "trivial.2"]
    assert all(c.parent == "trivial" and c.status == "done" for c in children)
    signs = sorted(np.sign(c.states[-1, 0]) for c in children)
    assert signs == [-1.0, 1.0]
    for child in children:
        p, x = child.parameter_values, child.states[:, 0]
        assert np.all(p > 0)
        np.testing.assert_allclose(x * x, p, rtol=1e-9)  # on p = x^2
        assert child.parameter_values[-1] == pytest.approx(0.5, abs=0)  # ends on the edge
        assert np.all(child.stable)


def test_transcritical_switching_exchanges_stability():
    # x' = p x - x^2 (Strogatz, section 3.2): x = 0 stable for p < 0, x = p stable for
    # p > 0 (f_x = p - 2x): stabilities exchange at p = 0.
    model, branch, event = traced_with_branch_point("p*x - x^2")
    assert event.branching == "transcritical"
    children = trace_switched(model, branch, event, StepSettings(), INTERVAL)
    assert len(children) == 2
    for child in children:
        p, x = child.parameter_values, child.states[:, 0]
        np.testing.assert_allclose(x, p, rtol=1e-9, atol=1e-13)
        assert np.all(child.stable == (p > 0))
    assert {np.sign(c.parameter_values[-1]) for c in children} == {-1.0, 1.0}
    assert np.all(branch.stable == (branch.parameter_values < 0))


def test_starts_lie_on_the_new_branch_near_the_branch_point():
    model, branch, event = traced_with_branch_point("p*x - x^2")
    starts = branch_starts(model, branch, event)
    assert len(starts) == 2
    for x0, p0, tangent in starts:
        assert abs(model.rhs(x0, model.parameter_vector({"p": p0}))[0]) < 1e-15
        assert x0[0] == pytest.approx(p0, rel=1e-12)
        distance = math.hypot(x0[0], p0)
        assert distance == pytest.approx(SWITCH_OFFSET, rel=1e-6)
        assert np.linalg.norm(tangent) == pytest.approx(1.0)
        assert np.sign(tangent[-1]) == np.sign(p0)  # pointing away from the branch point


def test_subcritical_pitchfork_children_meet_their_folds():
    # x' = p x + x^3 - x^5: subcritical pitchfork at p = 0, the side branches
    # p = x^4 - x^2 turn at the folds p = -1/4, x^2 = 1/2 (the quintic-stabilized
    # subcritical pitchfork of Strogatz, Nonlinear Dynamics and Chaos, section 3.4, from
    # memory; the fold values by elementary algebra: dp/dx = 4x^3 - 2x = 0). Near the
    # pitchfork they are unstable: f_x = 2x^2 - 4x^4 > 0 on them (elementary).
    model, branch, event = traced_with_branch_point("p*x + x^3 - x^5")
    assert event.branching == "pitchfork"
    children = trace_switched(model, branch, event, StepSettings(), INTERVAL)
    assert len(children) == 2
    for child in children:
        assert child.unstable_count[0] == 1
        folds = [e for e in locate_events(model, child) if e.kind == "fold"]
        assert len(folds) == 1
        assert folds[0].value == pytest.approx(-0.25, rel=1e-14)
        assert abs(folds[0].state[0]) == pytest.approx(math.sqrt(0.5), rel=1e-7)


def test_lorenz_pitchfork_switches_onto_the_convection_branches():
    # Lorenz origin branch, pitchfork at r = 1 (Lorenz 1963; Strogatz, section 9.2):
    # C+- = (+-sqrt(b (r - 1)), +-sqrt(b (r - 1)), r - 1), stable for 1 < r < r_H.
    b = 8.0 / 3.0
    model = expression_model(
        {"x": "sigma*(y - x)", "y": "r*x - y - x*z", "z": "x*y - b*z"},
        {"sigma": 10.0, "r": 0.5, "b": b},
    )
    interval = (0.0, 10.0)
    origin = trace_branch(
        model, "origin", "r", model.defaults, np.zeros(3), interval, "both", StepSettings()
    )
    (event,) = locate_events(model, origin)
    children = trace_switched(model, origin, event, StepSettings(), interval)
    assert [c.name for c in children] == ["origin.1", "origin.2"]
    for child in children:
        r, state = child.parameter_values, child.states
        # The row checked next to the branch point (issue 15) has r - 1 ~ 1e-12, which
        # carries the rounding of r itself: the closed form is compared beyond it.
        away = r - 1 > 1e-9
        np.testing.assert_allclose(
            np.abs(state[away, 0]), np.sqrt(b * (r[away] - 1)), rtol=1e-8
        )
        np.testing.assert_allclose(state[:, 2], r - 1, rtol=1e-8, atol=1e-12)
        assert np.all(child.stable)


def test_no_starts_for_other_events():
    model = expression_model({"N": "N*(1 - N) - h"}, {"h": 0.1})
    branch = trace_branch(
        model, "m", "h", model.defaults, np.array([0.9]), (0.0, 0.4), "both", StepSettings()
    )
    (fold,) = locate_events(model, branch)
    assert branch_starts(model, branch, fold) == []
    assert trace_switched(model, branch, fold, StepSettings(), (0.0, 0.4)) == []


# ---------------------------------------------------------------------------
# Every published reference case with a branch point (tests/reference_cases.py), dense
# and sparse, both correctors: the half-branches switched to lie on the source's
# closed form of the crossing branches.
# ---------------------------------------------------------------------------

SWITCHING = [c for c in COMBINATIONS if c.values[0].children]


@pytest.mark.parametrize(("case", "policy", "newton"), SWITCHING)
def test_reference_case_switching(case, policy, newton):
    children = switched(case, policy, newton)
    assert len(children) == case.children, case.source
    for child in children:
        assert child.status == "done", child.message
        assert 1 <= int(child.newton_iterations[1:].max()) <= case.newton_cap
        assert np.max(child.residual_norms) <= 1e-10
        for x, value in zip(child.states, child.parameter_values, strict=True):
            parameters = dict(case.parameters)
            parameters[case.vary] = value
            state = dict(zip(case.equations, x, strict=True))  # the model's state order
            assert abs(case.child_relation(state, parameters)) <= 1e-9, (value, x)
