"""One colour per connected curve, named switched branches, curves hidden under others.

Sources of the expected geometry:
- The pond demo is the Rosenzweig-MacArthur predator-prey model (Rosenzweig,
  "Paradox of enrichment: destabilization of exploitation ecosystems in
  ecological time", Science 171, 1971). Its grazer-free equilibria are
  A = K, Z = 0, and the grazers invade where A = K equals the coexistence
  value A* = m / (a (e - m h)) = 0.3 / (2 (0.4 - 0.15)) = 0.6: a transcritical
  branch point at K = 0.6 (solved by hand from the equations).
- x' = p - x has the single equilibrium x = p (solved by hand), so two traces of
  it coincide everywhere.
"""

from __future__ import annotations

import copy
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from branchline import scan_from_dict
from branchline.errors import ScanError
from branchline.present.curves import connected_curves, hidden_curves
from branchline.present.plotting import bifurcation_figure, hidden_note
from branchline.runner import run_scan

ROOT = Path(__file__).resolve().parents[1]

POND = {
    "title": "pond",
    "model": {
        "parameters": {"r": 1.0, "K": 1.5, "a": 2.0, "h": 0.5, "e": 0.4, "m": 0.3},
        "definitions": {"grazing": "a*A*Z/(1 + a*h*A)"},
        "equations": {"A": "r*A*(1 - A/K) - grazing", "Z": "e*grazing - m*Z"},
    },
    "trace": [
        {
            "name": "coexistence",
            "vary": "K",
            "interval": [0.3, 4.0],
            "start": {"A": 0.6, "Z": 0.48},
            "limits": {"Z": [0.0, 100.0]},
        }
    ],
}


def _branch_colours(figure) -> dict[str, str]:
    """Trace name -> colour of its drawn runs in the top panel."""
    colours = {}
    for line in figure.axes[0].get_lines():
        gid = line.get_gid() or ""
        if gid.startswith("branch-"):
            colours[gid[len("branch-") :].rpartition("-")[0]] = line.get_color()
    return colours


def _run(scan: dict):
    result = run_scan(scan_from_dict(scan))
    points, events, info = result.points_frame(), result.event_records(), result.info()
    return points, events, info, bifurcation_figure(points, events, info)


def test_the_two_halves_of_a_switched_branch_are_one_curve_in_one_colour():
    points, _, _, figure = _run(POND)
    colours = _branch_colours(figure)
    assert set(colours) == {"coexistence", "coexistence.1", "coexistence.2"}
    assert colours["coexistence.1"] == colours["coexistence.2"] != colours["coexistence"]
    legend = [t.get_text() for t in figure.legends[0].get_texts()]
    assert sum("coexistence.1" in text for text in legend) == 1, legend
    # the halves really are the grazer-free line A = K, Z = 0 (Rosenzweig 1971)
    halves = points[points["trace"].isin(["coexistence.1", "coexistence.2"])]
    np.testing.assert_allclose(halves["A"], halves["K"], rtol=1e-9)
    np.testing.assert_allclose(halves["Z"], 0.0, atol=1e-12)
    assert halves["K"].min() == pytest.approx(0.3) and halves["K"].max() == pytest.approx(4.0)


def test_a_switched_branch_can_be_named():
    scan = copy.deepcopy(POND)
    scan["trace"][0]["branch_names"] = ["grazer-free"]
    points, events, info, figure = _run(scan)
    halves = ["coexistence.grazer-free.1", "coexistence.grazer-free.2"]
    assert list(dict.fromkeys(points["trace"])) == ["coexistence", *halves]
    for name in halves:
        entry = next(t for t in info["traces"] if t["name"] == name)
        assert entry["curve_name"] == "grazer-free" and entry["parent"] == "coexistence"
    colours = _branch_colours(figure)
    assert colours[halves[0]] == colours[halves[1]] != colours["coexistence"]
    legend = [t.get_text() for t in figure.legends[0].get_texts()]
    assert any(text.startswith("grazer-free\n(branches off coexistence") for text in legend)
    # the branch point sits at K = 0.6 (Rosenzweig 1971, solved by hand)
    (point,) = [e for e in events if e["kind"] == "branch_point"]
    assert point["value"] == pytest.approx(0.6, rel=1e-10)


