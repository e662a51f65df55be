"""A phase portrait's numbers: equilibria, their types, eigen-directions, the
manifolds of saddles, trajectories, and the linear-against-nonlinear comparison.

Everything here is numerical and returns frozen records; drawing lives in
:mod:`branchline.present.portrait`. Equilibria come from the traced branches at
the portrait's parameter values and from Newton's method started on a grid
over the plane (a plain multi-start search). Types follow the trace-determinant
classification (Strogatz, Nonlinear Dynamics and Chaos, section 5.2) through
:func:`branchline.problems.equilibrium.linearize`. A saddle's one-dimensional
stable and unstable manifolds are integrated with scipy.integrate.solve_ivp from
points a small step along its eigenvectors (backward in time for the stable
one; the standard construction, e.g. Strogatz, section 6.4).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from branchline.model.build import Model
from branchline.portrait.plane import Plane, field_at
from branchline.problems.equilibrium import Linearization, linearize, solve_equilibrium
from branchline.simulation.integrate import simulate

Array = np.ndarray

# Newton starts per side of the search grid over the plane, and how far it
# reaches: the region the traces met, grown this many times about its centre.
SEARCH_GRID = 8
SEARCH_GROWTH = 3.0
# Two equilibria closer than this (relative to the window's size) are one.
SAME_POINT_SHARE = 1e-6
# The window is the equilibria's bounding box padded by this share of its size
# on every side; a window of one point gets this size relative to the point.
WINDOW_PAD = 0.35
LONE_POINT_SIZE = 0.5
# A manifold starts this far (relative to the window's size) from its saddle
# along the eigenvector: small enough to lie on the manifold's tangent to
# within roundoff-level curvature, large enough to leave in a few time scales.
MANIFOLD_STEP = 1e-5
# Integration lengths, in units of the slowest relevant time scale 1/|lambda|.
MANIFOLD_TIMES = 40.0
TRAJECTORY_TIMES = 25.0
# A curve stops once it leaves the window enlarged by this factor.
ESCAPE_FACTOR = 1.6
# Trajectory starts per side of the grid drawn in the window ("a handful").
TRAJECTORY_GRID = 3
# Arrows per side and nullcline grid resolution.
ARROW_GRID = 19
NULLCLINE_GRID = 161
# The local panel's radius: this share of the distance to the nearest other
# equilibrium (or of the window when there is none).
LOCAL_SHARE = 0.3
LOCAL_STARTS = 8
# The undecided case is judged by the distance after this many turns (or time scales).
JUDGE_TURNS = 12.0
APPROACH_RATIO = 0.8  # end distance below this share of the start: approaches


@dataclass(frozen=True)
class PortraitEquilibrium:
    """One equilibrium at the portrait's parameter values.

    ``directions`` holds (eigenvalue, unit direction in the plane) for each real
    eigenvalue; ``decided`` says whether the linearization decides the local
    behaviour (hyperbolic) or not (centre, zero eigenvalue).
    """

    state: Array
    point: Array
    eigenvalues: Array
    kind: str
    decided: bool
    source: str
    directions: tuple[tuple[float, Array], ...]
    description: str

    @property
    def words(self) -> str:
        """The type in words, e.g. ``"stable focus"``."""
        return self.kind.replace("_", " ")


@dataclass(frozen=True)
class Manifold:
    """One branch of a saddle's stable or unstable manifold, in plane coordinates."""

    equilibrium: int
    which: str  # "stable" or "unstable"
    eigenvector: Array  # unit direction in state space it started along
    points: Array  # (k, 2)
    states: Array  # (k, n)


@dataclass(frozen=True)
class LocalComparison:
    """The linearized flow beside the nonlinear one around one equilibrium."""

    equilibrium: int
    radius: Array  # (2,): half-axes of the ring of starts, in plane units
    nonlinear: tuple[Array, ...]  # (k, 2) each, plane coordinates
    linear: tuple[Array, ...]
    verdict: str  # words for the figure
    seen: str  # what the nonlinear simulation shows where the linearization does not decide


