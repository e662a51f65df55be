"""Families of periodic orbits: start at a Hopf point (or a period doubling), follow, end.

:func:`trace_cycles` builds the small orbits near a located Hopf point from
the critical eigenvector and the first Lyapunov coefficient, corrects the
first one on the collocation system and hands the problem of
:mod:`branchline.problems.cycles` to the continuation engine.
:func:`trace_doubled` starts the doubled family at a located period doubling.

A family also ends when its period grows without bound while the orbit stays
bounded (the approach to a homoclinic orbit or a saddle-node on the orbit):
status ``homoclinic``, with the last period and the equilibrium nearest the
orbit's slowest point in the message.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import TYPE_CHECKING

import numpy as np

from branchline.continuation import correctors
from branchline.continuation import engine as continuation
from branchline.numerics import collocation, floquet, linalg
from branchline.numerics.eigenvalues import eigenvector_near
from branchline.problems.cycles import OrbitPoint, PeriodicOrbitProblem
from branchline.problems.equilibrium import linearize, solve_equilibrium
from branchline.results.records import STATUS_FAILED, CycleFamily, Event
from branchline.vocabulary import Status

if TYPE_CHECKING:
    from branchline.model.build import Model

Array = np.ndarray

STATUS_HOMOCLINIC = Status.HOMOCLINIC
# The first orbit lies this fraction of the parameter window away from the Hopf
# value (its amplitude then follows from the normal form r^2 = -alpha'(p - p0) /
# (omega l1)): small enough for the normal form to be accurate, large enough to be
# well away from the Hopf point, where the family meets the equilibria.
START_PARAMETER_FRACTION = 1e-4
# ... but its amplitude (states' units) stays within these bounds relative to
# 1 + |x0| (a Hopf point near a Bautin point has l1 ~ 0 and huge predicted amplitudes).
START_AMPLITUDE_RANGE = (1e-4, 2e-2)
# Homoclinic approach: the period exceeds this multiple of the smallest period on
# the family, still grows, and the orbit's size changes much more slowly than the
# period (relative change below ``BOUNDED_GROWTH`` times the period's).
HOMOCLINIC_PERIOD_FACTOR = 10.0
BOUNDED_GROWTH = 0.1
# An equilibrium found from the orbit's slowest point counts as lying on the
# orbit when it is this close (relative to the orbit's size).
ON_ORBIT_DISTANCE = 0.05


class FamilyEnds(continuation.ObservationFailed):
    """Raised by the watched problem's ``observe``: the family ends here (not a failure)."""


class _WatchedOrbits(PeriodicOrbitProblem):
    """The collocation problem, watching for a period that grows without bound."""

    ended: str = ""
    _history: list

    def observe(self, u, tangent, jacobian):
        point, tests = super().observe(u, tangent, jacobian)
        history = getattr(self, "_history", [])
        self._history = history
        extent = float(np.max(point.maxima - point.minima))
        if history:
            smallest = min(period for period, _ in history)
            last_period, last_extent = history[-1]
            period_change = (point.period - last_period) / last_period
            extent_change = abs(extent - last_extent) / max(last_extent, 1e-300)
            if (
                point.period > HOMOCLINIC_PERIOD_FACTOR * smallest
                and period_change > 0.0
                and extent_change < BOUNDED_GROWTH * period_change
            ):
                self.ended = homoclinic_message(self, u, point, smallest)
                raise FamilyEnds(self.ended)
        history.append((point.period, extent))
        return point, tests


