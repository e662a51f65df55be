"""What the confirmations read off the traced branches: stable runs, the equilibria
traced at a parameter value, and which traced equilibrium a simulated state reached."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from branchline.results.records import Branch, Event

Array = np.ndarray

# A simulated end state this close (relative to the scale of the states) to a
# traced equilibrium counts as having settled there.
SAME_STATE_SHARE = 1e-3


@dataclass(frozen=True)
class Run:
    """Consecutive rows ``first..last`` (inclusive) of a branch with the same stability."""

    branch: Branch
    first: int
    last: int
    stable: bool

    def state_at(self, value: float | Array) -> Array:
        """The run's state at parameter value(s), linear between rows (clipped to the run):
        shape (n,) for one value, (k, n) for k values.

        Within a run the parameter is monotone: a turning point changes stability.
        """
        values = self.branch.parameter_values[self.first : self.last + 1]
        states = self.branch.states[self.first : self.last + 1]
        order = np.argsort(values)
        return np.stack(
            [np.interp(value, values[order], states[order, j]) for j in range(states.shape[1])],
            axis=-1,
        )

    @property
    def span(self) -> tuple[float, float]:
        """(lowest, highest) parameter value of the run."""
        values = self.branch.parameter_values[self.first : self.last + 1]
        return float(values.min()), float(values.max())


def run_containing(branch: Branch, row: int) -> Run:
    """The run of equal stability that contains ``row``."""
    stable = branch.stable
    first = last = row
    while first > 0 and stable[first - 1] == stable[row]:
        first -= 1
    while last < len(branch) - 1 and stable[last + 1] == stable[row]:
        last += 1
    return Run(branch, first, last, bool(stable[row]))


def rows_beside(branch: Branch, event: Event) -> tuple[int | None, int | None]:
    """The rows just before and just after an event along its branch (None at an end)."""
    s = branch.arclength
    after = int(np.searchsorted(s, event.arclength, side="right"))
    before = after - 1
    # a row sitting on the event itself (a trace that ends there) is neither side
    scale = 1e-9 * (1.0 + float(np.abs(s).max()))
    if before >= 0 and abs(s[before] - event.arclength) <= scale:
        before -= 1
    if after < len(s) and abs(s[after] - event.arclength) <= scale:
        after += 1
    return (before if before >= 0 else None), (after if after < len(s) else None)


def run_end_event(run: Run, events: Sequence[Event], towards: float) -> Event | None:
    """The located event that ends ``run`` when the parameter moves in direction ``towards``."""
    branch = run.branch
    values = branch.parameter_values
    if values[run.last] != values[run.first]:
        forward = np.sign(values[run.last] - values[run.first]) == np.sign(towards)
    else:
        forward = towards > 0
    end = run.last if forward else run.first
    neighbour = end + 1 if forward else end - 1
    s = branch.arclength
    low = s[min(end, neighbour)] if 0 <= neighbour < len(s) else s[end]
    high = s[max(end, neighbour)] if 0 <= neighbour < len(s) else s[end]
    slack = 1e-9 * (1.0 + abs(high - low))
    candidates = [
        e for e in events if e.trace == branch.name and low - slack <= e.arclength <= high + slack
    ]
    if not candidates:
        return None
    return min(candidates, key=lambda e: abs(e.arclength - s[end]))


def state_scale(branches: Sequence[Branch]) -> Array:
    """Per-state scale: the largest magnitude met on any branch (at least a tiny floor)."""
    stacked = np.vstack([b.states for b in branches if len(b)])
    return np.maximum(np.abs(stacked).max(axis=0), 1e-12)


def traced_at(branches: Sequence[Branch], vary: str, value: float) -> list[tuple[str, Array, bool]]:
    """Equilibria traced at ``vary = value``: (trace, state, stable), linear between rows."""
    found = []
    for branch in branches:
        if branch.vary != vary or len(branch) < 2:
            continue
        p = branch.parameter_values
        for i in np.nonzero((p[:-1] - value) * (p[1:] - value) <= 0.0)[0]:
            if p[i + 1] == p[i]:
                continue
            w = (value - p[i]) / (p[i + 1] - p[i])
            state = (1 - w) * branch.states[i] + w * branch.states[i + 1]
            found.append((branch.name, state, bool(branch.stable[i] and branch.stable[i + 1])))
    return found


def nearest_traced(
    branches: Sequence[Branch], vary: str, value: float, state: Array, scale: Array
) -> tuple[str | None, float]:
    """The trace whose equilibrium at ``value`` is nearest ``state`` and the scaled gap to it."""
    best, gap = None, np.inf
    for name, traced, _ in traced_at(branches, vary, value):
        distance = float(np.max(np.abs(traced - state) / scale))
        if distance < gap:
            best, gap = name, distance
    return best, gap
