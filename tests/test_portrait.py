"""Phase portraits of textbook planar systems whose equilibria, types, eigenvectors
and manifolds are known in closed form (Strogatz, Nonlinear Dynamics and Chaos,
2nd ed., sections 5.2 and 6.1-6.4; example numbers from memory)."""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from matplotlib.figure import Figure
from scipy.integrate import solve_ivp

import branchline
from branchline.portrait.build import compute_portrait
from branchline.scan.loader import scan_from_dict

SCANS = Path(__file__).resolve().parents[1] / "scans"
SRC = Path(__file__).resolve().parents[1] / "src"


def _scan(equations: dict[str, str], start: dict[str, float], parameter=("a", 1.0)):
    name, value = parameter
    return scan_from_dict(
        {
            "model": {"parameters": {name: value}, "equations": equations},
            "trace": [{"vary": name, "interval": [value - 0.5, value + 0.5], "start": start}],
        }
    )


def _at(portrait, state, tol=1e-8):
    (match,) = [e for e in portrait.equilibria if np.allclose(e.state, state, atol=tol)]
    return match


def _parallel(u, v) -> float:
    """|sin| of the angle between two plane vectors."""
    u, v = np.asarray(u, float), np.asarray(v, float)
    return abs(u[0] * v[1] - u[1] * v[0]) / (np.linalg.norm(u) * np.linalg.norm(v))


# Strogatz, section 5.2, Example 5.2.1: x' = x + y, y' = 4x - 2y has eigenvalues 2 and -3
# with eigenvectors (1, 1) and (1, -4): a saddle whose manifolds are those two lines.
def test_linear_saddle_example_5_2_1():
    portrait = compute_portrait(_scan({"x": "a*x + y", "y": "4*x - 2*y"}, {"x": 0.1, "y": 0.1}))
    (saddle,) = portrait.equilibria
    assert saddle.kind == "saddle" and saddle.decided
    directions = dict(saddle.directions)
    assert set(np.round(sorted(directions), 12)) == {-3.0, 2.0}
    assert _parallel(directions[2.0], (1, 1)) < 1e-12
    assert _parallel(directions[-3.0], (1, -4)) < 1e-12
    stable = [m for m in portrait.manifolds if m.which == "stable"]
    unstable = [m for m in portrait.manifolds if m.which == "unstable"]
    assert len(stable) == 2 and len(unstable) == 2
    size = portrait.window[1] - portrait.window[0]
    for m in stable:  # every point on the line y = -4 x
        assert np.max(np.abs(m.points[:, 1] + 4 * m.points[:, 0])) < 1e-6 * size
    for m in unstable:  # every point on the line y = x
        assert np.max(np.abs(m.points[:, 1] - m.points[:, 0])) < 1e-6 * size


# Strogatz, section 6.1, Example 6.1.1: x' = x + exp(-y), y' = -y has one equilibrium
# (-1, 0), a saddle with eigenvalues 1 and -1, eigenvectors (1, 0) and (1, 2); the x-axis
# is invariant, so it is the unstable manifold.
def test_saddle_of_example_6_1_1_stable_manifold_tangent_to_its_eigenvector():
    portrait = compute_portrait(_scan({"x": "a*x + exp(-y)", "y": "-y"}, {"x": -0.9, "y": 0.1}))
    saddle = _at(portrait, (-1.0, 0.0))
    assert saddle.kind == "saddle"
    directions = dict(saddle.directions)
    assert _parallel(directions[1.0], (1, 0)) < 1e-12
    assert _parallel(directions[-1.0], (1, 2)) < 1e-12
    size = portrait.window[1] - portrait.window[0]
    for m in portrait.manifolds:
        if m.which == "unstable":
            assert np.max(np.abs(m.points[:, 1])) < 1e-9
        else:
            # tangent at the saddle: the first stretch leaves along (1, 2) ...
            near = m.points[np.linalg.norm(m.points - saddle.point, axis=1) < 1e-3 * size]
            chords = near[1:] - saddle.point
            assert max(_parallel(c, (1, 2)) for c in chords) < 1e-3
            # ... and the curve then bends away from the straight line (it is not linear)
            far = m.points[-1] - saddle.point
            assert _parallel(far, (1, 2)) > 1e-2


