"""The stability map's region labels against independently counted equilibria.

Source: the cusp normal form x' = a + b x - x^3 (Kuznetsov, Elements of Applied
Bifurcation Theory, 3rd ed., section 8.2): three equilibria (two stable, one
with one unstable eigenvalue) inside the cusp 27 a^2 < 4 b^3, b > 0, one stable
equilibrium outside. The check does not use that closed form: on a dense grid
of (a, b) the equilibria are the real roots of the cubic -x^3 + b x + a
(numpy.roots) and each is stable when f'(x) = b - 3 x^2 < 0; the map's label of
the region holding each grid point must agree.
"""

from __future__ import annotations

import numpy as np
import pytest

import branchline
from boundary_models import cusp_fold_scan
from branchline.problems.stability_regions import region_raster, sample_cells

CUSP = cusp_fold_scan()


@pytest.fixture(scope="module")
def cusp():
    return branchline.run(CUSP, confirm=False)


def cubic_counts(a: float, b: float) -> tuple[int, ...]:
    """Unstable-eigenvalue count of every equilibrium of x' = a + b x - x^3, sorted."""
    roots = np.roots([-1.0, 0.0, b, a])
    real = roots[np.abs(roots.imag) < 1e-9].real
    return tuple(sorted(int(b - 3 * x**2 > 0) for x in real))


def test_region_labels_match_a_dense_grid_of_equilibrium_counts(cusp):
    (found,) = cusp.stability_maps
    assert (found.first, found.second) == ("a", "b")
    assert len(found.regions) == 2 and all(region.uniform for region in found.regions)
    labels = sorted(region.samples[0].unstable for region in found.regions)
    assert labels == [(0,), (0, 0, 1)]
    checked = 0
    for a in np.linspace(-0.99, 0.99, 67):
        for b in np.linspace(-0.49, 1.99, 67):
            region = found.region_at(a, b)
            if region is None:  # a cell on the curve itself
                continue
            assert region.samples[0].unstable == cubic_counts(a, b), (a, b)
            checked += 1
    assert checked > 0.9 * 67 * 67  # only the cells along the curve are left out


def test_samples_are_measured_inside_their_region(cusp):
    (found,) = cusp.stability_maps
    for region in found.regions:
        for sample in region.samples:
            assert sample.unstable == cubic_counts(sample.first, sample.second)
            assert found.region_at(sample.first, sample.second) is region


def test_map_is_written_and_described_in_run_json(tmp_path, cusp):
    folder = branchline.write_results(cusp, tmp_path / "out")
    assert (folder / "stability_map.png").stat().st_size > 10_000
    entry = branchline.read_results(folder).info["stability_maps"][0]
    assert entry["parameters"] == ["a", "b"] and entry["boundaries"] == ["folds"]
    texts = sorted(r["samples"][0]["equilibria"] for r in entry["regions"])
    assert texts == [1, 3]
    figures = cusp.stability_map_figures()
    words = [t.get_text() for t in figures[0].axes[0].texts]
    assert "cusp" in words
    assert any(w.startswith("3 equilibria, 2 stable") for w in words)


def test_a_region_whose_samples_disagree_says_so():
    """Only the Hopf curve of the Bogdanov-Takens normal form x' = y, y' = b1 + b2 x + x^2
    - x y (Kuznetsov, sec. 8.4) is followed: it ends inside the window at the
    Bogdanov-Takens point, so it separates nothing, and the one region holds parts with
    two equilibria and with none (beyond the fold curve b1 = b2^2 / 4, not followed).
    The samples find both; the map says they differ instead of guessing one label."""
    result = branchline.run(
        {
            "model": {
                "parameters": {"b1": 0.0, "b2": -1.0},
                "equations": {"x": "y", "y": "b1 + b2*x + x^2 - x*y"},
            },
            "trace": [
                {"name": "line", "vary": "b1", "interval": [-1.0, 1.0], "start": {"x": 0, "y": 0}}
            ],
            "boundary": [
                {
                    "name": "hopf",
                    "from": "line",
                    "kind": "hopf",
                    "second": "b2",
                    "window": {"b1": [-1.0, 1.0], "b2": [-2.0, 1.0]},
                }
            ],
        },
        confirm=False,
    )
    (found,) = result.stability_maps
    (region,) = found.regions
    assert not region.uniform
    for sample in region.samples:  # each sample right: 2 equilibria below the parabola, else 0
        b1, b2 = sample.first, sample.second
        assert sample.equilibria == (2 if b2**2 > 4 * b1 else 0)
    from branchline.present.stability_map import region_text

    entry = result.info()["stability_maps"][0]
    assert region_text(entry["regions"][0]).startswith("samples differ")


def test_raster_geometry():
    """A straight line splits the window into two regions; sample cells are interior."""
    labels = region_raster([(np.array([0.0, 1.0]), np.array([0.5, 0.5]))], ((0, 1), (0, 1)), 50)
    assert labels.max() == 2
    assert set(np.unique(labels[:20])) == {labels[0, 0]} and labels[0, 0] != labels[-1, 0]
    cells = sample_cells(labels == labels[0, 0], 3)
    assert cells[0][0] < 25 and len(cells) == 3


def test_plot_redraws_the_stability_map_from_the_folder(tmp_path, cusp, capsys):
    """`branchline plot DIR` draws the map again from run.json and boundaries.csv alone:
    the same picture as the run drew, written where the diagram goes."""
    from branchline.cli import main

    folder = branchline.write_results(cusp, tmp_path / "out")
    drawn = (folder / "stability_map.png").read_bytes()
    (folder / "stability_map.png").unlink()
    assert main(["plot", str(folder)]) == 0
    assert f"stability map written to {folder / 'stability_map.png'}" in capsys.readouterr().out
    assert (folder / "stability_map.png").read_bytes() == drawn

    elsewhere = tmp_path / "figures"
    elsewhere.mkdir()
    target = elsewhere / "diagram.svg"
    assert main(["plot", str(folder), "--format", "svg", "--output", str(target)]) == 0
    assert (elsewhere / "stability_map.svg").read_text().lstrip().startswith("<?xml")

    (folder / "boundaries.csv").unlink()
    assert main(["plot", str(folder)]) == 2
    error = capsys.readouterr().err
    assert "boundaries.csv" in error and "Traceback" not in error


def test_plot_of_a_run_without_boundaries_draws_no_map(tmp_path, capsys):
    from branchline.cli import main

    scan = {key: value for key, value in CUSP.items() if key != "boundary"}
    folder = branchline.write_results(branchline.run(scan, confirm=False), tmp_path / "out")
    assert main(["plot", str(folder)]) == 0
    assert "stability map" not in capsys.readouterr().out
    assert not (folder / "stability_map.png").exists()
