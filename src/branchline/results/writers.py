"""The results folder: write it whole (never half-written), read it back.

Files follow the interface contract: points.csv, events.csv, events.json,
report.md, diagram.png, diagram.svg, run.json (and states.npz for models with
more than ``tables.MAX_STATE_COLUMNS`` states; search.csv when a trace searched
for equilibria without a start guess).
"""

from __future__ import annotations

import contextlib
import json
import shutil
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from branchline.results.output_folder import (
    FILES_KEY,
    MARKER_KEY,
    MARKER_VALUE,
    STAGING_MARKER,
    move_into_place,
    new_staging,
    read_marker,
    remove_stale_staging,
    reserve_output,
)
from branchline.results.records import STATUS_INTERRUPTED, RunResult

# Full round-trip precision for binary64 (the contract: 17 significant digits).
FLOAT_FORMAT = "%.17g"


@dataclass(frozen=True)
class SavedRun:
    """A results folder read back: what `plot` and `report` work from."""

    folder: Path
    points: pd.DataFrame
    events: list[dict[str, Any]]
    info: dict[str, Any]
    cycles: pd.DataFrame | None = None
    # What the reader had to leave out (a table cut short mid-row), in words for the user.
    skipped: tuple[str, ...] = ()


def _csv(frame: pd.DataFrame, path: Path) -> None:
    frame = frame.copy()
    for column in frame.columns:
        if frame[column].dtype == bool:
            frame[column] = frame[column].map({True: "true", False: "false"})
        elif pd.api.types.is_float_dtype(frame[column].dtype):
            frame[column] = frame[column] + 0.0  # -0.0 + 0.0 is +0.0: no "-0" in a table
    frame.to_csv(path, index=False, float_format=FLOAT_FORMAT)


def _json(data: Any, path: Path) -> None:
    path.write_text(json.dumps(data, indent=2, allow_nan=False) + "\n", encoding="utf-8")


def write_results(
    result: RunResult, folder: str | Path, *, figures: bool = True, reserved: bool = False
) -> Path:
    """Write every results file, replacing an earlier branchline run in ``folder``.

    The files are written into a hidden staging folder beside ``folder`` that is
    moved into place only when complete (:mod:`branchline.results.output_folder`),
    so a crash never leaves a half-written results folder; a folder holding
    anything branchline did not write is never replaced (OutputFolderError).
    An interrupted run does not replace complete earlier results: it goes to
    ``<folder>-interrupted`` instead (marked ``"status": "interrupted"``).

    Parameters
    ----------
    reserved : bool
        The caller already holds ``folder`` with :func:`reserve_output`.

    Returns
    -------
    Path
        The folder actually written.
    """
    folder = Path(folder)
    if result.status == STATUS_INTERRUPTED and _holds_complete_run(folder):
        folder = folder.with_name(f"{folder.name}-interrupted")
        reserved = False
    with contextlib.nullcontext(folder) if reserved else reserve_output(folder):
        remove_stale_staging(folder)
        staging = new_staging(folder)
        try:
            _write_files(result, staging, figures)
            move_into_place(staging, folder)
        except BaseException:
            shutil.rmtree(staging, ignore_errors=True)
            raise
    return folder


def write_files(result: RunResult, folder: Path, *, figures: bool = True) -> None:
    """Write every results file into ``folder``, an existing empty folder whose
    completeness the caller guarantees (a batch member's staging folder, renamed
    into place when whole); no lock, no staging of its own."""
    _write_files(result, Path(folder), figures)


def _holds_complete_run(folder: Path) -> bool:
    info = read_marker(folder) if folder.is_dir() else None
    return bool(info) and info.get("status") != STATUS_INTERRUPTED


