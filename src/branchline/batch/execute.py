"""Run a batch: plan the members, run them on a backend, save, aggregate, report.

One loop for every backend (:mod:`branchline.batch.backends`): members go out
in chunks (one task of several members of one scan, smaller near the end), at
most a few chunks per worker slot are in flight; each member of a returned chunk is saved at once
(so an interruption loses only the members still running), a failed member is
recorded with its error, and the aggregated tables and report are written at
the end of every run, complete or interrupted.
"""

from __future__ import annotations

import json
import shutil
import time
import uuid
from collections.abc import Callable, Sequence
from concurrent.futures import FIRST_COMPLETED, Future, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from branchline import __version__
from branchline.batch import folder as disk
from branchline.batch.backends import InlineExecutor, open_backend
from branchline.batch.member import STAGING_PREFIX, STATUS_FAILED, MemberOutcome, run_members
from branchline.batch.plan import MemberPlan, ensemble_parameters, plan_batch
from branchline.batch.tables import events_frame, margins_frame, members_frame, write_table
from branchline.scan.loader import Scan, load_scan, scan_from_dict

# Tasks (chunks of members) in flight per worker slot: enough to keep every
# worker busy while the batch saves a finished chunk, few enough that an
# interruption loses little.
IN_FLIGHT_PER_SLOT = 2
# Chunks of members: about this many tasks per worker slot over the members
# still to run, each at most MAX_CHUNK members. One task per member spent as
# much time sending the scan and the task as a small member takes to run
# (Dask: 1.1x serial on 2 workers); chunks share that cost among their members.
TASKS_PER_SLOT = 6
MAX_CHUNK = 16
# Lost members named in the batch's message; the rest are counted.
LOST_SHOWN = 10

# progress(finished, to_run, failed, elapsed seconds): after every member of this run
# (members of a chunk report together, when the chunk returns).
BatchProgress = Callable[[int, int, int, float], None]


@dataclass(frozen=True)
class BatchResult:
    """A batch's aggregated tables and how the run went.

    ``complete`` is False when the run was interrupted (Ctrl-C, a lost worker,
    or ``limit``) before every member finished; ``message`` then says how to
    continue (``--resume``).
    """

    folder: Path
    members: pd.DataFrame
    events: pd.DataFrame
    margins: pd.DataFrame
    total: int  # members in the batch
    complete: bool
    message: str
    info: dict[str, Any]

    @property
    def failed(self) -> int:
        """Finished members whose status is failed."""
        return int((self.members["status"] == STATUS_FAILED).sum())


def _load(scan: str | Path | dict | Scan) -> Scan:
    if isinstance(scan, Scan):
        return scan
    if isinstance(scan, dict):
        return scan_from_dict(scan)
    return load_scan(scan)


