"""Numerical fault injection: models that break part-way along a branch.

For every fault the trace must stop gracefully where it happens, keep every
point computed before it, say where and why in run.json and the report, exit
with code 1 (numerical trouble), print no traceback, and let the other traces
of the scan run. Faults in what a user function *returns at the start*
(wrong type, complex values) are bad input: exit 2 naming the key.
"""

from __future__ import annotations

import json
import math
import re
import time
from pathlib import Path

import pandas as pd
import pytest

from branchline.cli import main
from faulty_models import FAULT_AT

PYTHON_SCAN = """
title = "stock model with an injected fault"
[model.parameters]
F = 0.0
[model.python]
rhs = "faulty_models:{rhs}"
{extra}
size = 2
[[trace]]
name = "faulty"
vary = "F"
interval = [0.0, 0.9]
start = {{ x0 = 1.0, x1 = 0.0 }}
[[trace]]
name = "healthy"
vary = "F"
interval = [0.0, 0.25]
start = {{ x0 = 1.0, x1 = 0.0 }}
direction = "increasing"
"""

# (id, rhs, extra [model.python] lines, words the failure message must contain)
PART_WAY_FAULTS = [
    ("nan", "nan_past", "", ["not finite"]),
    ("infinity", "inf_past", "", ["not finite"]),
    ("raises", "raise_past", "", ["RuntimeError", "the sensor table ends here"]),
    ("sys-exit", "exit_past", "", ["sys.exit(3)"]),
    ("wrong-shape", "wrong_shape_past", "", ["shape (3,)"]),
    ("dict", "dict_past", "", ["returned dict"]),
    ("object-array", "object_array_past", "", ["not an array of numbers"]),
    (
        "jacobian-wrong-shape",
        "healthy",
        'jacobian = "faulty_models:jacobian_wrong_shape_past"',
        ["shape (3, 3)"],
    ),
    (
        "sparse-jacobian-wrong-shape",
        "healthy",
        'jacobian = "faulty_models:sparse_jacobian_wrong_shape_past"',
        ["shape (3, 3)"],
    ),
    (
        "singular-jacobian",
        "healthy",
        'jacobian = "faulty_models:singular_jacobian_past"',
        ["singular"],
    ),
]


def _run(tmp_path: Path, text: str) -> tuple[int, str, Path]:
    scan = tmp_path / "fault.toml"
    scan.write_text(text)
    out = tmp_path / "out"
    code = main(["run", str(scan), "--out", str(out), "--quiet"])
    return code, out


@pytest.mark.parametrize("case", PART_WAY_FAULTS, ids=[c[0] for c in PART_WAY_FAULTS])
def test_fault_part_way_stops_gracefully_and_keeps_points(tmp_path, capsys, case):
    _, rhs, extra, words = case
    code, out = _run(tmp_path, PYTHON_SCAN.format(rhs=rhs, extra=extra))
    err = capsys.readouterr().err
    assert code == 1, err
    assert "Traceback" not in err
    info = json.loads((out / "run.json").read_text())
    assert info["status"] == "failed"
    traces = {t["name"]: t for t in info["traces"]}
    assert traces["faulty"]["status"] == "failed"
    assert traces["healthy"]["status"] == "done"  # the other trace still ran
    for word in words:
        assert word in traces["faulty"]["message"], traces["faulty"]["message"]
    points = pd.read_csv(out / "points.csv")
    faulty = points[points["trace"] == "faulty"]
    # Every point before the fault is kept: the healthy part runs from F = 0 to
    # within a step or two of the fault (largest step 0.05 by default).
    assert faulty["F"].min() == 0.0
    assert FAULT_AT - 0.1 < faulty["F"].max() <= FAULT_AT + 0.05
    # The stop is said in the report, with where the trace got to.
    report = (out / "report.md").read_text()
    assert "The run stopped early" in report and "faulty" in report


def test_nan_on_part_of_the_range_stops_there(tmp_path, capsys):
    # x = F is an equilibrium everywhere, but sqrt(0.4 - F) is NaN past F = 0.4.
    text = (
        'title = "fault"\n[model.parameters]\nF = 0.0\n[model.equations]\n'
        'x = "F - x + 1e-30*sqrt(0.4 - F)"\n'
        '[[trace]]\nname = "t"\nvary = "F"\ninterval = [0.0, 1.0]\nstart = { x = 0.0 }\n'
    )
    code, out = _run(tmp_path, text)
    err = capsys.readouterr().err
    assert code == 1, err
    assert "Traceback" not in err
    (trace,) = json.loads((out / "run.json").read_text())["traces"]
    assert trace["status"] == "failed" and "not finite" in trace["message"]
    points = pd.read_csv(out / "points.csv")
    assert 0.4 - 1e-6 < points["F"].max() <= 0.4
    assert ((points["x"] - points["F"]).abs() < 1e-12).all()


