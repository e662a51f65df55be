"""The stability-change report and the facts it reads, checked on synthetic tables
with known answers.

The tables (tests/tables_for_tests.py) are closed-form cases, exact up to the
grid: the S-shaped branch of x' = p + x - x^3 with folds at p = +-2/(3 sqrt(3)),
the Hopf normal form and a transcritical exchange; their sources are named
there. At a fold of the S-curve the cubic x^3 - x - p has a double root, and its
third root (found here with numpy.roots) is where the state lands after the jump.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from branchline.present.report import CAUTION, render_report, summary_table
from branchline.results.margins import (
    bistable_ranges,
    hysteresis_windows,
    jump_targets,
    operating_margins,
)
from branchline.results.reading import event_label, fmt, stability_intervals
from tables_for_tests import (
    FOLD_P,
    hopf_tables,
    s_curve_tables,
    s_curve_with_hopf_tables,
    transcritical_tables,
)

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


def test_two_stable_states_coexist_over_a_clean_hysteresis_window():
    points, events, info = s_curve_tables()
    (window,) = hysteresis_windows(points, events, info)
    ((low, high),) = bistable_ranges(points, events, info, window)
    assert (low, high) == (window.low, window.high)


def test_a_hopf_point_beside_a_fold_narrows_the_bistable_range():
    # The lower branch loses stability at a Hopf point (p = 0.2) before its fold
    # (p = FOLD_P): the fold pair is no clean loop, yet two stable states still
    # coexist between the upper branch's fold and the Hopf point.
    points, events, info = s_curve_with_hopf_tables(hopf_p=0.2)
    (window,) = hysteresis_windows(points, events, info)
    assert not window.bistable
    ((low, high),) = bistable_ranges(points, events, info, window)
    assert low == pytest.approx(-FOLD_P, rel=1e-15)
    assert high == 0.2
    report = render_report(points, events, info)
    assert f"(width {fmt(window.width)})" in report
    assert f"two stable states coexist for {fmt(low)} < p < {fmt(high)}" in report


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
    assert "not the real system" in CAUTION


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
    from branchline.present.plotting import bifurcation_figure
    from branchline.results.writers import read_results, write_results
    from branchline.runner import run_scan
    from branchline.scan.loader import scan_from_dict

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
