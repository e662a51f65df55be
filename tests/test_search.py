"""Equilibria found with no start guess: deflation and deflated continuation.

Every model here has equilibria known independently of branchline: roots of
polynomials from numpy.roots or sympy, isola ends and folds from closed forms
derived by sympy from the model equations. Each reference names its source.
"""

from __future__ import annotations

import itertools
import json
import math
import subprocess
import sys

import numpy as np
import pytest
import sympy as sp

import branchline
from branchline.errors import ScanError
from branchline.model.build import build_model
from branchline.present.plotting import bifurcation_figure
from branchline.problems.deflation import Box, find_equilibria, sobol_starts
from branchline.results.reading import fmt
from branchline.results.writers import read_results, write_results
from branchline.scan.loader import load_scan

# Two reported equilibria closer than this are the same one reported twice (the test).
DISTINCT = 1e-8


def _pairwise_gap(points: np.ndarray) -> float:
    gaps = [np.linalg.norm(a - b) for a, b in itertools.combinations(points, 2)]
    return min(gaps) if gaps else math.inf


def _matched(found: np.ndarray, reference: np.ndarray, tol: float) -> bool:
    """Every reference point has exactly one found point within tol, and vice versa."""
    if found.shape != reference.shape:
        return False
    distances = np.linalg.norm(found[:, None, :] - reference[None, :, :], axis=2)
    return bool(
        np.all((distances < tol).sum(axis=0) == 1) and np.all((distances < tol).sum(1) == 1)
    )


def _search_scan(equations, parameters, vary, interval, box, **extra):
    trace = {
        "name": "all",
        "vary": vary,
        "interval": interval,
        "start": "search",
        "search_box": box,
        **extra,
    }
    return branchline.scan_from_dict(
        {"model": {"parameters": parameters, "equations": equations}, "trace": [trace]}
    )


# ----------------------------------------------------------------- polynomial systems

# z^5 = c in z = x + i y: Re and Im of (x + i y)^5 - c (binomial expansion).
FIFTH_POWER = {
    "x": "x^5 - 10*x^3*y^2 + 5*x*y^4 - c",
    "y": "5*x^4*y - 10*x^2*y^3 + y^5",
}


def test_fifth_roots_of_unity_all_found_once_from_no_guess():
    # de Moivre: z^5 = 1 has exactly five roots exp(2 pi i k / 5); numpy.roots is the reference.
    scan = _search_scan(
        FIFTH_POWER, {"c": 1.0}, "c", [0.5, 2.0], {"x": [-2.0, 2.0], "y": [-2.0, 2.0]}, search_at=0
    )
    result = branchline.run_scan(scan)
    (search,) = result.searches
    (at_start,) = search.values
    reference = np.roots([1, 0, 0, 0, 0, -1])
    reference = np.column_stack([reference.real, reference.imag])
    assert at_start.count == 5 and len(at_start.roots) == 5
    assert _matched(at_start.roots, reference, 1e-12)
    assert _pairwise_gap(at_start.roots) > DISTINCT
    # each root is on a branch of its own (z = c^(1/5) e^(2 pi i k/5) moves radially), traced once
    assert sorted(search.found) == [f"all#{k}" for k in range(1, 6)]
    assert len(set(at_start.traces)) == 5
    for branch in result.branches:
        radius = np.hypot(branch.states[:, 0], branch.states[:, 1])
        assert np.max(np.abs(radius - branch.parameter_values**0.2)) < 1e-9
        assert branch.parameter_values.min() == 0.5 and branch.parameter_values.max() == 2.0


def test_circle_and_hyperbola_meet_in_four_points():
    # x^2 + y^2 = r, x y = 1: four real intersections for r > 2 (x^2 = (r +- sqrt(r^2 - 4))/2),
    # the reference solved exactly by sympy.
    x, y = sp.symbols("x y", real=True)
    exact = sp.solve([x**2 + y**2 - 4, x * y - 1], [x, y], dict=True)
    reference = np.array([[float(s[x]), float(s[y])] for s in exact])
    assert len(reference) == 4
    scan = _search_scan(
        {"x": "x^2 + y^2 - r", "y": "x*y - 1"},
        {"r": 4.0},
        "r",
        [3.0, 5.0],
        {"x": [-3.0, 3.0], "y": [-3.0, 3.0]},
        search_at=[3.0, 5.0],
    )
    result = branchline.run_scan(scan)
    (search,) = result.searches
    assert [v.count for v in search.values] == [4, 4, 4]
    assert _matched(search.values[0].roots, reference, 1e-12)
    assert all(_pairwise_gap(v.roots) > DISTINCT for v in search.values)
    # later values only meet the four traced branches again: nothing new there
    assert not any(any(v.new) for v in search.values[1:])
    assert len(result.branches) == 4