ESCAPE_SCAN = """
title = "escape"
[model.parameters]
F = 1.0
G = 0.0
[model.equations]
x = "{x}"
y = "G - y"
[steps]
largest = {largest}
[[trace]]
name = "runaway"
vary = "F"
interval = [{lo}, {hi}]
start = {{ x = {x0}, y = 0.0 }}
[[trace]]
name = "healthy"
vary = "G"
interval = [0.0, 1.0]
start = {{ x = {x0}, y = 0.0 }}
"""


@pytest.mark.parametrize(
    "x, exact",
    [("1 - F*x", lambda f: 1.0 / f), ("1 - F*F*x", lambda f: 1.0 / f**2)],
    ids=["1/F", "1/F^2"],
)
def test_escape_to_infinity_stops_with_a_message(tmp_path, capsys, x, exact):
    """x' = 1 - F^k x has the equilibrium x = 1/F^k (exact, by hand), a pole at F = 0:
    the trace stops there by the rule of continuation/escape.py, exit 1, points kept."""
    text = ESCAPE_SCAN.format(x=x, largest=0.05, lo=0.0, hi=1.0, x0=1.0)
    code, out = _run(tmp_path, text)
    err = capsys.readouterr().err
    assert code == 1, err
    assert "Traceback" not in err and "Warning" not in err
    info = json.loads((out / "run.json").read_text())
    runaway, healthy = info["traces"]
    assert runaway["status"] == "failed" and healthy["status"] == "done"
    message = runaway["message"]
    assert "the state x grows without bound" in message
    points = pd.read_csv(out / "points.csv")
    mine = points[points["trace"] == "runaway"]
    # Every point kept is on the exact branch; the last one is the one named.
    assert (abs(mine["x"] / exact(mine["F"]) - 1.0) < 1e-9).all()
    assert mine["F"].max() == 1.0
    last = mine.loc[mine["F"].idxmin()]
    assert f"x={last['x']:.6g} at F={last['F']:.10g}" in message
    assert 10.0 < last["x"] < 2000.0  # stopped soon after the watch began, not at max_points
    assert len(mine) < 2000
    assert "grows without bound" in (out / "report.md").read_text()


def test_large_but_finite_growth_is_not_an_escape(tmp_path, capsys):
    """x = exp(F) (x' = exp(F) - x) grows to 1.6e5 on [0, 12] but has no pole: done, exit 0."""
    text = ESCAPE_SCAN.format(x="exp(F) - x", largest=5000.0, lo=0.0, hi=12.0, x0=1.0)
    text = text.replace("F = 1.0", "F = 0.0")
    code, out = _run(tmp_path, text)
    err = capsys.readouterr().err
    assert code == 0, err
    info = json.loads((out / "run.json").read_text())
    assert [t["status"] for t in info["traces"]] == ["done", "done"]
    points = pd.read_csv(out / "points.csv")
    assert points.loc[points["trace"] == "runaway", "x"].max() > 1e5


def test_newton_cycling_at_start_is_reported(tmp_path, capsys):
    text = (
        'title = "cycling"\n[model.parameters]\nF = 0.5\n[model.equations]\n'
        'x = "atan(x) + 0*F"\n[[trace]]\nname = "t"\nvary = "F"\ninterval = [0.0, 1.0]\n'
        "start = { x = 1.5 }\n"
    )
    code, out = _run(tmp_path, text)
    err = capsys.readouterr().err
    info = json.loads((out / "run.json").read_text())
    # Plain Newton on atan overshoots from |x0| > 1.39 and diverges; the damped
    # solve (steps cut back until |f| falls) rescues it and finds x = 0.
    assert code == 0, err
    assert info["traces"][0]["status"] == "done"
    assert abs(pd.read_csv(out / "points.csv")["x"]).max() < 1e-9


