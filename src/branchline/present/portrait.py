"""The phase portrait as a figure and as JSON.

Left panel: the flow in the plane (grey direction arrows), the nullclines,
every equilibrium with its number and type in words, the eigen-directions of
real eigenvalues (arrowheads pointing in for attracting, out for repelling
directions), the stable and unstable manifolds of saddles and a handful of
trajectories. Right panel: around one equilibrium, trajectories of the
linearized flow (dashed) beside those of the model (solid) from the same
starts, with a sentence saying whether the linearization decides the type.
"""

from __future__ import annotations

import json
import textwrap
from pathlib import Path
from typing import Any

import matplotlib as mpl
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from branchline.portrait.compute import Portrait
from branchline.present.plotting import settle_layout
from branchline.results.reading import fmt

FIGURE_SIZE = (12.0, 6.0)
PNG_DPI = 150
FONT_SIZE = 9
# Okabe & Ito (2008) colours, distinguishable under colour-vision deficiencies.
FIRST_NULLCLINE = "#0072B2"
SECOND_NULLCLINE = "#009E73"
STABLE_MANIFOLD = "#CC79A7"
UNSTABLE_MANIFOLD = "#D55E00"
TRAJECTORY = "#333333"
ARROW_GREY = "#BBBBBB"
LINEAR = "#D55E00"
NONLINEAR = "#0072B2"
# Eigen-direction segments: this share of the window's size.
DIRECTION_SHARE = 0.07
WRAP = 70


def _arrowhead(ax, curve: np.ndarray, colour: str, where: float = 0.5) -> None:
    if len(curve) < 3:
        return
    lengths = np.r_[0.0, np.cumsum(np.hypot(*np.diff(curve, axis=0).T))]
    if lengths[-1] == 0:
        return
    i = int(np.searchsorted(lengths, where * lengths[-1]))
    i = min(max(i, 1), len(curve) - 1)
    ax.annotate(
        "",
        xy=curve[i],
        xytext=curve[i - 1],
        arrowprops={"arrowstyle": "-|>", "color": colour, "lw": 0.8, "mutation_scale": 11},
        zorder=4,
    )


def _eigen_directions(ax, portrait: Portrait) -> None:
    size = max(portrait.window[1] - portrait.window[0], portrait.window[3] - portrait.window[2])
    length = DIRECTION_SHARE * size
    for eq in portrait.equilibria:
        for value, direction in eq.directions:
            for sign in (1.0, -1.0):
                tip = eq.point + sign * length * direction
                start, end = (tip, eq.point + 0.25 * sign * length * direction)
                if value > 0:
                    start, end = eq.point + 0.25 * sign * length * direction, tip
                ax.annotate(
                    "",
                    xy=end,
                    xytext=start,
                    zorder=6,
                    arrowprops={
                        "arrowstyle": "-|>",
                        "color": "black",
                        "lw": 1.3,
                        "mutation_scale": 9,
                    },
                )


def _equilibrium_marks(ax, portrait: Portrait) -> None:
    for number, eq in enumerate(portrait.equilibria, start=1):
        stable = eq.decided and np.all(eq.eigenvalues.real < 0)
        face = "black" if stable else ("white" if eq.decided else "#999999")
        ax.plot(*eq.point, marker="o", ms=8, mfc=face, mec="black", mew=1.3, zorder=7)
        words = eq.words + ("" if eq.decided else "\n(linearization undecided)")
        ax.annotate(
            f"#{number} {words}",
            eq.point,
            xytext=(7, 7),
            textcoords="offset points",
            fontsize=FONT_SIZE - 0.5,
            zorder=8,
            bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": "#999999", "alpha": 0.85},
        )


def _main_panel(ax, portrait: Portrait) -> None:
    s, t, u, v = portrait.arrows
    ax.quiver(
        s,
        t,
        u,
        v,
        color=ARROW_GREY,
        angles="xy",
        pivot="mid",
        width=0.0025,
        headwidth=4,
        scale=ARROW_SCALE,
        zorder=1,
    )
    ss, tt, uu, vv = portrait.nullclines
    for values, colour in ((uu, FIRST_NULLCLINE), (vv, SECOND_NULLCLINE)):
        if np.nanmin(values) < 0 < np.nanmax(values):
            ax.contour(
                ss,
                tt,
                values,
                levels=[0.0],
                colors=[colour],
                linewidths=1.3,
                linestyles="dashed",
                zorder=2,
            )
    for curve in portrait.trajectories:
        ax.plot(curve[:, 0], curve[:, 1], color=TRAJECTORY, lw=0.8, zorder=3)
        _arrowhead(ax, curve, TRAJECTORY)
    for manifold in portrait.manifolds:
        colour = STABLE_MANIFOLD if manifold.which == "stable" else UNSTABLE_MANIFOLD
        ax.plot(manifold.points[:, 0], manifold.points[:, 1], color=colour, lw=2.2, zorder=5)
    _eigen_directions(ax, portrait)
    _equilibrium_marks(ax, portrait)
    ax.set_xlim(portrait.window[0], portrait.window[1])
    ax.set_ylim(portrait.window[2], portrait.window[3])
    ax.set_xlabel(portrait.plane.axes[0])
    ax.set_ylabel(portrait.plane.axes[1])
    ax.set_title("Phase portrait")


