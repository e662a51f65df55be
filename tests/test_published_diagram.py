"""A published two-parameter diagram compared point by point: the spruce budworm.

Source: Ludwig, Jones and Holling, "Qualitative analysis of insect outbreak
systems: the spruce budworm and forest", J. Animal Ecology 47 (1978); in the
dimensionless form x' = r x (1 - x / k) - x^2 / (1 + x^2) of Strogatz, Nonlinear
Dynamics and Chaos, section 3.7 (from memory). Its stability diagram in the
(k, r) plane (Strogatz, Fig. 3.7.6) is bounded by the fold curve given there in
parametric form,

    r = 2 x^3 / (1 + x^2)^2,    k = 2 x^3 / (x^2 - 1),    x > 1,

whose two branches meet in a cusp at x = sqrt(3), (k, r) = (3 sqrt(3), 3 sqrt(3) / 8).
(Re-derived here: the equilibria satisfy r (1 - x/k) = x / (1 + x^2), and at a
fold also -r/k = (1 - x^2) / (1 + x^2)^2.) Between the branches the model is
bistable (refuge and outbreak both stable; Strogatz's "bistable" region), outside
them it has one stable positive equilibrium ("refuge" or "outbreak"); the
equilibrium x = 0 is unstable throughout (r > 0).

Each computed fold point (x, k, r) is compared with the parametric curve at the
same x, to 1e-8 relative.
"""

from __future__ import annotations

import numpy as np
import pytest

import branchline

BUDWORM = {
    "title": "Spruce budworm (Ludwig, Jones and Holling 1978)",
    "model": {
        "parameters": {"r": 0.3, "k": 10.0},
        "equations": {"x": "r*x*(1 - x/k) - x^2/(1 + x^2)"},
    },
    "trace": [
        {
            "name": "refuge",
            "vary": "r",
            "interval": [0.2, 0.8],
            "start": {"x": 0.5},
            # the box the stability map counts equilibria in (the outbreak state nears k)
            "search_box": {"x": [-1.0, 25.0]},
            "search_at": 0,
        }
    ],
    "boundary": [
        {
            "name": "folds",
            "from": "refuge",
            "kind": "fold",
            "second": "k",
            "window": {"r": [0.2, 0.8], "k": [3.0, 20.0]},
            "steps": {"largest": 0.2},
        }
    ],
}


@pytest.fixture(scope="module")
def budworm():
    return branchline.run(BUDWORM, confirm=False)


def test_fold_curve_matches_the_published_parametric_curve(budworm):
    frame = budworm.boundaries_frame()
    assert len(frame) > 40
    x, k, r = frame["x"].to_numpy(), frame["k"].to_numpy(), frame["r"].to_numpy()
    assert np.all(x > 1.0)
    expected_r = 2 * x**3 / (1 + x**2) ** 2
    expected_k = 2 * x**3 / (x**2 - 1)
    assert np.max(np.abs(r - expected_r) / expected_r) < 1e-8
    assert np.max(np.abs(k - expected_k) / expected_k) < 1e-8
    # both branches of the diagram: x below and above the cusp's sqrt(3)
    assert x.min() < 1.5 and x.max() > 2.5


def test_cusp_of_the_published_diagram(budworm):
    cusps = [e for e in budworm.events if e.kind == "cusp"]
    assert len(cusps) >= 1
    for event in cusps:
        r, k = event.parameters
        assert abs(r - 3 * np.sqrt(3) / 8) < 1e-8
        assert abs(k - 3 * np.sqrt(3)) < 1e-8
        assert abs(event.state[0] - np.sqrt(3)) < 1e-6  # the cusp's state is flat in x


def test_stability_map_regions_are_the_published_ones(budworm):
    (found,) = budworm.stability_maps
    labels = sorted(region.samples[0].unstable for region in found.regions if region.uniform)
    # bistable: refuge and outbreak stable, the middle state and x = 0 unstable;
    # elsewhere one stable positive state beside the unstable x = 0
    assert (0, 0, 1, 1) in labels and (0, 1) in labels
    for region in found.regions:
        for sample in region.samples:
            inside = _inside_cusp(sample.first, sample.second)
            assert sample.unstable == ((0, 0, 1, 1) if inside else (0, 1))


def _inside_cusp(r: float, k: float) -> bool:
    """Three positive equilibria: r (1 - x/k) (1 + x^2) = x has three positive roots."""
    roots = np.roots([-r / k, r, -r / k - 1.0, r])
    real = roots[np.abs(roots.imag) < 1e-9].real
    return int(np.sum(real > 0)) == 3