def test_seven_roots_of_a_chebyshev_polynomial_in_one_state():
    # T_7(x) = 64x^7 - 112x^5 + 56x^3 - 7x has the seven roots cos((2k - 1) pi / 14)
    # (Abramowitz and Stegun, Handbook of Mathematical Functions, 22.16.4); numpy.roots agrees.
    scan = _search_scan(
        {"x": "64*x^7 - 112*x^5 + 56*x^3 - 7*x - c"},
        {"c": 0.0},
        "c",
        [-0.5, 0.5],
        {"x": [-1.5, 1.5]},
        search_at=0,
        search_samples=8,
    )
    (search,) = branchline.run_scan(scan).searches
    found = np.sort(search.values[0].roots[:, 0])
    closed = np.sort(np.cos((2 * np.arange(1, 8) - 1) * np.pi / 14))
    by_numpy = np.sort(np.roots([64, 0, -112, 0, 56, 0, -7, 0]).real)
    assert found.shape == (7,)
    assert np.max(np.abs(found - closed)) < 1e-14 * 10
    assert np.max(np.abs(found - by_numpy)) < 1e-12
    assert np.min(np.diff(found)) > DISTINCT


def test_deflation_never_returns_a_known_root():
    # x^3 - x: roots -1, 0, 1 (elementary). With 0 and 1 deflated from the start, only -1 is new.
    spec = branchline.scan_from_dict(
        {
            "model": {"parameters": {"a": 0.0}, "equations": {"x": "x^3 - x + a"}},
            "trace": [{"vary": "a", "interval": [-1, 1], "start": {"x": 1.0}}],
        }
    ).model
    model = build_model(spec)
    box = Box(np.array([-2.0]), np.array([2.0]))
    found = find_equilibria(
        model, model.defaults, box, sobol_starts(box, 16, seed=3), known=np.array([[0.0], [1.0]])
    )
    assert found.roots[:, 0].tolist() == [-1.0]
    assert found.returned == 0


@pytest.mark.parametrize("jacobian", ["jacobian", "sparse_jacobian"])
def test_python_models_dense_and_sparse(jacobian):
    # The same z^5 = 1 as a [model.python], with its dense and its scipy.sparse Jacobian.
    scan = branchline.scan_from_dict(
        {
            "model": {
                "parameters": {"c": 1.0},
                "python": {
                    "rhs": "search_models:rhs",
                    "jacobian": f"search_models:{jacobian}",
                    "size": 2,
                    "states": ["re", "im"],
                },
            },
            "trace": [
                {
                    "name": "z",
                    "vary": "c",
                    "interval": [0.5, 2.0],
                    "start": "search",
                    "search_box": {"re": [-2.0, 2.0], "im": [-2.0, 2.0]},
                    "search_at": 0,
                }
            ],
        }
    )
    result = branchline.run_scan(scan)
    assert result.model.sparse == (jacobian == "sparse_jacobian")
    reference = np.roots([1, 0, 0, 0, 0, -1])
    reference = np.column_stack([reference.real, reference.imag])
    assert _matched(result.searches[0].values[0].roots, reference, 1e-12)
    assert len(result.branches) == 5 and all(b.status == "done" for b in result.branches)


# ----------------------------------------------------------------- an isola

# The isothermal autocatalator A + 2B -> 3B, B -> C in a stirred tank (Gray and Scott,
# "Autocatalytic reactions in the isothermal continuous stirred tank reactor: isolas and
# other forms of multistability", Chem. Eng. Sci. 38, 1983), dimensionless: a, b the
# concentrations over the feed of A, tau the residence time, k2 the decay rate of B,
# b0 the feed of B. With b0 = 0 the steady states are b = 0 and the roots of
# tau (1 + k2 tau) b^2 - tau b + (1 + k2 tau) = 0, real for tau >= 4 (1 + k2 tau)^2: an
# isola for k2 < 1/16 (Gray and Scott's isola condition, from memory), whose ends are
# tau = ((1 - 8 k2) -+ sqrt(1 - 16 k2)) / (8 k2^2) (elementary algebra on that condition).
AUTOCATALATOR = {"a": "(1 - a)/tau - a*b^2", "b": "(b0 - b)/tau + a*b^2 - k2*b"}
K2 = 0.05