# Quiver's scale: arrows of unit length drawn this many to the panel's width.
ARROW_SCALE = 30.0


def _local_panel(ax, portrait: Portrait) -> None:
    local = portrait.local
    if local is None:
        ax.set_axis_off()
        ax.text(0.5, 0.5, "No equilibrium found", ha="center", va="center", transform=ax.transAxes)
        return
    eq = portrait.equilibria[local.equilibrium]
    for curve in local.nonlinear:
        ax.plot(curve[:, 0], curve[:, 1], color=NONLINEAR, lw=1.2, zorder=3)
        _arrowhead(ax, curve, NONLINEAR, 0.3)
    for curve in local.linear:
        ax.plot(curve[:, 0], curve[:, 1], color=LINEAR, lw=1.2, ls=(0, (4, 2.5)), zorder=4)
    starts = np.array([c[0] for c in local.nonlinear])
    ax.plot(starts[:, 0], starts[:, 1], "o", ms=3, color="black", zorder=5)
    ax.plot(*eq.point, marker="o", ms=8, mfc="white", mec="black", mew=1.3, zorder=6)
    r = 1.5 * local.radius
    ax.set_xlim(eq.point[0] - r[0], eq.point[0] + r[0])
    ax.set_ylim(eq.point[1] - r[1], eq.point[1] + r[1])
    ax.set_xlabel(portrait.plane.axes[0])
    ax.set_ylabel(portrait.plane.axes[1])
    ax.set_title(f"Around #{local.equilibrium + 1}: linearized flow beside the model's")
    ax.text(
        0.5,
        -0.2,
        "\n".join(textwrap.wrap(local.verdict, WRAP)),
        transform=ax.transAxes,
        ha="center",
        va="top",
        fontsize=FONT_SIZE,
        color="black" if eq.decided else "#B00000",
    )


def _legend(fig, portrait: Portrait) -> None:
    names = portrait.plane.axes
    handles = [
        Line2D(
            [],
            [],
            color=FIRST_NULLCLINE,
            ls="--",
            label=f"{names[0]}-nullcline (d{names[0]}/dt = 0)",
        ),
        Line2D(
            [],
            [],
            color=SECOND_NULLCLINE,
            ls="--",
            label=f"{names[1]}-nullcline (d{names[1]}/dt = 0)",
        ),
        Line2D([], [], color=TRAJECTORY, lw=0.8, label="trajectories"),
    ]
    if any(m.which == "stable" for m in portrait.manifolds):
        handles.append(
            Line2D([], [], color=STABLE_MANIFOLD, lw=2.2, label="stable manifold (separatrix)")
        )
    if any(m.which == "unstable" for m in portrait.manifolds):
        handles.append(Line2D([], [], color=UNSTABLE_MANIFOLD, lw=2.2, label="unstable manifold"))
    handles += [
        Line2D([], [], marker="o", ls="none", mfc="black", mec="black", label="stable equilibrium"),
        Line2D(
            [], [], marker="o", ls="none", mfc="white", mec="black", label="unstable equilibrium"
        ),
        Line2D(
            [],
            [],
            marker="o",
            ls="none",
            mfc="#999999",
            mec="black",
            label="linearization undecided",
        ),
        Line2D(
            [],
            [],
            color="black",
            marker=">",
            ms=5,
            lw=1.3,
            label="eigen-direction (in: attracting)",
        ),
        Line2D([], [], color=NONLINEAR, lw=1.2, label="right: the model"),
        Line2D([], [], color=LINEAR, lw=1.2, ls=(0, (4, 2.5)), label="right: linearized"),
    ]
    fig.legend(
        handles=handles,
        loc="outside lower center",
        ncols=4,
        frameon=False,
        fontsize=FONT_SIZE - 0.5,
    )


