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
from branchline.events.sensitivities import with_sensitivities
from branchline.model.build import Model, build_model, check_jacobian, resolve_callable
from branchline.model.pattern_check import check_pattern, difference_jacobian_warning
from branchline.problems.boundary import follow_boundaries
from branchline.problems.crowding import resolve_crowded_steps
from branchline.problems.cycle_runs import run_cycles
from branchline.problems.equilibrium_branch import locate_events, trace_branch
from branchline.problems.robust_margin import robust_margin
from branchline.problems.stability_regions import stability_maps
from branchline.problems.start_guess import start_distance
from branchline.problems.switching import trace_switched
from branchline.problems.window_search import run_search, search_box
from branchline.results.records import STATUS_MAX_POINTS, Branch, Event, RunResult
from branchline.scan.loader import Scan, TraceSpec
from branchline.scan.search_section import SEARCH_START
from branchline.stopping import Interrupted, StopRequest, watched_model
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


def _interrupted(branch: Branch, stop: StopRequest | None) -> Branch:
    """``branch`` marked interrupted if a stop cut it short (its points are kept)."""
    if stop is None or not stop.requested or branch.status != Status.FAILED:
        return branch
    where = ""
    if len(branch):
        where = f", the last at {branch.vary} = {branch.parameter_values[-1]:.10g}"
    if stop.by_time_limit:  # a bound on the run's work, not an interrupt: a failure
        cause = f"the run's time limit ({stop.time_limit:g} s, time_limit)"
        status = Status.FAILED
    else:
        cause, status = str(stop.signal_name), Status.INTERRUPTED
    return replace(
        branch, status=status, message=f"stopped by {cause} after {len(branch)} points{where}"
    )


def _follow(
    model: Model,
    spec: TraceSpec,
    parameters: np.ndarray,
    x0: np.ndarray,
    progress: Progress | None,
    stop: StopRequest | None = None,
) -> _TraceOutcome:
    """The trace of ``spec`` and the branches switched from it, with their events.

    The branches are followed with the model watched by ``stop`` (a stop request
    ends them at once, keeping their points); events are located with the plain
    model, so a stop does not cut a location short (it takes milliseconds for
    dense models; large sparse ones skip it once stopped).
    """
    traced = watched_model(model, stop) if stop is not None else model
    done = [0]  # points of this trace's earlier branches: the progress count runs on

    def counter(label: str):
        if progress is None:
            return None
        return lambda count: progress(label, done[0] + count)

    def stopped() -> bool:
        return stop is not None and stop.requested

    def located(branch: Branch) -> list[Event]:
        done[0] += len(branch)
        if stopped() and model.sparse:
            return []
        return _mark_edge_events(locate_events(model, branch), spec.interval)

    root = trace_branch(
        traced,
        spec.name,
        spec.vary,
        parameters,
        x0,
        spec.interval,
        spec.direction,
        spec.steps,
        progress=counter(spec.name),
        limits=spec.limits,
    )
    root = _interrupted(root, stop)
    if not stopped():
        root = resolve_crowded_steps(model, root)
    branches, events = [root], located(root)
    if not spec.switch_branches:
        return _TraceOutcome(branches, events)
    visited: list[Event] = []
    started: dict[str, int] = {}  # parent name -> children started so far
    queue = [(root, e, 1) for e in events if e.kind == EventKind.BRANCH_POINT]
    skipped = 0
    while queue and not stopped():
        parent, event, depth = queue.pop(0)
        if _seen(event, visited) or depth > MAX_SWITCH_DEPTH or _on_edge(event, spec.interval):
            continue
        if len(branches) > MAX_SWITCHED_BRANCHES:
            skipped += 1
            continue
        visited.append(event)
        named = len(visited) <= len(spec.branch_names)  # the scan's branch_names, in order
        children = trace_switched(
            traced,
            parent,
            event,
            spec.steps,
            spec.interval,
            progress=counter(f"{spec.name}, branches switched at {parent.name}"),
            first_number=1 if named else started.get(parent.name, 0) + 1,
            limits=spec.limits,
            prefix=f"{parent.name}.{spec.branch_names[len(visited) - 1]}" if named else None,
        )
        if not named:
            started[parent.name] = started.get(parent.name, 0) + len(children)
        for child in children:
            child = _interrupted(child, stop)
            if not stopped():
                child = resolve_crowded_steps(model, child)
            branches.append(child)
            found = located(child)
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