def homoclinic_message(problem: PeriodicOrbitProblem, u: Array, point: OrbitPoint, smallest):
    """Words for a family stopped on a growing period: last period, nearest equilibrium."""
    model = problem.model
    values, _, parameter = problem.unpack(u)
    p = problem._parameters(parameter)
    speeds, _, _ = problem._model_at(values, p, derivatives=False)
    slowest = values[int(np.argmin(np.linalg.norm(speeds, axis=1)))]
    size = float(np.max(point.maxima - point.minima))
    where = ", ".join(f"{s}={v:.6g}" for s, v in zip(model.states, slowest, strict=True))
    text = (
        f"the period grows without bound while the orbit stays bounded (last period "
        f"{point.period:.8g}, {point.period / smallest:.3g} times the smallest on the family, "
        f"at {model.parameters[problem.vary_index]}={parameter:.10g}): the orbits approach a "
        "homoclinic orbit or an equilibrium appearing on the orbit"
    )
    solution = solve_equilibrium(model, slowest, p)
    if solution.converged and np.linalg.norm(solution.state - slowest) <= ON_ORBIT_DISTANCE * size:
        kind = linearize(model, solution.state, p).description
        found = ", ".join(f"{s}={v:.6g}" for s, v in zip(model.states, solution.state, strict=True))
        return f"{text}; nearest equilibrium ({found}): {kind}"
    return (
        f"{text}; no equilibrium yet at the orbit's slowest point ({where}): "
        "a saddle-node is about to appear on the orbit"
    )


def _cycle_side_offset(hopf: Event, width: float) -> tuple[float, float | None]:
    """(parameter offset of the first orbit, d offset / d r^2) from the normal form, or (0, None)."""
    form = hopf.details.get("normal_form", {}) if hopf.details else {}
    growth = form.get("growth_rate")
    if hopf.lyapunov is None or not growth or not hopf.frequency or hopf.lyapunov == 0.0:
        return 0.0, None
    per_square = -hopf.frequency * hopf.lyapunov / growth  # p - p0 = per_square * r^2
    offset = math.copysign(START_PARAMETER_FRACTION * width, per_square)
    return offset, per_square


def _critical_vector(model: Model, hopf: Event) -> Array:
    """q with A q = i omega q, <q, q> = 1/2, largest component real (as in events.json)."""
    stored = (hopf.details or {}).get("eigenvectors", {}).get("right")
    if stored:
        q = np.array([complex(re, im) for re, im in stored])
    else:
        a_matrix = model.state_jacobian(hopf.state, hopf.parameters)
        _, q = eigenvector_near(a_matrix, 1j * float(hopf.frequency))
    return q / math.sqrt(2.0 * float(np.vdot(q, q).real))


def hopf_start(
    model: Model,
    hopf: Event,
    interval: tuple[float, float],
    intervals: int,
    degree: int,
    amplitude: float,
    *,
    dense: bool = False,
) -> tuple[_WatchedOrbits, Array, Array]:
    """The collocation problem, the first orbit's guess and the direction of travel.

    The guess is x(s) = x0 + 2 r Re(q exp(2 pi i s)), T = 2 pi / omega, at
    p = p0 + (p - p0)(r) from the normal form (Kuznetsov, Elements of Applied
    Bifurcation Theory, section 3.5: r^2 = -alpha' (p - p0) / (omega l1)). With l1
    known, r is chosen so that the first orbit lies ``START_PARAMETER_FRACTION`` of
    the window from the Hopf value; otherwise r = ``amplitude`` at p = p0.
    """
    k = model.parameter_index(hopf.vary)
    x0, p0 = np.asarray(hopf.state, dtype=float), float(hopf.value)
    q = _critical_vector(model, hopf)
    offset, per_square = _cycle_side_offset(hopf, interval[1] - interval[0])
    scale = 1.0 + float(np.max(np.abs(x0)))
    lo, hi = (bound * scale for bound in START_AMPLITUDE_RANGE)
    if per_square is None:
        radius, slope = min(max(amplitude, lo), hi), 0.0
    else:
        radius = min(max(math.sqrt(offset / per_square), lo), hi)
        offset = per_square * radius**2
        slope = 2.0 * per_square * radius  # d(p - p0) / dr
    mesh = np.linspace(0.0, 1.0, intervals + 1)
    wave = np.exp(2j * np.pi * collocation.representation_times(mesh, degree))
    shape = 2.0 * (wave[:, None] * q[None, :]).real  # (N m, n)
    values = x0[None, :] + radius * shape
    problem = _WatchedOrbits(model, k, hopf.parameters, mesh, degree, values, dense=dense)
    u_guess = problem.pack(values, 2.0 * math.pi / float(hopf.frequency), p0 + offset)
    direction = problem.pack(shape, 0.0, slope)
    return problem, u_guess, direction / np.linalg.norm(direction)