@dataclass(frozen=True)
class Portrait:
    """Everything a phase portrait shows, in plane coordinates."""

    title: str
    states: tuple[str, ...]
    parameters: dict[str, float]
    highlight: tuple[str, ...]  # the parameters worth naming: varied by traces or set
    plane: Plane
    window: tuple[float, float, float, float]
    equilibria: tuple[PortraitEquilibrium, ...]
    manifolds: tuple[Manifold, ...]
    trajectories: tuple[Array, ...]
    arrows: tuple[Array, Array, Array, Array]  # s, t, unit ds, unit dt on a grid
    nullclines: tuple[Array, Array, Array, Array]  # s, t, field components on a grid
    local: LocalComparison | None
    notes: tuple[str, ...] = ()


# --------------------------------------------------------------------------- equilibria


def _dedupe(states: Sequence[tuple[Array, str]], scale: float) -> list[tuple[Array, str]]:
    kept: list[tuple[Array, str]] = []
    for state, source in states:
        if all(np.linalg.norm(state - other) > SAME_POINT_SHARE * scale for other, _ in kept):
            kept.append((state, source))
    return kept


def window_around(points: Array) -> tuple[float, float, float, float]:
    """A window holding every point with room around it."""
    low, high = points.min(axis=0), points.max(axis=0)
    size = high - low
    room = np.where(size > 0, WINDOW_PAD * size, 0.0)
    lone = LONE_POINT_SIZE * np.maximum(np.abs(points).max(axis=0), 1.0)
    room = np.where(size > 0.05 * max(size.max(), 1e-300), room, np.maximum(room, lone))
    return (low[0] - room[0], high[0] + room[0], low[1] - room[1], high[1] + room[1])


def search_window(points: Array) -> tuple[float, float, float, float]:
    """Where Newton starts are spread: the region the traces met, grown SEARCH_GROWTH times."""
    low, high = points.min(axis=0), points.max(axis=0)
    centre, half = (low + high) / 2, (high - low) / 2
    half = np.maximum(half, LONE_POINT_SIZE * np.maximum(np.abs(centre), 1.0))
    half = SEARCH_GROWTH * half
    return (centre[0] - half[0], centre[0] + half[0], centre[1] - half[1], centre[1] + half[1])


def _grid_starts(plane: Plane, window, count: int) -> Array:
    s = np.linspace(window[0], window[1], count)
    t = np.linspace(window[2], window[3], count)
    ss, tt = np.meshgrid(s, t)
    return plane.to_state(np.column_stack([ss.ravel(), tt.ravel()]))


def find_equilibria(
    model: Model,
    parameters: Array,
    plane: Plane,
    known: Sequence[tuple[Array, str]],
    window: tuple[float, float, float, float],
) -> list[tuple[Array, str]]:
    """Polish the ``known`` guesses (state, source) and search the window for more."""
    found = []
    for guess, source in known:
        solution = solve_equilibrium(model, guess, parameters)
        if solution.converged:
            found.append((solution.state, source))
    for guess in _grid_starts(plane, window, SEARCH_GRID):
        solution = solve_equilibrium(model, guess, parameters)
        if solution.converged:
            found.append((solution.state, "search"))
    scale = max(window[1] - window[0], window[3] - window[2], 1e-300)
    inside = [
        (x, source)
        for x, source in found
        if _in_window(plane.to_plane(x), window, ESCAPE_FACTOR) or source != "search"
    ]
    return _dedupe(inside, scale)


def _in_window(point: Array, window, factor: float = 1.0) -> bool:
    cs, ct = (window[0] + window[1]) / 2, (window[2] + window[3]) / 2
    hs, ht = factor * (window[1] - window[0]) / 2, factor * (window[3] - window[2]) / 2
    return abs(point[0] - cs) <= hs and abs(point[1] - ct) <= ht


def describe(model: Model, state: Array, parameters: Array, plane: Plane, source: str):
    """A PortraitEquilibrium from an equilibrium's linearization."""
    lin: Linearization = linearize(model, state, parameters)
    jac = np.asarray(lin.jacobian, dtype=float)
    values, vectors = np.linalg.eig(jac)
    scale = max(float(np.abs(values).max()), 1e-300)
    directions = []
    for value, vector in zip(values, vectors.T):
        if abs(value.imag) <= 1e-12 * scale:
            flat = plane.project_vector(vector.real)
            norm = float(np.linalg.norm(flat))
            if norm > 1e-9:
                directions.append((float(value.real), flat / norm))
    return PortraitEquilibrium(
        state=np.asarray(state, dtype=float),
        point=plane.to_plane(state),
        eigenvalues=lin.eigenvalues,
        kind=lin.kind,
        decided=lin.hyperbolic,
        source=source,
        directions=tuple(directions),
        description=lin.description,
    )