def _autocatalator_run(**extra):
    scan = _search_scan(
        AUTOCATALATOR,
        {"tau": 3.0, "k2": K2, "b0": 0.0},
        "tau",
        [2.0, 70.0],
        {"a": [-0.5, 1.5], "b": [-0.5, 1.5]},
        steps={"largest": 1.0},
        **extra,
    )
    return branchline.run_scan(scan)


@pytest.fixture(scope="module")
def autocatalator():
    return _autocatalator_run()


def test_the_autocatalator_isola_is_found_and_closes(autocatalator):
    result = autocatalator
    (search,) = result.searches
    # at the start value tau = 3 only the unreacted state (a, b) = (1, 0): the isola lies
    # wholly inside the window, away from the start
    assert search.values[0].count == 1
    np.testing.assert_allclose(search.values[0].roots[0], [1.0, 0.0], atol=1e-14)
    isolas = [b for b in result.branches if b.status == "closed"]
    assert len(isolas) == 1 and isolas[0].name in search.found
    folds = sorted(e.value for e in result.events if e.kind == "fold")
    low = ((1 - 8 * K2) - math.sqrt(1 - 16 * K2)) / (8 * K2**2)
    high = ((1 - 8 * K2) + math.sqrt(1 - 16 * K2)) / (8 * K2**2)
    assert len(folds) == 2
    assert math.isclose(folds[0], low, rel_tol=1e-10) and math.isclose(
        folds[1], high, rel_tol=1e-10
    )


def test_autocatalator_counts_match_the_roots_of_its_cubic(autocatalator):
    # Reference: numpy.roots of b (tau (1 + k2 tau) b^2 - tau b + (1 + k2 tau)) at each value.
    (search,) = autocatalator.searches
    for searched in search.values:
        tau = searched.value
        cubic = np.roots([tau * (1 + K2 * tau), -tau, 1 + K2 * tau, 0.0])
        real = np.sort(cubic[np.abs(cubic.imag) < 1e-9].real)
        a = 1 - real * (1 + K2 * tau)  # the sum of the two equations at a steady state
        reference = np.column_stack([a, real])
        inside = (np.abs(reference) <= 1.5).all(axis=1)
        assert searched.count == int(inside.sum()), tau
        assert _matched(searched.roots, reference[inside], 1e-10), tau
        assert _pairwise_gap(searched.roots) > DISTINCT


# ----------------------------------------------------------------- a backward bifurcation

# SIS with vaccination (Kribs-Zaleta and Velasco-Hernandez, "A simple vaccination model
# with multiple endemic states", Math. Biosci. 164, 2000; the form here from memory):
# births and deaths mu, infection beta, recovery gamma back to S, vaccination phi of
# susceptibles, waning theta, vaccine efficacy 1 - sigma. The endemic branch bends back
# below R_vac = 1 (a backward bifurcation) for these values; the window in beta lies wholly
# below R_vac = 1, so there the endemic branch never meets the disease-free one.
SIV = {
    "S": "mu*(1 - S) - beta*S*I + gamma*I - phi*S + theta*V",
    "I": "beta*S*I + sigma*beta*V*I - (mu + gamma)*I",
    "V": "phi*S - sigma*beta*V*I - (mu + theta)*V",
}
SIV_PARAMETERS = {"beta": 1.5, "mu": 0.02, "gamma": 0.5, "phi": 0.2, "theta": 0.01, "sigma": 0.2}
SIV_WINDOW = [1.3, 1.68]


