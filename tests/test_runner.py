"""The run pipeline: naming of switched branches, branch points on an
interval edge, singular points on an edge, failure bookkeeping."""

from __future__ import annotations

import math

import branchline
from branchline.results.records import STATUS_DONE


def _scan(equation: str, interval, start, parameters):
    return branchline.scan_from_dict(
        {
            "model": {"parameters": parameters, "equations": {"x": equation}},
            "trace": [{"name": "base", "vary": "p", "interval": interval, "start": {"x": start}}],
        }
    )


def test_children_of_two_branch_points_get_distinct_names():
    # x' = x (p^2 - 1) - x^3: the trivial branch has pitchforks at p = -1 and p = 1
    # (x^2 = p^2 - 1; elementary algebra, the standard pitchfork normal form
    # x' = mu x - x^3 of Strogatz, Nonlinear Dynamics and Chaos, section 3.4, with mu = p^2 - 1).
    result = branchline.run_scan(_scan("x*(p^2 - 1) - x^3", [-2.0, 2.0], 0.0, {"p": 0.0}))
    names = [b.name for b in result.branches]
    assert len(names) == len(set(names))
    assert names == ["base", "base.1", "base.2", "base.3", "base.4"]
    points = [e.value for e in result.events if e.kind == "branch_point" and e.trace == "base"]
    assert len(points) == 2
    assert all(math.isclose(a, b, rel_tol=1e-12) for a, b in zip(sorted(points), [-1.0, 1.0]))
    for child in result.branches[1:]:
        # x^2 = p^2 - 1 > 0 off the trivial branch: every child lies on that curve.
        assert abs(child.states[:, 0] ** 2 - (child.parameter_values**2 - 1)).max() < 1e-9
        assert child.status == STATUS_DONE


def test_a_singular_point_on_the_edge_still_ends_the_trace_there():
    # x' = p (x - 1): x = 1 for p != 0, but at p = 0 every x is an equilibrium,
    # so df/dx = 0 on the edge p = 0 (elementary algebra).
    result = branchline.run_scan(_scan("p*(x - 1)", [0.0, 1.0], 1.2, {"p": 0.5}))
    (branch,) = result.branches
    assert branch.status == STATUS_DONE, branch.message
    assert branch.parameter_values[0] == 0.0 and branch.parameter_values[-1] == 1.0
    assert abs(branch.states[:, 0] - 1.0).max() < 1e-12


def test_branch_points_on_an_edge_are_noted_and_not_followed():
    # x' = p x - x^3: the pitchfork of the trivial branch sits at p = 0 (Strogatz,
    # Nonlinear Dynamics and Chaos, section 3.4), here exactly on the interval's edge.
    result = branchline.run_scan(_scan("x*p - x^3", [0.0, 1.0], 0.0, {"p": 0.5}))
    assert [b.name for b in result.branches] == ["base"]
    (event,) = result.events
    assert event.kind == "branch_point" and abs(event.value) < 1e-12
    assert "edge of the parameter interval" in event.note
