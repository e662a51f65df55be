"""The bifurcation diagram, drawn from synthetic tables with known events.

The tables are the closed-form cases of tests/test_report.py (S-shaped branch
of x' = p + x - x^3, Hopf normal form, transcritical exchange); see there for
the sources.
"""

from __future__ import annotations

import matplotlib.image as mpimg
import numpy as np
import pytest
from matplotlib.figure import Figure

from branchline.plotting import (
    FIGURE_SIZE,
    PNG_DPI,
    TRACE_COLOURS,
    available_names,
    bifurcation_figure,
    save_figure,
)
from test_report import hopf_tables, s_curve_tables, transcritical_tables


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
    curves = [line for line in top.get_lines() if len(line.get_xdata()) > 1]
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
    legend = [t.get_text() for t in top.get_legend().get_texts()]
    assert legend == ["trace s", "stable", "unstable", "fold"]


def test_hopf_and_switched_trace_in_the_legend():
    points, events, info = hopf_tables(s=1.0)
    fig = bifurcation_figure(points, events, info)
    assert any(t.startswith("Hopf (subcritical)") for t in _texts(fig))
    points, events, info = transcritical_tables()
    fig = bifurcation_figure(points, events, info)
    legend = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert "trace zero.1 (branches off zero)" in legend
    colours = {line.get_color() for line in fig.axes[0].get_lines() if len(line.get_xdata()) > 1}
    assert colours == {TRACE_COLOURS[0], TRACE_COLOURS[1]}


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
    # bbox "tight" trims the margins a little, never below 85 % of the nominal size
    assert 0.85 * FIGURE_SIZE[0] * PNG_DPI <= width <= 1.02 * FIGURE_SIZE[0] * PNG_DPI
    assert 0.85 * FIGURE_SIZE[1] * PNG_DPI <= height <= 1.02 * FIGURE_SIZE[1] * PNG_DPI
    assert pixels[..., :3].std() > 0.01  # not a blank image
    text = svg.read_text(encoding="utf-8")
    assert text.lstrip().startswith("<?xml") and "<svg" in text
    assert "fold" in text  # text kept as text
    with pytest.raises(ValueError, match=r"\.png, \.svg, \.pdf"):
        save_figure(fig, tmp_path / "diagram.jpg")
