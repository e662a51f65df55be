"""Where a results folder may go, and how it replaces an earlier one safely.

branchline never removes what it did not write. A folder counts as its own
when its run.json carries the marker ``"written_by": "branchline"`` and every
entry in it is a file that run listed in run.json (``files``) or a diagram
that ``branchline plot`` added. Anything else (a folder of someone else's
files, the current folder or one of its parents, a file) is refused with a
message before any work is done.

Writing happens in a hidden staging folder beside the target, which is moved
into place only when complete; the old results are moved aside first and
removed last, so a crash leaves either the old or the new folder whole. Two
runs into one folder at once are kept apart by an advisory lock (``flock``)
on a lock file beside the target: the second run is refused at once.
Staging folders left by a killed run carry a marker file and are removed by
the next run into the same target.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any

MARKER_KEY = "written_by"
MARKER_VALUE = "branchline"
# run.json lists the files of the run under this key.
FILES_KEY = "files"
# Diagrams `branchline plot` may add to a results folder later.
PLOT_FILES = ("diagram.png", "diagram.svg", "diagram.pdf")
# Marker file inside a staging folder: only folders with it are ever cleaned up.
STAGING_MARKER = ".branchline-staging"
# At most this many entries are named in a refusal message.
NAMED_ENTRIES = 5
# A run.json larger than this is not ours (ours are a few kilobytes to a few
# megabytes); reading it whole to find the marker would be wasteful.
MAX_RUN_JSON_BYTES = 64 * 1024 * 1024


class OutputFolderError(Exception):
    """An output folder branchline must not (or cannot) write: the message says why."""


def _hidden_prefix(folder: Path, kind: str) -> str:
    return f".{folder.name}.branchline-{kind}-"


def read_marker(folder: Path) -> dict[str, Any] | None:
    """run.json of ``folder`` if it carries branchline's marker, else None."""
    import json

    path = folder / "run.json"
    try:
        if not path.is_file() or path.stat().st_size > MAX_RUN_JSON_BYTES:
            return None
        info = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError, RecursionError):
        return None
    if isinstance(info, dict) and info.get(MARKER_KEY) == MARKER_VALUE:
        return info
    return None


def foreign_entries(folder: Path) -> list[str]:
    """Names in ``folder`` that branchline did not write (empty: the folder is ours)."""
    names = sorted(entry.name for entry in folder.iterdir())
    if not names:
        return []
    info = read_marker(folder)
    listed = info.get(FILES_KEY) if info else None
    if not isinstance(listed, list):
        return names
    own = {name for name in listed if isinstance(name, str)} | set(PLOT_FILES)
    return [name for name in names if name not in own]


def _short_list(names: list[str]) -> str:
    shown = ", ".join(repr(name[:60]) for name in names[:NAMED_ENTRIES])
    more = len(names) - NAMED_ENTRIES
    return shown + (f" and {more} more" if more > 0 else "")


def check_output_folder(folder: str | Path) -> Path:
    """Refuse an output folder that is not safe to (re)write; returns it as a Path.

    Raises
    ------
    OutputFolderError
        When ``folder`` is the current folder or one of its parents, is a file
        or a symbolic link, holds files branchline did not write, or lies where
        nothing can be written.
    """
    folder = Path(folder)
    resolved = folder.resolve()
    here = Path.cwd().resolve()
    if resolved == here or resolved in here.parents:
        raise OutputFolderError(
            f"{folder}: is the current folder or one of its parents; "
            "results need a folder of their own (e.g. runs/NAME)"
        )
    if folder.is_symlink():
        raise OutputFolderError(f"{folder}: is a symbolic link; name a real folder")
    if folder.exists():
        if not folder.is_dir():
            raise OutputFolderError(f"{folder}: exists and is not a folder")
        try:
            foreign = foreign_entries(folder)
        except OSError as err:
            raise OutputFolderError(f"{folder}: cannot be read ({err.strerror})") from None
        if foreign:
            raise OutputFolderError(
                f"{folder}: holds files branchline did not write ({_short_list(foreign)}); "
                "choose another folder, or move those files away yourself"
            )
        if not os.access(folder, os.W_OK | os.X_OK):
            raise OutputFolderError(
                f"{folder}: earlier results there cannot be replaced (permission denied)"
            )
    ancestor = folder.absolute().parent
    while not ancestor.exists():
        ancestor = ancestor.parent
    if not ancestor.is_dir():
        raise OutputFolderError(f"{folder}: {ancestor} is a file, not a folder")
    if not os.access(ancestor, os.W_OK | os.X_OK):
        raise OutputFolderError(f"{folder}: cannot write in {ancestor} (permission denied)")
    return folder