def test_newton_that_cycles_stops_the_trace_at_its_start(tmp_path, capsys):
    """f(x) = x^3 - 2x + 2 from x0 = 0: plain Newton cycles 0 -> 1 -> 0 for ever (a standard
    example of Newton cycling, e.g. Burden and Faires, Numerical Analysis, chapter 2; from
    memory, section not checked; the two steps are verified below). The damped solve
    refuses the step back to 0 (|f| would rise from 1 to 2) and stalls at the local
    minimum of |f|, x = sqrt(2/3), f = 2 - (4/3) sqrt(2/3) = 0.9113 (by hand: f' = 0): no
    equilibrium near the guess (the only real root is x = -1.769). Exit 1, where and why,
    no hang, and the other trace runs."""

    def plain_newton(x):
        return x - (x**3 - 2 * x + 2) / (3 * x**2 - 2)

    assert plain_newton(0.0) == 1.0 and plain_newton(1.0) == 0.0
    text = (
        'title = "cycling"\n[model.parameters]\nF = 0.5\n[model.equations]\n'
        'x = "x^3 - 2*x + 2 + 0*F"\ny = "F - y"\n'
        '[[trace]]\nname = "cycling"\nvary = "F"\ninterval = [0.0, 1.0]\n'
        "start = { x = 0.0, y = 0.5 }\n"
        '[[trace]]\nname = "found"\nvary = "F"\ninterval = [0.0, 1.0]\n'
        "start = { x = -1.8, y = 0.5 }\n"
    )
    code, out = _run(tmp_path, text)
    err = capsys.readouterr().err
    assert code == 1, err
    assert "Traceback" not in err
    info = json.loads((out / "run.json").read_text())
    cycling, found = info["traces"]
    assert cycling["status"] == "failed" and found["status"] == "done"
    message = cycling["message"]
    assert "no equilibrium found at the start F=0.5" in message
    assert "stalled" in message and "try another guess" in message
    stalled_at = float(re.search(r"stalled at x=([-+0-9.e]+)", message).group(1))
    assert abs(stalled_at - math.sqrt(2.0 / 3.0)) < 1e-3
    residual = float(re.search(r"residual ([-+0-9.e]+)", message).group(1))
    assert abs(residual - (2.0 - 4.0 / 3.0 * math.sqrt(2.0 / 3.0))) < 1e-3
    assert cycling["counts"]["newton_iterations"] < 100
    assert "no equilibrium found at the start" in (out / "report.md").read_text()
    points = pd.read_csv(out / "points.csv")
    assert set(points["trace"]) == {"found"}
    # The root of x^3 - 2x + 2 (Cardano; by hand): -1.76929235...
    assert (abs(points["x"] ** 3 - 2 * points["x"] + 2) < 1e-9).all()


@pytest.mark.parametrize(
    "rhs, extra, words",
    [
        ("complex_rhs", "", ["model.python.rhs", "complex"]),
        (
            "healthy",
            'observables = "faulty_models:observables_list"',
            ["model.python.observables", "list"],
        ),
    ],
    ids=["complex-rhs", "observables-list"],
)
def test_wrong_type_at_the_start_is_bad_input(tmp_path, capsys, rhs, extra, words):
    code, out = _run(tmp_path, PYTHON_SCAN.format(rhs=rhs, extra=extra))
    err = capsys.readouterr().err
    assert code == 2, err
    assert "Traceback" not in err
    for word in words:
        assert word in err
    assert not out.exists()


def test_user_exception_at_the_start_keeps_its_message(tmp_path, capsys):
    code, out = _run(tmp_path, PYTHON_SCAN.format(rhs="raises_at_start", extra=""))
    capsys.readouterr()
    assert code == 1
    info = json.loads((out / "run.json").read_text())
    assert "calibration 'K7' missing" in info["traces"][0]["message"]


def test_observables_that_raise_are_said(tmp_path, capsys):
    extra = 'observables = "faulty_models:observables_raise_past"'
    code, out = _run(tmp_path, PYTHON_SCAN.format(rhs="healthy", extra=extra))
    err = capsys.readouterr().err
    info = json.loads((out / "run.json").read_text())
    assert code == 0, err
    assert any("flow is zero" in w and "biomass" in w for w in info["warnings"])
    points = pd.read_csv(out / "points.csv")
    assert points.loc[points["F"] > FAULT_AT, "biomass"].isna().all()
    assert points.loc[points["F"] <= FAULT_AT, "biomass"].notna().all()


def test_jacobian_wrong_away_from_the_start_is_said(tmp_path, capsys):
    extra = 'jacobian = "faulty_models:coupled_jacobian_transposed"'
    code, out = _run(tmp_path, PYTHON_SCAN.format(rhs="coupled", extra=extra))
    capsys.readouterr()
    info = json.loads((out / "run.json").read_text())
    # No warning at the start (the transpose is right there), one from the re-check.
    rechecks = [w for w in info["warnings"] if "disagrees with finite differences" in w]
    assert rechecks and all("corrector iterations" in w for w in rechecks)
    assert code in (0, 1)


