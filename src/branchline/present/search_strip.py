"""The diagram's search strip: how many distinct equilibria each searched value has.

One bar per searched parameter value, its height the number of distinct
equilibria in the search box there, split into those on branches traced before
the search reached that value (grey) and those the search found new there
(coloured); the count is written above each bar and a note says what the
search covered. Drawn from run.json's ``searches`` entry alone.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from branchline.present.labels import LABEL_FONT_SIZE

# Bars are this fraction of the smallest gap between searched values wide
# (or of the window, for a single value): neighbours never touch.
BAR_FRACTION = 0.5
KNOWN_COLOUR = "#999999"
NEW_COLOUR = "#CC79A7"  # Okabe & Ito reddish purple, unused by the first traces
STRIP_HEIGHT = 0.75  # relative to the diagram's panels (2.3 and 1.0)


@dataclass(frozen=True)
class SearchCounts:
    """Counts at the searched values of one parameter, from run.json."""

    vary: str
    values: np.ndarray
    totals: np.ndarray
    new: np.ndarray
    boxes: tuple[str, ...]  # "search <trace>: box ..., N starts" per search


def search_counts(info: Mapping[str, Any], x: str) -> SearchCounts | None:
    """The counts of every search that varies ``x``, or None when there is none."""
    searches = [s for s in info.get("searches") or [] if s.get("vary") == x]
    if not searches:
        return None
    values, totals, new, boxes = [], [], [], []
    for search in searches:
        for v in search.get("values") or []:
            values.append(float(v["value"]))
            totals.append(int(v["equilibria"]))
            new.append(int(v["found_by_search"]))
        box = ", ".join(
            f"{name} [{lo:.4g}, {hi:.4g}]" for name, (lo, hi) in (search.get("box") or {}).items()
        )
        boxes.append(f"search {search.get('trace')}: box {box}; {search.get('samples')} starts")
    order = np.argsort(values, kind="stable")
    return SearchCounts(
        vary=x,
        values=np.array(values)[order],
        totals=np.array(totals)[order],
        new=np.array(new)[order],
        boxes=tuple(boxes),
    )


def draw_search_strip(ax, counts: SearchCounts) -> None:
    """Draw the strip into ``ax`` (sharing x with the diagram above)."""
    values = counts.values
    gaps = np.diff(np.unique(values))
    # one value alone: a bar a twentieth of the x range the panels above show
    width = BAR_FRACTION * (gaps.min() if gaps.size else np.ptp(ax.get_xlim()) / 10.0)
    known = counts.totals - counts.new
    ax.bar(
        values, known, width=width, color=KNOWN_COLOUR, zorder=3, label="on branches traced before"
    )
    ax.bar(
        values,
        counts.new,
        width=width,
        bottom=known,
        color=NEW_COLOUR,
        zorder=3,
        label="new at this value (search)",
    )
    for value, total in zip(values, counts.totals):
        ax.annotate(
            str(int(total)),
            (value, total),
            xytext=(0, 2),
            textcoords="offset points",
            ha="center",
            va="bottom",
            fontsize=LABEL_FONT_SIZE,
        )
    top = int(counts.totals.max()) if counts.totals.size else 1
    ax.set_ylim(0, top * 1.35 + 0.5)
    ax.yaxis.get_major_locator().set_params(integer=True)
    ax.set_ylabel("equilibria found\n(in the search box)")
    ax.legend(loc="upper left", fontsize=LABEL_FONT_SIZE, frameon=False, ncols=2)
    ax.set_title(
        "; ".join(counts.boxes)
        + ". Only this box and these values were searched: no search can prove "
        "that no equilibrium is missing.",
        loc="left",
        fontsize=LABEL_FONT_SIZE - 0.5,
        color="#555555",
        wrap=True,
    )


__all__ = ["STRIP_HEIGHT", "SearchCounts", "draw_search_strip", "search_counts"]
