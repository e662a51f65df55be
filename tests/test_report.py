"""The stability-change report, checked on synthetic tables with known answers.

Reference cases (closed forms, so the tables are exact up to the grid):

- S-shaped branch of x' = p + x - x^3. Equilibria satisfy p = x^3 - x; folds
  where dp/dx = 3x^2 - 1 = 0, i.e. x = -+1/sqrt(3), p = +-2/(3 sqrt(3))
  (elementary calculus; the same curve as the imperfect pitchfork
  x' = h + r x - x^3 at r = 1 in Strogatz, Nonlinear Dynamics and Chaos,
  section 3.6, critical h_c = (2r/3) sqrt(r/3) -- recalled from memory).
  Stability: f_x = 1 - 3x^2 < 0 for |x| > 1/sqrt(3). At a fold the cubic
  x^3 - x - p has a double root, and its third root (found here with
  numpy.roots) is where the state lands after the jump.
- Hopf normal form x' = mu x - y + s x (x^2+y^2), y' = x + mu y + s y (x^2+y^2):
  equilibrium 0 for all mu, eigenvalues mu +- i, Hopf at mu = 0 with
  frequency 1, first Lyapunov coefficient s with the contract's scaling
  (Kuznetsov, Elements of Applied Bifurcation Theory, section 3.4).
- Transcritical x' = p x - x^2: branches x = 0 and x = p exchange stability at
  p = 0 (Strogatz, section 3.2).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from branchline.report import (
    CAUTION,
    event_label,
    hysteresis_windows,
    jump_targets,
    operating_margins,
    render_report,
    stability_intervals,
    summary_table,
)

FOLD_P = 2.0 / (3.0 * math.sqrt(3.0))
FOLD_X = 1.0 / math.sqrt(3.0)


# --------------------------------------------------------------------------- builders


def _edge_x(p: float) -> float:
    """The real root of x^3 - x - p = 0 for |p| > FOLD_P (one real root)."""
    roots = np.roots([1.0, 0.0, -1.0, -p])
    real = roots[np.abs(roots.imag) < 1e-12].real
    assert real.size == 1
    return float(real[0])


def _polyline_arclength(columns: list[np.ndarray], start: int) -> np.ndarray:
    steps = np.sqrt(sum(np.diff(c) ** 2 for c in columns))
    s = np.concatenate([[0.0], np.cumsum(steps)])
    return s - s[start]


def s_curve_tables(start_x: float = 1.1, count: int = 401, lo: float = -1.0, hi: float = 1.0):
    """points/events/info for x' = p + x - x^3 traced over p in [lo, hi].

    The branch is parametrized by x; rows go from p = lo (lower branch) to
    p = hi (upper branch), which is the order of increasing arclength when the
    start point on the upper branch is traced towards decreasing p first.
    """
    x = np.linspace(_edge_x(lo), _edge_x(hi), count)
    x = np.sort(np.append(x, start_x))
    start = int(np.nonzero(x == start_x)[0][0])
    p = x**3 - x
    p[0], p[-1] = lo, hi  # the trace ends exactly on the interval edges
    s = _polyline_arclength([x, p], start)
    slope = 1.0 - 3.0 * x**2
    points = pd.DataFrame(
        {
            "trace": "s",
            "step": np.arange(x.size),
            "arclength": s,
            "p": p,
            "x": x,
            "stable": slope < 0,
            "unstable_count": (slope > 0).astype(int),
            "leading_real": slope,
            "leading_imag": 0.0,
        }
    )
    events = []
    for x_fold in (-FOLD_X, FOLD_X):  # in trace order (increasing x)
        value = x_fold**3 - x_fold
        events.append(
            {
                "trace": "s",
                "kind": "fold",
                "vary": "p",
                "value": value,
                "state": {"x": x_fold},
                "parameters": {"p": value},
                "arclength": float(np.interp(x_fold, x, s)),
                "frequency": None,
                "period": None,
                "lyapunov": None,
                "criticality": None,
                "branching": None,
                "fold_coefficient": -3.0 * x_fold,
                "note": "",
                "details": {},
            }
        )
    info = {
        "branchline_version": "test",
        "scan": "s_curve.toml",
        "title": "Switch with a cubic response",
        "model": {
            "kind": "expressions",
            "states": ["x"],
            "parameters": {"p": float(start_x**3 - start_x)},
            "equations": {"x": "p + x - x^3"},
            "definitions": {},
            "observables": [],
            "python_source": None,
        },
        "traces": [
            {
                "name": "s",
                "vary": "p",
                "interval": [lo, hi],
                "set": {},
                "direction": "both",
                "parent": None,
                "status": "done",
                "message": "",
                "points": int(x.size),
                "start_value": float(p[start]),
            }
        ],
        "status": "done",
        "message": "",
        "timings": {},
    }
    return points, events, info


def hopf_tables(s: float = -1.0, start_mu: float = -0.5, count: int = 200):
    """points/events/info for the Hopf normal form, mu in [-1, 1], start at start_mu."""
    mu = np.sort(np.append(np.linspace(-1.0, 1.0, count), start_mu))
    mu = np.unique(mu)
    points = pd.DataFrame(
        {
            "trace": "rest",
            "step": np.arange(mu.size),
            "arclength": mu - start_mu,
            "mu": mu,
            "x": 0.0,
            "y": 0.0,
            "stable": mu < 0,
            "unstable_count": np.where(mu > 0, 2, 0),
            "leading_real": mu,
            "leading_imag": 1.0,
        }
    )
    event = {
        "trace": "rest",
        "kind": "hopf",
        "vary": "mu",
        "value": 0.0,
        "state": {"x": 0.0, "y": 0.0},
        "parameters": {"mu": 0.0, "s": s},
        "arclength": -start_mu,
        "frequency": 1.0,
        "period": 2.0 * math.pi,
        "lyapunov": s,
        "criticality": "supercritical" if s < 0 else "subcritical",
        "branching": None,
        "fold_coefficient": None,
        "note": "",
        "details": {},
    }
    info = {
        "branchline_version": "test",
        "scan": "hopf.toml",
        "title": "Oscillator onset",
        "model": {
            "kind": "expressions",
            "states": ["x", "y"],
            "parameters": {"mu": start_mu, "s": s},
            "equations": {"x": "mu*x - y + s*x*(x^2+y^2)", "y": "x + mu*y + s*y*(x^2+y^2)"},
            "definitions": {},
            "observables": [],
            "python_source": None,
        },
        "traces": [
            {
                "name": "rest",
                "vary": "mu",
                "interval": [-1.0, 1.0],
                "set": {},
                "direction": "both",
                "parent": None,
                "status": "done",
                "message": "",
                "points": int(mu.size),
                "start_value": start_mu,
            }
        ],
        "status": "done",
        "message": "",
        "timings": {},
    }
    return points, [event], info


def transcritical_tables(count: int = 100):
    """x' = p x - x^2 on p in [-1, 1]: the trace x = 0 and the switched branch x = p."""
    p = np.linspace(-1.0, 1.0, count)
    start = count // 4  # p = -0.5
    zero = pd.DataFrame(
        {
            "trace": "zero",
            "step": np.arange(count),
            "arclength": p - p[start],
            "p": p,
            "x": 0.0,
            "stable": p < 0,
            "unstable_count": (p > 0).astype(int),
            "leading_real": p,
            "leading_imag": 0.0,
        }
    )
    child = pd.DataFrame(
        {
            "trace": "zero.1",
            "step": np.arange(count),
            "arclength": math.sqrt(2.0) * p,
            "p": p,
            "x": p,
            "stable": p > 0,
            "unstable_count": (p < 0).astype(int),
            "leading_real": -p,
            "leading_imag": 0.0,
        }
    )
    points = pd.concat([zero, child], ignore_index=True)
    event = {
        "trace": "zero",
        "kind": "branch_point",
        "vary": "p",
        "value": 0.0,
        "state": {"x": 0.0},
        "parameters": {"p": 0.0},
        "arclength": -float(p[start]),
        "frequency": None,
        "period": None,
        "lyapunov": None,
        "criticality": None,
        "branching": "transcritical",
        "fold_coefficient": None,
        "note": "",
        "details": {},
    }
    base = {"interval": [-1.0, 1.0], "set": {}, "direction": "both", "status": "done"}
    info = {
        "title": "Exchange of stability",
        "model": {
            "kind": "expressions",
            "states": ["x"],
            "parameters": {"p": -0.5},
            "equations": {"x": "p*x - x^2"},
        },
        "traces": [
            {
                **base,
                "name": "zero",
                "vary": "p",
                "parent": None,
                "points": count,
                "start_value": float(p[start]),
                "message": "",
            },
            {
                **base,
                "name": "zero.1",
                "vary": "p",
                "parent": "zero",
                "points": count,
                "start_value": 0.0,
                "message": "",
            },
        ],
        "status": "done",
        "message": "",
    }
    return points, [event], info


