"""Run the ``[[cycles]]`` of a scan: families from Hopf points, their events, doubled families."""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np

from branchline.events.cycle_events import locate_cycle_events
from branchline.numerics.floquet import FloquetFailed
from branchline.problems.cycle_family import (
    doubled_start,
    family_record,
    follow_family,
    trace_cycles,
)
from branchline.problems.cycles import PeriodicOrbitProblem
from branchline.results.records import STATUS_FAILED, CycleFamily, Event
from branchline.vocabulary import EventKind

Progress = Callable[[str, int], None]


def hopf_points(events: Sequence[Event], trace: str) -> list[Event]:
    """The located Hopf points of ``trace``, in trace order."""
    found = [e for e in events if e.trace == trace and e.kind == EventKind.HOPF]
    return sorted(found, key=lambda e: e.arclength)


def run_cycles(
    model,
    specs,
    events: Sequence[Event],
    progress: Progress | None = None,
    warnings: list[str] | None = None,
) -> tuple[list[CycleFamily], list[Event]]:
    """Every family the specs ask for, with its events, in scan order (doubled ones after).

    ``warnings`` gets a sentence for every cycle event that could not be located.
    """
    families: list[CycleFamily] = []
    found: list[Event] = []
    for spec in specs:
        callback = (lambda count, name=spec.name: progress(name, count)) if progress else None
        candidates = hopf_points(events, spec.source_trace)
        if len(candidates) < spec.hopf:
            message = (
                f"trace {spec.source_trace} has {len(candidates)} located Hopf point(s); "
                f"[[cycles]] {spec.name} asks for number {spec.hopf}"
            )
            vary = model.parameters[0]
            families.append(
                family_record(
                    spec.name,
                    vary,
                    model.defaults,
                    None,
                    spec.points,
                    spec.interval,
                    STATUS_FAILED,
                    message,
                )
            )
            continue
        hopf = candidates[spec.hopf - 1]
        family = trace_cycles(
            model,
            spec.name,
            hopf,
            spec.interval,
            spec.steps,
            intervals=spec.intervals,
            degree=spec.points,
            progress=callback,
        )
        _add_with_doublings(model, spec, family, families, found, progress, warnings)
    return families, found


def _add_with_doublings(model, spec, family, families, found, progress, warnings) -> None:
    """Append ``family`` and its events; switch at its first period doubling, repeatedly."""
    depth = 0
    while True:
        families.append(family)
        located = (
            locate_cycle_events(model, family, family.test_values, warnings)
            if len(family) > 1
            else []
        )
        found.extend(located)
        doublings = [e for e in located if e.kind == EventKind.PERIOD_DOUBLING]
        if depth >= spec.doublings or not doublings:
            return
        depth += 1
        family = trace_doubled(model, family, doublings[0], spec, progress)


def trace_doubled(model, family: CycleFamily, event: Event, spec, progress) -> CycleFamily:
    """The family of doubled orbits started at the located period doubling ``event``."""
    values = np.array(event.details["orbit_values"], dtype=float)
    mesh = np.array(event.details["orbit_mesh"], dtype=float)
    k = model.parameter_index(family.vary)
    problem = PeriodicOrbitProblem(model, k, family.parameters, mesh, family.degree, values)
    u = problem.pack(values, event.details["period"], event.value)
    name = f"{family.name}.2"
    origin = f"the period doubling at {family.vary}={event.value:.10g} on {family.name}"
    try:
        doubled, u0, direction = doubled_start(problem, u)
    except FloquetFailed as failure:
        return family_record(
            name,
            family.vary,
            family.parameters,
            None,
            family.degree,
            spec.interval,
            STATUS_FAILED,
            f"no doubled orbit started at {origin}: {failure}",
            origin=origin,
            parent=family.name,
        )
    callback = (lambda count: progress(name, count)) if progress else None
    curve, status, message = follow_family(
        doubled, u0, direction, spec.steps, spec.interval, exact_tangent=True, progress=callback
    )
    return family_record(
        name,
        family.vary,
        family.parameters,
        curve,
        family.degree,
        spec.interval,
        status,
        message,
        origin=origin,
        parent=family.name,
    )


__all__ = ["hopf_points", "run_cycles", "trace_doubled"]
