"""One member of a batch, run wherever a worker runs it.

:func:`run_member` is the one job every backend executes (the calling process
with ``--jobs 1``, a local process pool, or a Dask worker), in chunks of
members of one scan (:func:`run_members`, one task per chunk). It compiles the
scan's model once per worker process (kept in :data:`_MODELS`), runs the
member's scan with its ensemble values as parameter defaults, and returns
everything the batch keeps as plain picklable data: its events.csv rows, its
operating margins and its results folder, written in place under the batch's
members folder by workers that share the batch's disk (the local backends, and
Dask workers that find the batch's disk mark), or as bytes from workers on
other machines, which need no shared disk. It never raises for a failing
member: the error becomes the outcome's ``status`` and ``error``.
"""

from __future__ import annotations

import math
import os
import shutil
import socket
import tempfile
import threading
import time
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import pandas as pd

from branchline.batch.plan import MemberPlan
from branchline.model.build import Model, build_model
from branchline.results.margins import operating_margins
from branchline.results.records import RunResult
from branchline.results.writers import write_files, write_results
from branchline.runner import run_scan
from branchline.scan.loader import Scan

# Hidden member folders being written start with this (cleared when a batch starts).
STAGING_PREFIX = "."
STATUS_DONE = "done"
STATUS_FAILED = "failed"

# Compiled models of this worker process, by scan model: compiling is the
# costly part of a small scan, and every member of a scan shares its model.
_MODELS: dict[str, Model] = {}
_MODELS_LOCK = threading.Lock()  # Dask workers may run several members in threads


@dataclass(frozen=True)
class MemberOutcome:
    """What one member produced (plain data, sent back from the worker)."""

    member: int
    status: str  # "done" or "failed"
    seconds: float  # wall time on the worker, run and results files
    error: str  # why it failed; empty when done
    files: dict[str, bytes]  # the member's results folder, file name -> content
    events: tuple[dict[str, Any], ...]  # its events.csv rows (None for empty cells)
    margins: tuple[dict[str, Any], ...]  # operating margin of each scanned trace
    worker: str  # host:pid of the worker process
    built_model: bool  # True if this member compiled the model (first on its worker)
    staged: str = ""  # the folder written in place (local backends); then ``files`` is empty


def member_scan(scan: Scan, values: dict[str, float]) -> Scan:
    """The scan of one member: ``values`` become parameter defaults, no ensemble."""
    parameters = {**scan.model.parameters, **values}
    return replace(scan, model=replace(scan.model, parameters=parameters), ensemble=None)


def _model_key(scan: Scan) -> str:
    return repr((scan.source, scan.model))


def compiled_model(scan: Scan) -> tuple[Model, bool]:
    """This worker's compiled model of ``scan`` and whether it was compiled just now."""
    key = _model_key(scan)
    with _MODELS_LOCK:
        if key in _MODELS:
            return _MODELS[key], False
        model = build_model(scan.model, source=scan.source)
        _MODELS[key] = model
        return model, True


class _TablesOnce:
    """A RunResult whose tables are computed once: a member needs each of them
    for its folder, its events rows and its margins (a third of a small
    member's time went to computing them again)."""

    def __init__(self, result: RunResult) -> None:
        self._result = result
        self._tables: dict[str, Any] = {}

    def __getattr__(self, name: str) -> Any:
        return getattr(self._result, name)

    def _once(self, name: str) -> Any:
        if name not in self._tables:
            self._tables[name] = getattr(self._result, name)()
        return self._tables[name]

    def points_frame(self) -> pd.DataFrame:
        return self._once("points_frame")

    def events_frame(self) -> pd.DataFrame:
        return self._once("events_frame")

    def event_records(self) -> list[dict[str, Any]]:
        return self._once("event_records")

    def info(self) -> dict[str, Any]:
        return self._once("info")


def _finite(value: Any) -> Any:
    """NaN -> None, numpy scalars -> Python ones: a JSON-ready table cell."""
    if hasattr(value, "item"):
        value = value.item()
    if isinstance(value, float) and math.isnan(value):
        return None
    return value