# Strogatz, section 6.3, Example 6.3.1: x' = -x + x^3, y' = -2y: a stable node at the
# origin, saddles at (+-1, 0) whose stable manifolds are the lines x = +-1 (the
# separatrices) and whose unstable manifolds lie on the x-axis.
def test_example_6_3_1_nodes_saddles_and_separatrices():
    portrait = compute_portrait(_scan({"x": "-a*x + x^3", "y": "-2*y"}, {"x": 0.1, "y": 0.0}))
    assert len(portrait.equilibria) == 3
    assert _at(portrait, (0.0, 0.0)).kind == "stable_node"
    for side in (1.0, -1.0):
        saddle = _at(portrait, (side, 0.0))
        assert saddle.kind == "saddle"
        directions = dict(saddle.directions)
        assert _parallel(directions[2.0], (1, 0)) < 1e-12
        assert _parallel(directions[-2.0], (0, 1)) < 1e-12
    for m in portrait.manifolds:
        start = m.points[0]
        if m.which == "stable":
            assert np.max(np.abs(m.points[:, 0] - start[0])) < 1e-9
        else:
            assert np.max(np.abs(m.points[:, 1])) < 1e-9
    # every trajectory drawn stays on its side of both separatrices x = -1 and x = 1
    assert portrait.trajectories
    for curve in portrait.trajectories:
        for line in (-1.0, 1.0):
            sides = np.sign(curve[:, 0] - line)
            assert np.all(sides == sides[0])


# Strogatz, section 6.4 (rabbits versus sheep): x' = x (3 - x - 2y), y' = y (2 - x - y):
# unstable node (0, 0), stable nodes (3, 0) and (0, 2), saddle (1, 1) with eigenvalues
# -1 +- sqrt(2); the saddle's stable manifold separates the two nodes' basins.
COMPETITION = {"x": "x*(a - x - 2*y)", "y": "y*(2 - x - y)"}


def test_competition_types_eigenvalues_and_basins():
    portrait = compute_portrait(_scan(COMPETITION, {"x": 1.0, "y": 1.0}, ("a", 3.0)))
    assert len(portrait.equilibria) == 4
    assert _at(portrait, (0, 0)).kind == "unstable_node"
    assert _at(portrait, (3, 0)).kind == "stable_node"
    assert _at(portrait, (0, 2)).kind == "stable_node"
    saddle = _at(portrait, (1, 1))
    assert saddle.kind == "saddle"
    assert sorted(saddle.eigenvalues.real) == pytest.approx(
        [-1 - math.sqrt(2), -1 + math.sqrt(2)], rel=1e-12
    )
    # the separatrix: both branches of the saddle's stable manifold, a rising curve
    separatrix = np.vstack([m.points for m in portrait.manifolds if m.which == "stable"])
    order = np.argsort(separatrix[:, 0])
    xs, ys = separatrix[order, 0], separatrix[order, 1]
    assert np.all(np.diff(ys) >= -1e-6)  # rising, up to integration noise near the node

    def rhs(t, z):
        x, y = z
        return [x * (3 - x - 2 * y), y * (2 - x - y)]

    for curve in portrait.trajectories:
        inside = (curve[:, 0] > xs[0]) & (curve[:, 0] < xs[-1])
        if not inside.any():
            continue
        sides = np.sign(curve[inside, 1] - np.interp(curve[inside, 0], xs, ys))
        assert np.all(sides == sides[0])
        # and it ends at the node on that side (scipy, independently of branchline)
        end = solve_ivp(rhs, (0, 200), curve[0], rtol=1e-10, atol=1e-12).y[:, -1]
        assert np.allclose(end, (0, 2) if sides[0] > 0 else (3, 0), atol=1e-6)


# Strogatz, section 6.3, Example 6.3.2: x' = -y + a x (x^2 + y^2), y' = x + a y (x^2 + y^2)
# has a linear centre at the origin for every a; the nonlinear terms make it a stable
# spiral for a < 0 and an unstable one for a > 0.
@pytest.mark.parametrize(("a", "seen"), [(-1.0, "stable focus"), (1.0, "unstable focus")])
def test_centre_is_undecided_and_the_simulation_says_what_the_terms_do(a, seen, tmp_path):
    scan = _scan(
        {"x": "-y + a*x*(x^2 + y^2)", "y": "x + a*y*(x^2 + y^2)"}, {"x": 0.0, "y": 0.0}, ("a", a)
    )
    portrait = compute_portrait(scan)
    (centre,) = portrait.equilibria
    assert centre.kind == "centre" and not centre.decided
    assert portrait.local.seen == seen
    assert "does NOT decide" in portrait.local.verdict
    branchline.write_portrait(portrait, tmp_path)
    record = json.loads((tmp_path / "portrait.json").read_text())
    (entry,) = record["equilibria"]
    assert entry["type"] == "centre" and entry["linearization_decides"] is False
    assert seen in record["local_panel"]["verdict"]


