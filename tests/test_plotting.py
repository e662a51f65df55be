"""The bifurcation diagram, drawn from synthetic tables with known events.

The tables are the closed-form cases of tests/tables_for_tests.py (S-shaped branch
of x' = p + x - x^3, Hopf normal form, transcritical exchange); see there for
the sources.
"""

from __future__ import annotations

import subprocess
import sys

import matplotlib.image as mpimg
import numpy as np
import pandas as pd
import pytest
from matplotlib.figure import Figure

from branchline.present.plotting import (
    FIGURE_SIZE,
    PNG_DPI,
    TRACE_COLOURS,
    available_names,
    bifurcation_figure,
    save_figure,
)
from tables_for_tests import (
    FOLD_P,
    hopf_tables,
    s_curve_tables,
    s_curve_with_hopf_tables,
    transcritical_tables,
)


def _curves(ax) -> list:
    """The drawn branch runs of an axes (not markers, guides or the zero line)."""
    return [line for line in ax.get_lines() if (line.get_gid() or "").startswith("branch-")]


def _texts(fig: Figure) -> list[str]:
    return [t.get_text() for ax in fig.axes for t in ax.texts]


def test_two_panels_with_the_scan_names_on_the_axes():
    points, events, info = s_curve_tables()
    fig = bifurcation_figure(points, events, info)
    top, bottom = fig.axes
    assert top.get_ylabel() == "x"
    assert bottom.get_xlabel() == "p (parameter)"
    assert "real part" in bottom.get_ylabel()
    assert top.get_shared_x_axes().joined(top, bottom)
    assert fig._suptitle.get_text() == info["title"]
    # one zero line in the eigenvalue panel
    flat = [np.asarray(line.get_ydata(), dtype=float) for line in bottom.get_lines()]
    assert any(y.size == 2 and np.all(y == 0.0) for y in flat)


def test_stable_parts_solid_unstable_dashed_and_continuous_at_the_folds():
    points, events, info = s_curve_tables()
    top = bifurcation_figure(points, events, info).axes[0]
    curves = _curves(top)
    styles = [line.get_linestyle() for line in curves]
    assert styles == ["-", "--", "-"]
    # each run ends exactly on the located fold, where the next one starts
    for first, second, event in zip(curves, curves[1:], events, strict=False):
        assert first.get_xdata()[-1] == second.get_xdata()[0] == event["value"]
        assert first.get_ydata()[-1] == second.get_ydata()[0] == event["state"]["x"]


def test_every_event_is_marked_and_labelled_in_words():
    points, events, info = s_curve_tables()
    fig = bifurcation_figure(points, events, info)
    top, bottom = fig.axes
    marks = [line for line in top.get_lines() if line.get_marker() == "D"]
    assert sorted(float(m.get_xdata()[0]) for m in marks) == sorted(e["value"] for e in events)
    assert len([line for line in bottom.get_lines() if line.get_marker() == "D"]) == 2
    labels = _texts(fig)
    assert sum(text.startswith("fold") for text in labels) == 2
    (legend,) = fig.legends
    entries = [t.get_text() for t in legend.get_texts()]
    # three columns (traces, line styles, event kinds), padded with blanks
    assert [e for e in entries if e.strip()] == [
        "trace s",
        "stable",
        "unstable",
        "start value (scan)",
        "two stable states coexist",
        "fold",
    ]
    assert top.get_legend() is None  # outside the axes: it hides no data


def test_hopf_and_switched_trace_in_the_legend():
    points, events, info = hopf_tables(s=1.0)
    fig = bifurcation_figure(points, events, info)
    assert any(t.startswith("Hopf (subcritical)") for t in _texts(fig))
    points, events, info = transcritical_tables()
    fig = bifurcation_figure(points, events, info)
    legend = [t.get_text() for t in fig.legends[0].get_texts()]
    assert "trace zero.1 (branches off zero)" in legend
    colours = {line.get_color() for line in _curves(fig.axes[0])}
    assert colours == {TRACE_COLOURS[0], TRACE_COLOURS[1]}


def test_hysteresis_band_covers_where_two_stable_states_coexist():
    # lower branch unstable from a Hopf point at p = 0.2 to its fold: the band (labelled
    # for what it shows, not as the report's fold-to-fold hysteresis window) runs
    # from the upper branch's fold (-FOLD_P) to the Hopf point, not to the other fold
    points, events, info = s_curve_with_hopf_tables(hopf_p=0.2)
    fig = bifurcation_figure(points, events, info)
    top = fig.axes[0]
    (band,) = top.patches
    xs = top.transData.inverted().transform(band.get_verts())[:, 0]
    assert (xs.min(), xs.max()) == pytest.approx((-FOLD_P, 0.2), abs=1e-9)
    assert "two stable states coexist" in [t.get_text() for t in fig.legends[0].get_texts()]
    # no fold pair, no band
    points, events, info = hopf_tables()
    fig = bifurcation_figure(points, events, info)
    assert not fig.axes[0].patches
    assert "two stable states coexist" not in [t.get_text() for t in fig.legends[0].get_texts()]