@pytest.mark.parametrize(
    ("names", "problem"),
    [
        ("free", "list of names"),
        (["a.b"], "contains '.'"),
        (["x", "x"], "used twice"),
        (["coexistence"], "used twice"),
        ([""], "must not be empty"),
    ],
)
def test_bad_branch_names_are_refused_with_the_key(names, problem):
    scan = copy.deepcopy(POND)
    scan["trace"][0]["branch_names"] = names
    with pytest.raises(ScanError) as refused:
        scan_from_dict(scan)
    assert refused.value.key.startswith("trace[1].branch_names")
    assert problem in str(refused.value)


def test_branch_names_without_switching_are_refused():
    scan = copy.deepcopy(POND)
    scan["trace"][0].update(branch_names=["free"], switch_branches=False)
    with pytest.raises(ScanError, match="switch_branches = false"):
        scan_from_dict(scan)


def _line(trace: str, p: np.ndarray, x: np.ndarray) -> pd.DataFrame:
    return pd.DataFrame({"trace": trace, "step": np.arange(len(p)), "p": p, "x": x})


def _switched_info(children: list[str]) -> dict:
    traces = [{"name": "line", "vary": "p", "parent": None}]
    traces += [{"name": c, "vary": "p", "parent": "line", "start_value": 0.001} for c in children]
    return {"traces": traces}


BRANCH_POINT = {"trace": "line", "kind": "branch_point", "value": 0.0, "parameters": {"p": 0.0}}


def test_a_half_continuing_its_parent_joins_its_curve():
    # The parent x = 0 ends at its branch point p = 0; x = 0 on p > 0 continues it
    # (directions leaving the point opposite), x = p on p > 0 turns off at 45 degrees.
    left = np.linspace(-1.0, 0.0, 11)
    right = np.linspace(0.001, 1.0, 11)
    event = {**BRANCH_POINT, "state": {"x": 0.0}}
    onward = pd.concat([_line("line", left, 0 * left), _line("line.1", right, 0 * right)])
    curves = connected_curves(
        onward, [event], _switched_info(["line.1"]), ["line", "line.1"], ["p", "x"]
    )
    assert [c.traces for c in curves] == [("line", "line.1")]
    across = pd.concat([_line("line", left, 0 * left), _line("line.1", right, right)])
    curves = connected_curves(
        across, [event], _switched_info(["line.1"]), ["line", "line.1"], ["p", "x"]
    )
    assert [c.traces for c in curves] == [("line",), ("line.1",)]


def test_a_curve_drawn_exactly_under_another_is_noted():
    # x' = p - x: x = p for both traces (solved by hand), so the first is hidden.
    scan = {
        "model": {"parameters": {"p": 0.0}, "equations": {"x": "p - x"}},
        "trace": [
            {"name": "first", "vary": "p", "interval": [-1.0, 1.0], "start": {"x": 0.0}},
            {"name": "again", "vary": "p", "interval": [-1.0, 1.0], "start": {"x": 0.0}},
        ],
    }
    _, _, _, figure = _run(scan)
    legend = [t.get_text() for t in figure.legends[0].get_texts()]
    assert hidden_note("first", "again") in legend


def test_curves_apart_or_crossing_are_not_noted_as_hidden():
    _, _, _, figure = _run(POND)  # the branches cross at K = 0.6 but are not hidden
    legend = " ".join(t.get_text() for t in figure.legends[0].get_texts())
    assert "lies under" not in legend
    p = np.linspace(0.0, 1.0, 50)
    # a short curve drawn first is hidden under a long one drawn over it; drawn
    # last it stays on top, and the long one shows beyond it; 1 % apart is not hidden
    assert hidden_curves([("b", p[:25], p[:25]), ("a", p, p)]) == [("b", "a")]
    assert hidden_curves([("a", p, p), ("b", p[:25], p[:25])]) == []
    assert hidden_curves([("a", p, p), ("b", p, p + 0.01)]) == []
