"""Trace limits on states: a side stops exactly on a state's limit; bad limits are
refused at the door; branches started at branch points inherit the limits."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

from branchline import run_scan, scan_from_dict
from branchline.cli import main
from branchline.continuation.engine import follow_curve
from branchline.continuation.step_control import LIMIT_SLACK, Limit
from branchline.errors import ScanError
from branchline.model.build import build_model
from branchline.problems.equilibrium_branch import trace_branch
from branchline.scan.loader import ExpressionModelSpec, StepSettings

# The landed point is put on the limit exactly; the other components come from Newton
# with residual below RESIDUAL_TOL (1e-10), quadratically converged.
LANDING_TOL = 1e-12


def one_trace(equations, parameters, start, interval, limits=None, vary="p", **extra):
    trace = {"vary": vary, "interval": interval, "start": start, **extra}
    if limits is not None:
        trace["limits"] = limits
    return scan_from_dict(
        {"model": {"parameters": parameters, "equations": equations}, "trace": [trace]}
    )


def branch_named(result, name):
    return next(b for b in result.branches if b.name == name)


# ----------------------------------------------------------------------------- landing


def test_transcritical_branch_stops_exactly_at_zero():
    # x' = p x - x^2, the transcritical normal form (Strogatz, Nonlinear Dynamics and
    # Chaos, section 3.2): equilibria x = 0 and x = p, crossing at p = 0. Followed along
    # x = p with x limited to [0, 10], the decreasing side ends at x = 0 exactly, p = 0.
    result = run_scan(
        one_trace({"x": "p*x - x^2"}, {"p": 0.5}, {"x": 0.5}, [-1, 1], {"x": [0, 10]})
    )
    trace = branch_named(result, "trace1")
    assert trace.status == "done"
    assert "reached the limit x = 0 of trace limits" in trace.message
    assert "reached the edge 1 of the parameter interval" in trace.message
    assert trace.states[0, 0] == 0.0  # first row in trace order: the decreasing side's end
    assert abs(trace.parameter_values[0]) < LANDING_TOL
    assert trace.parameter_values[-1] == 1.0
    assert trace.states[:, 0].min() >= 0.0
    # Every row lies on x = p (the traced branch), the landed one included.
    assert np.max(np.abs(trace.states[:, 0] - trace.parameter_values)) < 1e-10


def test_same_branch_without_limits_runs_into_negative_x():
    # The same trace without limits goes on to the interval edge p = -1 along x = p < 0:
    # the limit is what stops it.
    result = run_scan(one_trace({"x": "p*x - x^2"}, {"p": 0.5}, {"x": 0.5}, [-1, 1]))
    trace = branch_named(result, "trace1")
    assert trace.parameter_values[0] == -1.0
    assert trace.states[0, 0] == pytest.approx(-1.0, abs=1e-10)


CHEMOSTAT = {
    "S": "D*(S_in - S) - mu*X/Y",
    "X": "(mu - D)*X",
}
CHEMOSTAT_PARAMETERS = {"D": 0.2, "S_in": 4.0, "mu_max": 0.5, "K_s": 0.1, "Y": 0.5}


def chemostat_scan(limits, start=None):
    data = {
        "model": {
            "parameters": CHEMOSTAT_PARAMETERS,
            "equations": CHEMOSTAT,
            "definitions": {"mu": "mu_max*S/(K_s + S)"},
        },
        "trace": [
            {"vary": "D", "interval": [0.05, 0.49], "start": start or {"S": 0.07, "X": 1.95}},
        ],
    }
    if limits is not None:
        data["trace"][0]["limits"] = limits
    return scan_from_dict(data)


def test_chemostat_stops_at_washout_with_zero_biomass():
    # Chemostat with Monod growth (Smith & Waltman, The Theory of the Chemostat, 1995,
    # chapter 1; from memory): the surviving equilibrium has mu(S*) = D, i.e.
    # S* = K_s D / (mu_max - D), X* = Y (S_in - S*); X* = 0 where S* = S_in, at
    # D_c = mu_max S_in / (K_s + S_in). With X limited to [0, 100] the trace stops there.
    d_critical = 0.5 * 4.0 / (0.1 + 4.0)
    result = run_scan(chemostat_scan({"X": [0.0, 100.0]}))
    trace = branch_named(result, "trace1")
    assert trace.status == "done"
    assert "reached the limit X = 0 of trace limits" in trace.message
    assert trace.states[-1, 1] == 0.0
    assert trace.parameter_values[-1] == pytest.approx(d_critical, rel=1e-10)
    assert trace.states[-1, 0] == pytest.approx(4.0, rel=1e-10)
    assert trace.states[:, 1].min() >= 0.0
    # Without limits the same trace runs into negative biomass up to the interval edge.
    free = branch_named(run_scan(chemostat_scan(None)), "trace1")
    assert free.parameter_values[-1] == 0.49
    assert free.states[:, 1].min() < -0.1


def test_washout_branch_on_the_limit_is_followed_and_switches_inside_only():
    # The washout branch S = S_in, X = 0 lies on the limit X = 0: its roundoff around
    # X = 0 is within LIMIT_SLACK, so it runs to both interval edges. Of the surviving
    # branch crossing it at D_c (Smith & Waltman, as above) only the half with X > 0
    # starts; it inherits the limits and runs to the lower edge with X = Y (S_in - S*).
    d_critical = 0.5 * 4.0 / (0.1 + 4.0)
    result = run_scan(chemostat_scan({"X": [0.0, 100.0]}, start={"S": 4.0, "X": 0.0}))
    washout = branch_named(result, "trace1")
    assert list(washout.parameter_values[[0, -1]]) == [0.05, 0.49]
    assert np.max(np.abs(washout.states[:, 1])) <= LIMIT_SLACK
    points = [e for e in result.events if e.kind == "branch_point"]
    assert len(points) == 1 and points[0].value == pytest.approx(d_critical, rel=1e-10)
    children = [b for b in result.branches if b.parent == "trace1"]
    assert [child.name for child in children] == ["trace1.1"]
    child = children[0]
    assert child.status == "done" and child.parameter_values[-1] == 0.05
    assert child.states[:, 1].min() > 0.0
    s_star = 0.1 * 0.05 / (0.5 - 0.05)
    # Edge points carry Newton's accuracy (CORRECTOR_UPDATE_RTOL 1e-6 leaves ~1e-12 absolute).
    assert child.states[-1, 0] == pytest.approx(s_star, abs=1e-11)
    assert child.states[-1, 1] == pytest.approx(0.5 * (4.0 - s_star), abs=1e-11)


def test_limit_hit_on_both_sides_through_a_fold():
    # x' = p - x^2, the saddle-node normal form (Strogatz, Nonlinear Dynamics and Chaos,
    # section 3.1): x = +-sqrt(p), a fold at p = 0. From x = 1 (p = 1), x limited to
    # [-0.5, 1.5]: one side turns at the fold and stops at x = -0.5 (p = 0.25), the
    # other stops at x = 1.5 (p = 2.25) before the interval edge p = 4.
    result = run_scan(
        one_trace({"x": "p - x^2"}, {"p": 1.0}, {"x": 1.0}, [0, 4], {"x": [-0.5, 1.5]})
    )
    trace = branch_named(result, "trace1")
    assert trace.status == "done"
    assert trace.message.count("trace limits") == 2
    assert trace.states[0, 0] == -0.5 and trace.states[-1, 0] == 1.5
    assert trace.parameter_values[0] == pytest.approx(0.25, abs=LANDING_TOL)
    assert trace.parameter_values[-1] == pytest.approx(2.25, abs=LANDING_TOL)
    folds = [e for e in result.events if e.kind == "fold"]
    assert len(folds) == 1 and abs(folds[0].value) < 1e-10


def test_engine_limits_by_index_on_a_circle():
    # x^2 + p^2 = 1 from (1, 0) upwards: x falls to its limit 0.5 at p = sqrt(3)/2
    # (elementary geometry). The mapping form {index: (lo, hi)} names the limit u[0].
    class Circle:
        def residual(self, u):
            return np.array([u[0] ** 2 + u[1] ** 2 - 1.0])

        def jacobian(self, u):
            return np.array([[2 * u[0], 2 * u[1]]])

        def observe(self, u, t, jac):
            return None, np.array([t[-1]])

    curve = follow_curve(
        Circle(),
        np.array([1.0, 0.0]),
        np.array([0.0, 1.0]),
        StepSettings(),
        limits={0: (0.5, 2.0)},
    )
    assert curve.status == "done"
    assert curve.message == "reached the limit u[0] = 0.5 of trace limits"
    assert curve.points[-1, 0] == 0.5
    assert curve.points[-1, 1] == pytest.approx(math.sqrt(3.0) / 2.0, abs=LANDING_TOL)
    # With the parameter edge reached first along the chord, the edge wins.
    curve = follow_curve(
        Circle(),
        np.array([1.0, 0.0]),
        np.array([0.0, 1.0]),
        StepSettings(),
        (-1.0, 0.5),
        limits=[Limit(0, 0.5, 2.0, "x")],
    )
    assert curve.message == "reached the edge 0.5 of the parameter interval"
    assert curve.points[-1, 1] == 0.5
    assert curve.points[-1, 0] == pytest.approx(math.sqrt(0.75), abs=LANDING_TOL)
    with pytest.raises(ValueError):
        follow_curve(
            Circle(), np.zeros(2), np.ones(2), StepSettings(), limits={0: (1, 0)}
        )


def test_start_equilibrium_outside_limits_fails_without_points():
    # x' = p - x^2 at p = 1: Newton from x = 0.4 converges to x = 1 (Strogatz, section
    # 3.1), outside the window [-10, 0.5]; the trace says so instead of running.
    model = build_model(ExpressionModelSpec(parameters={"p": 1.0}, equations={"x": "p - x^2"}))
    branch = trace_branch(
        model,
        "t",
        "p",
        model.defaults,
        np.array([0.4]),
        (0.0, 4.0),
        "both",
        StepSettings(),
        limits={"x": (-10.0, 0.5)},
    )
    assert branch.status == "failed"
    assert len(branch) == 0
    assert "outside its limits" in branch.message and "x=1" in branch.message


# ----------------------------------------------------------------------------- switching


def test_pitchfork_children_inherit_limits():
    # x' = p x - x^3, the supercritical pitchfork (Strogatz, section 3.4): the crossing
    # branches x = +-sqrt(p) reach x = +-0.5 at p = 0.25 exactly; they inherit the trace's
    # limits [-0.5, 0.5] and stop there, well before the interval edge p = 1.
    scan = one_trace({"x": "p*x - x^3"}, {"p": -0.5}, {"x": 0.0}, [-1, 1], {"x": [-0.5, 0.5]})
    result = run_scan(scan)
    trivial = branch_named(result, "trace1")
    assert trivial.parameter_values[0] == -1.0 and trivial.parameter_values[-1] == 1.0
    children = [b for b in result.branches if b.parent == "trace1"]
    assert len(children) == 2
    assert sorted(child.states[-1, 0] for child in children) == [-0.5, 0.5]
    for child in children:
        assert child.status == "done"
        assert "of trace limits" in child.message
        assert child.parameter_values[-1] == pytest.approx(0.25, abs=LANDING_TOL)
        assert np.all(np.abs(child.states[:, 0]) <= 0.5)


def test_half_branch_starting_outside_limits_is_not_followed():
    # Same pitchfork with x limited to [0, 0.5]: only the x > 0 half starts.
    scan = one_trace({"x": "p*x - x^3"}, {"p": -0.5}, {"x": 0.0}, [-1, 1], {"x": [0.0, 0.5]})
    children = [b for b in run_scan(scan).branches if b.parent == "trace1"]
    assert len(children) == 1
    assert children[0].states[-1, 0] == 0.5


# ----------------------------------------------------------------------------- bad input

BAD_LIMITS = [
    ("unknown-state", {"X": [0.0, 10.0]}, "trace[1].limits.X", "did you mean 'x'"),
    ("parameter", {"p": [0.0, 10.0]}, "trace[1].limits.p", "interval"),
    ("reversed", {"x": [10.0, 0.0]}, "trace[1].limits.x", "reversed"),
    ("empty", {"x": [1.0, 1.0]}, "trace[1].limits.x", "empty"),
    ("non-numeric", {"x": ["zero", 10.0]}, "trace[1].limits.x[1]", "number"),
    ("one-number", {"x": [0.0]}, "trace[1].limits.x", "two numbers"),
    ("not-a-table", [0.0, 10.0], "trace[1].limits", "table"),
    ("start-outside", {"x": [0.6, 10.0]}, "trace[1].limits.x", "start guess x = 0.5"),
]


@pytest.mark.parametrize("case", BAD_LIMITS, ids=[c[0] for c in BAD_LIMITS])
def test_bad_limits_are_scan_errors_with_key_path(case):
    _, limits, key, words = case
    with pytest.raises(ScanError) as error:
        one_trace({"x": "p*x - x^2"}, {"p": 0.5}, {"x": 0.5}, [-1, 1], limits)
    assert key in str(error.value)
    assert words in str(error.value)


GOOD = """
[model.parameters]
p = 0.5
[model.equations]
x = "p*x - x^2"
[[trace]]
vary = "p"
interval = [-1.0, 1.0]
start = { x = 0.5 }
limits = { x = [0.0, 10.0] }
"""


@pytest.mark.parametrize(
    "bad",
    [
        GOOD.replace("{ x = [0.0, 10.0] }", "{ y = [0.0, 10.0] }"),
        GOOD.replace("[0.0, 10.0]", "[10.0, 0.0]"),
        GOOD.replace("[0.0, 10.0]", '["low", 10.0]'),
        GOOD.replace("[0.0, 10.0]", "[0.7, 10.0]"),
    ],
    ids=["unknown-state", "reversed", "non-numeric", "start-outside"],
)
def test_cli_bad_limits_exit_2_and_write_nothing(tmp_path, capsys, monkeypatch, bad):
    monkeypatch.chdir(tmp_path)
    scan = tmp_path / "bad.toml"
    scan.write_text(bad)
    code = main(["run", str(scan), "--out", str(tmp_path / "out"), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2
    assert "bad.toml" in err and "trace[1].limits" in err
    assert "Traceback" not in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.toml"]


def test_cli_run_records_limits_and_keeps_states_inside(tmp_path):
    scan = tmp_path / "limited.toml"
    scan.write_text(GOOD)
    out = tmp_path / "out"
    assert main(["run", str(scan), "--out", str(out), "--quiet"]) == 0
    run = json.loads((out / "run.json").read_text())
    traces = {entry["name"]: entry for entry in run["traces"]}
    assert traces["trace1"]["limits"] == {"x": [0.0, 10.0]}
    # Branches started at the branch point carry the limits they inherited.
    assert all(entry["limits"] == {"x": [0.0, 10.0]} for entry in traces.values())
    points = pd.read_csv(out / "points.csv")
    main_rows = points[points["trace"] == "trace1"]
    assert main_rows["x"].iloc[0] == 0.0  # round-trip precision: exactly the limit
    assert points["x"].min() >= -LIMIT_SLACK


def test_no_limits_by_default():
    scan = one_trace({"x": "p*x - x^2"}, {"p": 0.5}, {"x": 0.5}, [-1, 1])
    assert scan.traces[0].limits == {}


def test_branch_point_where_a_trace_lands_on_its_limit_is_located_and_followed():
    # The surviving branch lands on X = 0 exactly where the washout branch
    # S = S_in, X = 0 crosses it, at D_c = mu_max S_in / (K_s + S_in) (Smith &
    # Waltman, as above): the end row's test value is zero up to roundoff.
    d_critical = 0.5 * 4.0 / (0.1 + 4.0)
    result = run_scan(chemostat_scan({"X": [0.0, 100.0]}))
    (event,) = [e for e in result.events if e.kind == "branch_point"]
    assert event.value == pytest.approx(d_critical, rel=1e-12)
    assert event.branching == "transcritical"
    above, below = [b for b in result.branches if b.parent == "trace1"]
    # Both washout halves: the one above D_c starts close to the edge 0.49 (its
    # start offset is cut to fit) and the one below runs to the edge 0.05.
    assert above.parameter_values[-1] == 0.49 and below.parameter_values[-1] == 0.05
    for child in (above, below):
        assert np.max(np.abs(child.states[:, 1])) <= LIMIT_SLACK
        assert np.allclose(child.states[:, 0], 4.0, rtol=1e-12)
    # Below D_c the growth rate at S_in exceeds D: washout is unstable (one eigenvalue
    # mu(S_in) - D > 0); above D_c it is stable: the exchange of stability of a
    # transcritical point.
    assert (below.unstable_count == 1).all()
    assert (above.unstable_count == 0).all()