def portrait_figure(portrait: Portrait) -> Figure:
    """The two-panel phase portrait as a matplotlib Figure (no pyplot)."""
    with mpl.rc_context(
        {"font.size": FONT_SIZE, "svg.fonttype": "none", "svg.hashsalt": "branchline"}
    ):
        fig = Figure(figsize=FIGURE_SIZE, layout="constrained")
        FigureCanvasAgg(fig)
        main, local = fig.subplots(1, 2, width_ratios=(1.35, 1.0))
        _main_panel(main, portrait)
        _local_panel(local, portrait)
        _legend(fig, portrait)
        shown = ", ".join(f"{k} = {fmt(portrait.parameters[k], 6)}" for k in portrait.highlight)
        fig.suptitle(f"{portrait.title}\n{shown}", fontsize=FONT_SIZE + 1)
        for note in portrait.notes:
            main.text(
                0.0,
                -0.16,
                "\n".join(textwrap.wrap(note, 90)),
                transform=main.transAxes,
                fontsize=FONT_SIZE - 1,
                color="#555555",
                va="top",
            )
        settle_layout(fig)  # laid out once here, not again by each file saved
    return fig


def portrait_record(portrait: Portrait) -> dict[str, Any]:
    """portrait.json: the parameters, the plane and each equilibrium with its type."""
    states = portrait.states
    equilibria = []
    for number, eq in enumerate(portrait.equilibria, start=1):
        equilibria.append(
            {
                "number": number,
                "states": {name: float(value) + 0.0 for name, value in zip(states, eq.state)},
                "plane_point": [float(c) + 0.0 for c in eq.point],
                "eigenvalues": [[float(z.real), float(z.imag)] for z in eq.eigenvalues],
                "type": eq.words,
                "linearization_decides": bool(eq.decided),
                "found_by": eq.source,
                "eigen_directions": [
                    {"eigenvalue": value, "direction_in_plane": [float(c) for c in d]}
                    for value, d in eq.directions
                ],
                "description": eq.description,
            }
        )
    local = portrait.local
    return {
        "title": portrait.title,
        "parameters": portrait.parameters,
        "plane": {
            "kind": portrait.plane.kind,
            "axes": list(portrait.plane.axes),
            "origin": {n: float(v) for n, v in zip(states, portrait.plane.origin)},
            "basis": portrait.plane.basis.T.tolist(),
        },
        "window": [float(w) for w in portrait.window],
        "equilibria": equilibria,
        "manifolds": [
            {"equilibrium": m.equilibrium + 1, "which": m.which, "points": len(m.points)}
            for m in portrait.manifolds
        ],
        "local_panel": None
        if local is None
        else {
            "equilibrium": local.equilibrium + 1,
            "verdict": local.verdict,
            "ring_half_axes": [float(r) for r in local.radius],
            "simulated": local.seen,
        },
        "notes": list(portrait.notes),
    }


def write_portrait(portrait: Portrait, folder: str | Path) -> Path:
    """Write portrait.png, portrait.svg and portrait.json into ``folder`` (created if needed;
    other files there are left alone)."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    figure = portrait_figure(portrait)
    for suffix in ("png", "svg"):
        staged = folder / f".portrait.{suffix}.part"
        with mpl.rc_context({"svg.fonttype": "none", "svg.hashsalt": "branchline"}):
            figure.savefig(
                staged,
                format=suffix,
                dpi=PNG_DPI,
                metadata={"Date": None} if suffix == "svg" else {},
            )
        staged.replace(folder / f"portrait.{suffix}")
    staged = folder / ".portrait.json.part"
    staged.write_text(json.dumps(portrait_record(portrait), indent=2) + "\n", encoding="utf-8")
    staged.replace(folder / "portrait.json")
    return folder


def portrait_lines(portrait: Portrait) -> list[str]:
    """The terminal summary: each equilibrium, its type and whether the linearization decides."""
    shown = ", ".join(f"{k} = {fmt(portrait.parameters[k], 6)}" for k in portrait.highlight)
    lines = [f"{portrait.title}: phase portrait at {shown}"]
    for number, eq in enumerate(portrait.equilibria, start=1):
        where = ", ".join(f"{n} = {fmt(v + 0.0, 6)}" for n, v in zip(portrait.states, eq.state))
        decides = "linearization decides" if eq.decided else "linearization does NOT decide"
        lines.append(f"  #{number} {eq.words} at {where} ({decides}; found by {eq.source})")
    if portrait.local is not None:
        lines.append("  " + portrait.local.verdict)
    lines += [f"  note: {note}" for note in portrait.notes]
    return lines
