"""The stability map: the plane of two parameters with its boundary curves, the points
found on them named in words, and each region labelled with the equilibria counted
inside it (run.json's ``stability_maps``: measured at run time, never guessed here).

Drawn from the saved tables alone (boundaries.csv, events.json, run.json); the
regions are shaded from the same raster the run measured
(:func:`branchline.problems.stability_regions.region_raster`), coloured by the
number of stable equilibria. With ``[robust_margin]`` in the same two parameters,
the nominal point and the margin ellipse (the set of points at the nearest
distance, in units of the scales) are drawn too.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import ListedColormap
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from branchline.present.boundary_report import markdown_table
from branchline.results.reading import fmt, kind_words

FIGURE_SIZE = (7.0, 6.0)  # inches
FONT_SIZE = 9
# Region shades by number of stable equilibria (0, 1, 2, 3 or more): light enough for
# the labels and curves on top to read.
REGION_SHADES = ("#f2f2f2", "#d9ecf7", "#cfe9d9", "#f6e3cf")
# Curve colours (Okabe & Ito 2008) by curve kind; the kind is also said in the legend.
CURVE_COLOURS = {"fold": "#0072B2", "hopf": "#D55E00"}
CURVE_STYLES = {"fold": "-", "hopf": (0, (5.0, 2.0))}
POINT_COLOUR = "#000000"
MARGIN_COLOUR = "#009E73"
# Regions smaller than this share of the window get their words beside them, with an
# arrow, LABEL_OFFSET points away.
NARROW_REGION_SHARE = 0.08
LABEL_OFFSET = 70.0
# The searched state box is said under the map for models with at most this many states.
BOX_STATES_SHOWN = 3


def region_text(region: Mapping[str, Any]) -> str:
    """What was counted in a region, in words (two lines; samples that differ say so)."""
    samples = region["samples"]
    kinds = sorted({tuple(s["unstable_eigenvalues"]) for s in samples})
    if len(kinds) > 1:
        found = "; ".join(f"{len(k)} ({sum(1 for c in k if c == 0)} stable)" for k in kinds)
        return f"samples differ:\n{found} equilibria"
    counts = kinds[0]
    stable = sum(1 for c in counts if c == 0)
    if not counts:
        return "no equilibrium\nin the box"
    noun = "equilibrium" if len(counts) == 1 else "equilibria"
    return (
        f"{len(counts)} {noun}, {stable} stable\n"
        f"unstable eigenvalues: {', '.join(str(c) for c in counts)}"
    )


def stability_map_figure(
    entry: Mapping[str, Any],
    boundaries: pd.DataFrame,
    events: Sequence[Mapping[str, Any]],
    info: Mapping[str, Any],
) -> Figure:
    """The stability map of one run.json ``stability_maps`` entry, as a Figure."""
    first, second = entry["parameters"]
    window = (tuple(entry["window"][first]), tuple(entry["window"][second]))
    fig = Figure(figsize=FIGURE_SIZE)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    names = entry["boundaries"]
    rows = boundaries[boundaries["boundary"].isin(names)]
    curves = [
        (part[first].to_numpy(), part[second].to_numpy()) for _, part in rows.groupby("boundary")
    ]
    _shade(ax, entry, curves, window)
    handles = _curves(ax, rows, first, second)
    handles += _points(ax, events, names, first, second)
    handles += _margin(ax, info, first, second)
    for region in entry["regions"]:
        _label(ax, region, first, second, window)
    ax.set_xlim(*window[0])
    ax.set_ylim(*window[1])
    ax.set_xlabel(first, fontsize=FONT_SIZE)
    ax.set_ylabel(second, fontsize=FONT_SIZE)
    title = info.get("title") or "Stability map"
    ax.set_title(f"{title}: stability map", fontsize=FONT_SIZE + 1)
    fixed = ", ".join(f"{k} = {fmt(v, 4)}" for k, v in (entry.get("fixed") or {}).items())
    note = "equilibria counted at sample points of each region"
    box = entry.get("box") or {}
    states = info.get("model", {}).get("states") or []
    if box and 0 < len(states) <= BOX_STATES_SHOWN:
        ranges = ", ".join(
            f"{name} in [{fmt(lo, 3)}, {fmt(hi, 3)}]"
            for name, lo, hi in zip(states, box["low"], box["high"], strict=False)
        )
        note += f" ({ranges})"
    ax.annotate(
        f"{note}{'; ' + fixed if fixed else ''}",
        (0.0, -0.12),
        xycoords="axes fraction",
        fontsize=FONT_SIZE - 2,
        color="#555555",
    )
    if handles:
        ax.legend(handles=handles, fontsize=FONT_SIZE - 1, loc="best", framealpha=0.9)
    fig.tight_layout()
    return fig


def _label(ax, region, first: str, second: str, window) -> None:
    """The region's words at its most interior sample; for a narrow region, beside it
    with an arrow (toward the window's centre, where there is room)."""
    sample = region["samples"][0]
    where = (sample[first], sample[second])
    box = {"boxstyle": "round", "facecolor": "white", "alpha": 0.85, "linewidth": 0.5}
    offset = (0.0, 0.0)
    if region["share"] < NARROW_REGION_SHARE:
        centre = [(lo + hi) / 2 for lo, hi in window]
        spans = [hi - lo for lo, hi in window]
        towards = [(c - w) / s for c, w, s in zip(centre, where, spans, strict=True)]
        size = max(np.hypot(*towards), 1e-9)
        offset = (LABEL_OFFSET * towards[0] / size, LABEL_OFFSET * towards[1] / size)
    ax.annotate(
        region_text(region),
        where,
        xytext=offset,
        textcoords="offset points",
        ha="center",
        va="center",
        fontsize=FONT_SIZE - 1,
        bbox=box,
        arrowprops={"arrowstyle": "->", "linewidth": 0.7} if offset != (0.0, 0.0) else None,
    )


def _shade(ax, entry, curves, window) -> None:
    # Imported here: it pulls in scipy, which reading a report must not load.
    from branchline.problems.stability_regions import region_raster

    labels = region_raster(curves, window, int(entry.get("resolution", 200)))
    stable = np.zeros(labels.shape, dtype=float)
    stable[:] = np.nan
    for region in entry["regions"]:
        sample = region["samples"][0]
        stable[labels == region["label"]] = min(sample["stable"], len(REGION_SHADES) - 1)
    (lo1, hi1), (lo2, hi2) = window
    ax.imshow(
        np.ma.masked_invalid(stable),
        origin="lower",
        extent=(lo1, hi1, lo2, hi2),
        aspect="auto",
        cmap=ListedColormap(REGION_SHADES),
        vmin=-0.5,
        vmax=len(REGION_SHADES) - 0.5,
        interpolation="nearest",
    )


def _curves(ax, rows: pd.DataFrame, first: str, second: str) -> list:
    kinds_drawn = []
    for _, part in rows.groupby("boundary", sort=False):
        kind = str(part["kind"].iloc[0])
        ax.plot(
            part[first],
            part[second],
            color=CURVE_COLOURS.get(kind, "#000000"),
            linestyle=CURVE_STYLES.get(kind, "-"),
            linewidth=1.6,
        )
        if kind not in kinds_drawn:
            kinds_drawn.append(kind)
    return [
        Line2D(
            [],
            [],
            color=CURVE_COLOURS.get(k, "#000000"),
            linestyle=CURVE_STYLES.get(k, "-"),
            label=f"{kind_words(k)} curve",
        )
        for k in kinds_drawn
    ]


def _points(ax, events, names, first: str, second: str) -> list:
    drawn = False
    for event in events:
        details = event.get("details") or {}
        if event.get("trace") not in names or "second_value" not in details:
            continue
        x, y = float(event["value"]), float(details["second_value"])
        if details.get("second") != second or event.get("vary") != first:
            continue
        ax.plot([x], [y], marker="o", color=POINT_COLOUR, markersize=5, linestyle="none")
        ax.annotate(
            kind_words(str(event["kind"])),
            (x, y),
            xytext=(6, 6),
            textcoords="offset points",
            fontsize=FONT_SIZE - 1,
        )
        drawn = True
    if not drawn:
        return []
    return [
        Line2D([], [], marker="o", color=POINT_COLOUR, linestyle="none", label="point on a curve")
    ]


def _margin(ax, info, first: str, second: str) -> list:
    margin = info.get("robust_margin")
    if not margin or sorted(margin["parameters"]) != sorted([first, second]):
        return []
    nominal = margin["nominal"]
    ax.plot(
        [nominal[first]],
        [nominal[second]],
        marker="*",
        color=MARGIN_COLOUR,
        markersize=11,
        linestyle="none",
    )
    handles = [
        Line2D([], [], marker="*", color=MARGIN_COLOUR, linestyle="none", label="nominal point")
    ]
    distance = margin.get("distance")
    if distance and margin.get("ellipse", True):
        scales = margin["scales"]
        angle = np.linspace(0.0, 2.0 * np.pi, 361)
        ax.plot(
            nominal[first] + distance * scales[first] * np.cos(angle),
            nominal[second] + distance * scales[second] * np.sin(angle),
            color=MARGIN_COLOUR,
            linewidth=1.2,
        )
        handles.append(
            Line2D([], [], color=MARGIN_COLOUR, label=f"robust margin: {fmt(distance, 4)} scales")
        )
    return handles


def stability_map_section(info: Mapping[str, Any]) -> list[str]:
    """The report's lines on each stability map: its regions and what was counted there."""
    entries = info.get("stability_maps") or []
    if not entries:
        return []
    out = ["## Stability map", ""]
    for number, entry in enumerate(entries, start=1):
        first, second = entry["parameters"]
        name = "stability_map.png" if number == 1 else f"stability_map-{number}.png"
        (lo1, hi1), (lo2, hi2) = entry["window"][first], entry["window"][second]
        out += [
            f"`{name}`: {first} in [{fmt(lo1)}, {fmt(hi1)}] against {second} in "
            f"[{fmt(lo2)}, {fmt(hi2)}], cut by {', '.join(entry['boundaries'])}. Each region's "
            "equilibria were counted at sample points spread over it (deflated Newton in the "
            "state box; equilibria outside it are not counted):",
            "",
        ]
        rows = []
        for region in sorted(entry["regions"], key=lambda r: -r["share"]):
            at = "; ".join(f"({fmt(s[first], 4)}, {fmt(s[second], 4)})" for s in region["samples"])
            rows.append(
                (f"{100 * region['share']:.0f}%", region_text(region).replace("\n", "; "), at)
            )
        out += markdown_table(
            ("share of the window", "found", f"samples ({first}, {second})"), rows
        )
    return out
