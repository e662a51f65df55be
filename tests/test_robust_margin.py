"""The robust margin: the nearest fold or Hopf point in scaled parameters.

The method is Dobson's closest-bifurcation condition (Dobson, "Computing a
closest bifurcation instability in multidimensional parameter space",
J. Nonlinear Sci. 3, 1993): at the nearest point the scaled offset is
parallel to the boundary's normal. Checks here:

- straight-line boundaries in closed form: for x' = (a + 2 b) - x^2 the fold
  points are the line a + 2 b = 0, and for the Hopf normal form with
  mu = a + 2 b (Kuznetsov, Elements of Applied Bifurcation Theory, sec. 3.4) the
  Hopf points are the same line; the distance from (a0, b0) in units of the
  scales (sa, sb) is |a0 + 2 b0| / sqrt(sa^2 + 4 sb^2) (distance from a point to
  a line), the nearest point the foot of the perpendicular;
- curved boundaries against brute-force minimisation (scipy.optimize) over the
  boundary's closed-form parametrisation: the cusp normal form
  x' = a + b x - x^3 with its fold curve a = -2 x^3, b = 3 x^2 (Kuznetsov,
  sec. 8.2), a Hopf parabola mu = a - b^2, and three uncertain parameters in
  x' = a + b x - c x^3, fold surface (a, b, c) = (-2 c x^3, 3 c x^2, c)
  (derived by hand from f = f_x = 0);
- no point of the traced [[boundary]] curve lies nearer than the margin (the
  curve sampled densely by continuation).
"""

from __future__ import annotations

import copy

import numpy as np
import pytest
from scipy import optimize

import branchline
from boundary_models import cusp_fold_scan
from branchline.errors import ScanError

HOPF_TEMPLATE = {
    "x": "mu*x - y - x*(x^2 + y^2)",
    "y": "x + mu*y - y*(x^2 + y^2)",
}


def hopf_equations(mu: str) -> dict[str, str]:
    return {name: text.replace("mu", f"({mu})") for name, text in HOPF_TEMPLATE.items()}


def scan(equations, parameters, start, vary, interval, scales, nominal=None, extra=None):
    data = {
        "model": {"parameters": parameters, "equations": equations},
        "trace": [{"name": "line", "vary": vary, "interval": interval, "start": start}],
        "robust_margin": {"scale": scales},
    }
    if nominal:
        data["robust_margin"]["nominal"] = nominal
    data.update(extra or {})
    return data


def located(result):
    points = [p for p in result.robust_margin.points if p.status == "done"]
    assert points, [p.message for p in result.robust_margin.points]
    return points


@pytest.mark.parametrize("kind", ["fold", "hopf"])
def test_straight_line_boundary_closed_form(kind):
    a0, b0, sa, sb = 0.3, 0.5, 0.5, 0.25
    if kind == "fold":
        equations, start = {"x": "(a + 2*b) - x^2"}, {"x": 1.0}
    else:
        equations, start = hopf_equations("-(a + 2*b)"), {"x": 0.0, "y": 0.0}
    result = branchline.run(
        scan(equations, {"a": a0, "b": b0}, start, "a", [-3.0, 3.0], {"a": sa, "b": sb}),
        confirm=False,
    )
    (point,) = located(result)
    assert point.kind == kind
    # distance from a point to the line a + 2 b = 0 in scaled units z = ((a-a0)/sa, (b-b0)/sb)
    exact = abs(a0 + 2 * b0) / np.hypot(sa, 2 * sb)
    assert abs(point.distance - exact) < 1e-10 * exact
    normal = -np.sign(a0 + 2 * b0) * np.array([sa, 2 * sb]) / np.hypot(sa, 2 * sb)
    assert np.max(np.abs(point.direction - normal)) < 1e-10
    foot = np.array([a0, b0]) + exact * np.array([sa, sb]) * normal
    assert np.max(np.abs(point.parameters - foot)) < 1e-10
    assert abs(point.parameters[0] + 2 * point.parameters[1]) < 1e-12
    if kind == "hopf":
        assert abs(point.frequency - 1.0) < 1e-10  # omega = 1 on the whole line (sec. 3.4)