def test_layout_is_settled_once_and_each_file_is_drawn_once(tmp_path, monkeypatch):
    points, events, info = s_curve_tables()
    fig = bifurcation_figure(points, events, info)
    # the labels were placed against this layout, so it must not be redone
    assert fig.get_layout_engine() is None
    placed = [ax.get_position().bounds for ax in fig.axes]
    draws = []
    draw = Figure.draw

    def counted(self, renderer):
        draws.append(type(renderer).__name__)
        return draw(self, renderer)

    monkeypatch.setattr(Figure, "draw", counted)
    save_figure(fig, tmp_path / "diagram.png")
    save_figure(fig, tmp_path / "diagram.svg")
    assert len(draws) == 2
    assert [ax.get_position().bounds for ax in fig.axes] == placed


def test_importing_report_and_diagram_modules_leaves_pyplot_alone():
    code = (
        "import sys, branchline.present.plotting, branchline.present.report; "
        "print(sorted(m for m in ('matplotlib.pyplot', 'sympy', 'scipy') if m in sys.modules))"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert done.stdout.strip() == "[]"


def test_labels_do_not_overlap():
    points, events, info = s_curve_tables()
    fig = bifurcation_figure(points, events, info)
    renderer = fig.canvas.get_renderer()
    boxes = [t.get_window_extent(renderer) for t in fig.axes[0].texts]
    for i, a in enumerate(boxes):
        for b in boxes[i + 1 :]:
            assert not a.overlaps(b)


def test_norm_and_other_axes():
    points, events, info = hopf_tables()
    fig = bifurcation_figure(points, events, info, y="norm")
    assert fig.axes[0].get_ylabel().startswith("norm")
    points, events, info = s_curve_tables()
    fig = bifurcation_figure(points, events, info, x="p", y="p")
    assert fig.axes[0].get_ylabel() == "p (parameter)"


@pytest.mark.parametrize("axis", ["x", "y"])
def test_unknown_names_raise_with_the_available_ones(axis):
    points, events, info = s_curve_tables()
    with pytest.raises(ValueError, match=r"'temperature'.*Available: .*\bx\b.*norm"):
        bifurcation_figure(points, events, info, **{axis: "temperature"})
    assert {"p", "x", "norm", "leading_real"} <= set(available_names(points))


def test_saves_png_and_svg(tmp_path):
    points, events, info = s_curve_tables()
    fig = bifurcation_figure(points, events, info)
    png = save_figure(fig, tmp_path / "diagram.png")
    svg = save_figure(fig, tmp_path / "diagram.svg")
    assert png.stat().st_size > 20_000
    pixels = mpimg.imread(png)
    height, width = pixels.shape[:2]
    assert (width, height) == (round(FIGURE_SIZE[0] * PNG_DPI), round(FIGURE_SIZE[1] * PNG_DPI))
    assert pixels[..., :3].std() > 0.01  # not a blank image
    text = svg.read_text(encoding="utf-8")
    assert text.lstrip().startswith("<?xml") and "<svg" in text
    assert "fold" in text  # text kept as text
    with pytest.raises(ValueError, match=r"\.png, \.svg, \.pdf"):
        save_figure(fig, tmp_path / "diagram.jpg")


def test_large_models_plot_the_norm_by_default():
    # a model with more than 20 states: the tables hold `norm` instead of the states
    points, events, info = s_curve_tables()
    points = points.rename(columns={"x": "norm"})
    points["norm"] = points["norm"].abs()
    info["model"]["states"] = [f"u{i}" for i in range(25)]
    events = [{**e, "state": {f"u{i}": 0.2 for i in range(25)}} for e in events]
    fig = bifurcation_figure(points, events, info)
    top = fig.axes[0]
    assert top.get_ylabel().startswith("norm")
    marks = [line for line in top.get_lines() if line.get_marker() == "D"]
    # the event's norm is computed from its full state: sqrt(25 * 0.2^2) = 1
    assert [float(m.get_ydata()[0]) for m in marks] == pytest.approx([1.0, 1.0], rel=1e-15)


def test_stiff_eigenvalues_switch_to_a_symmetric_log_scale():
    points, events, info = s_curve_tables()
    assert bifurcation_figure(points, events, info).axes[1].get_yscale() == "linear"
    damped = points["leading_real"] < 0
    points.loc[damped, "leading_real"] *= 1000.0  # strongly damped stable parts
    bottom = bifurcation_figure(points, events, info).axes[1]
    assert bottom.get_yscale() == "symlog"
    assert "log" in bottom.get_ylabel()


def test_traces_varying_another_parameter_are_named_not_drawn():
    points, events, info = s_curve_tables()
    other = points.assign(trace="other", q=points["p"], p=0.0)
    points = pd.concat([points.assign(q=0.0), other], ignore_index=True)
    info["traces"].append({**info["traces"][0], "name": "other", "vary": "q"})
    fig = bifurcation_figure(points, events, info)
    curves = _curves(fig.axes[0])
    assert {line.get_color() for line in curves} == {TRACE_COLOURS[0]}
    assert "Not shown: other (varying q" in fig.axes[0].get_title(loc="left")
    fig = bifurcation_figure(points, events, info, x="q")
    assert fig.axes[1].get_xlabel() == "q"


def test_no_points_gives_a_figure_that_says_so(tmp_path):
    points, _events, info = s_curve_tables()
    info["message"] = "trace s: Newton did not converge at the start point"
    fig = bifurcation_figure(points.iloc[:0], [], info)
    assert any("No equilibrium was computed" in t for t in _texts(fig))
    assert save_figure(fig, tmp_path / "diagram.svg").is_file()