def test_doubled_jacobian_ends_as_a_failure_that_blames_it(tmp_path, capsys):
    # J twice the true one: Newton converges only linearly (ratio 1/2), the steps
    # shrink and max_points would be spent on a short stretch; that must not pass as
    # exit 0, and the trace must stop as soon as the struggle repeats and the
    # Jacobian check there fails, not after max_points.
    extra = 'jacobian = "faulty_models:healthy_jacobian_doubled"'
    code, out = _run(tmp_path, PYTHON_SCAN.format(rhs="healthy", extra=extra))
    capsys.readouterr()
    assert code == 1
    info = json.loads((out / "run.json").read_text())
    faulty = next(t for t in info["traces"] if t["name"] == "faulty")
    assert faulty["status"] == "failed"
    assert "healthy_jacobian_doubled" in faulty["message"]
    assert "disagrees with finite differences" in faulty["message"]
    assert "struggled at 3 points in a row" in faulty["message"]
    assert "max_points" not in faulty["message"]
    # stopped at the third struggling point of the increasing side (plus the points
    # of the decreasing side, which reaches F = 0 in a few steps), far from 2000
    assert faulty["points"] <= 20
    assert any("d f[x0] / d x0 is" in w for w in info["warnings"])
    points = pd.read_csv(out / "points.csv")
    # every point kept, and each is an equilibrium x0 = 1 - F (solved by hand)
    rows = points[points["trace"] == "faulty"]
    assert len(rows) == faulty["points"] > 0
    assert ((rows["x0"] - (1.0 - rows["F"])).abs() < 1e-8).all()


def test_slow_rhs_call_stops_the_trace_at_the_call_time_limit(tmp_path, capsys):
    # Past F = 0.3 each rhs call sleeps 0.2 s, over call_time_limit = 0.05 s:
    # the first slow call ends the trace (one sleep), the other trace still runs.
    extra = "call_time_limit = 0.05"
    code, out = _run(tmp_path, PYTHON_SCAN.format(rhs="sleepy_past", extra=extra))
    err = capsys.readouterr().err
    assert code == 1 and "Traceback" not in err
    info = json.loads((out / "run.json").read_text())
    traces = {t["name"]: t for t in info["traces"]}
    assert traces["faulty"]["status"] == "failed"
    assert "over the limit of 0.05 s (model.python.call_time_limit)" in traces["faulty"]["message"]
    assert traces["healthy"]["status"] == "done"
    faulty = pd.read_csv(out / "points.csv").query("trace == 'faulty'")
    assert faulty["F"].min() == 0.0 and FAULT_AT - 0.1 < faulty["F"].max() <= FAULT_AT + 0.05


def test_rhs_that_never_returns_is_cut_off_by_the_run_time_limit(tmp_path, capsys):
    # Past F = 0.3 an rhs call would sleep 60 s; time_limit = 1.5 s stops the run
    # (an alarm interrupts the call), writes every point and exits 1 with the reason.
    text = "time_limit = 1.5\n" + PYTHON_SCAN.format(rhs="hangs_past", extra="")
    started = time.monotonic()
    code, out = _run(tmp_path, text)
    spent = time.monotonic() - started
    err = capsys.readouterr().err
    assert code == 1 and "Traceback" not in err
    assert spent < 30.0  # far below the 60 s sleep (the bound is loose: shared machines)
    info = json.loads((out / "run.json").read_text())
    assert info["status"] == "failed"
    assert "time limit of 1.5 s was reached (time_limit)" in info["message"]
    faulty = next(t for t in info["traces"] if t["name"] == "faulty")
    assert faulty["status"] == "failed" and "time limit" in faulty["message"]
    faulty_points = pd.read_csv(out / "points.csv").query("trace == 'faulty'")
    assert faulty_points["F"].max() > FAULT_AT - 0.1  # the points before the hang are kept


@pytest.mark.parametrize(
    ("text", "key"),
    [
        ("time_limit = 0\n" + PYTHON_SCAN.format(rhs="healthy", extra=""), "time_limit"),
        ('time_limit = "1h"\n' + PYTHON_SCAN.format(rhs="healthy", extra=""), "time_limit"),
        (
            PYTHON_SCAN.format(rhs="healthy", extra="call_time_limit = -1"),
            "model.python.call_time_limit",
        ),
    ],
)
def test_bad_limits_are_refused_with_the_key(tmp_path, capsys, text, key):
    code, out = _run(tmp_path, text)
    assert code == 2
    assert key in capsys.readouterr().err
    assert not out.exists()