def _write_files(result: RunResult, staging: Path, figures: bool) -> None:
    points = result.points_frame()
    events = result.event_records()
    info = result.info()
    _csv(points, staging / "points.csv")
    _csv(result.events_frame(), staging / "events.csv")
    if result.scan.boundaries:
        _csv(result.boundaries_frame(), staging / "boundaries.csv")
    if result.robust_margin is not None:
        _csv(result.robust_margin_frame(), staging / "robust_margin.csv")
    _json({"events": events}, staging / "events.json")
    cycles = None
    if result.cycles:
        from branchline.results.cycle_tables import profile_arrays

        cycles = result.cycles_frame()
        _csv(cycles, staging / "cycles.csv")
        np.savez_compressed(staging / "cycles.npz", **profile_arrays(result))
    if result.searches:
        from branchline.results.search_tables import search_frame

        _csv(search_frame(result), staging / "search.csv")
    if result.model.size > 20:
        np.savez_compressed(
            staging / "states.npz",
            **{b.name: b.states for b in result.branches},
            state_names=np.array(result.model.states),
        )
    from branchline.present.report import render_report

    (staging / "report.md").write_text(
        render_report(points, events, info, cycles=cycles), encoding="utf-8"
    )
    if figures:
        from branchline.present.plotting import bifurcation_figure, save_figure

        figure = bifurcation_figure(points, events, info, cycles=cycles)
        save_figure(figure, staging / "diagram.png")
        save_figure(figure, staging / "diagram.svg")
        _confirmation_figure(result, staging)
        _stability_map_figures(result, info, events, staging)
    written = sorted(entry.name for entry in staging.iterdir() if entry.name != STAGING_MARKER)
    _json(
        {**info, MARKER_KEY: MARKER_VALUE, FILES_KEY: [*written, "run.json"]}, staging / "run.json"
    )


def _stability_map_figures(result: RunResult, info, events, folder: Path) -> None:
    """stability_map.png (stability_map-2.png, ... for further planes)."""
    if info.get("stability_maps"):
        save_stability_maps(info, result.boundaries_frame(), events, folder)


def stability_map_names(info: Mapping[str, Any]) -> list[str]:
    """The file stems of a run's stability maps: stability_map, stability_map-2, ..."""
    count = len(info.get("stability_maps") or [])
    return ["stability_map" if n == 1 else f"stability_map-{n}" for n in range(1, count + 1)]


def save_stability_maps(
    info: Mapping[str, Any],
    boundaries: pd.DataFrame,
    events: list[dict[str, Any]],
    folder: Path,
    suffix: str = "png",
) -> list[Path]:
    """Draw every run.json ``stability_maps`` entry from boundaries.csv rows and the
    events; write them into ``folder`` (names of :func:`stability_map_names`)."""
    from branchline.present.plotting import save_figure
    from branchline.present.stability_map import stability_map_figure

    written = []
    for entry, name in zip(info["stability_maps"], stability_map_names(info), strict=True):
        target = folder / f"{name}.{suffix}"
        save_figure(stability_map_figure(entry, boundaries, events, info), target)
        written.append(target)
    return written


def redraw_stability_maps(saved: SavedRun, folder: Path, suffix: str = "png") -> list[Path]:
    """The stability maps of a saved run drawn again from its boundaries.csv, run.json
    and events.json (none when the run has no ``stability_maps``).

    Raises
    ------
    ResultsFolderError
        When run.json lists stability maps but boundaries.csv is missing or unreadable.
    """
    if not saved.info.get("stability_maps"):
        return []
    path = saved.folder / "boundaries.csv"
    try:
        boundaries = pd.read_csv(path)
    except (OSError, ValueError) as err:
        raise ResultsFolderError(
            f"{saved.folder}: run.json lists stability maps but boundaries.csv cannot be read "
            f"({_short(err)})"
        ) from None
    return save_stability_maps(saved.info, boundaries, saved.events, folder, suffix)


def _confirmation_figure(result: RunResult, folder: Path) -> None:
    """confirmations.png: one small panel per event the run simulated."""
    from branchline.present.confirmations import confirmations_figure, save_confirmations_figure

    figure = confirmations_figure(result.confirmations)
    if figure is not None:
        save_confirmations_figure(figure, folder / "confirmations.png")