def _siv_reference():
    """Endemic states' quadratic in I, the fold and R_vac = 1, from the equations by sympy."""
    s, i, v, beta = sp.symbols("S I V beta")
    mu, gamma, phi, theta, sigma = (
        sp.Rational(str(SIV_PARAMETERS[k])) for k in ("mu", "gamma", "phi", "theta", "sigma")
    )
    # I != 0: beta (S + sigma V) = mu + gamma; S + I + V = 1; V' = 0.
    linear = sp.solve([beta * (s + sigma * v) - (mu + gamma), s + i + v - 1], [s, v], dict=True)[0]
    quadratic = sp.numer(sp.together(phi * linear[s] - (sigma * beta * i + mu + theta) * linear[v]))
    poly = sp.Poly(sp.expand(quadratic), i)
    fold = sp.solve(sp.discriminant(poly, i), beta)
    r_vac_one = (mu + gamma) * (mu + theta + phi) / ((mu + theta) + sigma * phi)
    return poly, [float(b) for b in fold if b.is_real and b > 0], float(r_vac_one)


def test_backward_bifurcation_endemic_branch_found_only_by_the_search():
    poly, folds, beta_one = _siv_reference()
    lo, hi = SIV_WINDOW
    assert hi < beta_one  # the whole window lies below R_vac = 1
    scan = branchline.scan_from_dict(
        {
            "model": {"parameters": SIV_PARAMETERS, "equations": SIV},
            "trace": [
                {
                    "name": "free",
                    "vary": "beta",
                    "interval": SIV_WINDOW,
                    "start": {"S": 0.13, "I": 0.0, "V": 0.87},
                    "search_box": {"S": [-0.1, 1.1], "I": [-0.1, 1.1], "V": [-0.1, 1.1]},
                }
            ],
        }
    )
    result = branchline.run_scan(scan)
    free = result.branch("free")
    assert np.max(np.abs(free.states[:, 1])) < 1e-12  # the traced branch is disease-free
    assert not [e for e in result.events if e.trace == "free"]  # and meets nothing in the window
    (search,) = result.searches
    assert list(search.found) == ["free#1"]
    endemic = result.branch("free#1")
    assert endemic.parent is None and endemic.states[:, 1].max() > 0.1
    # both ends leave the window at its upper edge: the branch turns back at a fold inside it
    assert endemic.parameter_values[0] == hi and endemic.parameter_values[-1] == hi
    (fold,) = [e for e in result.events if e.trace == "free#1"]
    (reference_fold,) = [b for b in folds if lo < b < hi]
    assert fold.kind == "fold" and math.isclose(fold.value, reference_fold, rel_tol=1e-10)
    beta = sp.Symbol("beta")
    for searched in search.values:
        roots = np.roots([float(c.subs(beta, searched.value)) for c in poly.all_coeffs()])
        endemic_i = np.sort(roots[(np.abs(roots.imag) < 1e-12) & (roots.real > 0)].real)
        assert searched.count == 1 + len(endemic_i), searched.value  # plus the disease-free state
        found_i = np.sort(searched.roots[:, 1])[1:]
        np.testing.assert_allclose(found_i, endemic_i, rtol=0, atol=1e-10)
        assert _pairwise_gap(searched.roots) > DISTINCT
    # the upper endemic state is stable, the lower one a saddle (Kribs-Zaleta and
    # Velasco-Hernandez: the backward bifurcation's lower branch is unstable)
    inside = search.values[len(search.values) // 2]
    order = np.argsort(inside.roots[:, 1])
    if len(order) == 3:
        assert [inside.unstable[k] for k in order] == [0, 1, 0]


# ----------------------------------------------------------------- outputs and input checks


def test_results_folder_report_and_strip(autocatalator, tmp_path):
    folder = write_results(autocatalator, tmp_path / "run")
    table = (folder / "search.csv").read_text().splitlines()
    assert table[0] == "search,tau,a,b,trace,found_by_search,in_box,stable,unstable_count"
    saved = read_results(folder)
    (entry,) = saved.info["searches"]
    assert entry["box"] == {"a": [-0.5, 1.5], "b": [-0.5, 1.5]} and entry["samples"] == 32
    assert [v["equilibria"] for v in entry["values"]][:3] == [1, 1, 3]
    found = {t["name"]: t for t in saved.info["traces"]}
    assert found["all#2"]["found_at"] == 10.5 and found["all#2"]["start"] == "search"
    assert found["all#1"]["at_start_value"] and not found["all#2"]["at_start_value"]
    report = (folder / "report.md").read_text()
    assert "## Equilibria found without a start guess" in report
    # the isola's extent, to the digits shown, is the closed form of its ends (see above)
    low = ((1 - 8 * K2) - math.sqrt(1 - 16 * K2)) / (8 * K2**2)
    high = ((1 - 8 * K2) + math.sqrt(1 - 16 * K2)) / (8 * K2**2)
    assert f"an isola: a closed branch, tau from {fmt(low)} to {fmt(high)} (its folds)" in report
    assert "No search can prove" in report and "Caution" in report
    figure = bifurcation_figure(saved.points, saved.events, saved.info)
    strip = figure.axes[2]
    assert "equilibria found" in strip.get_ylabel()
    heights = sorted({round(p.get_height() + p.get_y()) for p in strip.patches if p.get_height()})
    assert heights == [1, 3]


def _scan_text(trace_lines: str) -> str:
    return (
        '[model.parameters]\nc = 1.0\n[model.equations]\nx = "x^2 - c"\ny = "y + x"\n'
        '[[trace]]\nvary = "c"\ninterval = [0.0, 2.0]\n' + trace_lines
    )


@pytest.mark.parametrize(
    ("lines", "key", "words"),
    [
        ('start = "search"\n', "trace[1].search_box", "range for every state"),
        ('start = "search"\nsearch_box = { x = [0, 1] }\n', "trace[1].search_box", "missing y"),
        (
            'start = "search"\nsearch_box = { x = [1, 0], y = [0, 1] }\n',
            "trace[1].search_box.x",
            "low < high",
        ),
        (
            'start = "search"\nsearch_box = { x = [0, 1], z = [0, 1] }\n',
            "trace[1].search_box.z",
            "not a state",
        ),
        (
            'start = "search"\nsearch_box = { x = [0, 1], y = [0, 1] }\nsearch_samples = 0\n',
            "trace[1].search_samples",
            "whole number",
        ),
        (
            'start = "search"\nsearch_box = { x = [0, 1], y = [0, 1] }\nsearch_seed = -1\n',
            "trace[1].search_seed",
            "whole number",
        ),
        (
            'start = "search"\nsearch_box = { x = [0, 1], y = [0, 1] }\nsearch_at = [0.5, 3.0]\n',
            "trace[1].search_at[2]",
            "outside the trace's interval",
        ),
        (
            "start = { x = 1.0, y = -1.0 }\nsearch_samples = 8\n",
            "trace[1].search_samples",
            "only used with a search_box",
        ),
        ('name = "a#1"\nstart = { x = 1.0, y = -1.0 }\n', "trace[1].name", "kept for branches"),
    ],
)
def test_invalid_search_keys_name_the_file_and_key(tmp_path, lines, key, words):
    path = tmp_path / "bad.toml"
    path.write_text(_scan_text(lines))
    with pytest.raises(ScanError) as caught:
        load_scan(path)
    message = str(caught.value)
    assert str(path) in message and f": {key}:" in message and words in message


def test_command_line_run_of_a_search_scan(tmp_path):
    path = tmp_path / "roots.toml"
    path.write_text(
        _scan_text(
            'start = "search"\nsearch_box = { x = [-3, 3], y = [-3, 3] }\nsearch_at = 3\n'
            "search_samples = 8\n"
        )
    )
    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "branchline",
            "run",
            str(path),
            "--out",
            str(tmp_path / "out"),
            "--quiet",
        ],
        capture_output=True,
        text=True,
        check=False,
    )
    assert done.returncode == 0, done.stderr
    info = json.loads((tmp_path / "out" / "run.json").read_text())
    # x^2 = c, y = -x: two equilibria for c > 0, one (double) at c = 0, on the edge
    counts = {v["value"]: v["equilibria"] for v in info["searches"][0]["values"]}
    assert counts == {1.0: 2, 0.0: 1, 2.0: 2}
    # one branch through both equilibria, turning at the fold c = 0 on the edge
    assert [t["name"] for t in info["traces"]] == ["trace1#1"]


def test_inspect_describes_an_equilibrium_the_search_finds(tmp_path):
    # x^2 = c, y = -x at c = 1: the equilibria (1, -1) and (-1, 1) (elementary algebra).
    from branchline.present.inspection import describe_equilibrium

    path = tmp_path / "roots.toml"
    path.write_text(
        _scan_text('start = "search"\nsearch_box = { x = [-3, 3], y = [-3, 3] }\nsearch_at = 0\n')
    )
    text, converged = describe_equilibrium(load_scan(path), {})
    assert converged and "2 distinct equilibria found in the search box" in text