# --------------------------------------------------------------------------- S-curve


def test_every_fold_is_in_the_report_with_its_value():
    points, events, info = s_curve_tables()
    text = render_report(points, events, info)
    for event in events:
        assert f"p = {event['value']:.10g}" in text
    assert text.count("| fold |") == 2
    assert "# Switch with a cubic response" in text
    assert "dx/dt = p + x - x^3" in text


def test_hysteresis_width_is_the_distance_between_the_folds():
    points, events, info = s_curve_tables()
    (window,) = hysteresis_windows(points, events, info)
    assert window.width == pytest.approx(2.0 * FOLD_P, rel=1e-14)
    assert (window.low, window.high) == pytest.approx((-FOLD_P, FOLD_P), rel=1e-14)
    assert window.bistable
    text = render_report(points, events, info)
    assert f"width {2.0 * FOLD_P:.10g}" in text
    assert "Hysteresis window" in text


def test_stability_intervals_end_on_the_located_folds():
    points, events, info = s_curve_tables()
    parts = stability_intervals(points, events, info, "s")
    assert [p.stable for p in parts] == [True, False, True]
    expected = [(-1.0, FOLD_P), (FOLD_P, -FOLD_P), (-FOLD_P, 1.0)]
    for part, (a, b) in zip(parts, expected, strict=True):
        assert part.start_value == pytest.approx(a, rel=1e-15)
        assert part.end_value == pytest.approx(b, rel=1e-15)
        assert part.start_exact and part.end_exact
    assert parts[1].unstable_counts == (1,)