def chunk_size(remaining: int, slots: int, inline: bool) -> int:
    """Members in the next task: about TASKS_PER_SLOT tasks per slot over what
    remains, at most MAX_CHUNK, so chunks shrink to single members near the end
    and the workers finish together. One member per task in this process
    (nothing to send; progress and Ctrl-C stay per member)."""
    if inline:
        return 1
    return max(1, min(MAX_CHUNK, remaining // (TASKS_PER_SLOT * slots)))


def _next_chunk(queue: list[MemberPlan], size: int) -> tuple[MemberPlan, ...]:
    """Pop up to ``size`` members of one scan off ``queue`` (its end is next)."""
    chunk = [queue.pop()]
    while queue and len(chunk) < size and queue[-1].scan == chunk[0].scan:
        chunk.append(queue.pop())
    return tuple(chunk)


def _run_members(
    todo: list[MemberPlan],
    scans: list[Scan],
    save: Callable[[MemberOutcome, MemberPlan], None],
    backend,
    progress: BatchProgress | None,
    members: Path | None = None,
) -> str:
    """Run ``todo`` on ``backend`` in chunks, saving each member as its chunk returns;
    "" or why it stopped early.

    With ``members`` (a backend on this disk) workers write each member's folder
    there in place. A chunk whose task was lost on the backend (its worker
    killed once too often, say) saves none of its members: they stay
    unfinished, are named in the reason, and ``--resume`` runs them again.
    """
    started = time.perf_counter()
    pending: dict[Future, tuple[MemberPlan, ...]] = {}
    queue = list(reversed(todo))
    finished = failed = 0
    lost: list[str] = []
    where = str(members) if members is not None else None
    mark = None if where is None or backend.shared_disk else _disk_mark(members)
    inline = isinstance(backend.executor, InlineExecutor)
    try:
        while queue or pending:
            while queue and len(pending) < IN_FLIGHT_PER_SLOT * backend.slots:
                chunk = _next_chunk(queue, chunk_size(len(queue), backend.slots, inline))
                task = backend.executor.submit(
                    run_members, scans[chunk[0].scan], chunk, where, mark
                )
                pending[task] = chunk
            done, _ = wait(pending, return_when=FIRST_COMPLETED)
            for future in sorted(done, key=lambda f: pending[f][0].member):
                chunk = pending.pop(future)
                try:
                    outcomes = future.result()
                except BrokenProcessPool:
                    raise
                except Exception as error:  # the task never ran to its end on the worker
                    why = f"({type(error).__name__}: {error})"
                    lost += [f"{plan.member} {why}" for plan in chunk]
                    continue
                for outcome, plan in zip(outcomes, chunk, strict=True):
                    save(outcome, plan)
                    finished += 1
                    failed += outcome.status == STATUS_FAILED
                    if progress:
                        progress(finished, len(todo), failed, time.perf_counter() - started)
    except KeyboardInterrupt:
        reason = "interrupted"
    except BrokenProcessPool:
        reason = "a worker process died"
    else:
        return _lost_members(lost)
    finally:
        if mark:
            shutil.rmtree(members / mark, ignore_errors=True)
    for future in pending:
        future.cancel()
    return "; ".join([reason, _lost_members(lost)]) if lost else reason


def _disk_mark(members: Path) -> str:
    """Make a uniquely named hidden folder in ``members`` and return its name: a
    worker that sees it shares this disk (a Dask worker on this machine or on a
    shared file system) and writes member folders in place instead of sending
    them back as bytes, which costs this process the writing."""
    mark = f"{STAGING_PREFIX}disk-{uuid.uuid4().hex}"
    (members / mark).mkdir()
    return mark


def _lost_members(lost: list[str]) -> str:
    """Why members are missing after their tasks failed on the backend ("" if none did)."""
    if not lost:
        return ""
    shown = ", ".join(lost[:LOST_SHOWN]) + (", ..." if len(lost) > LOST_SHOWN else "")
    return f"{len(lost)} member(s) lost on the backend, not saved: {shown}"


def run_batch(
    scans: Sequence[str | Path | dict | Scan],
    out: str | Path,
    *,
    jobs: int | None = None,
    cluster: str | None = None,
    resume: bool = False,
    progress: BatchProgress | None = None,
    limit: int | None = None,
) -> BatchResult:
    """Run every member of the scans' ensembles and write the batch folder ``out``.

    Parameters
    ----------
    scans : sequence of paths, dicts or Scans
        A scan without ``[ensemble]`` is one member.
    out : path
        The batch folder (must be new or empty unless ``resume``).
    jobs : int, optional
        Local worker processes (default: the number of cores; 1 runs the
        members in this process). Ignored with ``cluster``.
    cluster : str, optional
        Address of a Dask scheduler (``tcp://host:8786``): run there instead.
    resume : bool
        Continue the batch in ``out``, skipping its finished members.
    progress : callable, optional
        ``progress(finished, to_run, failed, elapsed_seconds)`` after each member.
    limit : int, optional
        Run at most this many unfinished members now (the rest with ``resume``).

    Returns
    -------
    BatchResult
        The aggregated tables as DataFrames. Ctrl-C during the run stops it;
        the members finished so far are kept and tabled, and ``complete`` is False.

    Raises
    ------
    ScanError
        An invalid scan (nothing is written).
    BatchFolderError, BackendError
        ``out`` cannot be used as asked, or the backend cannot be opened.
    """
    loaded = [_load(scan) for scan in scans]
    plan = plan_batch(loaded)
    folder = Path(out)
    sources = [scan.source for scan in loaded]

    def save(outcome: MemberOutcome, member: MemberPlan) -> None:
        disk.save_member(folder, outcome, member, sources[member.scan], len(plan))

    started = time.perf_counter()
    with open_backend(jobs, cluster) as backend:  # first: a backend error writes nothing
        finished = disk.prepare(folder, disk.plan_document(sources, plan), resume)
        disk.clear_staging(folder)
        todo = [member for member in plan if member.member not in finished]
        stopped = _run_members(
            todo[:limit], loaded, save, backend, progress, folder / disk.MEMBERS_FOLDER
        )
        where = backend.description
    # members of chunks lost or cut short may have left staging folders behind
    disk.clear_staging(folder)
    return _conclude(folder, loaded, plan, stopped, where, time.perf_counter() - started)


def _conclude(
    folder: Path, scans: list[Scan], plan, stopped: str, where: str, seconds: float
) -> BatchResult:
    records = disk.read_member_records(folder)
    parameters = ensemble_parameters(scans)
    members = members_frame(records, parameters)
    events = events_frame(records, parameters)
    margins = margins_frame(records)
    complete = len(records) == len(plan)
    message = ""
    if not complete:
        why = stopped or "stopped at the member limit"
        message = (
            f"{why}: {len(records)} of {len(plan)} members finished; "
            "run the same command with --resume to continue"
        )
    builds: dict[str, int] = {}
    for record in records:
        if record.get("built_model"):
            builds[record["worker"]] = builds.get(record["worker"], 0) + 1
    info = {
        "branchline_version": __version__,
        "scans": [scan.source for scan in scans],
        "ensemble_parameters": parameters,
        "members": len(plan),
        "finished": len(records),
        "failed": int((members["status"] == STATUS_FAILED).sum()),
        "complete": complete,
        "message": message,
        "backend": where,
        "seconds_this_run": seconds,
        "model_builds_by_worker": builds,
    }
    written = []
    for frame, name in ((members, "members"), (events, "events"), (margins, "margins")):
        written += write_table(frame, folder, name)
    info["tables"] = written
    from branchline.batch.report import write_report

    info["report"] = write_report(folder, scans, plan, members, events, margins)
    (folder / "batch.json").write_text(json.dumps(info, indent=2) + "\n", encoding="utf-8")
    return BatchResult(folder, members, events, margins, len(plan), complete, message, info)


def read_batch(out: str | Path) -> BatchResult:
    """A batch folder's aggregated tables, read back from its member records.

    Raises
    ------
    BatchFolderError
        If ``out`` holds no batch (no plan.json).
    """
    folder = Path(out)
    try:
        plan = json.loads((folder / disk.PLAN_FILE).read_text(encoding="utf-8"))
        info = json.loads((folder / "batch.json").read_text(encoding="utf-8"))
    except (OSError, ValueError) as error:
        raise disk.BatchFolderError(f"{folder}: not a batch folder ({error})") from None
    records = disk.read_member_records(folder)
    parameters = list(info.get("ensemble_parameters", []))
    total = len(plan["members"])
    return BatchResult(
        folder=folder,
        members=members_frame(records, parameters),
        events=events_frame(records, parameters),
        margins=margins_frame(records),
        total=total,
        complete=len(records) == total,
        message=str(info.get("message", "")),
        info=info,
    )


__all__ = ["BatchProgress", "BatchResult", "read_batch", "run_batch"]