def _recheck_jacobian(model: Model, branches: list[Branch]) -> list[str]:
    """Compare a user Jacobian with differences again where the corrector struggled.

    The check at the start sees one point only; a Jacobian wrong elsewhere (a
    transposed one, say) shows where Newton needs many iterations or fails:
    the point with the most corrector iterations and the last point of each branch.
    """
    found = []
    for branch in branches:
        if len(branch) == 0:
            continue
        rows = {int(np.argmax(branch.newton_iterations)), len(branch) - 1}
        k = model.parameter_index(branch.vary)
        for row in sorted(rows):
            params = np.array(branch.parameters, dtype=float)
            params[k] = branch.parameter_values[row]
            with np.errstate(all="ignore"):
                check = check_jacobian(model, branch.states[row], params)
            if not check.ok and np.isfinite(check.max_relative_error):
                found.append(
                    f"trace {branch.name} at {branch.vary} = {params[k]:.10g} "
                    f"({int(branch.newton_iterations[row])} corrector iterations): {check.message}"
                )
                break
    return found


def _blame_jacobian(branch: Branch, source: str) -> Branch:
    """A branch cut short by max_points with a Jacobian known to be wrong: a failure
    that says so (the corrector converges slowly with a wrong Jacobian, the steps
    shrink, and the points are spent on a short stretch), not a cap to raise."""
    if branch.status != STATUS_MAX_POINTS or len(branch) == 0:
        return branch
    stretch = float(np.ptp(branch.parameter_values))
    return replace(
        branch,
        status=Status.FAILED,
        message=(
            f"{branch.message}; the {len(branch)} points cover only {branch.vary} in a stretch "
            f"of {stretch:.3g} because the Jacobian function ({source}) disagrees with finite "
            "differences (see the warnings): fix it, or leave out model.python.jacobian to use "
            "differences"
        ),
    )


def _observable_trouble(model: Model, branches: list[Branch]) -> str:
    """A warning when the observables cannot be computed at some points (their cells are empty)."""
    if not model.observable_names:
        return ""
    failures, first = 0, ""
    for branch in branches:
        params = np.array(branch.parameters, dtype=float)
        k = model.parameter_index(branch.vary)
        for x, value in zip(branch.states, branch.parameter_values):
            params[k] = value
            try:
                model.observables(x, params)
            except (ArithmeticError, ValueError) as error:
                failures += 1
                if not first:
                    first = f"first at {branch.vary} = {value:.10g} on trace {branch.name}: {error}"
    if not failures:
        return ""
    names = ", ".join(model.observable_names)
    return (
        f"the observables ({names}) could not be computed at {failures} points ({first}); "
        "those cells are empty"
    )