CUSP_SCAN = {**cusp_fold_scan(largest_step=0.01), "robust_margin": {"scale": {"a": 0.1, "b": 0.3}}}


@pytest.fixture(scope="module")
def cusp():
    return branchline.run(CUSP_SCAN, confirm=False)


def cusp_distance(x, a0=0.05, b0=1.0, sa=0.1, sb=0.3):
    """Scaled distance from the nominal point to the fold point with state x."""
    return np.hypot((-2 * x**3 - a0) / sa, (3 * x**2 - b0) / sb)


def test_cusp_fold_margin_against_brute_force(cusp):
    points = located(cusp)
    assert sorted(p.number for p in points) == [1, 2]  # both folds of the trace start one
    for point in points:
        x = point.state[0]
        a, b = point.parameters
        assert abs(a + 2 * x**3) < 1e-12 and abs(b - 3 * x**2) < 1e-12  # on the fold curve
        # brute force: dense sampling of the curve on x's side of the cusp, then polished
        side = np.linspace(0, 1.5, 30001) * np.sign(x)
        guess = side[np.argmin(cusp_distance(side))]
        best = optimize.minimize_scalar(
            cusp_distance, bracket=(guess - 1e-3, guess, guess + 1e-3), tol=1e-14
        )
        assert abs(point.distance - best.fun) < 1e-9 * best.fun
        assert abs(x - best.x) < 1e-6  # the minimiser itself is flat to 1e-8 in distance
    nearest = cusp.robust_margin.nearest()
    assert nearest.distance == min(p.distance for p in points)


def test_no_point_of_the_boundary_curve_is_nearer(cusp):
    frame = cusp.boundaries_frame()
    distances = np.hypot((frame["a"] - 0.05) / 0.1, (frame["b"] - 1.0) / 0.3)
    nearest = cusp.robust_margin.nearest().distance
    assert distances.min() >= nearest - 1e-12
    assert distances.min() - nearest < 1e-3  # the curve's points come close to it


def test_hopf_parabola_against_brute_force():
    a0, b0, sa, sb = -0.5, 0.3, 0.2, 0.4
    result = branchline.run(
        scan(
            hopf_equations("a - b^2"),
            {"a": a0, "b": b0},
            {"x": 0.0, "y": 0.0},
            "a",
            [-1.0, 1.0],
            {"a": sa, "b": sb},
        ),
        confirm=False,
    )
    (point,) = located(result)
    a, b = point.parameters
    assert abs(a - b**2) < 1e-12  # on the Hopf curve mu = 0

    def distance(t):
        return np.hypot((t**2 - a0) / sa, (t - b0) / sb)

    best = optimize.minimize_scalar(distance, bracket=(-2.0, 0.0, 2.0), tol=1e-14)
    samples = np.linspace(-3, 3, 60001)
    assert distance(samples).min() >= best.fun - 1e-12  # the minimiser is global
    assert abs(point.distance - best.fun) < 1e-9 * best.fun
    assert abs(point.frequency - 1.0) < 1e-10


def test_three_uncertain_parameters_against_brute_force():
    nominal = np.array([0.1, 1.0, 1.0])
    scales = np.array([0.05, 0.2, 0.3])
    result = branchline.run(
        scan(
            {"x": "a + b*x - c*x^3"},
            dict(zip("abc", nominal)),
            {"x": 1.2},
            "a",
            [-1.0, 1.0],
            dict(zip("abc", scales)),
        ),
        confirm=False,
    )
    points = located(result)
    assert len(points) == 2

    def distance(v):  # fold surface (a, b, c) = (-2 c x^3, 3 c x^2, c)
        x, c = v
        return np.linalg.norm((np.array([-2 * c * x**3, 3 * c * x**2, c]) - nominal) / scales)

    for point in points:
        a, b, c = point.parameters
        x = point.state[0]
        assert abs(a + 2 * c * x**3) < 1e-12 and abs(b - 3 * c * x**2) < 1e-12
        # a local minimum: no surface point in a small ring around it is nearer
        angles = np.linspace(0, 2 * np.pi, 64, endpoint=False)
        ring = [distance((x + 1e-3 * np.cos(t), c + 1e-3 * np.sin(t))) for t in angles]
        assert min(ring) > point.distance
        # the direction is the unit scaled offset
        offset = (point.parameters - nominal) / scales
        assert np.max(np.abs(point.direction - offset / point.distance)) < 1e-12
    # brute force: the whole surface sampled on a dense (x, c) grid, the best polished
    grid_x, grid_c = np.meshgrid(np.linspace(-1.5, 1.5, 601), np.linspace(0.01, 3.0, 600))
    sampled = np.vectorize(lambda x, c: distance((x, c)))(grid_x, grid_c)
    at = np.unravel_index(np.argmin(sampled), sampled.shape)
    best = optimize.minimize(
        distance,
        (grid_x[at], grid_c[at]),
        method="Nelder-Mead",
        options={"xatol": 1e-12, "fatol": 1e-15, "maxiter": 20000},
    )
    nearest = result.robust_margin.nearest()
    assert best.fun <= sampled.min()
    assert abs(nearest.distance - best.fun) < 1e-9 * best.fun


