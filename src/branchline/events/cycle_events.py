"""Events on families of periodic orbits: cycle fold, period doubling, torus.

Sign changes of the test functions of :func:`branchline.problems.cycles.cycle_tests`
between two computed orbits bracket an event. Each is refined by a secant
method (the Illinois variant of regula falsi; Dahlquist and Bjoerck, Numerical
Methods, section 6.2; from memory) on the collocation system itself: for a
trial fraction theta of the chord between the two orbits, the orbit is
corrected by Newton's method in the hyperplane through
u_a + theta (u_b - u_a) normal to the chord, and the test function is
evaluated there (for the cycle fold on the tangent, for the others on the
Floquet multipliers of the corrected orbit). The iteration stops when the
bracket is below ``LOCATE_TOLERANCE`` (relative) or the test function vanishes.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from branchline.continuation import correctors
from branchline.numerics import collocation
from branchline.numerics.floquet import FloquetFailed
from branchline.problems.cycles import PeriodicOrbitProblem, cycle_tests
from branchline.results.records import CycleFamily, Event
from branchline.vocabulary import EventKind

Array = np.ndarray

KINDS = (EventKind.CYCLE_FOLD, EventKind.PERIOD_DOUBLING, EventKind.TORUS)
# Relative width of the final bracket along the chord (in u): below it the located
# orbit is as good as the collocation system can place it.
LOCATE_TOLERANCE = 1e-12
MAX_SECANT_STEPS = 60
# A torus bracket whose crossing pair has an imaginary part below this (relative to
# its modulus) is a real pair with product 1 (a neutral saddle): not a torus.
REAL_PAIR_TOLERANCE = 1e-6


def problem_for(family: CycleFamily, model, row: int) -> PeriodicOrbitProblem:
    """A collocation problem on the mesh of orbit ``row``, phase reference that orbit."""
    orbit = family.orbits[row]
    k = model.parameter_index(family.vary)
    return PeriodicOrbitProblem(
        model, k, family.parameters, orbit.mesh, family.degree, orbit.values
    )


def orbit_vector(problem: PeriodicOrbitProblem, orbit) -> Array:
    """u of ``orbit`` on ``problem``'s mesh (interpolated when the meshes differ)."""
    values = orbit.values
    if orbit.mesh.shape != problem.mesh.shape or not np.array_equal(orbit.mesh, problem.mesh):
        times = collocation.representation_times(problem.mesh, problem.degree)
        values = collocation.evaluate_periodic(orbit.mesh, problem.degree, orbit.values, times)
    return problem.pack(values, orbit.period, orbit.parameter)


def _test_at(problem, u, tangent, which: int) -> tuple[float, object]:
    point = problem.orbit_point(u)
    return float(cycle_tests(tangent, point.multipliers, point.trivial)[which]), point


def refine(problem: PeriodicOrbitProblem, u_a: Array, u_b: Array, which: int):
    """Illinois secant on the collocation system between orbits u_a and u_b.

    Returns
    -------
    (u, tangent, OrbitPoint, iterations, message) ; message "" on success.
    """
    evaluate = correctors.evaluator(problem)
    counts = correctors.EvaluationCounts()
    chord = u_b - u_a
    length = float(np.linalg.norm(chord))
    direction = chord / length
    ends = []
    for u in (u_a, u_b):
        correction = correctors.correct_newton(evaluate, u, direction, None, counts)
        ok, u_c, jac, why = (
            correction.converged, correction.solution, correction.jacobian, correction.message
        )
        if not ok:
            return None, None, None, 0, f"the bracketing orbits do not correct ({why})"
        tangent = correctors.unit_tangent(jac, direction, True)
        ends.append(_test_at(problem, u_c, tangent, which)[0])
    lo, hi, g_lo, g_hi = 0.0, 1.0, ends[0], ends[1]
    if g_lo * g_hi > 0:
        return None, None, None, 0, "the test function does not change sign between the orbits"
    best = None
    side = 0
    scale = 1.0 + float(np.linalg.norm(u_a))
    for iteration in range(1, MAX_SECANT_STEPS + 1):
        theta = (lo * g_hi - hi * g_lo) / (g_hi - g_lo) if g_hi != g_lo else 0.5 * (lo + hi)
        if not lo < theta < hi:
            theta = 0.5 * (lo + hi)
        guess = u_a + theta * chord
        correction = correctors.correct_newton(evaluate, guess, direction, None, counts)
        ok, u, jac, why = (
            correction.converged, correction.solution, correction.jacobian, correction.message
        )
        if not ok:
            return None, None, None, iteration, f"Newton failed inside the bracket ({why})"
        tangent = correctors.unit_tangent(jac, direction, True)
        value, point = _test_at(problem, u, tangent, which)
        best = (u, tangent, point, iteration, "")
        if value == 0.0:
            break
        if math.copysign(1.0, value) == math.copysign(1.0, g_lo):
            lo, g_lo = theta, value
            if side == -1:
                g_hi *= 0.5
            side = -1
        else:
            hi, g_hi = theta, value
            if side == 1:
                g_lo *= 0.5
            side = 1
        if (hi - lo) * length <= LOCATE_TOLERANCE * scale:
            break
    return best