def run_scan(
    scan: Scan,
    *,
    progress: Progress | None = None,
    model: Model | None = None,
    confirm: bool = True,
    stop: StopRequest | None = None,
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
    confirm : bool
        Confirm each located event by a short simulation
        (:func:`branchline.simulation.confirm.confirm_events`); models with more
        than ``confirm.MAX_STATES`` states are skipped with a note.
    stop : branchline.stopping.StopRequest, optional
        Once it is requested (the command line's Ctrl-C / SIGTERM handler), the
        branch being followed ends at once with its points kept, nothing further
        is started, and the result has status ``"interrupted"``.

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
    if stop is None:  # the scan's time_limit bounds every run, from the command line or not
        stop = StopRequest(time_limit=scan.time_limit)
    if model is None:
        model = build_model(scan.model, source=scan.source)
    compiled = time.perf_counter()
    warnings = [advice for advice in (difference_jacobian_warning(model),) if advice]
    branches: list[Branch] = []
    events: list[Event] = []
    searches = []
    skipped = []
    for spec in scan.traces:
        if stop is not None and stop.requested:
            skipped.append(spec.name)
            continue
        parameters = model.parameter_vector(spec.set)
        guessed = spec.start != SEARCH_START
        x0 = start_vector(model, spec, parameters, scan.source) if guessed else None
        if model.jacobian_source:
            where = x0 if guessed else search_box(model, spec).centre
            check = check_jacobian(model, where, parameters)
            if not check.ok:
                warnings.append(check.message)
        if model.jacobian_pattern is not None:
            where = x0 if guessed else search_box(model, spec).centre
            for found in check_pattern(model, where, parameters):
                if found not in warnings:
                    warnings.append(found)
        if guessed:
            try:
                outcome = _follow(model, spec, parameters, x0, progress, stop)
            except Interrupted:  # cut off outside the engine (e.g. at a start): nothing to keep
                skipped.append(spec.name)
                continue
            found = _start_warning(model, spec.name, x0, outcome.branches[0])
            if found:
                warnings.append(found)
            warnings.extend(outcome.warnings)
            branches.extend(outcome.branches)
            events.extend(outcome.events)
            if model.jacobian_source:
                rechecks = _recheck_jacobian(model, outcome.branches)
                warnings.extend(rechecks)
                if rechecks or not check.ok:
                    branches[-len(outcome.branches) :] = [
                        _blame_jacobian(b, model.jacobian_source) for b in outcome.branches
                    ]
        if spec.search is not None:

            def follow(found_spec, found_parameters, root):
                found = _follow(model, found_spec, found_parameters, root, progress, stop)
                warnings.extend(found.warnings)
                return found.branches, found.events

            try:
                search = run_search(model, spec, parameters, branches, follow, progress)
            except Interrupted:
                skipped.append(f"{spec.name} (search)")
                continue
            branches.extend(search.branches)
            events.extend(search.events)
            searches.append(search.record)
    stopped = stop is not None and stop.requested
    families, cycle_events = (
        run_cycles(model, scan.cycles, events, progress, warnings) if not stopped else ((), ())
    )
    events.extend(cycle_events)
    if not stopped:
        events = with_sensitivities(model, events)
    boundaries, boundary_events, boundary_warnings = (
        follow_boundaries(model, scan, events, progress) if not stopped else ((), [], [])
    )
    events.extend(boundary_events)
    warnings.extend(boundary_warnings)
    maps = stability_maps(model, scan, boundaries, branches) if not stopped else ()
    margin = None
    if scan.robust_margin is not None and not stopped:
        margin = robust_margin(model, scan.robust_margin, events, {b.name for b in branches})
    trouble = _observable_trouble(model, branches)
    if trouble:
        warnings.append(trouble)
    failed = [b for b in (*branches, *families) if b.status in (Status.FAILED, Status.INTERRUPTED)]
    message = "; ".join(f"trace {b.name}: {b.message}" for b in failed)
    failed_boundaries = [b for b in boundaries if b.status == Status.FAILED]
    message = "; ".join(
        [message] * bool(message) + [f"boundary {b.name}: {b.message}" for b in failed_boundaries]
    )
    status = Status.FAILED if failed or failed_boundaries else Status.DONE
    if stopped:
        status = Status.FAILED if stop.by_time_limit else Status.INTERRUPTED
        not_started = f"; not started: {', '.join(skipped)}" if skipped else ""
        message = f"{stop.reason}{': ' + message if message else ''}{not_started}"
    traced = time.perf_counter()
    confirmations, note = _confirm(model, branches, events) if confirm and not stopped else ((), "")
    finished = time.perf_counter()
    return RunResult(
        scan=scan,
        model=model,
        branches=tuple(branches),
        events=tuple(events),
        status=status,
        message=message,
        timings={
            "compile_seconds": compiled - started,
            "continuation_seconds": traced - compiled,
            "confirmation_seconds": finished - traced,
            "total_seconds": finished - started,
        },
        warnings=tuple(warnings),
        confirmations=confirmations,
        confirmation_note=note,
        cycles=tuple(families),
        searches=tuple(searches),
        boundaries=tuple(boundaries),
        robust_margin=margin,
        stability_maps=maps,
    )


def _confirm(model: Model, branches, events) -> tuple[tuple, str]:
    """Confirmations by simulation, or none and a note saying why."""
    from branchline.simulation.confirm import MAX_STATES, confirm_events, skipped_note

    if model.size > MAX_STATES:
        return (), skipped_note(model.size)
    return confirm_events(model, branches, events), ""
