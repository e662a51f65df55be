"""Gaps a new user meets: inspect's one hyperbolicity rule, starting exactly on a
fold, traces cut by max_points, a poor start guess, step settings and "-0" in tables.

Reference values are closed forms of the harvested logistic equation
N' = N (1 - N) - h (Strogatz, Nonlinear Dynamics and Chaos, section 3.7,
harvesting exercise; elementary calculus): equilibria N = (1 +- sqrt(1 - 4 h)) / 2,
df/dN = 1 - 2 N = -+ sqrt(1 - 4 h), a fold at h = 1/4, N = 1/2.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

from branchline.cli import main
from branchline.problems.equilibrium import classify

HARVEST = """
title = "harvested logistic stock"
[model.parameters]
h = {h}
[model.equations]
N = "N*(1 - N) - h"
[[trace]]
vary = "h"
interval = [0.0, 0.4]
start = {{ N = {guess} }}
"""


def _scan(tmp_path, text, name="scan.toml"):
    path = tmp_path / name
    path.write_text(text)
    return str(path)


def _inspect_lines(tmp_path, capsys, h, guess):
    scan = _scan(tmp_path, HARVEST.format(h=repr(h), guess=guess))
    assert main(["inspect", scan]) == 0
    out = capsys.readouterr().out
    kind = next(line for line in out.splitlines() if line.startswith("type:"))
    verdict = next(line for line in out.splitlines() if line.startswith("hyperbolic:"))
    rule = next(line for line in out.splitlines() if line.startswith("rule:"))
    return kind, verdict, rule


@pytest.mark.parametrize(
    ("gap", "on_axis"),
    [
        (0.0, True),  # exactly on the fold: eigenvalue 0
        (2.7755575615628914e-17, True),  # one rounding step below 1/4: eigenvalue ~ -1e-8
        (1e-16, True),  # eigenvalue -2e-8, within 1e-7 |J| = 5e-8 of the axis (|J| = 0.5)
        (1e-14, False),  # eigenvalue -2e-7: beyond it, decisive
        (2.5e-7, False),  # eigenvalue -1e-3: decisive
        (0.01, False),
    ],
)
def test_inspect_type_and_hyperbolicity_follow_one_rule(tmp_path, capsys, gap, on_axis):
    # Upper equilibrium N = (1 + sqrt(1 - 4h)) / 2 has df/dN = -sqrt(1 - 4h) = -2 sqrt(gap)
    # (elementary calculus); the rule compares |Re| with 1e-7 |J|, |J| = |h / N| ~ 0.5 here.
    h = 0.25 - gap
    kind, verdict, rule = _inspect_lines(tmp_path, capsys, h, 0.5 + math.sqrt(gap) + 1e-3)
    assert "1e-07 |J|" in rule  # the rule is stated in the output
    eigenvalue = -math.sqrt(max(1.0 - 4.0 * h, 0.0))
    threshold = float(rule.split("= ")[1].split(" ")[0])
    assert (abs(eigenvalue) <= threshold) is on_axis
    if on_axis:
        assert verdict.startswith("hyperbolic: no")
        assert kind == "type: zero eigenvalue"
    else:
        assert verdict.startswith("hyperbolic: yes")
        assert kind == "type: stable node"


def test_planar_type_and_verdict_agree_near_a_zero_eigenvalue():
    # Eigenvalues -1.2e-8 and -1 in a non-orthogonal basis: the determinant is tiny but the
    # type and the verdict come from the same count (elementary linear algebra).
    basis = np.array([[1.0, 0.3], [0.2, 1.0]])
    for small, expected in ((-1.2e-8, "zero_eigenvalue"), (-7e-7, "stable_node")):
        jac = basis @ np.diag([small, -1.0]) @ np.linalg.inv(basis)
        result = classify(jac)
        assert result.kind == expected
        assert result.hyperbolic is (expected != "zero_eigenvalue")


def test_trace_started_exactly_on_a_fold(tmp_path):
    # The tangent at a fold is (1, 0): defined, with a zero parameter component.
    scan = _scan(tmp_path, HARVEST.format(h="0.25", guess="0.5"))
    out = tmp_path / "out"
    assert main(["run", scan, "--out", str(out), "--quiet"]) == 0
    points = pd.read_csv(out / "points.csv")
    events = pd.read_csv(out / "events.csv")
    assert list(events["kind"]) == ["fold"]
    assert events["h"][0] == pytest.approx(0.25, abs=1e-14)
    # both halves are followed away from the fold, down to h = 0 (N = 0 and N = 1)
    at_zero = np.sort(points.loc[points["h"] == 0.0, "N"].to_numpy())
    assert at_zero == pytest.approx([0.0, 1.0], abs=1e-10)


@pytest.mark.parametrize("quiet", [False, True])
def test_max_points_cut_is_said_on_screen_and_exits_0(tmp_path, capsys, quiet):
    text = HARVEST.format(h="0.1", guess="0.9") + "[steps]\nmax_points = 5\n"
    scan = _scan(tmp_path, text)
    out = tmp_path / "out"
    args = ["run", scan, "--out", str(out)] + (["--quiet"] if quiet else [])
    assert main(args) == 0  # the documented policy: a cut is not a numerical failure
    err = capsys.readouterr().err
    assert "trace trace1 was cut short by max_points" in err
    info = json.loads((out / "run.json").read_text())
    assert info["traces"][0]["status"] == "max_points"


def test_poor_start_guess_says_which_equilibrium_and_how_far(tmp_path, capsys):
    # N' = N (1 - N) - h at h = 0.09: equilibria 0.1 and 0.9. The guess 0.3 is meant for the
    # upper one; Newton lands on the lower one, 0.1 (x^2 - x + 0.09 = 0).
    scan = _scan(tmp_path, HARVEST.format(h="0.09", guess="0.3"))
    out = tmp_path / "out"
    assert main(["run", scan, "--out", str(out)]) == 0
    err = capsys.readouterr().err
    assert "converged to the equilibrium N=0.1," in err
    assert "distance 0.2 " in err
    assert "far from the guess" in err
    assert main(["inspect", scan]) == 0
    assert "warning: the start guess converged to the equilibrium N=0.1," in capsys.readouterr().out
    # a good guess is described without a warning
    good = _scan(tmp_path, HARVEST.format(h="0.09", guess="0.89"), "good.toml")
    assert main(["inspect", good]) == 0
    text = capsys.readouterr().out
    assert "converged to the equilibrium N=0.9," in text
    assert "warning" not in text


def test_largest_step_alone_lowers_the_first_step(tmp_path):
    text = HARVEST.format(h="0.1", guess="0.9") + "[steps]\nlargest = 0.004\n"
    out = tmp_path / "out"
    assert main(["run", _scan(tmp_path, text), "--out", str(out), "--quiet"]) == 0
    steps = json.loads((out / "run.json").read_text())["steps"]
    assert steps["initial"] == 0.004
    assert steps["largest"] == 0.004


def test_no_negative_zero_in_tables(tmp_path):
    # x' = -x (1 + p) from the start x = -0.0 (a TOML negative zero): the equilibrium x = 0
    # is exact at once and would be written "-0".
    text = """
[model.parameters]
p = 0.0
[model.equations]
x = "-x*(1 + p)"
[[trace]]
vary = "p"
interval = [0.0, 0.1]
start = { x = -0.0 }
"""
    out = tmp_path / "out"
    assert main(["run", _scan(tmp_path, text), "--out", str(out), "--quiet"]) == 0
    for name in ("points.csv", "events.csv"):
        content = (out / name).read_text()
        cells = [cell for line in content.splitlines() for cell in line.split(",")]
        assert "-0" not in cells
