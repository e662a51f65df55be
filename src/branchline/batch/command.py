"""``branchline batch``: the command line's side of a batch (progress, summary, exit code).

Exit codes as everywhere: 2 for an invalid scan file, an unusable batch folder
or backend (nothing run); 1 when members failed or the batch was interrupted
(everything finished is saved; ``--resume`` continues); 0 otherwise.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from branchline.cli import EXIT_INVALID, EXIT_NUMERICS, EXIT_OK, _error, _python_notice

# The progress line is redrawn at most this often (seconds): a terminal
# flooded with a line per millisecond member slows the batch down.
REDRAW_SECONDS = 0.2


def _duration(seconds: float) -> str:
    seconds = round(seconds)
    hours, rest = divmod(seconds, 3600)
    return f"{hours}:{rest // 60:02d}:{rest % 60:02d}" if hours else f"{rest // 60}:{rest % 60:02d}"


class BatchProgressLine:
    """One self-overwriting line with members done, failures and an ETA; silent off a terminal."""

    def __init__(self, enabled: bool) -> None:
        self.enabled = enabled
        self.shown = False
        self.drawn_at = -float("inf")

    def __call__(self, finished: int, total: int, failed: int, elapsed: float) -> None:
        now = time.monotonic()
        if not self.enabled or (now - self.drawn_at < REDRAW_SECONDS and finished < total):
            return
        self.drawn_at = now
        left = elapsed / finished * (total - finished) if finished else float("nan")
        eta = f", about {_duration(left)} left" if finished < total else ""
        sys.stderr.write(f"\r  members {finished}/{total}, {failed} failed{eta}    ")
        sys.stderr.flush()
        self.shown = True

    def close(self) -> None:
        if self.shown:
            sys.stderr.write("\r" + " " * 70 + "\r")
            sys.stderr.flush()


def command_batch(args: argparse.Namespace) -> int:
    """Run ``branchline batch`` with parsed ``args``; return the exit code."""
    from branchline.batch.backends import BackendError
    from branchline.batch.execute import run_batch
    from branchline.batch.folder import BatchFolderError
    from branchline.errors import ScanError
    from branchline.present.report import CAUTION
    from branchline.scan.loader import load_scan

    out = Path(args.out) if args.out else Path("runs") / f"{Path(args.scans[0]).stem}-batch"
    try:
        scans = [load_scan(path) for path in args.scans]
    except ScanError as err:
        _error(str(err))
        return EXIT_INVALID
    if not args.quiet:
        for scan in scans:
            _python_notice(scan)
    progress = BatchProgressLine(enabled=not args.quiet and sys.stderr.isatty())
    try:
        result = run_batch(
            scans,
            out,
            jobs=args.jobs,
            cluster=args.cluster,
            resume=args.resume,
            progress=progress,
        )
    except (ScanError, BatchFolderError, BackendError) as err:
        progress.close()
        _error(str(err))
        return EXIT_INVALID
    progress.close()
    info = result.info
    if not args.quiet:
        print(
            f"{info['finished']} of {result.total} members finished "
            f"({result.failed} failed) on {info['backend']} in {info['seconds_this_run']:.2f} s"
        )
        print(f"results written to {out}/ (members.csv, events.csv, report.md)")
        print(CAUTION)
    if not result.complete:
        _error(result.message)
        return EXIT_NUMERICS
    if result.failed:
        _error(f"{result.failed} members failed; members.csv and report.md say why")
        return EXIT_NUMERICS
    return EXIT_OK


__all__ = ["command_batch"]
