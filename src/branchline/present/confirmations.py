"""Confirmation by simulation, for a person: the report's section and the small figures.

The report section works from run.json alone (``info["confirmations"]``), so
``branchline report DIR`` never recomputes; the figure is drawn from the
records when a run is written (``confirmations.png``), one small panel per
simulated event.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import matplotlib as mpl
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from branchline.results.reading import fmt, kind_words
from branchline.simulation.records import (
    CONFIRMED,
    MISMATCH,
    ROLE_MARK,
    ROLE_PREDICTION,
    ROLE_SIMULATION,
    ROLE_STABLE,
    ROLE_UNSTABLE,
    Confirmation,
)

# One panel per simulated event, this many side by side; inches per panel.
COLUMNS = 2
PANEL_SIZE = (3.6, 2.6)
TITLE_ROOM = 0.3  # inches above the panels for the figure's title
# The figure is written once per run: a modest resolution keeps the run fast.
PNG_DPI = 110
PNG_COMPRESSION = 1
TEXT_HINTING = "none"
# Tick marks per axis of a panel, and where its legend goes.
TICKS = 4
LEGEND_CORNER = "upper right"
FONT_SIZE = 8
SIMULATION_COLOURS = ("#D55E00", "#0072B2", "#009E73", "#CC79A7")  # Okabe & Ito (2008)
BRANCH_COLOUR = "#888888"
PREDICTION_COLOUR = "#000000"
STATUS_WORDS = {
    CONFIRMED: "confirmed",
    MISMATCH: "MISMATCH",
    "inconclusive": "inconclusive",
    "not applicable": "not applicable",
}


def confirmation_info(confirmations: Sequence[Confirmation], note: str = "") -> dict[str, Any]:
    """run.json's ``confirmations`` entry: each record's summary, and a note when skipped."""
    return {"note": note, "records": [c.to_dict() for c in confirmations]}


def confirmation_section(info: Mapping[str, Any]) -> list[str]:
    """The report's "Confirmation by simulation" section (markdown lines); empty when the
    run did not ask for confirmations."""
    entry = info.get("confirmations")
    if not entry:
        return []
    out = ["## Confirmation by simulation", ""]
    if entry.get("note"):
        out += [str(entry["note"]), ""]
    records = entry.get("records") or []
    if not records and not entry.get("note"):
        out += ["No stability change to confirm.", ""]
    for record in records:
        status = STATUS_WORDS.get(record.get("status"), str(record.get("status")))
        label = kind_words(str(record.get("kind")))
        summary = str(record.get("summary") or "")
        summary = summary[:1].upper() + summary[1:]
        out.append(
            f"- #{record.get('event')} {label} at {record.get('vary')} = {fmt(record.get('value'))} "
            f"(trace {record.get('trace')}): **{status}**. {summary}."
        )
    if records:
        out += [
            "",
            "Short simulations of the model itself (scipy's LSODA integrator): folds by slow "
            "ramps of the parameter (the jump lags the fold by the slow-passage law's "
            "delay), Hopf points just past the onset (amplitude against the normal form), "
            "branch points by nudging each equilibrium on both sides. A mismatch means the "
            "simulation contradicts the located event or its classification. Figures: "
            "confirmations.png.",
        ]
    out.append("")
    return out


def _panel(ax, record: Confirmation) -> None:
    simulated = 0
    for curve in record.curves:
        if curve.role in (ROLE_STABLE, ROLE_UNSTABLE):
            style = "-" if curve.role == ROLE_STABLE else (0, (4.0, 2.5))
            named = curve.label if curve.label == "equilibrium" else None
            ax.plot(curve.x, curve.y, color=BRANCH_COLOUR, ls=style, lw=1.0, zorder=2, label=named)
        elif curve.role == ROLE_SIMULATION:
            colour = SIMULATION_COLOURS[simulated % len(SIMULATION_COLOURS)]
            ax.plot(curve.x, curve.y, color=colour, lw=1.1, zorder=3, label=curve.label)
            if len(curve.x) > 2:
                _arrow(ax, curve.x, curve.y, colour)
            simulated += 1
        elif curve.role == ROLE_PREDICTION:
            ax.plot(
                curve.x,
                curve.y,
                color=PREDICTION_COLOUR,
                ls=(0, (1.5, 1.5)),
                lw=1.0,
                zorder=4,
                label=curve.label,
            )
        elif curve.role == ROLE_MARK:
            ax.plot(
                curve.x,
                curve.y,
                marker="D",
                ms=5,
                mfc="white",
                mec="black",
                ls="none",
                zorder=5,
                label=curve.label,
            )
    handles, labels = ax.get_legend_handles_labels()
    unique = dict(zip(labels, handles))
    if unique:
        # a fixed corner: "best" searches every curve's points for room at each draw
        ax.legend(
            unique.values(),
            unique.keys(),
            fontsize=FONT_SIZE - 1.5,
            loc=LEGEND_CORNER,
            framealpha=0.8,
        )
    # few ticks and a title at a fixed height: both are laid out again at every draw
    ax.xaxis.set_major_locator(MaxNLocator(TICKS))
    ax.yaxis.set_major_locator(MaxNLocator(TICKS))
    ax.set_xlabel(record.x_label)
    ax.set_ylabel(record.y_label)
    status = STATUS_WORDS.get(record.status, record.status)
    ax.set_title(
        f"#{record.event + 1} {kind_words(record.kind)} at {record.vary} = "
        f"{fmt(record.value, 6)}: {status}",
        fontsize=FONT_SIZE,
        color="#B00000" if record.status == MISMATCH else "black",
        y=1.0,
        pad=4.0,
    )


def _arrow(ax, x: np.ndarray, y: np.ndarray, colour: str) -> None:
    """An arrowhead at the middle of a curve: which way the simulation went."""
    i = len(x) // 2
    ax.annotate(
        "",
        xy=(x[i + 1], y[i + 1]),
        xytext=(x[i], y[i]),
        arrowprops={"arrowstyle": "-|>", "color": colour, "lw": 1.0},
        zorder=4,
    )


def _margins(rows: int, columns: int) -> dict[str, float]:
    height = PANEL_SIZE[1] * rows + TITLE_ROOM
    width = PANEL_SIZE[0] * columns
    return {
        "left": 0.7 / width,
        "right": 1.0 - 0.15 / width,
        "bottom": 0.45 / height,
        "top": 1.0 - (TITLE_ROOM + 0.3) / height,
        "wspace": 0.35,
        "hspace": 0.75 / PANEL_SIZE[1],
    }


def confirmations_figure(confirmations: Sequence[Confirmation]) -> Figure | None:
    """One small panel per confirmation that simulated something; None if none did."""
    drawn = [c for c in confirmations if c.curves]
    if not drawn:
        return None
    rows = -(-len(drawn) // COLUMNS)
    columns = min(COLUMNS, len(drawn))
    with mpl.rc_context({"font.size": FONT_SIZE, "svg.hashsalt": "branchline"}):
        # fixed margins instead of a layout engine: the layout pass would cost as much
        # as drawing the panels, and these small panels fit the margins
        fig = Figure(
            figsize=(PANEL_SIZE[0] * columns, PANEL_SIZE[1] * rows + TITLE_ROOM), dpi=PNG_DPI
        )
        FigureCanvasAgg(fig)
        axes = np.atleast_1d(fig.subplots(rows, columns, squeeze=False).ravel())
        fig.subplots_adjust(**_margins(rows, columns))
        for ax, record in zip(axes, drawn):
            _panel(ax, record)
            ax.grid(True, color="#DDDDDD", lw=0.5)
        for ax in axes[len(drawn) :]:
            ax.set_axis_off()
        fig.suptitle("Confirmation by simulation", fontsize=FONT_SIZE + 1)
    return fig


def save_confirmations_figure(figure: Figure, path) -> None:
    """Write confirmations.png: PNG_DPI (the figure's own, so no text is laid out
    again at another resolution), light compression (zlib level 1: the default
    level 6 spends about a third of the drawing time compressing, for a file only
    about 15 % smaller), and glyphs without hinting (FreeType's hinting costs about
    a sixth of the drawing time; at this size the text reads the same)."""
    with mpl.rc_context({"text.hinting": TEXT_HINTING}):
        figure.savefig(path, dpi=PNG_DPI, pil_kwargs={"compress_level": PNG_COMPRESSION})


def confirmation_summary(confirmations: Sequence[Confirmation], note: str = "") -> str:
    """One line for the terminal: how many events the simulations confirmed."""
    if note:
        return note
    if not confirmations:
        return ""
    counts: dict[str, int] = {}
    for record in confirmations:
        counts[record.status] = counts.get(record.status, 0) + 1
    parts = [f"{n} {STATUS_WORDS.get(status, status)}" for status, n in counts.items()]
    line = "confirmation by simulation: " + ", ".join(parts)
    if counts.get(MISMATCH):
        line += " (see report.md: a simulation contradicts a located event)"
    return line