def test_stability_boundary_without_event_is_estimated_and_flagged():
    points, _events, info = s_curve_tables()
    parts = stability_intervals(points, [], info, "s")
    assert not parts[0].end_exact
    # linear interpolation of f_x = 1 - 3x^2 between grid points: grid accuracy only
    assert parts[0].end_value == pytest.approx(FOLD_P, abs=1e-3)
    assert "≈" in render_report(points, [], info)


def test_operating_margin_is_measured_along_the_branch():
    # Start on the upper branch at x = 1.1 (p0 = 0.231). Along the branch towards
    # lower p the first fold met is p = -FOLD_P, although +FOLD_P is nearer in p.
    points, events, info = s_curve_tables(start_x=1.1)
    p0 = 1.1**3 - 1.1
    (margin,) = operating_margins(points, events, info)
    assert margin.stable
    assert margin.start_value == pytest.approx(p0, rel=1e-15)
    assert margin.decreasing.event["value"] == pytest.approx(-FOLD_P, rel=1e-15)
    assert margin.decreasing.absolute == pytest.approx(p0 + FOLD_P, rel=1e-14)
    assert margin.decreasing.relative == pytest.approx((p0 + FOLD_P) / p0, rel=1e-14)
    assert margin.increasing.event is None
    assert margin.increasing.reached_edge
    # p0 lies in the hysteresis window: the lower branch is a second stable state there,
    # the smallest real root of x^3 - x - p0 (the middle root is unstable)
    lower = float(np.min(np.roots([1.0, 0.0, -1.0, -p0]).real))
    (other,) = margin.coexisting
    assert other.state["x"] == pytest.approx(lower, abs=1e-3)  # grid interpolation
    text = render_report(points, events, info)
    assert f"{p0 + FOLD_P:.6g} away ({100 * (p0 + FOLD_P) / p0:.4g} % of the start value)" in text
    assert "none within the traced part" in text
    brief = text[text.index("## In brief") : text.index("## The model")]
    assert f"fold at p = {-FOLD_P:.10g}" in brief
    assert f"Hysteresis between p = {-FOLD_P:.10g} and {FOLD_P:.10g}" in brief