def _brackets(family: CycleFamily, tests: Array) -> list[tuple[int, int]]:
    """(row, test index) where test ``index`` changes sign between row and row + 1."""
    found = []
    for which in range(tests.shape[1]):
        column = tests[:, which]
        for row in range(len(column) - 1):
            if column[row] * column[row + 1] < 0:
                found.append((row, which))
    return sorted(found)


def locate_cycle_events(
    model, family: CycleFamily, tests: Array, missed: list[str] | None = None
) -> list[Event]:
    """Located cycle folds, period doublings and tori on a family, in family order.

    Parameters
    ----------
    model : branchline.model.build.Model
    family : CycleFamily
    tests : ndarray (k, 3)
        The test values per orbit (the engine's ``test_values``).
    missed : list of str, optional
        Gets one sentence for every sign change that could not be located (Newton or
        the Floquet multipliers failed inside its bracket): where it is and why.
    """
    events = []
    for row, which in _brackets(family, tests):
        problem = problem_for(family, model, row + 1)
        u_a = orbit_vector(problem, family.orbits[row])
        u_b = orbit_vector(problem, family.orbits[row + 1])
        try:
            located = refine(problem, u_a, u_b, which)
            why = "" if located is not None and located[0] is not None else "Newton failed"
            if located is not None and located[0] is None:
                why = located[4] or why
        except FloquetFailed as failure:
            located, why = None, str(failure)
        if why:
            if missed is not None:
                missed.append(_unlocated(family, row, KINDS[which], why))
            continue
        u, _tangent, point, iterations, _ = located
        event = _event(model, family, KINDS[which], problem, u, point, row, iterations)
        if event is not None:
            events.append(event)
    return events


def _unlocated(family: CycleFamily, row: int, kind: EventKind, why: str) -> str:
    """Where a sign change of a cycle test function lies and why it was not located."""
    low, high = family.orbits[row].parameter, family.orbits[row + 1].parameter
    return (
        f"cycles {family.name}: a {kind.value.replace('_', ' ')} between orbits {row + 1} and "
        f"{row + 2} ({family.vary} {low:.8g} to {high:.8g}) was not located: {why}"
    )


def _event(model, family, kind, problem, u, point, row, iterations) -> Event | None:
    values, period, parameter = problem.unpack(u)
    parameters = problem._parameters(parameter)
    rest = point.nontrivial
    details = {
        "period": period,
        "multipliers": [[float(z.real), float(z.imag)] for z in point.multipliers],
        "method": "Illinois secant on the collocation system between two orbits",
        "secant_steps": iterations,
        "orbit_row": row,
        "orbit_mesh": problem.mesh.tolist(),
        "orbit_values": values.tolist(),
    }
    if kind == EventKind.TORUS:
        products = [abs(abs(z) - 1.0) for z in rest]
        crossing = rest[int(np.argmin(products))]
        if abs(crossing.imag) <= REAL_PAIR_TOLERANCE * abs(crossing):
            return None  # a real pair with product 1: a neutral saddle, not a torus
        angle = abs(math.atan2(crossing.imag, crossing.real))
        details["angle"] = angle
        note = (
            f"a complex pair of multipliers crosses the unit circle at angle {angle:.8g} rad "
            f"(ratio to 2 pi {angle / (2 * math.pi):.6g}); period {period:.10g}"
        )
    elif kind == EventKind.PERIOD_DOUBLING:
        crossing = rest[int(np.argmin(np.abs(rest + 1.0)))]
        note = f"multiplier {crossing.real:.10g} passes through -1; period {period:.10g}"
    else:
        note = f"the family turns back in {family.vary}; period {period:.10g}"
    return Event(
        trace=family.name,
        kind=kind,
        vary=family.vary,
        value=parameter,
        state=values[0].copy(),
        parameters=parameters,
        arclength=float(family.arclength[row]),
        note=note,
        details=details,
    )


def with_note(event: Event, words: str) -> Event:
    """The event with ``words`` appended to its note."""
    return replace(event, note=f"{event.note}; {words}" if event.note else words)


__all__ = ["KINDS", "locate_cycle_events", "orbit_vector", "problem_for", "refine", "with_note"]
