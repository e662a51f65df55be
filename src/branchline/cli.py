"""The command line: argument parsing, exit codes, progress display.

Nothing numerical happens here; every command calls the Python API.
Exit codes: 0 success, 2 invalid scan file (nothing written), 1 numerics
failed part-way (what was computed is written and the report says why). A
trace cut short by ``steps.max_points`` exits 0 with a warning on screen.
"""

from __future__ import annotations

import argparse
import math
import os
import re
import sys
from pathlib import Path

# Nothing numerical is imported at module level: `--help` and `--version` load
# neither numpy nor matplotlib, and a run sets the thread policy below first.

EXIT_OK = 0
EXIT_NUMERICS = 1
EXIT_INVALID = 2
# Stopped by a signal: 128 + its number, as shells report (130 SIGINT, 143 SIGTERM).
EXIT_SIGNAL_BASE = 128

PYTHON_MODEL_NOTICE = (
    "note: this scan's [model.python] section imports {source}; importing a module "
    "runs its code, so only run scan files you trust."
)


class _Progress:
    """One self-overwriting status line on a terminal; silent otherwise."""

    def __init__(self, enabled: bool) -> None:
        self.enabled = enabled
        self.shown = False

    def __call__(self, trace: str, points: int) -> None:
        if self.enabled:
            sys.stderr.write(f"\r  tracing {trace}: {points} points   ")
            sys.stderr.flush()
            self.shown = True

    def close(self) -> None:
        if self.shown:
            sys.stderr.write("\r" + " " * 60 + "\r")
            sys.stderr.flush()


def _error(message: str) -> None:
    print(f"branchline: error: {message}", file=sys.stderr)


def _load(path: str):
    from branchline.scan.loader import load_scan

    return load_scan(path)


def _python_notice(scan) -> None:
    """Say plainly that a [model.python] scan imports (and so runs) a module."""
    if hasattr(scan.model, "rhs"):
        print(PYTHON_MODEL_NOTICE.format(source=scan.model.rhs.split(":")[0]), file=sys.stderr)


def _command_run(args: argparse.Namespace) -> int:
    from branchline.errors import ScanError
    from branchline.results.output_folder import OutputFolderError, reserve_output

    try:
        scan = _load(args.scan)
    except ScanError as err:
        _error(str(err))
        return EXIT_INVALID
    if scan.ensemble is not None:
        _error(f"{args.scan} has an [ensemble] section: run it with `branchline batch {args.scan}`")
        return EXIT_INVALID
    out = Path(args.out) if args.out else Path("runs") / Path(args.scan).stem
    try:
        with reserve_output(out):
            return _run_and_write(scan, out, args.quiet, confirm=not args.no_confirm)
    except OutputFolderError as err:
        _error(f"--out {err}")
        return EXIT_INVALID


def _run_and_write(scan, out: Path, quiet: bool, confirm: bool = True) -> int:
    """Run a loaded scan and write its results into ``out`` (already reserved)."""
    from branchline.errors import ScanError
    from branchline.present.confirmations import confirmation_summary
    from branchline.present.inspection import plural
    from branchline.present.report import CAUTION, summary_table
    from branchline.results.writers import write_results
    from branchline.runner import run_scan
    from branchline.stopping import StopRequest, catching_signals

    if not quiet:
        _python_notice(scan)
    progress = _Progress(enabled=not quiet and sys.stderr.isatty())
    stop = StopRequest(time_limit=scan.time_limit)
    with catching_signals(stop):
        try:
            result = run_scan(scan, progress=progress, confirm=confirm, stop=stop)
        except ScanError as err:
            progress.close()
            _error(str(err))
            return EXIT_INVALID
        progress.close()
        try:
            written = write_results(result, out, reserved=True)
        except OSError as err:
            _error(f"could not write the results to {out}: {err}")
            return EXIT_NUMERICS
    if result.status == "interrupted":
        points = sum(len(b) for b in result.branches)
        _error(
            f"{result.message}; the {points} points computed were written to {written}/ "
            "(run.json says interrupted)"
        )
        return EXIT_SIGNAL_BASE + (stop.signal_number or 2)
    if stop.requested and not stop.by_time_limit:
        # The signal came after the computation, while writing: the write was let
        # finish (the results are whole; the old ones were replaced only then).
        _error(
            f"{stop.reason} while the results were being written; the computation was "
            f"complete and the results were written whole to {written}/"
        )
        return EXIT_SIGNAL_BASE + (stop.signal_number or 2)
    if not quiet:
        for warning in result.warnings:
            print(f"warning: {warning}", file=sys.stderr)
        points = sum(len(b) for b in result.branches)
        seconds = result.timings.get("total_seconds", float("nan"))
        print(
            f"{scan.title}: {plural(len(result.branches), 'trace')}, {plural(points, 'point')}, "
            f"{plural(len(result.events), 'stability change')} in {seconds:.2f} s"
        )
        print(summary_table(result.event_records()))
        checked = confirmation_summary(result.confirmations, result.confirmation_note)
        if checked:
            print(checked)
        print(f"results written to {written}/")
        print(CAUTION)
    for line in cut_short(result.branches):
        print(f"warning: {line}", file=sys.stderr)
    if result.status != "done":
        _error(f"the computation stopped early: {result.message} (see {written / 'report.md'})")
        return EXIT_NUMERICS
    return EXIT_OK