def test_fold_reading_names_the_branch_the_state_jumps_to():
    points, events, info = s_curve_tables()
    upper_fold = events[1]  # p = -FOLD_P: the upper branch ends, lowering p
    (target,) = jump_targets(points, upper_fold, info)
    roots = np.roots([1.0, 0.0, -1.0, FOLD_P])  # x^3 - x - p with p = -FOLD_P
    landing = float(roots.real[np.argmin(roots.real)])  # the simple root, -2/sqrt(3)
    assert landing == pytest.approx(-2.0 / math.sqrt(3.0), rel=1e-12)
    assert target.state["x"] == pytest.approx(landing, abs=1e-3)  # grid interpolation
    text = render_report(points, events, info)
    assert "tipping point" in text
    assert "lowered below" in text and "raised above" in text
    assert f"x = {landing:.5g}" in text or f"x = {target.state['x']:.5g}" in text


def test_summary_table_lists_each_event():
    _points, events, _info = s_curve_tables()
    table = summary_table(events)
    lines = table.splitlines()
    assert len(lines) == 2 + len(events)
    for event, line in zip(events, lines[2:], strict=True):
        assert line.startswith("s ")
        assert f"{event['value']:.10g}" in line
    assert summary_table([]) == "No stability changes found."


def test_caution_ends_every_report():
    points, events, info = s_curve_tables()
    text = render_report(points, events, info)
    assert CAUTION in text
    assert text.rstrip().endswith(CAUTION)
    assert "not the plant" in CAUTION


# --------------------------------------------------------------------------- failure


def test_failed_run_gets_a_section_saying_where_and_why():
    points, events, info = s_curve_tables()
    kept = points[points["p"] < 0.2].copy()  # rows up to the stop
    info["status"] = "failed"
    info["message"] = "trace s: Newton did not converge at p = 0.2 (singular Jacobian)"
    info["traces"][0]["status"] = "failed"
    info["traces"][0]["message"] = "Newton did not converge at p = 0.2 (singular Jacobian)"
    text = render_report(kept, events[:1], info)
    assert "## The run stopped early" in text
    assert "Newton did not converge at p = 0.2 (singular Jacobian)" in text
    assert "stopped by numerical trouble" in text
    assert text.index("## The run stopped early") < text.index("## The model")
    ok = render_report(points, events, s_curve_tables()[2])
    assert "stopped early" not in ok


# --------------------------------------------------------------------------- Hopf, branch point


@pytest.mark.parametrize("s, onset", [(-1.0, "soft onset"), (1.0, "hard onset")])
def test_hopf_reading_and_margin(s, onset):
    points, events, info = hopf_tables(s=s)
    assert event_label(events[0]) == f"Hopf ({'supercritical' if s < 0 else 'subcritical'})"
    text = render_report(points, events, info)
    assert onset in text
    assert f"period about {2 * math.pi:.6g}" in text
    assert "raised above 0" in text
    (margin,) = operating_margins(points, events, info)
    assert margin.increasing.absolute == pytest.approx(0.5, rel=1e-15)
    assert margin.increasing.relative == pytest.approx(1.0, rel=1e-15)
    assert margin.decreasing.event is None
    parts = stability_intervals(points, events, info, "rest")
    assert [(p.stable, p.start_value, p.end_value) for p in parts] == [
        (True, -1.0, 0.0),
        (False, 0.0, 1.0),
    ]
    assert parts[1].unstable_counts == (2,)


def test_branch_point_reading_and_switched_trace():
    points, events, info = transcritical_tables()
    text = render_report(points, events, info)
    assert "exchange of stability" in text
    assert "followed as zero.1" in text
    assert "switched from zero" in text
    margins = operating_margins(points, events, info)
    assert [m.trace for m in margins] == ["zero"]  # switched branches have no operating point
    start_value = info["traces"][0]["start_value"]
    assert margins[0].increasing.absolute == pytest.approx(-start_value, rel=1e-15)
    child = stability_intervals(points, events, info, "zero.1")
    assert [p.stable for p in child] == [False, True]
    # the child changes stability at its parent's branch point (recorded on the parent only)
    assert child[0].end_value == 0.0 and child[0].end_exact
    assert child[0].end_kind == "branch_point"