def _margin_rows(result) -> tuple[dict[str, Any], ...]:
    rows = []
    info = result.info()
    for margin in operating_margins(
        result.points_frame(), result.event_records(), info, coexisting=False
    ):
        sides = {"below": margin.decreasing, "above": margin.increasing}
        distances = {k: side.absolute for k, side in sides.items()}
        near = min((k for k in sides if distances[k] is not None), key=distances.get, default=None)
        rows.append(
            {
                "trace": margin.trace,
                "vary": margin.vary,
                "start_value": margin.start_value,
                "stable": margin.stable,
                "below": distances["below"],
                "above": distances["above"],
                "margin": distances[near] if near else None,
                "nearest": sides[near].event["kind"] if near else None,
            }
        )
    return tuple(rows)


def _folder_bytes(result) -> dict[str, bytes]:
    """The member's results folder (no diagrams: ``branchline plot`` draws one) as bytes."""
    with tempfile.TemporaryDirectory(prefix="branchline-member-") as scratch:
        folder = write_results(result, Path(scratch) / "member", figures=False)
        return {path.name: path.read_bytes() for path in sorted(folder.iterdir())}


def _folder_in_place(result, members: Path, member: int) -> str:
    """Write the member's results folder straight into a hidden staging folder under
    ``members`` (a disk the batch shares); the batch renames it into place."""
    staging = Path(tempfile.mkdtemp(prefix=f"{STAGING_PREFIX}{member}-", dir=members))
    try:
        write_files(result, staging, figures=False)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    return str(staging)


def run_member(scan: Scan, plan: MemberPlan, members: str | None = None) -> MemberOutcome:
    """Run one member of a batch; a failure is recorded, never raised.

    Parameters
    ----------
    scan : Scan
        The batch's scan (its ``[ensemble]`` is ignored here).
    plan : MemberPlan
        The member's number and ensemble values.
    members : str, optional
        The batch's members folder, when this worker shares its disk (the local
        backends): the results folder is written there in place (``staged``)
        instead of travelling back as bytes (``files``).

    Returns
    -------
    MemberOutcome
        ``status`` "failed" with ``error`` when the scan stopped on numerical
        trouble (its partial results are kept) or raised (no files then).
    """
    started = time.perf_counter()
    worker = f"{socket.gethostname()}:{os.getpid()}"
    built = False
    try:
        model, built = compiled_model(scan)
        own = member_scan(scan, plan.values)
        # members are not confirmed by simulation: that would add its cost to every member
        result = _TablesOnce(
            run_scan(
                own,
                model=replace(model, defaults=model.parameter_vector(plan.values)),
                confirm=False,
            )
        )
        events = tuple(
            {k: _finite(v) for k, v in row.items()}
            for row in result.events_frame().to_dict(orient="records")
        )
        margins = _margin_rows(result)
        if members is None:
            files, staged = _folder_bytes(result), ""
        else:
            files, staged = {}, _folder_in_place(result, Path(members), plan.member)
    except Exception as error:  # any member's failure is recorded; the batch goes on
        return MemberOutcome(
            member=plan.member,
            status=STATUS_FAILED,
            seconds=time.perf_counter() - started,
            error=f"{type(error).__name__}: {error}",
            files={},
            events=(),
            margins=(),
            worker=worker,
            built_model=built,
        )
    failed = result.status != "done"
    return MemberOutcome(
        member=plan.member,
        status=STATUS_FAILED if failed else STATUS_DONE,
        seconds=time.perf_counter() - started,
        error=result.message if failed else "",
        files=files,
        events=events,
        margins=margins,
        worker=worker,
        built_model=built,
        staged=staged,
    )


def run_members(
    scan: Scan,
    plans: tuple[MemberPlan, ...],
    members: str | None = None,
    disk_mark: str | None = None,
) -> tuple[MemberOutcome, ...]:
    """Run a chunk of members of one scan, one after another: one task on a backend.

    A chunk sends ``scan`` to the worker once for all its members (sending it
    with every member made the task overhead rival a small member's run). Each
    member is run by :func:`run_member`, which never raises, so a failing member
    is recorded in its outcome and the rest of the chunk goes on.

    ``disk_mark`` (Dask workers, which may run on other machines): the name of a
    folder the batch made, uniquely named, in ``members``; a worker that sees it
    shares the batch's disk and writes the member folders in place, any other
    sends them back as bytes.
    """
    if members is not None and disk_mark is not None:
        if not (Path(members) / disk_mark).is_dir():
            members = None
    return tuple(run_member(scan, plan, members) for plan in plans)


__all__ = [
    "STATUS_DONE",
    "STATUS_FAILED",
    "MemberOutcome",
    "compiled_model",
    "run_member",
    "run_members",
]