def cut_short(branches) -> list[str]:
    """One line per trace stopped by ``steps.max_points`` before its interval edge.

    Exit-code policy: such a run still exits 0 (the cap is the user's own
    setting and every point is written), but the cut is always said on screen,
    even with ``--quiet``, as in report.md and run.json.
    """
    from branchline.results.records import STATUS_MAX_POINTS

    return [
        f"trace {b.name} was cut short by max_points before its interval edge ({b.message}); "
        "raise [steps] max_points to follow it further"
        for b in branches
        if b.status == STATUS_MAX_POINTS
    ]


# A number on the command line: ASCII digits only (float() also takes other scripts' digits).
NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?", re.ASCII)
# Text from the command line is echoed at most this long in messages.
ECHO_LIMIT = 60


def _parse_pairs(pairs: list[str], known: tuple[str, ...], option: str, source: str):
    """NAME=VALUE pairs as {name: float}; ScanError naming the option on bad input."""
    from branchline.errors import ScanError

    overrides = {}
    for pair in pairs:
        name, sep, value = pair.partition("=")
        name, value = name.strip(), value.strip()
        shown = f"{option} {pair[:ECHO_LIMIT]}"
        if not sep or name not in known:
            listed = ", ".join(known)
            raise ScanError(
                source, shown, f"expected NAME=VALUE with NAME one of {listed[:300]}"
            )
        number = float(value) if NUMBER.fullmatch(value) else float("nan")
        if not math.isfinite(number):
            raise ScanError(source, shown, f"{value[:ECHO_LIMIT]!r} is not a finite number")
        overrides[name] = number
    return overrides


def _command_inspect(args: argparse.Namespace) -> int:
    from branchline.errors import ScanError
    from branchline.model.build import build_model
    from branchline.present.inspection import describe_equilibrium

    try:
        scan = _load(args.scan)
        overrides = _parse_pairs(args.set or [], tuple(scan.model.parameters), "--set", scan.source)
        _python_notice(scan)
        start = None
        if args.start:
            states = build_model(scan.model, source=scan.source).states
            start = _parse_pairs(args.start, tuple(states), "--start", scan.source)
        text, converged = describe_equilibrium(scan, overrides, trace=args.trace, start=start)
    except ScanError as err:
        _error(str(err))
        return EXIT_INVALID
    print(text)
    return EXIT_OK if converged else EXIT_NUMERICS


def _command_portrait(args: argparse.Namespace) -> int:
    from branchline.errors import ScanError
    from branchline.portrait.build import compute_portrait
    from branchline.present.portrait import portrait_lines, write_portrait

    try:
        scan = _load(args.scan)
        settings = _parse_pairs(args.set or [], tuple(scan.model.parameters), "--set", scan.source)
        if not args.quiet:
            _python_notice(scan)
        portrait = compute_portrait(
            scan,
            settings,
            plane=tuple(args.plane) if args.plane else None,
            eigenvector_plane=args.eigenvector_plane,
            focus=args.at - 1 if args.at else None,
        )
    except ScanError as err:
        _error(str(err))
        return EXIT_INVALID
    out = Path(args.out) if args.out else Path("runs") / f"{Path(args.scan).stem}-portrait"
    try:
        write_portrait(portrait, out)
    except OSError as err:
        _error(f"could not write the portrait to {out}: {err}")
        return EXIT_NUMERICS
    if not args.quiet:
        print("\n".join(portrait_lines(portrait)))
        print(f"portrait written to {out}/ (portrait.png, portrait.svg, portrait.json)")
    if not portrait.equilibria:
        _error("no equilibrium was found at these parameter values")
        return EXIT_NUMERICS
    return EXIT_OK