def test_linear_and_nonlinear_panels_agree_near_a_hyperbolic_point():
    # Near a hyperbolic equilibrium the linearization's trajectories and the model's
    # start together and stay close at first (Hartman-Grobman; Strogatz, section 6.3).
    portrait = compute_portrait(_scan(COMPETITION, {"x": 1.0, "y": 1.0}, ("a", 3.0)))
    local = portrait.local
    assert local.equilibrium == portrait.equilibria.index(_at(portrait, (1, 1)))
    for linear, nonlinear in zip(local.linear, local.nonlinear):
        assert np.allclose(linear[0], nonlinear[0], atol=1e-12)
        assert np.linalg.norm(linear[3] - nonlinear[3]) < 0.2 * np.linalg.norm(local.radius)


def test_plane_through_a_larger_model_and_the_eigenvector_plane():
    # A third state that decays on its own leaves the competition portrait unchanged in
    # the plane (x, y) with z held at its equilibrium value 0.
    equations = {**COMPETITION, "z": "-z + 0*x"}
    scan = _scan(equations, {"x": 1.0, "y": 1.0, "z": 0.0}, ("a", 3.0))
    portrait = compute_portrait(scan, plane=("x", "y"))
    assert len(portrait.equilibria) == 4
    assert _at(portrait, (1, 1, 0)).kind == "saddle"
    assert np.allclose(_at(portrait, (3, 0, 0)).point, (3, 0))
    assert portrait.notes and "held at" in portrait.notes[0]
    # x' = -0.1 x - y, y' = x - 0.1 y, z' = -3 z: the leading pair spans the x-y plane
    spiral = _scan(
        {"x": "-0.1*x - a*y", "y": "a*x - 0.1*y", "z": "-3*z"}, {"x": 0.1, "y": 0.0, "z": 0.0}
    )
    turned = compute_portrait(spiral, eigenvector_plane=True)
    assert turned.plane.kind == "eigenvectors"
    assert np.max(np.abs(turned.plane.basis[2])) < 1e-12
    assert turned.equilibria[0].kind == "stable_focus"


def test_portrait_api_returns_a_figure():
    figure = branchline.phase_portrait(SCANS / "toggle_switch.toml", {"a": 3.0})
    assert isinstance(figure, Figure)
    assert len(figure.axes) == 2


def test_command_writes_three_files_and_refuses_bad_names(tmp_path):
    env = {"PYTHONPATH": str(SRC), "PATH": "/usr/bin:/bin"}
    scan = str(SCANS / "toggle_switch.toml")
    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "branchline",
            "portrait",
            scan,
            "--set",
            "a=3",
            "--out",
            str(tmp_path / "p"),
        ],
        env=env,
        capture_output=True,
        text=True,
    )
    assert done.returncode == 0, done.stderr
    for name in ("portrait.png", "portrait.svg", "portrait.json"):
        assert (tmp_path / "p" / name).is_file()
    record = json.loads((tmp_path / "p" / "portrait.json").read_text())
    kinds = sorted(e["type"] for e in record["equilibria"])
    assert kinds == ["saddle", "stable node", "stable node"]  # the switch at a = 3
    assert "saddle" in done.stdout
    bad = subprocess.run(
        [sys.executable, "-m", "branchline", "portrait", scan, "--plane", "u", "w"],
        env=env,
        capture_output=True,
        text=True,
    )
    assert bad.returncode == 2 and "'w' is not a state" in bad.stderr
    unknown = subprocess.run(
        [sys.executable, "-m", "branchline", "portrait", scan, "--set", "zz=1"],
        env=env,
        capture_output=True,
        text=True,
    )
    assert unknown.returncode == 2 and "--set zz=1" in unknown.stderr