@contextlib.contextmanager
def reserve_output(folder: str | Path) -> Iterator[Path]:
    """Hold the output folder for one run; a second run into it is refused at once.

    Creates the parent folders. The lock (``fcntl.flock`` on a hidden lock file
    beside the folder) is released by the system even if the process is
    killed; the lock file is removed on a normal exit.
    """
    folder = check_output_folder(folder)
    parent = folder.absolute().parent
    created = [path for path in (parent, *parent.parents) if not path.exists()]
    try:
        parent.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise OutputFolderError(f"{folder}: cannot create its parent ({err.strerror})") from None
    lock_path = parent / f".{folder.name}.branchline-lock"
    try:
        handle = _acquire(lock_path, folder)
    except OutputFolderError:
        _remove_empty(created)
        raise
    try:
        yield folder
    finally:
        with contextlib.suppress(OSError):
            lock_path.unlink()
        os.close(handle)
        _remove_empty(created)


def _remove_empty(created: list[Path]) -> None:
    """Remove the folders :func:`reserve_output` created if nothing was written in them."""
    for path in created:  # innermost first
        with contextlib.suppress(OSError):
            path.rmdir()


def _acquire(lock_path: Path, folder: Path) -> int:
    """An open, locked descriptor of ``lock_path`` (retried if the file was replaced)."""
    try:
        import fcntl
    except ImportError:  # not POSIX: no advisory locks; staging still keeps folders whole
        return os.open(os.devnull, os.O_RDONLY)
    while True:
        try:
            handle = os.open(lock_path, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as err:
            raise OutputFolderError(f"{folder}: cannot write beside it ({err.strerror})") from None
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(handle)
            raise OutputFolderError(
                f"{folder}: another branchline run is writing there now; wait for it "
                "to finish or choose another folder"
            ) from None
        # The holder before us may have removed the file after we opened it:
        # then our lock is on a dead file; take the current one instead.
        try:
            same = os.path.samestat(os.fstat(handle), os.stat(lock_path))
        except OSError:
            same = False
        if same:
            return handle
        os.close(handle)


def remove_stale_staging(folder: Path) -> None:
    """Remove staging folders a killed run left beside ``folder`` (only marked ones)."""
    parent = folder.absolute().parent
    for kind in ("new", "old"):
        for entry in parent.glob(_hidden_prefix(folder, kind) + "*"):
            if entry.is_dir() and not entry.is_symlink() and (entry / STAGING_MARKER).exists():
                shutil.rmtree(entry, ignore_errors=True)


def new_staging(folder: Path) -> Path:
    """An empty, marked staging folder beside ``folder`` with the usual permissions."""
    parent = folder.absolute().parent
    staging = Path(tempfile.mkdtemp(prefix=_hidden_prefix(folder, "new"), dir=parent))
    # mkdtemp makes it private (0700); a results folder gets the umask's usual mode.
    umask = os.umask(0)
    os.umask(umask)
    staging.chmod(0o777 & ~umask)
    (staging / STAGING_MARKER).touch()
    return staging


def move_into_place(staging: Path, folder: Path) -> None:
    """Replace ``folder`` (ours, checked) by the complete ``staging`` folder.

    The old folder is renamed aside (and marked) before the new one moves in,
    and is removed only afterwards: a crash in between leaves one of them whole.
    """
    (staging / STAGING_MARKER).unlink()
    aside = None
    if folder.exists():
        aside = Path(tempfile.mkdtemp(prefix=_hidden_prefix(folder, "old"), dir=staging.parent))
        (aside / STAGING_MARKER).touch()
        folder.rename(aside / "results")
    try:
        staging.rename(folder)
    except OSError:
        if aside is not None:
            (aside / "results").rename(folder)
            shutil.rmtree(aside, ignore_errors=True)
        raise
    if aside is not None:
        shutil.rmtree(aside, ignore_errors=True)