def _read_saved(folder: str):
    """The saved run in ``folder``, or None after printing why it cannot be read."""
    from branchline.results.writers import ResultsFolderError, read_results

    try:
        saved = read_results(folder)
    except ResultsFolderError as err:
        _error(str(err))
        return None
    for sentence in saved.skipped:
        print(f"branchline: note: {folder}: {sentence}", file=sys.stderr)
    return saved


def _damaged(folder: str, error: Exception) -> int:
    """A saved folder whose content the readers could not use: say so, exit 2."""
    text = str(error)[:200]
    _error(f"{folder}: the results there cannot be used ({type(error).__name__}: {text})")
    return EXIT_INVALID


def _command_plot(args: argparse.Namespace) -> int:
    from branchline.present.plotting import bifurcation_figure, save_figure

    saved = _read_saved(args.folder)
    if saved is None:
        return EXIT_INVALID
    target = Path(args.output) if args.output else saved.folder / f"diagram.{args.format}"
    if not target.parent.is_dir():
        _error(f"--output {target}: the folder {target.parent} does not exist")
        return EXIT_INVALID
    try:
        figure = bifurcation_figure(
            saved.points, saved.events, saved.info, x=args.x, y=args.y, cycles=saved.cycles
        )
    except ValueError as err:
        _error(str(err))
        return EXIT_INVALID
    except Exception as err:  # a damaged folder must not end in a traceback
        return _damaged(args.folder, err)
    try:
        save_figure(figure, target)
    except OSError as err:
        _error(f"--output {target}: cannot write it ({err.strerror or err})")
        return EXIT_INVALID
    print(f"diagram written to {target}")
    return _redraw_stability_maps(saved, target.parent, args.format)


def _redraw_stability_maps(saved, folder: Path, suffix: str) -> int:
    """The run's stability maps drawn again beside the diagram (none without boundaries)."""
    from branchline.results.writers import ResultsFolderError, redraw_stability_maps

    try:
        written = redraw_stability_maps(saved, folder, suffix)
    except ResultsFolderError as err:
        _error(str(err))
        return EXIT_INVALID
    except OSError as err:
        _error(f"{folder}: cannot write the stability map ({err.strerror or err})")
        return EXIT_INVALID
    except Exception as err:  # a damaged folder must not end in a traceback
        return _damaged(str(saved.folder), err)
    for path in written:
        print(f"stability map written to {path}")
    return EXIT_OK


def _command_report(args: argparse.Namespace) -> int:
    from branchline.present.report import render_report

    saved = _read_saved(args.folder)
    if saved is None:
        return EXIT_INVALID
    try:
        text = render_report(saved.points, saved.events, saved.info, cycles=saved.cycles)
    except Exception as err:  # a damaged folder must not end in a traceback
        return _damaged(args.folder, err)
    print(text)
    return EXIT_OK


