"""Where the event labels of a diagram go: clear of each other, of the markers and of the curves.

Each label is tried at a fixed list of offsets from its event mark; the text
extents come from the renderer of the figure's settled layout (text
measurement only, nothing is drawn), and the drawn lines are sampled in display
coordinates so that a label box lying across a curve is noticed.
"""

from __future__ import annotations

import numpy as np
from matplotlib.axes import Axes
from matplotlib.backend_bases import RendererBase
from matplotlib.figure import Figure
from matplotlib.text import Text
from matplotlib.transforms import Bbox

LABEL_FONT_SIZE = 7.5
# Offsets (points) tried in turn for an event label, so labels avoid each other.
LABEL_OFFSETS = (
    (10, 10),
    (10, -20),
    (-10, 10),
    (-10, -20),
    (22, 28),
    (-22, 28),
    (22, -38),
    (-22, -38),
    (34, 0),
    (-34, 0),
)
# Element id of the dotted start-value guides: a label may cross one sooner than a curve.
GUIDE_GID = "start-value"
# Spacing (display pixels) at which curves are sampled when labels look for room.
LINE_SAMPLE_SPACING = 3.0


def _boxes_overlap(a, b, pad: float = 2.0) -> bool:
    return not (a.x1 + pad < b.x0 or b.x1 + pad < a.x0 or a.y1 + pad < b.y0 or b.y1 + pad < a.y0)


def _line_vertices(lines) -> np.ndarray:
    """Display coordinates of drawn lines, densified so that a label box lying
    across a long straight segment still contains vertices of it."""
    chunks = []
    for line in lines:
        xy = line.get_xydata()
        if len(xy) < 2:
            continue  # an event marker: kept clear through its own box
        shown = line.get_transform().transform(xy)  # axvline: blended data/axes coords
        gaps = np.hypot(*np.diff(shown, axis=0).T)
        # Empty cells (NaN) are gaps in the drawn line: segments touching one are not
        # sampled (casting their NaN length to a count would warn and mean nothing).
        drawn = np.isfinite(gaps)
        pieces = np.ones(gaps.shape, dtype=int)
        pieces[drawn] = np.maximum(1, np.ceil(gaps[drawn] / LINE_SAMPLE_SPACING).astype(int))
        for a, b, n, ok in zip(shown[:-1], shown[1:], pieces, drawn, strict=True):
            if ok:
                chunks.append(a + np.linspace(0.0, 1.0, n, endpoint=False)[:, None] * (b - a))
        last = shown[-1:]
        if np.isfinite(last).all():
            chunks.append(last)
    return np.vstack(chunks) if chunks else np.empty((0, 2))


def _crosses(vertices: np.ndarray, box) -> bool:
    return bool(
        np.any(
            (vertices[:, 0] >= box.x0)
            & (vertices[:, 0] <= box.x1)
            & (vertices[:, 1] >= box.y0)
            & (vertices[:, 1] <= box.y1)
        )
    )


def place_labels(
    fig: Figure,
    ax: Axes,
    marks: list[tuple[float, float, str, str]],
    renderer: RendererBase,
    marker_size: float,
) -> None:
    """Annotate event marks, trying offsets in turn.

    A label must stay inside the axes, clear of other labels and of the event
    markers. Among the offsets that allow this it goes at the first one clear
    of every line; failing that, at the first one that only crosses a dotted
    guide (start value); failing that, at the first one at all (lying across a
    curve, on its white box). A label that fits nowhere is left out (the marker
    and the legend still show the event). Extents come from ``renderer`` (text
    measurement only): nothing is drawn. ``marks`` are (x, y, text, colour) in
    data coordinates; ``marker_size`` is the event markers' size in points.
    """
    frame = ax.get_window_extent(renderer)
    lines = ax.get_lines()
    guides = _line_vertices([line for line in lines if line.get_gid() == GUIDE_GID])
    curves = _line_vertices([line for line in lines if line.get_gid() != GUIDE_GID])
    taken = []
    for x, y, _, _ in marks:
        cx, cy = ax.transData.transform((x, y))
        size = marker_size * fig.dpi / 72.0
        taken.append(Bbox.from_bounds(cx - size / 2, cy - size / 2, size, size))
    for index, (x, y, text, colour) in enumerate(marks):
        others = [box for k, box in enumerate(taken) if k != index]
        best = None  # (rank, annotation, box): rank 0 clear, 1 across a guide, 2 across a curve
        for dx, dy in LABEL_OFFSETS:
            note = _annotation(ax, x, y, text, colour, (dx, dy))
            # the text's own box (the annotation's extent would include the arrow)
            note.update_positions(renderer)
            box = Text.get_window_extent(note, renderer).padded(3.0)
            inside = (
                box.x0 >= frame.x0
                and box.x1 <= frame.x1
                and box.y0 >= frame.y0
                and box.y1 <= frame.y1
            )
            if not inside or any(_boxes_overlap(box, other) for other in others):
                note.remove()
                continue
            rank = 2 if _crosses(curves, box) else 1 if _crosses(guides, box) else 0
            if best is not None and rank >= best[0]:
                note.remove()
                continue
            if best is not None:
                best[1].remove()
            best = (rank, note, box)
            if rank == 0:
                break
        if best is not None:
            taken.append(best[2])


def _annotation(ax, x: float, y: float, text: str, colour: str, offset: tuple[float, float]):
    """A boxed label ``offset`` points away from an event mark, joined to it by a thin line."""
    dx, dy = offset
    return ax.annotate(
        text,
        (x, y),
        xytext=(dx, dy),
        textcoords="offset points",
        ha="left" if dx >= 0 else "right",
        va="bottom" if dy >= 0 else "top",
        fontsize=LABEL_FONT_SIZE,
        multialignment="left",
        color="#222222",
        bbox={"boxstyle": "round,pad=0.25", "fc": "white", "ec": colour, "lw": 0.6, "alpha": 0.92},
        arrowprops={"arrowstyle": "-", "color": colour, "lw": 0.6, "shrinkA": 0, "shrinkB": 4},
        zorder=6,
    )


__all__ = ["GUIDE_GID", "LABEL_FONT_SIZE", "place_labels"]
