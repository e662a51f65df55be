"""The batch folder on disk: its plan, one folder per finished member, the tables.

Layout of ``DIR``:

- ``plan.json``: the scans and every member's values, written first; ``--resume``
  checks that a batch run again is the same batch;
- ``members/<number>/``: a member's own results folder plus ``member.json``
  (status, seconds, error, its events rows and margins). A member folder is
  written whole under a temporary name and renamed, so a folder that exists is
  a finished member: that is what ``--resume`` skips;
- the aggregated tables and the report (:mod:`branchline.batch.tables`,
  :mod:`branchline.batch.report`), rewritten at the end of every run.
"""

from __future__ import annotations

import json
import shutil
import tempfile
from pathlib import Path
from typing import Any

from branchline.batch.member import MemberOutcome
from branchline.batch.plan import MemberPlan

PLAN_FILE = "plan.json"
MEMBERS_FOLDER = "members"
MEMBER_RECORD = "member.json"
# Member folders are numbered with at least this many digits (sorted listings stay in order).
MEMBER_DIGITS = 4


class BatchFolderError(Exception):
    """A batch folder that cannot be used as asked (exists without --resume, another batch)."""


def plan_document(sources: list[str], plan: tuple[MemberPlan, ...]) -> dict[str, Any]:
    """plan.json's content: the scans, in order, and every member's values."""
    return {
        "scans": sources,
        "members": [{"member": m.member, "scan": m.scan, "values": m.values} for m in plan],
    }


def member_name(member: int, total: int) -> str:
    """The folder name of a member: its number, zero-padded."""
    return str(member).zfill(max(MEMBER_DIGITS, len(str(total))))


def _json(data: Any, path: Path) -> None:
    path.write_text(json.dumps(data, indent=1, allow_nan=False) + "\n", encoding="utf-8")


def prepare(folder: Path, document: dict[str, Any], resume: bool) -> set[int]:
    """Make ``folder`` ready for the batch; return the members already finished there.

    Raises
    ------
    BatchFolderError
        Without ``resume``, when ``folder`` exists and is not empty; with it,
        when it holds no batch or another batch (other scans or members).
    """
    plan_path = folder / PLAN_FILE
    if not resume:
        if folder.exists() and (not folder.is_dir() or any(folder.iterdir())):
            raise BatchFolderError(
                f"{folder} already exists and is not empty: continue its batch with --resume "
                "or choose another --out"
            )
        (folder / MEMBERS_FOLDER).mkdir(parents=True, exist_ok=True)
        _json(document, plan_path)
        return set()
    if not plan_path.is_file():
        raise BatchFolderError(f"{folder}: no batch to resume here (no {PLAN_FILE})")
    try:
        saved = json.loads(plan_path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as error:
        raise BatchFolderError(f"{plan_path}: cannot be read ({error})") from None
    if saved != json.loads(json.dumps(document)):
        raise BatchFolderError(
            f"{folder} holds another batch (its scans or their ensembles differ); "
            "resume with the same scan files, or choose another --out"
        )
    (folder / MEMBERS_FOLDER).mkdir(exist_ok=True)
    return {int(record["member"]) for record in read_member_records(folder)}


def save_member(
    folder: Path, outcome: MemberOutcome, plan: MemberPlan, source: str, total: int
) -> None:
    """Write one finished member's folder whole (staging folder, then a rename)."""
    members = folder / MEMBERS_FOLDER
    target = members / member_name(outcome.member, total)
    if outcome.staged:  # written in place by a worker on this disk
        staging = Path(outcome.staged)
    else:
        staging = Path(tempfile.mkdtemp(prefix=f".{target.name}-", dir=members))
    try:
        for name, content in outcome.files.items():
            (staging / name).write_bytes(content)
        record = {
            "member": outcome.member,
            "scan": source,
            "values": plan.values,
            "status": outcome.status,
            "seconds": outcome.seconds,
            "error": outcome.error,
            "worker": outcome.worker,
            "built_model": outcome.built_model,
            "events": list(outcome.events),
            "margins": list(outcome.margins),
        }
        _json(record, staging / MEMBER_RECORD)
        if target.exists():  # a member re-run after an unfinished rename
            shutil.rmtree(target)
        staging.rename(target)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise


def read_member_records(folder: Path) -> list[dict[str, Any]]:
    """Every finished member's record, in member order (staging leftovers ignored)."""
    records = []
    for path in (folder / MEMBERS_FOLDER).glob(f"*/{MEMBER_RECORD}"):
        if path.parent.name.startswith("."):
            continue
        try:
            records.append(json.loads(path.read_text(encoding="utf-8")))
        except (OSError, ValueError):
            continue  # unreadable: the member counts as not finished and runs again
    return sorted(records, key=lambda record: int(record["member"]))


def clear_staging(folder: Path) -> None:
    """Remove member folders left half-written by an interrupted run."""
    for path in (folder / MEMBERS_FOLDER).glob(".*"):
        shutil.rmtree(path, ignore_errors=True)


__all__ = [
    "BatchFolderError",
    "clear_staging",
    "member_name",
    "plan_document",
    "prepare",
    "read_member_records",
    "save_member",
]
