"""The results folder: write it whole (never half-written), read it back.

Files follow the interface contract: points.csv, events.csv, events.json,
report.md, diagram.png, diagram.svg, run.json (and states.npz for models with
more than ``tables.MAX_STATE_COLUMNS`` states).
"""

from __future__ import annotations

import json
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from branchline.results.records import RunResult

# Full round-trip precision for binary64 (the contract: 17 significant digits).
FLOAT_FORMAT = "%.17g"


@dataclass(frozen=True)
class SavedRun:
    """A results folder read back: what `plot` and `report` work from."""

    folder: Path
    points: pd.DataFrame
    events: list[dict[str, Any]]
    info: dict[str, Any]


def _csv(frame: pd.DataFrame, path: Path) -> None:
    frame = frame.copy()
    for column in frame.columns:
        if frame[column].dtype == bool:
            frame[column] = frame[column].map({True: "true", False: "false"})
    frame.to_csv(path, index=False, float_format=FLOAT_FORMAT)


def _json(data: Any, path: Path) -> None:
    path.write_text(json.dumps(data, indent=2, allow_nan=False) + "\n", encoding="utf-8")


def write_results(result: RunResult, folder: str | Path, *, figures: bool = True) -> Path:
    """Write every results file into ``folder``, replacing an earlier run there.

    The files are first written into a temporary sibling folder which is then
    moved into place, so a crash never leaves a half-written results folder.
    """
    folder = Path(folder)
    folder.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{folder.name}-", dir=folder.parent))
    try:
        points = result.points_frame()
        events = result.event_records()
        info = result.info()
        _csv(points, staging / "points.csv")
        _csv(result.events_frame(), staging / "events.csv")
        _json({"events": events}, staging / "events.json")
        _json(info, staging / "run.json")
        if result.model.size > 20:
            np.savez_compressed(
                staging / "states.npz",
                **{b.name: b.states for b in result.branches},
                state_names=np.array(result.model.states),
            )
        from branchline.present.report import render_report

        (staging / "report.md").write_text(render_report(points, events, info), encoding="utf-8")
        if figures:
            from branchline.present.plotting import bifurcation_figure, save_figure

            figure = bifurcation_figure(points, events, info)
            save_figure(figure, staging / "diagram.png")
            save_figure(figure, staging / "diagram.svg")
        if folder.exists():
            shutil.rmtree(folder)
        staging.rename(folder)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    return folder


def _read_points(path: Path) -> pd.DataFrame:
    frame = pd.read_csv(path)
    if "stable" in frame.columns:
        frame["stable"] = frame["stable"].astype(str).str.lower().eq("true")
    return frame


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
    try:
        points = _read_points(folder / "points.csv")
        events = json.loads((folder / "events.json").read_text(encoding="utf-8"))["events"]
        info = json.loads((folder / "run.json").read_text(encoding="utf-8"))
    except (ValueError, KeyError, OSError) as err:
        raise ResultsFolderError(f"{folder}: cannot read the results ({err})") from None
    return SavedRun(folder=folder, points=points, events=events, info=info)