def _command_batch(args: argparse.Namespace) -> int:
    from branchline.batch.command import command_batch

    return command_batch(args)


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``branchline`` command and its subcommands."""
    parser = argparse.ArgumentParser(
        prog="branchline",
        description="Follow equilibria of an ODE model through a parameter and report "
        "where their stability changes.",
    )
    from branchline import __version__

    parser.add_argument("--version", action="version", version=f"branchline {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)

    run = sub.add_parser("run", help="run a scan file and write its results folder")
    run.add_argument("scan", help="the scan file (TOML)")
    run.add_argument("--out", help="results folder (default runs/<scan file stem>/)")
    run.add_argument("--quiet", action="store_true", help="no progress and no summary")
    run.add_argument(
        "--no-confirm",
        action="store_true",
        help="skip the confirmation of each stability change by simulation",
    )
    run.set_defaults(handler=_command_run)

    inspect = sub.add_parser("inspect", help="solve for one equilibrium and describe it")
    inspect.add_argument("scan")
    inspect.add_argument(
        "--set", action="append", metavar="NAME=VALUE", help="override a parameter (repeatable)"
    )
    inspect.add_argument(
        "--trace", metavar="NAME", help="use this trace's settings and start guess (default: first)"
    )
    inspect.add_argument(
        "--start",
        action="append",
        metavar="STATE=VALUE",
        help="replace the start guess of a state (repeatable)",
    )
    inspect.set_defaults(handler=_command_inspect)

    portrait = sub.add_parser("portrait", help="draw the phase portrait at given parameter values")
    portrait.add_argument("scan")
    portrait.add_argument(
        "--set", action="append", metavar="NAME=VALUE", help="set a parameter (repeatable)"
    )
    portrait.add_argument(
        "--plane", nargs=2, metavar=("X", "Y"), help="the two states spanning the plane"
    )
    portrait.add_argument(
        "--eigenvector-plane",
        action="store_true",
        help="draw in the plane of the two leading eigenvectors instead",
    )
    portrait.add_argument(
        "--at", type=int, metavar="K", help="equilibrium number for the linearization panel"
    )
    portrait.add_argument("--out", help="folder (default runs/<scan file stem>-portrait/)")
    portrait.add_argument("--quiet", action="store_true", help="print nothing but errors")
    portrait.set_defaults(handler=_command_portrait)

    plot = sub.add_parser(
        "plot", help="redraw the diagram (and any stability map) of a results folder"
    )
    plot.add_argument("folder")
    plot.add_argument("--x", help="horizontal axis: a parameter or state")
    plot.add_argument("--y", help="vertical axis: a state, parameter, observable or norm")
    plot.add_argument("--format", choices=("png", "svg", "pdf"), default="png")
    plot.add_argument("--output", help="file to write instead of DIR/diagram.<format>")
    plot.set_defaults(handler=_command_plot)

    report = sub.add_parser("report", help="print the stability-change report of a results folder")
    report.add_argument("folder")
    report.set_defaults(handler=_command_report)

    batch = sub.add_parser(
        "batch", help="run many scans and their ensembles, locally or on a Dask cluster"
    )
    batch.add_argument("scans", nargs="+", help="scan files; each [ensemble] is expanded")
    batch.add_argument("--out", help="batch folder (default runs/<first scan stem>-batch/)")
    batch.add_argument("--jobs", type=int, help="local worker processes (default: the cores)")
    batch.add_argument("--cluster", metavar="ADDRESS", help="run on the Dask scheduler there")
    batch.add_argument("--resume", action="store_true", help="continue the batch in --out")
    batch.add_argument("--quiet", action="store_true", help="no progress and no summary")
    batch.set_defaults(handler=_command_batch)
    return parser


# The variables through which the common BLAS/LAPACK builds (OpenBLAS, MKL,
# BLIS, Apple Accelerate, OpenMP) take their thread count.
BLAS_THREAD_VARIABLES = (
    "OPENBLAS_NUM_THREADS",
    "OMP_NUM_THREADS",
    "MKL_NUM_THREADS",
    "BLIS_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
)


def single_threaded_blas(environment: dict | None = None) -> bool:
    """One BLAS thread, unless the user chose a thread count; True if it was set.

    branchline's dense linear algebra works on small matrices (a few to a few
    hundred states) many times over; thread start-up and contention cost more
    than they save there (measured on a shared 2-core machine: one 100 x 100
    eigenvalue call took 55-198 ms with default threading, 2.4-6.7 ms with one
    thread), and batches run one process per core. It must run before numpy is
    imported: the libraries read the variables once, when they load. If any of
    :data:`BLAS_THREAD_VARIABLES` is set, nothing is changed.
    """
    environment = os.environ if environment is None else environment
    if any(name in environment for name in BLAS_THREAD_VARIABLES):
        return False
    for name in BLAS_THREAD_VARIABLES:
        environment[name] = "1"
    return True


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``branchline`` console command."""
    single_threaded_blas()
    # Files only, never a window (matplotlib reads this when a command imports it).
    os.environ["MPLBACKEND"] = "Agg"
    args = build_parser().parse_args(argv)
    try:
        return args.handler(args)
    except KeyboardInterrupt:
        # Ctrl-C outside a run's own handling (loading, a second Ctrl-C): stop, no traceback.
        print("\nbranchline: interrupted; nothing more was written", file=sys.stderr)
        return EXIT_SIGNAL_BASE + 2
    except BrokenPipeError:
        # The reader (e.g. `| head`) closed the pipe; that is not an error of ours.
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK
