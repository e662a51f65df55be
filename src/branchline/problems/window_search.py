"""Deflated continuation: the equilibria along a parameter window that no trace met.

A trace follows only the branch through its start point. Following Farrell,
Beentjes and Birkisson ("The computation of disconnected bifurcation
diagrams", arXiv:1603.00809, 2016), the branches already traced are deflated
at a set of parameter values along the window and Newton's method is started
from their points (and from a Sobol sample of the search box): every root it
still finds lies on a branch not yet known (an isola, or a branch that meets
the traced ones only outside the window), and is traced as a trace of its own,
``<trace>#1``, ``<trace>#2``, ... in the order found. The search at the start
value comes first, so ``start = "search"`` traces every equilibrium there.

The points of a traced branch at a value v are its crossings of v,
interpolated between rows and polished by Newton at v. A root lies on a
traced branch when it is within ``ON_BRANCH_FRACTION`` of a segment's length
of the polyline of that branch's rows in (state, parameter) space: the step
control keeps the tangent turning by at most 0.3 rad per step, so the curve
deviates from its chord by at most about 0.04 of the chord's length.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np

from branchline.numerics import linalg
from branchline.problems.deflation import Box, find_equilibria, same_root, sobol_starts
from branchline.problems.equilibrium import linearize, solve_equilibrium
from branchline.problems.equilibrium_branch import state_limits_of, within_limits
from branchline.results.search_records import SEARCH_SEPARATOR, SearchedValue, SearchRecord

if TYPE_CHECKING:
    from branchline.model.build import Model
    from branchline.results.records import Branch, Event
    from branchline.scan.loader import TraceSpec

Array = np.ndarray

# A root within this fraction of a segment's length of a branch's polyline lies
# on that branch (see the module docstring: chords deviate by about 0.04).
ON_BRANCH_FRACTION = 0.25
# ... or within this distance, relative to 1 + |(x, p)|, for very short segments.
ON_BRANCH_FLOOR = 1e-8

# follow(spec, parameters, x0) -> (branches, events): trace one branch with its
# events and switched branches (the runner's own routine).
Follow = Callable[["TraceSpec", Array, Array], tuple[list["Branch"], list["Event"]]]


@dataclass(frozen=True)
class SearchOutcome:
    """The branches and events traced from the search's roots, and its record."""

    branches: list
    events: list
    record: SearchRecord


def search_box(model: Model, spec: TraceSpec) -> Box:
    """The spec's ``search_box`` as a :class:`Box` in the model's state order."""
    box = spec.search.box
    low = np.array([box[name][0] for name in model.states], dtype=float)
    high = np.array([box[name][1] for name in model.states], dtype=float)
    return Box(low, high)


def same_slice(branch: Branch, vary: str, parameters: Array, vary_index: int) -> bool:
    """True when ``branch`` varies ``vary`` with every other parameter as in ``parameters``."""
    if branch.vary != vary or len(branch) < 2:
        return False
    mask = np.arange(len(parameters)) != vary_index
    return bool(np.array_equal(branch.parameters[mask], parameters[mask]))


def crossings(model: Model, branch: Branch, p: Array, vary_index: int) -> list[tuple[Array, bool]]:
    """The branch's points at the value p[vary_index]: (state (n,), polished) per crossing.

    Each crossing of the value between two rows is interpolated linearly and
    polished by Newton at that value; ``polished`` is False when Newton did not
    converge near the interpolated point (the point then only serves to deflate).
    """
    value = float(p[vary_index])
    values = branch.parameter_values
    states = branch.states
    found = []
    for i in range(len(values) - 1):
        a, b = values[i] - value, values[i + 1] - value
        if a * b > 0.0 or (a == 0.0 and i > 0):
            continue  # no crossing (a row exactly at the value is taken once, as a segment's start)
        t = 0.0 if a == b else a / (a - b)
        guess = states[i] + t * (states[i + 1] - states[i])
        if b == 0.0 and a != 0.0:
            guess = states[i + 1]
        reach = linalg.norm(states[i + 1] - states[i]) + abs(values[i + 1] - values[i])
        solution = solve_equilibrium(model, guess, p)
        close = solution.converged and linalg.norm(solution.state - guess) <= reach + 1e-12
        found.append((solution.state if close else guess, bool(close)))
    return found


def on_branch(root: Array, value: float, branches: Sequence[Branch]) -> str | None:
    """The name of the first branch whose polyline passes through (root, value), or None."""
    point = np.append(root, value)
    floor = ON_BRANCH_FLOOR * (1.0 + linalg.norm(point))
    for branch in branches:
        if len(branch) < 2:
            continue
        rows = np.column_stack([branch.states, branch.parameter_values])
        starts, ends = rows[:-1], rows[1:]
        chords = ends - starts
        lengths = np.sqrt(np.einsum("ij,ij->i", chords, chords))
        with np.errstate(all="ignore"):
            t = np.einsum("ij,ij->i", point - starts, chords) / lengths**2
        t = np.clip(np.nan_to_num(t), 0.0, 1.0)
        gaps = np.linalg.norm(starts + t[:, None] * chords - point, axis=1)
        if np.any(gaps <= np.maximum(ON_BRANCH_FRACTION * lengths, floor)):
            return branch.name
    return None


def _known_points(model, branches, p, vary_index, scale):
    """Distinct polished crossings [(x, trace)] and every point to deflate (k, n)."""
    known: list[tuple[Array, str]] = []
    deflate: list[Array] = []
    for branch in branches:
        for x, polished in crossings(model, branch, p, vary_index):
            if same_root(x, deflate, scale):
                continue
            deflate.append(x)
            if polished:
                known.append((x, branch.name))
    return known, np.array(deflate).reshape(-1, model.size)


def _unstable_count(model: Model, x: Array, p: Array) -> int:
    with np.errstate(all="ignore"):
        return int(linearize(model, x, p).positive)


class _WindowSearch:
    """The state of one trace's search as it moves along the values (see run_search)."""

    def __init__(self, model, spec, parameters, traced, follow) -> None:
        self.model, self.spec, self.follow = model, spec, follow
        self.box = search_box(model, spec)
        self.scale = 1.0 / self.box.width
        self.vary_index = model.parameter_index(spec.vary)
        self.parameters = np.array(parameters, dtype=float)
        self.sample = sobol_starts(self.box, spec.search.samples, spec.search.seed)
        self.limits = state_limits_of(model, spec.limits)
        self.known = [
            b for b in traced if same_slice(b, spec.vary, self.parameters, self.vary_index)
        ]
        self.branches: list = []
        self.events: list = []
        self.found: dict[str, float] = {}
        self.outside = 0
        self.tracing = 0.0
        self.previous = np.empty((0, model.size))

    def _trace(self, root: Array, p: Array, value: float) -> list:
        """Trace a new root as <trace>#k; the branches traced (with switched ones)."""
        name = f"{self.spec.name}{SEARCH_SEPARATOR}{len(self.found) + 1}"
        clock = time.perf_counter()
        spec = replace(self.spec, name=name, direction="both", search=None)
        branches, events = self.follow(spec, p, root)
        self.tracing += time.perf_counter() - clock
        self.found[name] = value
        self.branches.extend(branches)
        self.events.extend(events)
        traced = [b for b in branches if len(b) >= 2]
        self.known.extend(traced)
        return traced

    def at(self, value: float) -> SearchedValue:
        """Search at one value: deflate the known branches, trace every new root."""
        model = self.model
        p = self.parameters.copy()
        p[self.vary_index] = value
        known, deflate = _known_points(model, self.known, p, self.vary_index, self.scale)
        # Deflated continuation: the equilibria of the value searched before start Newton here.
        starts = np.vstack([self.previous, self.sample])
        search = find_equilibria(model, p, self.box, starts, known=deflate)
        self.outside += len(search.outside)
        roots = [x for x, _ in known]
        owners = [name for _, name in known]
        new = [False] * len(known)
        before = list(self.known)  # a root on none of these is new at this value
        fresh = []
        for root in search.roots:
            if same_root(root, roots, self.scale):
                continue  # met already as a crossing of a branch traced at this value
            owner = on_branch(root, value, self.known)
            if owner is None and within_limits(root, self.limits):
                traced = self._trace(root, p, value)
                fresh.extend(traced)
                owner = traced[0].name if traced else ""
            roots.append(root)
            owners.append(owner or "")
            new.append(on_branch(root, value, before) is None)
            # the other points of the branch just traced at this value count here too
            for x, branch in _known_points(model, fresh, p, self.vary_index, self.scale)[0]:
                if not same_root(x, roots, self.scale):
                    roots.append(x)
                    owners.append(branch)
                    new.append(True)
        self.previous = np.array(roots).reshape(-1, model.size)
        return SearchedValue(
            value=value,
            roots=self.previous,
            traces=tuple(owners),
            new=tuple(bool(flag) for flag in new),
            in_box=tuple(self.box.contains(x) for x in roots),
            unstable=tuple(_unstable_count(model, x, p) for x in roots),
            starts=search.starts,
            iterations=search.newton_iterations,
            seconds=search.seconds,
            complete=search.complete,
        )


