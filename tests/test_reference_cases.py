"""Every reference case (tests/reference_cases.py), dense and sparse, with both correctors.

For each published case the trace must end cleanly, find exactly the expected
events at their exact values (refined on their defining systems), with the
expected frequency, first Lyapunov coefficient and branching, switch to the
expected number of crossing half-branches, and do it with a bounded number of
corrector iterations per point: the tangent predictor and full Newton need at
most ``newton_cap`` iterations, the chord method at most ``chord_cap``.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from branchline.model.build import build_model
from branchline.numerics.policy import DENSE, SPARSE
from branchline.problems.equilibrium_branch import locate_events, trace_branch
from branchline.problems.switching import trace_switched
from branchline.scan.loader import ExpressionModelSpec, StepSettings
from reference_cases import CASES, ReferenceCase

POLICIES = {"dense": DENSE, "sparse": SPARSE}
# Rejected steps of a whole trace: step control may shrink a few times near events
# and where the tangent turns fast; many more would mean the predictor is failing.
MAX_REJECTED_STEPS = 12


def traced(case: ReferenceCase, policy: str, newton: str):
    spec = ExpressionModelSpec(parameters=dict(case.parameters), equations=dict(case.equations))
    model = replace(build_model(spec), linear_algebra=POLICIES[policy])
    x0 = np.array([case.start[name] for name in model.states])
    branch = trace_branch(
        model,
        case.id,
        case.vary,
        model.defaults,
        x0,
        case.interval,
        "both",
        StepSettings(),
        newton=newton,
    )
    return model, branch


@pytest.mark.parametrize("newton", ["full", "chord"])
@pytest.mark.parametrize("policy", sorted(POLICIES))
@pytest.mark.parametrize("case", CASES, ids=lambda case: case.id)
def test_reference_case(case: ReferenceCase, policy: str, newton: str):
    model, branch = traced(case, policy, newton)
    assert branch.status == "done", branch.message
    cap = case.newton_cap if newton == "full" else case.chord_cap
    assert int(branch.newton_iterations.max()) <= cap
    assert branch.counts["rejected_steps"] <= MAX_REJECTED_STEPS
    assert np.max(branch.residual_norms) <= 1e-10
    found = locate_events(model, branch)
    assert [e.kind for e in found] == [e.kind for e in _in_trace_order(case, found)]
    assert sorted((e.kind, round(e.value, 6)) for e in found) == sorted(
        (e.kind, round(e.value, 6)) for e in case.events
    ), case.source
    for expected in case.events:
        (event,) = [
            e
            for e in found
            if e.kind == expected.kind and abs(e.value - expected.value) <= 1e-6
        ]
        assert event.value == pytest.approx(expected.value, rel=case.value_rtol, abs=1e-12)
        assert "bisection" not in event.note and "not refined" not in event.note
        if expected.frequency is not None:
            assert event.frequency == pytest.approx(expected.frequency, rel=1e-10)
        if expected.lyapunov is not None:
            assert event.lyapunov == pytest.approx(expected.lyapunov, rel=1e-8)
        if expected.branching is not None:
            assert event.branching == expected.branching
    children = [
        child
        for event in found
        if event.kind == "branch_point"
        for child in trace_switched(model, branch, event, StepSettings(), case.interval)
    ]
    assert len(children) == case.children
    for child in children:
        assert child.status == "done", child.message
        assert int(child.newton_iterations.max()) <= case.newton_cap
        assert np.max(child.residual_norms) <= 1e-10


def _in_trace_order(case, found):
    """The found events sorted by their position along the branch (the contract's order)."""
    return sorted(found, key=lambda e: e.arclength)
