"""Run a scan: model -> traces -> events -> branch switching -> RunResult.

No I/O here: the command line and notebooks call :func:`run_scan` and then
write or inspect the record it returns.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np

from branchline.errors import ScanError
from branchline.model.build import Model, build_model, check_jacobian, resolve_callable
from branchline.problems.crowding import resolve_crowded_steps
from branchline.problems.equilibrium_branch import locate_events, trace_branch
from branchline.problems.start_guess import start_distance
from branchline.problems.switching import trace_switched
from branchline.problems.window_search import run_search, search_box
from branchline.results.records import Branch, Event, RunResult
from branchline.scan.loader import Scan, TraceSpec
from branchline.scan.search_section import SEARCH_START
from branchline.vocabulary import EventKind, Status

# Branch points closer than this (relative, in state and parameter) to one
# already switched at are the same point met again from a child branch.
SAME_POINT_TOLERANCE = 1e-6
# Child branches may meet further branch points; stop switching this deep.
MAX_SWITCH_DEPTH = 3
# At most this many branches are started at branch points of one trace: a cluster of
# branch points (identical coupled cells) would otherwise start dozens of costly traces.
MAX_SWITCHED_BRANCHES = 8
# A branch point this close to an interval edge (relative to the interval's
# width) has its crossing branches outside the window: they are not followed.
EDGE_TOLERANCE = 1e-9

Progress = Callable[[str, int], None]


@dataclass(frozen=True)
class _TraceOutcome:
    branches: list[Branch]
    events: list[Event]
    warnings: list[str] = field(default_factory=list)


def start_vector(model: Model, spec: TraceSpec, parameters: np.ndarray, source: str) -> np.ndarray:
    """The trace's start guess as a state vector, shape (n,)."""
    if isinstance(spec.start, str):
        key = f"trace[{spec.name}].start"
        function = resolve_callable(spec.start, source, key)
        try:
            values = np.asarray(function(dict(zip(model.parameters, parameters))), dtype=float)
        except Exception as error:  # the user's own code: report it, never a traceback
            raise ScanError(
                source, key, f"{spec.start} raised {type(error).__name__}: {error}"
            ) from None
        if values.shape != (model.size,):
            raise ScanError(
                source,
                f"trace[{spec.name}].start",
                f"{spec.start} returned shape {values.shape}, expected ({model.size},)",
            )
        return values
    return np.array([spec.start[name] for name in model.states], dtype=float)


def _seen(event: Event, visited: list[Event]) -> bool:
    for other in visited:
        scale = 1.0 + abs(other.value) + float(np.linalg.norm(other.state))
        gap = abs(event.value - other.value) + float(np.linalg.norm(event.state - other.state))
        if gap <= SAME_POINT_TOLERANCE * scale:
            return True
    return False


def _on_edge(event: Event, interval: tuple[float, float]) -> bool:
    """True for a branch point on the interval's edge: nothing to follow inside."""
    width = interval[1] - interval[0]
    return min(abs(event.value - edge) for edge in interval) <= EDGE_TOLERANCE * width


def _mark_edge_events(events, interval: tuple[float, float]) -> list[Event]:
    """Say so in the note of every branch point on the interval's edge."""
    marked = []
    for event in events:
        if event.kind == EventKind.BRANCH_POINT and _on_edge(event, interval):
            words = "on the edge of the parameter interval; the crossing branches were not followed"
            event = replace(event, note=f"{event.note}; {words}" if event.note else words)
        marked.append(event)
    return marked


