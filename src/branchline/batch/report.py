"""The batch report (``report.md``) and its figures.

For each scan of the batch: where each event lies across its members (for a
grid, against the grid parameters in a figure: a line for one parameter, heat
maps for two or more, the others at their first value; for samples, the
distribution of each event's location in a table and histograms), for samples
the probability that each trace's operating margin is below the scan's
``margin_threshold`` with its Clopper-Pearson interval, and the Spearman rank
correlations of the sampled parameters with every event location and margin.
Failed members are listed with their errors. The caution ends the report.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pandas as pd

from branchline.batch.analysis import (
    CONFIDENCE,
    event_locations,
    location_summary,
    margin_risks,
    rank_correlations,
    scan_members,
)
from branchline.batch.plan import MemberPlan
from branchline.present.report import CAUTION
from branchline.scan.loader import Scan

# Failed members listed one by one in the report before it only counts them.
FAILED_SHOWN = 20
# Event labels drawn per figure (one panel each); more are in the tables only.
PANELS_SHOWN = 6
# Significant digits of numbers in the report's tables (events.csv keeps 17).
DIGITS = 6


def _number(value: object) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "-"
    if isinstance(value, (int, np.integer)):
        return str(value)
    return f"{float(value):.{DIGITS}g}"


def _table(frame: pd.DataFrame) -> list[str]:
    lines = ["| " + " | ".join(map(str, frame.columns)) + " |"]
    lines.append("|" + " --- |" * len(frame.columns))
    for row in frame.itertuples(index=False):
        cells = [v if isinstance(v, str) else _number(v) for v in row]
        lines.append("| " + " | ".join(cells) + " |")
    return lines


def _ensemble_words(scan: Scan) -> str:
    spec = scan.ensemble
    if spec is None:
        return "a single run (no [ensemble])"
    if spec.grid:
        axes = ", ".join(f"{name} ({len(values)} values)" for name, values in spec.grid)
        return f"a grid of {spec.size} members over {axes}"
    laws = ", ".join(f"{d.name} ~ {d.law}({d.a:g}, {d.b:g})" for d in spec.draws)
    return f"{spec.samples} samples ({spec.sampling}, seed {spec.seed}): {laws}"


def _failed_lines(members: pd.DataFrame) -> list[str]:
    failed = members[members["status"] == "failed"]
    if failed.empty:
        return []
    lines = ["## Failed members", ""]
    shown = failed.head(FAILED_SHOWN)
    lines += _table(shown[["member", "scan", "error"]])
    if len(failed) > FAILED_SHOWN:
        lines.append(f"\n... and {len(failed) - FAILED_SHOWN} more (members.csv lists them all).")
    return [*lines, ""]


def _grid_figure(scan: Scan, locations: pd.DataFrame, members: pd.DataFrame, path: Path):
    """Each event's location against the grid parameters; None when there is nothing to draw."""
    import matplotlib.pyplot as plt

    labels = list(dict.fromkeys(locations["label"]))[:PANELS_SHOWN]
    if not labels:
        return None
    axes_names = [name for name, _ in scan.ensemble.grid]
    table = locations.merge(members[["member", *axes_names]], on="member")
    for name, values in scan.ensemble.grid[2:]:
        table = table[table[name] == values[0]]  # further axes at their first value
    figure, axes = plt.subplots(1, len(labels), figsize=(4.2 * len(labels), 3.6), squeeze=False)
    for ax, label in zip(axes[0], labels):
        rows = table[table["label"] == label]
        where = f"{rows['parameter'].iloc[0]} at the event" if len(rows) else "location"
        if len(axes_names) == 1:
            ordered = rows.sort_values(axes_names[0])
            ax.plot(ordered[axes_names[0]], ordered["location"], marker="o", color="#2a6f97")
            ax.set_xlabel(axes_names[0])
            ax.set_ylabel(where)
        else:
            x_values, y_values = scan.ensemble.grid[0][1], scan.ensemble.grid[1][1]
            grid = np.full((len(y_values), len(x_values)), np.nan)
            for x, y, value in zip(rows[axes_names[0]], rows[axes_names[1]], rows["location"]):
                grid[list(y_values).index(y), list(x_values).index(x)] = value
            image = ax.pcolormesh(x_values, y_values, grid, shading="nearest", cmap="viridis")
            figure.colorbar(image, ax=ax, label=where)
            ax.set_xlabel(axes_names[0])
            ax.set_ylabel(axes_names[1])
        ax.set_title(label, fontsize=9)
    figure.tight_layout()
    figure.savefig(path, dpi=110)
    plt.close(figure)
    return path.name


def _sample_figure(locations: pd.DataFrame, path: Path):
    """Histograms of each event's location; None when there is nothing to draw."""
    import matplotlib.pyplot as plt

    labels = list(dict.fromkeys(locations["label"]))[:PANELS_SHOWN]
    if not labels:
        return None
    width, height = 4.2 * len(labels), 3.4
    figure, axes = plt.subplots(1, len(labels), figsize=(width, height), squeeze=False)
    # fixed margins (inches) for the title and axis labels: a layout pass cost as
    # much as drawing the panels, and one histogram per panel always fits them
    figure.subplots_adjust(
        left=0.75 / width,
        right=1.0 - 0.2 / width,
        bottom=0.6 / height,
        top=1.0 - 0.4 / height,
        wspace=0.9 / 4.2,
    )
    for ax, label in zip(axes[0], labels):
        rows = locations[locations["label"] == label]
        values = rows["location"].to_numpy(dtype=float)
        ax.hist(values, bins="auto", color="#8a5a44", edgecolor="white")
        ax.set_title(label, fontsize=9)
        ax.set_xlabel(f"{rows['parameter'].iloc[0]} at the event")
        ax.set_ylabel("members")
    figure.savefig(path, dpi=110)
    plt.close(figure)
    return path.name


def _scan_section(
    folder: Path,
    scan: Scan,
    figure_name: str,
    planned: Sequence[int],
    members: pd.DataFrame,
    events: pd.DataFrame,
    margins: pd.DataFrame,
) -> tuple[list[str], list[str]]:
    chosen = scan_members(members, planned)
    numbers = chosen["member"].tolist()
    locations = event_locations(events, scan, numbers)
    lines = [
        f"## {scan.title}",
        "",
        f"`{scan.source}`: {_ensemble_words(scan)}; {len(chosen)} members done.",
        "",
    ]
    figures: list[str] = []
    summary = location_summary(locations, len(chosen))
    if summary.empty:
        return [*lines, "No events were located in these members.", ""], figures
    lines += ["### Where the events lie", ""]
    lines += _table(
        summary.drop(columns=["mean", "std"] if scan.ensemble and scan.ensemble.grid else [])
    )
    lines.append("")
    spec = scan.ensemble
    if spec is not None and spec.grid:
        drawn = _grid_figure(scan, locations, chosen, folder / figure_name)
    elif spec is not None:
        drawn = _sample_figure(locations, folder / figure_name)
    else:
        drawn = None
    if drawn:
        figures.append(drawn)
        lines += [f"![event locations]({drawn})", ""]
    if spec is not None and not spec.grid:
        lines += _sample_lines(spec, chosen, locations, margins, numbers)
    return lines, figures


def _sample_lines(spec, chosen, locations, margins, numbers) -> list[str]:
    lines = []
    if spec.margin_threshold is not None:
        risks = margin_risks(margins, numbers, spec.margin_threshold)
        level = f"{CONFIDENCE:.0%}"
        lines += [
            "### Operating margin below the threshold",
            "",
            f"Probability that the distance from a trace's start value to its nearest "
            f"located event is below {spec.margin_threshold:g}, with its {level} "
            "Clopper-Pearson (exact binomial) interval, over the members done. "
            "A member that failed is not counted: if it found no equilibrium at its start, "
            "the operating state may not exist there at all (see the failed members).",
            "",
            f"| trace | parameter | members | below | probability | {level} interval |",
            "| --- | --- | --- | --- | --- | --- |",
        ]
        for risk in risks:
            p = risk.probability
            lines.append(
                f"| {risk.trace} | {risk.vary} | {p.trials} | {p.hits} | {_number(p.estimate)} "
                f"| [{_number(p.low)}, {_number(p.high)}] |"
            )
        lines.append("")
    parameters = [draw.name for draw in spec.draws]
    correlations = rank_correlations(chosen, locations, margins, parameters)
    if not correlations.empty:
        lines += [
            "### What drives the spread",
            "",
            "Spearman rank correlation of each sampled parameter with each quantity "
            "(+1 or -1: it alone orders the quantity; near 0: no monotone influence).",
            "",
        ]
        lines += [*_table(correlations), ""]
    return lines


def _figure_names(scans: Sequence[Scan]) -> list[str]:
    stems = [scan.stem for scan in scans]
    return [
        f"locations-{stem}.png" if stems.count(stem) == 1 else f"locations-{k + 1}-{stem}.png"
        for k, stem in enumerate(stems)
    ]


def write_report(
    folder: Path,
    scans: Sequence[Scan],
    plan: Sequence[MemberPlan],
    members: pd.DataFrame,
    events: pd.DataFrame,
    margins: pd.DataFrame,
) -> list[str]:
    """Write ``report.md`` and its figures into ``folder``; return the file names written."""
    done = int((members["status"] == "done").sum())
    lines = [
        "# Batch report",
        "",
        f"{len(members)} members finished: {done} done, {len(members) - done} failed. "
        "Each member's own results are in `members/<number>/` (`branchline report` and "
        "`branchline plot` read them).",
        "",
    ]
    lines += _failed_lines(members)
    written = ["report.md"]
    for index, (scan, name) in enumerate(zip(scans, _figure_names(scans))):
        planned = [m.member for m in plan if m.scan == index]
        section, figures = _scan_section(folder, scan, name, planned, members, events, margins)
        lines += section
        written += figures
    lines += ["---", "", f"**Caution.** {CAUTION}", ""]
    (folder / "report.md").write_text("\n".join(lines), encoding="utf-8")
    return written


__all__ = ["write_report"]