def follow_family(
    problem: PeriodicOrbitProblem,
    u0: Array,
    tangent0: Array,
    steps,
    interval: tuple[float, float],
    *,
    exact_tangent: bool = False,
    progress: Callable[[int], None] | None = None,
) -> tuple[continuation.Curve, str, str]:
    """Follow the family from the orbit u0; (curve, status, message)."""
    curve = continuation.follow_curve(
        problem,
        u0,
        tangent0,
        steps,
        interval,
        progress=progress,
        start_tangent_exact=exact_tangent,
    )
    ended = getattr(problem, "ended", "")
    if ended:
        return curve, STATUS_HOMOCLINIC, ended
    return curve, curve.status, curve.message


def corrected_start(problem, u_guess: Array, direction: Array) -> tuple[Array | None, str]:
    """The first orbit: Newton on the collocation system in the plane through the guess
    normal to ``direction``; (u, "") or (None, why not)."""
    counts = correctors.EvaluationCounts()
    with np.errstate(all="ignore"):
        correction = correctors.correct_newton(
            correctors.evaluator(problem), u_guess, direction, None, counts
        )
    return (correction.solution, "") if correction.converged else (None, correction.message)


def trace_cycles(
    model: Model,
    name: str,
    hopf: Event,
    interval: tuple[float, float],
    steps,
    *,
    intervals: int = 40,
    degree: int = 4,
    progress: Callable[[int], None] | None = None,
    dense: bool = False,
) -> CycleFamily:
    """Follow the periodic orbits born at the located Hopf point ``hopf``.

    Parameters
    ----------
    model : branchline.model.build.Model
    name : str
    hopf : branchline.results.records.Event
        A located Hopf point (kind ``hopf``): state, parameters, frequency, and when
        available the critical eigenvector and the first Lyapunov coefficient.
    interval : (lo, hi)
        Window for the varied parameter; the family ends exactly on its edge.
    steps : StepSettings-like
        ``initial`` (also the first orbit's amplitude when l1 is unknown),
        ``smallest``, ``largest``, ``max_points``.
    intervals, degree : int
        Mesh intervals N and Gauss-Legendre points per interval m.
    dense : bool
        Dense Jacobians (benchmark only).

    Returns
    -------
    CycleFamily
        Never raises for numerical trouble: see ``status`` and ``message``.
    """
    problem, u_guess, direction = hopf_start(
        model, hopf, interval, intervals, degree, float(steps.initial), dense=dense
    )
    origin = f"the Hopf point at {hopf.vary}={hopf.value:.10g} on trace {hopf.trace}"
    u0, why = corrected_start(problem, u_guess, direction)
    if u0 is None:
        return family_record(
            name,
            hopf.vary,
            hopf.parameters,
            None,
            degree,
            interval,
            STATUS_FAILED,
            f"no periodic orbit found near {origin}: {why}",
            origin=origin,
        )
    curve, status, message = follow_family(
        problem, u0, direction, steps, interval, progress=progress
    )
    return family_record(
        name, hopf.vary, hopf.parameters, curve, degree, interval, status, message, origin=origin
    )


def family_record(
    name, vary, parameters, curve, degree, interval, status, message, *, origin="", parent=None
) -> CycleFamily:
    """The CycleFamily record of a followed curve (None: no orbit at all)."""
    orbits: tuple = ()
    arclength = np.empty(0)
    counts: dict[str, int] = {}
    tests = np.empty((0, 3))
    if curve is not None and len(curve):
        orbits = tuple(curve.payloads)
        arclength = np.asarray(curve.arclength, dtype=float)
        counts = dict(curve.counts)
        tests = np.asarray(curve.test_values, dtype=float).reshape(len(curve), -1)
    return CycleFamily(
        name=name,
        vary=vary,
        parameters=np.array(parameters, dtype=float),
        orbits=orbits,
        arclength=arclength,
        degree=int(degree),
        status=status,
        message=message,
        interval=(float(interval[0]), float(interval[1])),
        counts=counts,
        parent=parent,
        origin=origin,
        test_values=tests,
    )