# --------------------------------------------------------------------------- curves


def _leaves(plane: Plane, window):
    def escape(t: float, x: Array) -> float:
        point = plane.to_plane(x)
        return 0.0 if not _in_window(point, window, ESCAPE_FACTOR) else -1.0

    return escape


def saddle_manifolds(
    model: Model, parameters: Array, plane: Plane, window, equilibria, index: int
) -> list[Manifold]:
    """The one-dimensional stable and unstable manifolds of saddle ``index``, both branches."""
    eq = equilibria[index]
    values, vectors = np.linalg.eig(np.asarray(model.jacobian(eq.state, parameters), dtype=float))
    size = max(window[1] - window[0], window[3] - window[2])
    curves = []
    for which, sign in (("unstable", 1.0), ("stable", -1.0)):
        chosen = [i for i, v in enumerate(values) if abs(v.imag) == 0.0 and v.real * sign > 0]
        if len(chosen) != 1:
            continue  # only one-dimensional manifolds are drawn
        value, vector = values[chosen[0]].real, vectors[:, chosen[0]].real
        vector = vector / np.linalg.norm(vector)
        duration = MANIFOLD_TIMES / abs(value)
        for direction in (1.0, -1.0):
            start = eq.state + direction * MANIFOLD_STEP * size * vector
            path = simulate(
                model,
                parameters,
                start,
                duration,
                samples=None,
                backward=which == "stable",
                stop=_leaves(plane, window),
            )
            states = np.vstack([eq.state, path.states])
            curves.append(
                Manifold(index, which, direction * vector, plane.to_plane(states), states)
            )
    return curves


def trajectories(model: Model, parameters: Array, plane: Plane, window, rate: float) -> list[Array]:
    """A handful of forward trajectories from a grid of starts in the window (plane coords)."""
    s = np.linspace(window[0], window[1], TRAJECTORY_GRID + 2)[1:-1]
    t = np.linspace(window[2], window[3], TRAJECTORY_GRID + 2)[1:-1]
    curves = []
    for a in s:
        for b in t:
            start = plane.to_state(np.array([a, b]))
            path = simulate(
                model,
                parameters,
                start,
                TRAJECTORY_TIMES / rate,
                samples=None,
                stop=_leaves(plane, window),
            )
            if path.states.shape[0] > 1:
                curves.append(plane.to_plane(path.states))
    return curves


def field_grids(model: Model, parameters: Array, plane: Plane, window):
    """(arrows, nullclines): unit arrow directions on a coarse grid and the field's plane
    components on a fine one."""

    def grid(count: int):
        s = np.linspace(window[0], window[1], count)
        t = np.linspace(window[2], window[3], count)
        ss, tt = np.meshgrid(s, t)
        flow = field_at(
            model, plane.to_state(np.column_stack([ss.ravel(), tt.ravel()])), parameters
        )
        uv = plane.project_vector(flow)
        return ss, tt, uv[:, 0].reshape(ss.shape), uv[:, 1].reshape(ss.shape)

    ss, tt, u, v = grid(ARROW_GRID)
    length = np.hypot(u, v)
    length[length == 0] = 1.0
    arrows = (ss, tt, u / length, v / length)
    return arrows, grid(NULLCLINE_GRID)


# --------------------------------------------------------------------------- local panel


def _rates(eq: PortraitEquilibrium) -> float:
    values = np.abs(eq.eigenvalues)
    values = values[values > 0]
    return float(values.max()) if values.size else 1.0