def test_written_table_and_report(tmp_path, cusp):
    folder = branchline.write_results(cusp, tmp_path / "out")
    frame = branchline.read_results(folder)
    table = (folder / "robust_margin.csv").read_text().splitlines()
    assert table[0] == (
        "trace,kind,number,status,distance,a,b,direction_a,direction_b,x,frequency,same_as,message"
    )
    entry = frame.info["robust_margin"]
    assert entry["parameters"] == ["a", "b"] and entry["scales"] == {"a": 0.1, "b": 0.3}
    assert entry["distance"] == cusp.robust_margin.nearest().distance
    report = (folder / "report.md").read_text()
    assert "## Robust margin" in report
    # the stability map shows the nominal point and the ellipse touching the nearest point
    (figure,) = cusp.stability_map_figures()
    legend = [t.get_text() for t in figure.axes[0].get_legend().get_texts()]
    assert "nominal point" in legend and any(t.startswith("robust margin") for t in legend)
    nearest = cusp.robust_margin.nearest()
    ellipse = next(line for line in figure.axes[0].get_lines() if len(line.get_xdata()) == 361)
    gaps = np.hypot(
        ellipse.get_xdata() - nearest.parameters[0], ellipse.get_ydata() - nearest.parameters[1]
    )
    assert gaps.min() < 0.01  # the ellipse passes through the nearest point (361 samples)
    assert "describe the model, not the real system" in report


@pytest.mark.parametrize(
    ("change", "key", "words"),
    [
        (lambda m: m.pop("scale"), "robust_margin.scale", "missing"),
        (lambda m: m.update({"scale": {"a": 0.1}}), "robust_margin.scale", "at least two"),
        (lambda m: m.update({"scale": {"a": 0.1, "bb": 1}}), "robust_margin.scale.bb", "did you"),
        (lambda m: m.update({"scale": {"a": 0.1, "b": 0}}), "robust_margin.scale.b", "positive"),
        (lambda m: m.update({"nominal": {"q": 1.0}}), "robust_margin.nominal.q", "not a parameter"),
        (lambda m: m.update({"ellipse": "yes"}), "robust_margin.ellipse", "true or false"),
        (lambda m: m.update({"centre": 1}), "robust_margin.centre", "unknown key"),
    ],
)
def test_bad_section_is_refused_naming_file_and_key(change, key, words):
    data = copy.deepcopy(CUSP_SCAN)
    change(data["robust_margin"])
    with pytest.raises(ScanError) as err:
        branchline.scan_from_dict(data, "plant.toml")
    text = str(err.value)
    assert "plant.toml" in text and key in text and words in text


def test_events_off_the_nominal_slice_are_skipped():
    data = copy.deepcopy(CUSP_SCAN)
    data.pop("boundary")
    data["model"]["parameters"]["c"] = 1.0
    data["model"]["equations"]["x"] = "a + b*x - c*x^3"
    data["trace"][0]["set"] = {"c": 1.1}
    result = branchline.run(data, confirm=False)
    assert result.robust_margin.points == ()
    assert any("c differ from the nominal point" in s for s in result.robust_margin.skipped)