def doubled_start(
    problem: PeriodicOrbitProblem, u: Array
) -> tuple[PeriodicOrbitProblem, Array, Array]:
    """The doubled orbit's problem, the orbit u traversed twice, and the switching direction.

    The Floquet eigenfunction phi of the multiplier nearest -1 is propagated along the
    orbit through the condensed collocation system; on the doubled period it is
    antiperiodic (phi, then -phi), and it spans the new direction at the period
    doubling, where the doubled family crosses the orbit traversed twice (a pitchfork
    in the doubled system; Kuznetsov, Elements of Applied Bifurcation Theory,
    section 10.3; from memory). On the sparse path the multiplier and its
    eigenvector come from Arnoldi, the eigenfunction from the cut-open system.
    Raises :class:`branchline.numerics.floquet.FloquetFailed` when the
    multipliers cannot be computed.
    """
    values, period, parameter = problem.unpack(u)
    m = problem.degree
    if problem.sparse_floquet:
        phi = _doubling_eigenfunction(problem, u)
    else:
        phi = _doubling_eigenfunction_dense(problem, u)
    mesh = np.concatenate([problem.mesh / 2.0, 0.5 + problem.mesh[1:] / 2.0])
    twice = np.concatenate([values, values])
    doubled = type(problem)(
        problem.model,
        problem.vary_index,
        problem._parameters(parameter),
        mesh,
        m,
        twice,
        dense=problem.dense,
    )
    u0 = doubled.pack(twice, 2.0 * period, parameter)
    direction = doubled.pack(np.concatenate([phi, -phi]), 0.0, 0.0)
    return doubled, u0, direction / linalg.norm(direction)


def _doubling_eigenfunction(problem: PeriodicOrbitProblem, u: Array) -> Array:
    """The eigenfunction of the kept multiplier nearest -1 (sparse path), (N m, n).

    One factorization of the cut-open collocation system gives both the
    multipliers (Arnoldi) and the eigenfunction (one more solve from its start).
    """
    action = problem.monodromy_action(u)
    result = floquet.leading_multipliers(action)
    vector = result.vectors[:, int(np.argmin(np.abs(result.multipliers + 1.0)))]
    # an eigenvector of a real eigenvalue is real up to a complex factor: rotate it real
    vector = vector * np.exp(-1j * np.angle(vector[int(np.argmax(np.abs(vector)))]))
    start = vector.real / np.linalg.norm(vector.real)
    return floquet.eigenfunction(action, start)


def _doubling_eigenfunction_dense(problem: PeriodicOrbitProblem, u: Array) -> Array:
    """The eigenfunction of the multiplier nearest -1 from the dense monodromy, (N m, n)."""
    values, period, parameter = problem.unpack(u)
    _, fx, _ = problem._model_at(
        problem._nodes(values)[0].reshape(-1, problem.n), problem._parameters(parameter)
    )
    n, m = problem.n, problem.degree
    blocks = problem.blocks(fx, period).reshape(problem.intervals, m * n, (m + 1) * n)
    transfers = collocation.interval_transfers(blocks, n)
    monodromy = np.eye(n)
    for transfer in transfers[:, -n:, :]:
        monodromy = transfer @ monodromy
    eigenvalues, vectors = np.linalg.eig(monodromy)
    vector = vectors[:, int(np.argmin(np.abs(eigenvalues + 1.0)))].real
    phi = np.empty_like(values)
    current = vector / np.linalg.norm(vector)
    for j, transfer in enumerate(transfers):
        phi[j * m] = current
        interior = (transfer @ current).reshape(m, n)
        phi[j * m + 1 : j * m + m] = interior[:-1]
        current = interior[-1]
    return phi


__all__ = [
    "STATUS_HOMOCLINIC",
    "doubled_start",
    "family_record",
    "follow_family",
    "hopf_start",
    "trace_cycles",
]