def test_report_of_a_run_without_points():
    _points, _events, info = s_curve_tables()
    info["status"] = "failed"
    info["message"] = "trace s: Newton did not converge at the start point"
    info["traces"][0].update(
        status="failed", message="Newton did not converge at the start point", points=0
    )
    empty = pd.DataFrame(columns=["trace", "step", "arclength"])
    text = render_report(empty, [], info)
    assert "## The run stopped early" in text
    assert "Newton did not converge at the start point" in text
    assert "None: no fold" in text
    assert text.rstrip().endswith(CAUTION)


def test_jump_targets_are_listed_nearest_first():
    # Two copies of the S-curve, the second shifted up by 3 in x: at the upper
    # fold the state can land on the lower branch of either copy.
    points, events, info = s_curve_tables()
    shifted = points.assign(trace="t", x=points["x"] + 3.0)
    both = pd.concat([points, shifted], ignore_index=True)
    targets = jump_targets(both, events[1], info)
    landing = -2.0 / math.sqrt(3.0)
    # From the fold at x = 1/sqrt(3): the shifted copy's lower branch (x = 3 - 2/sqrt(3),
    # 1.27 away) is nearer than the own lower branch (x = -2/sqrt(3), 1.73 away); the
    # copy's own fold is a double root, not a stable branch crossing the value.
    assert [t.trace for t in targets] == ["t", "s"]
    assert [t.state["x"] for t in targets] == pytest.approx([3.0 + landing, landing], abs=1e-3)
    text = render_report(both, events, info)
    assert "nearest first" in text


# --------------------------------------------------------------------------- a real run


def test_report_and_figure_of_a_real_run_read_back_from_disk(tmp_path):
    """Harvested logistic stock N' = N (1 - N) - h: the equilibria N = (1 +- sqrt(1 - 4h))/2
    meet in a fold at h = 1/4, N = 1/2 (Strogatz, Nonlinear Dynamics and Chaos, exercise on
    logistic growth with constant harvesting, section 3.7 -- recalled from memory; the
    closed form itself is elementary). The report must quote the located value and the
    margin from the operating value h = 0.1, computed from the saved tables only."""
    from branchline.plotting import bifurcation_figure
    from branchline.runner import run_scan
    from branchline.scan import scan_from_dict
    from branchline.writers import read_results, write_results

    scan = scan_from_dict(
        {
            "title": "Harvested stock",
            "model": {"parameters": {"h": 0.1}, "equations": {"N": "N*(1 - N) - h"}},
            "trace": [{"name": "stock", "vary": "h", "interval": [0.0, 0.4], "start": {"N": 0.9}}],
        }
    )
    folder = write_results(run_scan(scan), tmp_path / "run")
    saved = read_results(folder)
    (fold,) = [e for e in saved.events if e["kind"] == "fold"]
    assert fold["value"] == pytest.approx(0.25, rel=1e-10)
    text = render_report(saved.points, saved.events, saved.info)
    assert f"h = {fold['value']:.10g}" in text
    (margin,) = operating_margins(saved.points, saved.events, saved.info)
    assert margin.stable and margin.start_value == 0.1
    assert margin.increasing.absolute == pytest.approx(0.15, rel=1e-10)
    assert margin.increasing.relative == pytest.approx(1.5, rel=1e-10)
    # in trace order: the upper (stable) branch from h = 0 up to the fold, then the lower
    # (unstable) branch from the fold back to h = 0
    upper, lower = stability_intervals(saved.points, saved.events, saved.info, "stock")
    assert (upper.stable, lower.stable) == (True, False)
    assert upper.end_value == lower.start_value == fold["value"]
    assert upper.start_value == pytest.approx(0.0, abs=1e-12)
    assert lower.end_value == pytest.approx(0.0, abs=1e-12)
    assert (folder / "report.md").read_text(encoding="utf-8") == text
    fig = bifurcation_figure(saved.points, saved.events, saved.info)
    assert fig.axes[0].get_ylabel() == "N"
