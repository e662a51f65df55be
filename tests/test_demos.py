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
    # American Naturalist 97, 1963; closed forms from memory): the coexistence state
    # has A* = m / (a (e - m h)); grazers invade where K = A*, and the Hopf point sits
    # where A* is the hump of the prey isocline, K = 2 A* + 1 / (a h).
    a, h, e, m = 2.0, 0.5, 0.4, 0.3
    a_star = m / (a * (e - m * h))
    result = _run("enriched_pond")
    (hopf,) = [ev for ev in result.events if ev.kind == "hopf"]
    assert hopf.value == pytest.approx(2 * a_star + 1 / (a * h), rel=1e-10)
    assert hopf.criticality == "supercritical"
    invasion = [ev for ev in result.events if ev.kind == "branch_point"]
    assert invasion and invasion[0].value == pytest.approx(a_star, rel=1e-10)
    assert invasion[0].branching == "transcritical"


def test_cooled_reactor_has_a_hysteresis_window_and_a_subcritical_hopf():
    result = _run("cooled_reactor")
    folds = _values(result, "fold")
    assert len(folds) == 2
    (hopf,) = [e for e in result.events if e.kind == "hopf"]
    assert hopf.criticality == "subcritical"
    assert folds[0] < hopf.value < folds[1]
    # On the located fold the Jacobian is singular: its determinant vanishes to roundoff.
    for event in (e for e in result.events if e.kind == "fold"):
        jac = result.model.jacobian(event.state, event.parameters)
        scale = np.abs(jac).max() ** 2
        assert abs(np.linalg.det(jac)) <= 1e-9 * scale
    assert math.isfinite(hopf.frequency) and hopf.frequency > 0
