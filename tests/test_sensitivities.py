"""Sensitivities of located events from the implicit function theorem, checked against
finite differences of re-located events (re-running the trace with the parameter moved).

Sources: the Brusselator's Hopf point B = 1 + A^2, so dB/dA = 2A (Kuznetsov, Elements of
Applied Bifurcation Theory, 3rd ed., section 3.7 example; from memory, and derived by hand
from trace = B - 1 - A^2); the spruce budworm model's folds (Ludwig, Jones and Holling,
"Qualitative analysis of insect outbreak systems", J. Animal Ecology 47, 1978), compared
with central differences of re-located folds.
"""

from __future__ import annotations

import copy

import numpy as np
import pytest

import branchline

BUDWORM = {
    "model": {
        "parameters": {"r": 0.5, "K": 8.0},
        "equations": {"N": "r*N*(1 - N/K) - N^2/(1 + N^2)"},
    },
    "trace": [{"vary": "r", "interval": [0.3, 0.7], "start": {"N": 6.0}}],
}
BRUSSELATOR = {
    "model": {
        "parameters": {"A": 1.3, "B": 2.0, "c": 1.0},
        "equations": {"x": "A - (B + 1)*x + c*x^2*y", "y": "B*x - c*x^2*y"},
    },
    "trace": [{"vary": "B", "interval": [1, 4], "start": {"x": 1.3, "y": 1.5}}],
}
STEP = 1e-4  # relative: central differences then carry an error near STEP^2 ~ 1e-8


def located(scan, kind, name, value):
    moved = copy.deepcopy(scan)
    moved["model"]["parameters"][name] = value
    return np.array([e.value for e in branchline.run(moved).events if e.kind == kind])


@pytest.mark.parametrize(
    ("scan", "kind", "other"),
    [(BUDWORM, "fold", "K"), (BRUSSELATOR, "hopf", "A"), (BRUSSELATOR, "hopf", "c")],
)
def test_sensitivity_matches_relocated_events(scan, kind, other):
    result = branchline.run(scan)
    events = [e for e in result.events if e.kind == kind]
    assert events
    nominal = scan["model"]["parameters"][other]
    h = STEP * nominal
    differences = (
        located(scan, kind, other, nominal + h) - located(scan, kind, other, nominal - h)
    ) / (2 * h)
    for event, difference in zip(events, differences, strict=True):
        entry = event.details["sensitivities"][other]
        assert entry["derivative"] == pytest.approx(difference, rel=1e-6)
        assert entry["elasticity"] == pytest.approx(entry["derivative"] * nominal / event.value)


def test_brusselator_hopf_sensitivity_is_2A():
    (event,) = [e for e in branchline.run(BRUSSELATOR).events if e.kind == "hopf"]
    assert abs(event.value - (1 + 1.3**2)) < 1e-12
    assert abs(event.details["sensitivities"]["A"]["derivative"] - 2 * 1.3) < 1e-10


def test_report_ranks_what_moves_each_event():
    result = branchline.run(BRUSSELATOR)
    text = result.report()
    assert "What moves each stability change most" in text
    section = text.split("What moves each stability change most")[1]
    # at A = 1.3, c = 1: |elasticity| of A (2 A^2 / B = 1.25...) exceeds that of c
    assert section.index("A (") < section.index("c (")