def _follow(
    model: Model,
    spec: TraceSpec,
    parameters: np.ndarray,
    x0: np.ndarray,
    progress: Progress | None,
) -> _TraceOutcome:
    callback = (lambda count: progress(spec.name, count)) if progress else None
    root = trace_branch(
        model,
        spec.name,
        spec.vary,
        parameters,
        x0,
        spec.interval,
        spec.direction,
        spec.steps,
        progress=callback,
        limits=spec.limits,
    )
    root = resolve_crowded_steps(model, root)
    branches, events = [root], _mark_edge_events(locate_events(model, root), spec.interval)
    if not spec.switch_branches:
        return _TraceOutcome(branches, events)
    visited: list[Event] = []
    started: dict[str, int] = {}  # parent name -> children started so far
    queue = [(root, e, 1) for e in events if e.kind == EventKind.BRANCH_POINT]
    skipped = 0
    while queue:
        parent, event, depth = queue.pop(0)
        if _seen(event, visited) or depth > MAX_SWITCH_DEPTH or _on_edge(event, spec.interval):
            continue
        if len(branches) > MAX_SWITCHED_BRANCHES:
            skipped += 1
            continue
        visited.append(event)
        child_progress = (lambda count, n=parent.name: progress(n, count)) if progress else None
        children = trace_switched(
            model,
            parent,
            event,
            spec.steps,
            spec.interval,
            progress=child_progress,
            first_number=started.get(parent.name, 0) + 1,
            limits=spec.limits,
        )
        started[parent.name] = started.get(parent.name, 0) + len(children)
        for child in children:
            child = resolve_crowded_steps(model, child)
            branches.append(child)
            found = _mark_edge_events(locate_events(model, child), spec.interval)
            events.extend(found)
            queue.extend((child, e, depth + 1) for e in found if e.kind == EventKind.BRANCH_POINT)
    notes = []
    if skipped:
        notes.append(
            f"trace {spec.name}: the branches crossing at {skipped} more branch point(s) were "
            f"not followed (at most {MAX_SWITCHED_BRANCHES} branches are started per trace); "
            "trace them from their own start guesses or narrow the interval"
        )
    return _TraceOutcome(branches, events, notes)


def _start_warning(model: Model, name: str, guess: np.ndarray, root: Branch) -> str:
    """A warning when the trace's start equilibrium lies far from its guess, else ""."""
    if len(root) == 0:
        return ""
    start = int(np.argmin(np.abs(root.arclength)))
    found = start_distance(tuple(model.states), guess, root.states[start])
    return f"trace {name}: {found.text}" if found.far else ""


def run_scan(
    scan: Scan, *, progress: Progress | None = None, model: Model | None = None
) -> RunResult:
    """Run everything a validated scan asks for.

    Parameters
    ----------
    scan : Scan
        From :func:`branchline.scan.loader.load_scan` or :func:`branchline.scan.loader.scan_from_dict`.
    progress : callable (trace name, points so far) -> None, optional
        Called as points are computed (the command line's progress display).
    model : Model, optional
        The scan's model already compiled (a batch compiles it once per worker);
        its ``defaults`` must be the scan's parameter values.

    Returns
    -------
    RunResult
        ``status`` is ``"failed"`` if any trace stopped on numerical trouble;
        ``message`` then says which trace, where and why. All points computed
        are kept either way.

    Examples
    --------
    >>> from branchline import scan_from_dict, run_scan
    >>> scan = scan_from_dict({
    ...     "model": {"parameters": {"h": 0.1},
    ...               "equations": {"N": "N*(1 - N) - h"}},
    ...     "trace": [{"vary": "h", "interval": [0.0, 0.4], "start": {"N": 0.9}}]})
    >>> result = run_scan(scan)
    >>> [e.kind for e in result.events]
    ['fold']
    """
    started = time.perf_counter()
    if model is None:
        model = build_model(scan.model, source=scan.source)
    compiled = time.perf_counter()
    warnings = []
    branches: list[Branch] = []
    events: list[Event] = []
    searches = []
    for spec in scan.traces:
        parameters = model.parameter_vector(spec.set)
        guessed = spec.start != SEARCH_START
        x0 = start_vector(model, spec, parameters, scan.source) if guessed else None
        if model.jacobian_source:
            where = x0 if guessed else search_box(model, spec).centre
            check = check_jacobian(model, where, parameters)
            if not check.ok:
                warnings.append(check.message)
        if guessed:
            outcome = _follow(model, spec, parameters, x0, progress)
            found = _start_warning(model, spec.name, x0, outcome.branches[0])
            if found:
                warnings.append(found)
            warnings.extend(outcome.warnings)
            branches.extend(outcome.branches)
            events.extend(outcome.events)
        if spec.search is not None:

            def follow(found_spec, found_parameters, root):
                found = _follow(model, found_spec, found_parameters, root, progress)
                warnings.extend(found.warnings)
                return found.branches, found.events

            search = run_search(model, spec, parameters, branches, follow, progress)
            branches.extend(search.branches)
            events.extend(search.events)
            searches.append(search.record)
    failed = [b for b in branches if b.status == Status.FAILED]
    message = "; ".join(f"trace {b.name}: {b.message}" for b in failed)
    finished = time.perf_counter()
    return RunResult(
        scan=scan,
        model=model,
        branches=tuple(branches),
        events=tuple(events),
        status=Status.FAILED if failed else Status.DONE,
        message=message,
        timings={
            "compile_seconds": compiled - started,
            "continuation_seconds": finished - compiled,
            "total_seconds": finished - started,
        },
        warnings=tuple(warnings),
        searches=tuple(searches),
    )