def _read_points(path: Path, skipped: list[str] | None = None) -> pd.DataFrame:
    """The table at ``path``; a last row cut short (no final newline: the file was
    truncated mid-row) is left out, and ``skipped`` gets a sentence saying so."""
    frame = pd.read_csv(path)
    if len(frame) and not _ends_with_newline(path):
        frame = frame.iloc[:-1]
        if skipped is not None:
            skipped.append(
                f"{path.name} ends mid-row (the file was cut short); its last, incomplete "
                f"row was skipped and {len(frame)} complete rows were used"
            )
    if "stable" in frame.columns:
        frame["stable"] = frame["stable"].astype(str).str.lower().eq("true")
    return frame


def _ends_with_newline(path: Path) -> bool:
    with path.open("rb") as handle:
        handle.seek(0, 2)
        if handle.tell() == 0:
            return True
        handle.seek(-1, 2)
        return handle.read(1) in (b"\n", b"\r")


class ResultsFolderError(Exception):
    """A folder that is not a complete branchline results folder."""


def read_results(folder: str | Path) -> SavedRun:
    """Read a results folder written by :func:`write_results`."""
    folder = Path(folder)
    needed = ("points.csv", "events.json", "run.json")
    if not folder.is_dir():
        raise ResultsFolderError(f"{folder}: not a folder")
    missing = [name for name in needed if not (folder / name).is_file()]
    if missing:
        raise ResultsFolderError(
            f"{folder}: not a branchline results folder (missing {', '.join(missing)})"
        )
    skipped: list[str] = []
    try:
        points = _read_points(folder / "points.csv", skipped)
        events = json.loads((folder / "events.json").read_text(encoding="utf-8"))
        info = json.loads((folder / "run.json").read_text(encoding="utf-8"))
        cycles_path = folder / "cycles.csv"
        cycles = _read_points(cycles_path, skipped) if cycles_path.is_file() else None
    except (ValueError, KeyError, OSError, RecursionError, UnicodeDecodeError) as err:
        raise ResultsFolderError(f"{folder}: cannot read the results ({_short(err)})") from None
    problem = _layout_problem(points, events, info)
    if problem:
        raise ResultsFolderError(f"{folder}: not a readable results folder: {problem}")
    return SavedRun(
        folder=folder,
        points=points,
        events=events["events"],
        info=info,
        cycles=cycles,
        skipped=tuple(skipped),
    )


# Error texts from parsers can quote whole files; this much is enough to locate trouble.
MESSAGE_LIMIT = 200


def _short(error: BaseException) -> str:
    text = str(error)
    return text if len(text) <= MESSAGE_LIMIT else text[:MESSAGE_LIMIT] + " ..."


def _layout_problem(points: pd.DataFrame, events: Any, info: Any) -> str:
    """What is wrong with the saved tables' layout, or "" (what report and plot rely on)."""
    if not isinstance(info, dict):
        return f"run.json holds {type(info).__name__}, not an object"
    traces = info.get("traces", [])
    if not isinstance(traces, list) or not all(
        isinstance(t, dict) and isinstance(t.get("name"), str) and isinstance(t.get("vary"), str)
        for t in traces
    ):
        return "run.json: traces must be a list of objects with a name and a vary"
    if not isinstance(events, dict) or not isinstance(events.get("events"), list):
        return "events.json must be an object with a list under 'events'"
    if not all(isinstance(e, dict) for e in events["events"]):
        return "events.json: every event must be an object"
    for column in ("trace", "stable"):
        if column not in points.columns:
            return f"points.csv has no column '{column}'"
    for entry in traces:
        vary = entry["vary"]
        if vary not in points.columns:
            return f"points.csv has no column '{vary[:60]}' (the varied parameter)"
        if len(points) and not pd.api.types.is_numeric_dtype(points[vary]):
            return f"points.csv: column '{vary[:60]}' holds values that are not numbers"
    return ""
