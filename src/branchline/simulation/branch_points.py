"""Branch points confirmed by simulation: the exchange of stability.

On each side of a branch point, every equilibrium traced next to it is nudged
slightly toward its neighbour on that side and simulated: a stable one must
come back, an unstable one must leave (and, when the traced picture is right,
settle on the stable one). Across the point the roles swap: that is the
exchange of stability (transcritical) or the hand-over to the new pair of
branches (pitchfork).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from branchline.model.build import Model
from branchline.problems.equilibrium import linearize, solve_equilibrium
from branchline.results.records import Branch, Event
from branchline.simulation.branches import nearest_traced, state_scale, traced_at
from branchline.simulation.integrate import Trajectory, simulate

Array = np.ndarray

# Each side is simulated this share of the trace's interval away from the point
# (less when another event is nearer).
OFFSET_SHARE = 0.03
# Equilibria traced at the side's value within this many offsets (scaled state
# distance) of the branch point belong to it.
NEAR_FACTOR = 20.0
# The nudge: this share of the distance to the nearest neighbour on that side.
NUDGE_SHARE = 0.05
# Simulated for this many slowest time scales 1/|lambda| of the equilibrium.
SETTLE_TIMES = 12.0
# Time scales slower than this share of the fastest are not waited for (a cap on
# the duration next to a nearly zero eigenvalue).
SLOWEST_SHARE = 1e-3
# Back within this share of the nudge: returned. Farther than the nudge: left.
RETURN_SHARE = 0.1


@dataclass(frozen=True)
class Nudge:
    """One nudged equilibrium and where the simulation took it."""

    value: float
    trace: str
    stable: bool  # by its eigenvalues
    returned: bool  # the simulation came back to it
    reached: str | None  # the trace whose equilibrium it settled on, if any
    trajectory: Trajectory


def _offset(branch: Branch, event: Event, events: Sequence[Event]) -> float:
    low, high = branch.interval
    offset = OFFSET_SHARE * (high - low)
    others = [abs(e.value - event.value) for e in events if e is not event and e.vary == event.vary]
    others = [d for d in others if d > 0.0]
    if others:
        offset = min(offset, 0.4 * min(others))
    return offset


def _local(branches, event: Event, value: float, scale: Array, offset: float):
    """Equilibria traced at ``value`` near the branch point, deduplicated."""
    found = []
    for name, state, _ in traced_at(branches, event.vary, value):
        gap = float(np.max(np.abs(state - event.state) / scale))
        if gap <= NEAR_FACTOR * max(offset / max(abs(event.value), 1.0), 1e-3) and not any(
            float(np.max(np.abs(state - other) / scale)) < 1e-6 for _, other in found
        ):
            found.append((name, state))
    return found


def nudge_both_sides(
    model: Model, branches: Sequence[Branch], events: Sequence[Event], event: Event
) -> list[Nudge]:
    """Simulate each traced equilibrium beside the branch point, nudged; see the module."""
    branch = next(b for b in branches if b.name == event.trace)
    k = model.parameter_index(event.vary)
    scale = state_scale(branches)
    offset = _offset(branch, event, events)
    low, high = branch.interval
    nudges = []
    for value in (event.value - offset, event.value + offset):
        if not low <= value <= high:
            continue
        params = event.parameters.copy()
        params[k] = value
        local = []
        for name, guess in _local(branches, event, value, scale, offset):
            solution = solve_equilibrium(model, guess, params)
            if solution.converged:
                local.append((name, solution.state))
        for name, state in local:
            nudges.append(_nudge(model, branches, params, k, name, state, local, scale))
    return nudges


def _nudge(model, branches, params, k, name, state, local, scale) -> Nudge:
    others = [s for n, s in local if n != name]
    if others:
        target = min(others, key=lambda s: float(np.linalg.norm(s - state)))
        push = NUDGE_SHARE * (target - state)
    else:
        push = NUDGE_SHARE * 1e-2 * scale * np.sign(state + 1e-300)
    lin = linearize(model, state, params)
    rates = np.abs(lin.eigenvalues.real)
    slowest = max(float(rates.min()), SLOWEST_SHARE * float(rates.max()), 1e-300)
    duration = SETTLE_TIMES / slowest
    trajectory = simulate(model, params, state + push, duration, interpolant=False)
    value = float(params[k])
    if not trajectory.ok:
        return Nudge(value, name, lin.positive == 0, False, None, trajectory)
    end = trajectory.states[-1]
    size = float(np.max(np.abs(push) / scale))
    returned = float(np.max(np.abs(end - state) / scale)) <= RETURN_SHARE * size
    reached = None
    settled = solve_equilibrium(model, end, params)
    if settled.converged:
        trace, gap = nearest_traced(branches, model.parameters[k], value, settled.state, scale)
        reached = trace if gap <= max(1e-2, 10 * size) else None
    return Nudge(value, name, lin.positive == 0, returned, reached, trajectory)