def local_comparison(
    model: Model, parameters: Array, plane: Plane, window, equilibria, index: int
) -> LocalComparison:
    """Linearized and nonlinear trajectories from the same starts around equilibrium ``index``."""
    from scipy.linalg import expm

    eq = equilibria[index]
    # distances measured in units of the window's sides, so that axes of very
    # different scales (concentration and temperature, say) count alike
    unit = np.array([window[1] - window[0], window[3] - window[2]])
    others = [
        np.linalg.norm((e.point - eq.point) / unit) for i, e in enumerate(equilibria) if i != index
    ]
    radius = LOCAL_SHARE * (min(others) if others else 1.0) * unit
    jac = np.asarray(model.jacobian(eq.state, parameters), dtype=float)
    reduced = plane.pseudo_inverse @ jac @ plane.basis  # the linearization seen in the plane
    rate = _rates(eq)
    slow = [abs(v) for v in eq.eigenvalues if abs(v) > 1e-9 * rate]
    duration = 3.0 / min(slow) if slow else 10.0 / rate
    duration = min(duration, 60.0 / rate)
    local = (
        eq.point[0] - radius[0] * 1.5,
        eq.point[0] + radius[0] * 1.5,
        eq.point[1] - radius[1] * 1.5,
        eq.point[1] + radius[1] * 1.5,
    )
    nonlinear, linear = [], []
    samples = 300
    step = expm(reduced * duration / (samples - 1))  # one exact step of the linear flow
    for angle in np.linspace(0.0, 2 * np.pi, LOCAL_STARTS, endpoint=False) + np.pi / LOCAL_STARTS:
        offset = 0.8 * radius * np.array([np.cos(angle), np.sin(angle)])
        start = plane.to_state(eq.point + offset)
        path = simulate(
            model, parameters, start, duration, samples=None, stop=_leaves(plane, _shrunk(local))
        )
        nonlinear.append(plane.to_plane(path.states))
        line = np.empty((samples, 2))
        line[0] = offset
        for k in range(1, samples):
            line[k] = step @ line[k - 1]
        line += eq.point
        inside = np.all(np.abs(line - eq.point) <= 1.5 * radius, axis=1)
        cut = int(np.argmin(inside)) if not inside.all() else len(line)
        linear.append(line[: max(cut, 2)])
    seen = "" if eq.decided else _judge(model, parameters, plane, eq, radius)
    return LocalComparison(index, radius, tuple(nonlinear), tuple(linear), _verdict(eq, seen), seen)


def _shrunk(window):
    """A window whose ESCAPE_FACTOR enlargement is ``window`` itself."""
    cs, ct = (window[0] + window[1]) / 2, (window[2] + window[3]) / 2
    hs = (window[1] - window[0]) / 2 / ESCAPE_FACTOR
    ht = (window[3] - window[2]) / 2 / ESCAPE_FACTOR
    return (cs - hs, cs + hs, ct - ht, ct + ht)


def _judge(
    model: Model, parameters: Array, plane: Plane, eq: PortraitEquilibrium, radius: Array
) -> str:
    """What the nonlinear flow does where the linearization does not decide, by simulation."""
    imag = np.abs(eq.eigenvalues.imag)
    turning = imag.max() > 0
    scale = 2 * np.pi / imag.max() if turning else 1.0 / _rates(eq)
    ends = []
    for angle in np.linspace(0.0, 2 * np.pi, 4, endpoint=False) + 0.3:
        offset = 0.5 * radius * np.array([np.cos(angle), np.sin(angle)])
        path = simulate(
            model, parameters, plane.to_state(eq.point + offset), JUDGE_TURNS * scale, samples=50
        )
        end = np.linalg.norm((plane.to_plane(path.states[-1]) - eq.point) / radius)
        ends.append(end / np.linalg.norm(offset / radius))
    ends = np.array(ends)
    if np.all(ends < APPROACH_RATIO):
        return "stable focus" if turning else "stable (approached from every side tried)"
    if np.all(ends > 1 / APPROACH_RATIO):
        return "unstable focus" if turning else "unstable (left from every side tried)"
    if np.all(np.abs(ends - 1.0) < 1 - APPROACH_RATIO):
        return "centre-like (orbits keep their distance over the time simulated)"
    return "approached from some sides and left from others (a saddle-node-like point)"


def _verdict(eq: PortraitEquilibrium, seen: str) -> str:
    if eq.decided:
        return (
            f"Linearization: {eq.words}. It decides the local picture (hyperbolic; "
            "Hartman-Grobman theorem): near the point the two flows match."
        )
    return (
        f"Linearization: {eq.words}. It does NOT decide the type here (an eigenvalue on "
        f"the imaginary axis): the nonlinear terms do. Simulated: {seen}."
    )