def search_start(model: Model, spec: TraceSpec, p: Array) -> tuple[Array, int]:
    """The first equilibrium the trace's search finds at ``p`` and how many it finds
    (the box centre and 0 when it finds none): ``branchline inspect`` for a search."""
    box = search_box(model, spec)
    found = find_equilibria(model, p, box, sobol_starts(box, spec.search.samples, spec.search.seed))
    return (found.roots[0] if len(found) else box.centre), len(found)


def run_search(
    model: Model,
    spec: TraceSpec,
    parameters: Array,
    traced: Sequence[Branch],
    follow: Follow,
    progress: Callable[[str, int], None] | None = None,
) -> SearchOutcome:
    """Search the trace's box at its start value and at ``search_at``; trace what is new.

    Parameters
    ----------
    model : branchline.model.build.Model
    spec : branchline.scan.loader.TraceSpec
        With ``spec.search`` set.
    parameters : ndarray (m,)
        The trace's parameter vector (its ``vary`` entry is the start value).
    traced : sequence of Branch
        Branches already traced in this run; those in the same slice (same
        varied parameter, same other parameters) are known and deflated.
    follow : callable (spec, parameters, x0) -> (branches, events)
        Traces one branch, with events and switched branches.
    progress : callable (name, count), optional
        Called with ``"<trace> (search)"`` and the number of equilibria found so far
        (over all values searched).

    Returns
    -------
    SearchOutcome
        The branches found (``<trace>#k`` and their switched branches), their
        events, and the :class:`SearchRecord`. Never raises for numerical trouble.
    """
    started = time.perf_counter()
    state = _WindowSearch(model, spec, parameters, traced, follow)
    start_value = float(state.parameters[state.vary_index])
    values = [start_value, *(v for v in spec.search.at if v != start_value)]
    searched = []
    for value in values:
        searched.append(state.at(value))
        if progress is not None:  # the equilibria found so far are the search's points
            progress(f"{spec.name} (search)", sum(len(v.roots) for v in searched))
    record = SearchRecord(
        trace=spec.name,
        vary=spec.vary,
        box=dict(spec.search.box),
        samples=spec.search.samples,
        seed=spec.search.seed,
        values=tuple(searched),
        found=state.found,
        outside=state.outside,
        seconds=time.perf_counter() - started - state.tracing,
    )
    return SearchOutcome(state.branches, state.events, record)


__all__ = [
    "SearchOutcome",
    "crossings",
    "on_branch",
    "run_search",
    "same_slice",
    "search_box",
    "search_start",
]
