"""The robust margin: the nearest fold or Hopf point to a nominal point in scaled parameters.

With k uncertain parameters q, scales s and the nominal point q0, a parameter
point is measured in scaled units z = (q - q0) / s. The fold (or Hopf) points
form a surface of codimension one in q; its point nearest to the nominal point
solves the boundary's defining system E(x, [kappa], q) = 0 together with the
normal-vector condition

    z = r * nu(x, [kappa], q),      nu = S n / |S n|,   n = mu^T E_q,

where mu is the left null vector of E's state block (so that n is the normal of
the surface in parameter space: w^T f_q at a fold, w the left null vector of
f_x), S = diag(s), and r is the signed distance (Dobson, "Computing a closest
bifurcation instability in multidimensional parameter space", J. Nonlinear Sci.
3, 1993; the normal-vector method of Mönnigmann and Marquardt, "Normal vectors
on manifolds of critical points for parametric robustness of equilibrium
solutions of ODE systems", J. Nonlinear Sci. 12, 2002; titles from memory).
E is the minimally augmented system of the boundary curves
(:mod:`branchline.problems.fold_curve`, :mod:`branchline.problems.hopf_curve`)
with exact derivatives; nu's derivatives come from forward differences of the
exactly computed nu (reused while Newton converges fast), so the residual, and the located point, stay exact.

Newton starts from a fold or Hopf event located on a trace (it lies on the
surface): the answer is the nearest point of the part of the surface reached
from there. A critical point farther than the start is not a nearest point and
is refused.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import scipy.sparse as sps

from branchline.events.defining_systems import newton
from branchline.problems.boundary import PROBLEMS, start_point
from branchline.results.records import Event
from branchline.results.robust_margin_records import NearestPoint, RobustMargin

Array = np.ndarray

# Relative step of the forward differences of nu: sqrt(eps) balances truncation
# against rounding (Nocedal & Wright, Numerical Optimization, 2nd ed., sec. 8.1). They
# only shape Newton's steps: the residual, and so the located point, stay exact.
NORMAL_STEP = float(np.sqrt(np.finfo(float).eps))
# d nu / dy costs n + k normal evaluations: it is reused (a chord step) while each
# Newton iteration shrinks the residual at least this much, and recomputed otherwise.
CHORD_RATE = 0.1
# Events whose fixed parameters differ from the nominal point's by more than this
# (relative) lie in another slice of parameter space: not used.
SLICE_RTOL = 1e-12
# The descent along the surface stops when the tangential part of the scaled offset is
# this small relative to it (Newton on the normal-vector system finishes from there),
# after this many steps, or when a step this small (as a share of the tangential
# part) no longer shortens the offset.
DESCENT_RTOL = 1e-2
DESCENT_MAX_STEPS = 200
DESCENT_SMALLEST_SHARE = 1.0 / 64
# Two nearest points closer than this (relative, in the unknowns) are one.
SAME_POINT_RTOL = 1e-7


@dataclass(frozen=True)
class MarginSetting:
    """What the margin is measured from: indices of the uncertain parameters, their
    scales (k,) and the nominal parameter vector (m,)."""

    indices: tuple[int, ...]
    scales: Array
    nominal: Array


class NearestPointSystem:
    """The normal-vector system of one boundary surface as a square Newton system.

    Unknowns y = (x (n), [kappa], q (k), r); equations (E (n + 1 or n + 2), z - r nu (k)).
    """

    def __init__(self, model, kind: str, event: Event, setting: MarginSetting) -> None:
        self.setting = setting
        self.indices = list(setting.indices)
        self.n = len(model.states)
        self.extra = 1 if kind == "hopf" else 0
        first, second = self.indices[0], self.indices[1]
        problem_class = PROBLEMS[kind]
        parameters = np.array(setting.nominal, dtype=float)
        u0 = start_point(problem_class, event, first, second)
        self.problem = problem_class(model, first, second, parameters, u0)
        self.state_columns = list(range(self.n)) + ([self.n + 1] if self.extra else [])
        self._normal_block: Array | None = None  # d nu / dy, reused while Newton converges
        self._last_size = np.inf

    # ------------------------------------------------------------------ layout

    def start(self, event: Event) -> Array:
        """y at the event (on the surface), r = nu . z there."""
        n, e = self.n, self.extra
        y = np.zeros(n + e + len(self.indices) + 1)
        y[:n] = event.state
        if e:
            y[n] = float(event.frequency or 0.0) ** 2
        y[n + e : -1] = event.parameters[self.indices]
        y[-1] = float(self.normal(y) @ self.scaled(y))
        return y

    def point(self, y: Array) -> Array:
        """The curve problem's u at y (its parameter vector set to y's q)."""
        n, e = self.n, self.extra
        q = y[n + e : -1]
        self.problem.p[self.indices] = q
        return self.problem.pack(y[:n], q[0], q[1], y[n : n + e])

    def scaled(self, y: Array) -> Array:
        """z = (q - q0) / s."""
        q = y[self.n + self.extra : -1]
        return (q - self.setting.nominal[self.indices]) / self.setting.scales

    # ------------------------------------------------------------------ the system

    def normal(self, y: Array) -> Array:
        """nu: the unit normal of the surface in scaled parameters, shape (k,)."""
        gradient = self.problem.surface_normal(self.point(y), self.indices)
        scaled = self.setting.scales * gradient
        return scaled / np.linalg.norm(scaled)

    def __call__(self, y: Array) -> tuple[Array, Array]:
        """(residual, Jacobian) at y, for :func:`branchline.events.defining_systems.newton`."""
        n, e, k = self.n, self.extra, len(self.indices)
        u = self.point(y)
        residual, jacobian = self.problem.evaluate(u)
        jacobian = jacobian.toarray() if sps.issparse(jacobian) else np.asarray(jacobian)
        rows = residual.shape[0]
        full = np.zeros((rows + k, y.shape[0]))
        full[:rows, : n + e] = jacobian[:, self.state_columns]
        full[:rows, n + e : -1] = self.problem.parameter_derivatives(u, self.indices)
        nu = self.normal(y)
        r = float(y[-1])
        residual = np.concatenate([residual, self.scaled(y) - r * nu])
        size = float(np.linalg.norm(residual))
        if self._normal_block is None or size > CHORD_RATE * self._last_size:
            self._normal_block = self._normal_derivatives(y, nu)
        self._last_size = size
        full[rows:, : n + e + k] = -r * self._normal_block
        full[rows:, n + e : -1] += np.diag(1.0 / self.setting.scales)
        full[rows:, -1] = -nu
        return residual, full

    # ------------------------------------------------------------------ descent

    def onto_surface(self, y: Array, target: Array, direction: Array) -> Array | None:
        """y on the surface at z = target + s direction (s and the states solved for by
        Newton from y), or None when Newton fails."""
        n, e = self.n, self.extra
        setting = self.setting
        moved = setting.scales * direction

        def system(w: Array) -> tuple[Array, Array]:
            trial = self._with_offset(y, w, target, direction)
            u = self.point(trial)
            residual, jacobian = self.problem.evaluate(u)
            jacobian = jacobian.toarray() if sps.issparse(jacobian) else np.asarray(jacobian)
            column = self.problem.parameter_derivatives(u, self.indices) @ moved
            return residual, np.column_stack([jacobian[:, self.state_columns], column])

        w0 = np.append(y[: n + e], float((self.scaled(y) - target) @ direction))
        outcome = newton(system, w0)
        if not outcome.converged:
            return None
        return self._with_offset(y, outcome.solution, target, direction)

    def _with_offset(self, y: Array, w: Array, target: Array, direction: Array) -> Array:
        n, e = self.n, self.extra
        out = y.copy()
        out[: n + e] = w[:-1]
        z = target + w[-1] * direction
        out[n + e : -1] = self.setting.nominal[self.indices] + self.setting.scales * z
        return out

    def descend(self, y: Array) -> Array:
        """Steepest descent of |z| along the surface from the surface point y: a step
        along the tangential part of z, back onto the surface along the normal,
        accepted when |z| decreases (halved otherwise), until the tangential part is
        below ``DESCENT_RTOL`` |z|. Newton on the full system then finishes from a
        point near the minimum, never near a saddle of the distance."""
        for _ in range(DESCENT_MAX_STEPS):
            z, nu = self.scaled(y), self.normal(y)
            tangential = z - float(nu @ z) * nu
            size = float(np.linalg.norm(z))
            if np.linalg.norm(tangential) <= DESCENT_RTOL * size:
                break
            share = 1.0
            while share >= DESCENT_SMALLEST_SHARE:
                moved = self.onto_surface(y, z - share * tangential, nu)
                if moved is not None and np.linalg.norm(self.scaled(moved)) < size:
                    y = moved
                    break
                share *= 0.5
            else:
                break
        y = y.copy()
        y[-1] = float(self.normal(y) @ self.scaled(y))
        return y

    def _normal_derivatives(self, y: Array, nu: Array) -> Array:
        """d nu / d(x, [kappa], q) by forward differences, shape (k, n + e + k)."""
        columns = y.shape[0] - 1
        out = np.empty((len(self.indices), columns))
        for j in range(columns):
            up = y.copy()
            up[j] += NORMAL_STEP * max(1.0, abs(float(y[j])))
            out[:, j] = (self.normal(up) - nu) / (up[j] - y[j])
        return out


def nearest_point(model, event: Event, number: int, setting: MarginSetting) -> NearestPoint:
    """The point of ``event``'s fold or Hopf surface nearest to the nominal point.

    Parameters
    ----------
    model : branchline.model.build.Model
    event : Event
        A located ``fold`` or ``hopf`` event whose non-uncertain parameters are nominal.
    number : int
        Which event of that kind on its trace (for the record's label).
    setting : MarginSetting

    Returns
    -------
    NearestPoint
        Never raises for numerical trouble: ``status`` ``failed`` and ``message`` say why.
    """
    system = NearestPointSystem(model, event.kind, event, setting)
    with np.errstate(all="ignore"):
        try:
            y0 = system.start(event)
            outcome = newton(system, system.descend(y0))
        except (ArithmeticError, ValueError, np.linalg.LinAlgError, RuntimeError) as exc:
            return _failed(event, number, setting, f"the normal vector is undefined there ({exc})")
    if not outcome.converged:
        return _failed(event, number, setting, outcome.message, outcome.residual_norms)
    y = outcome.solution
    n, e = system.n, system.extra
    if e and not y[n] > 0.0:
        return _failed(
            event,
            number,
            setting,
            "the nearest point lies beyond a Bogdanov-Takens point (no Hopf point there)",
            outcome.residual_norms,
        )
    z = system.scaled(y)
    distance = float(np.linalg.norm(z))
    start_distance = float(np.linalg.norm(system.scaled(y0)))
    if distance > start_distance * (1.0 + 1e-9) + 1e-12:
        return _failed(
            event,
            number,
            setting,
            f"Newton found a critical point farther ({distance:.6g}) than the start "
            f"({start_distance:.6g}): not a nearest point",
            outcome.residual_norms,
        )
    parameters = np.array(setting.nominal, dtype=float)
    parameters[list(setting.indices)] = y[n + e : -1]
    direction = z / distance if distance > 0.0 else system.normal(y)
    return NearestPoint(
        trace=event.trace,
        kind=event.kind,
        number=number,
        status="done",
        distance=distance,
        direction=direction,
        parameters=parameters,
        state=y[:n].copy(),
        frequency=float(np.sqrt(y[n])) if e else None,
        residual_norms=list(outcome.residual_norms),
    )


def _failed(event, number, setting, message, history=()) -> NearestPoint:
    z = (event.parameters[list(setting.indices)] - setting.nominal[list(setting.indices)]) / (
        setting.scales
    )
    distance = float(np.linalg.norm(z))
    return NearestPoint(
        trace=event.trace,
        kind=event.kind,
        number=number,
        status="failed",
        distance=distance,
        direction=z / distance if distance > 0 else np.zeros_like(z),
        parameters=np.array(event.parameters, dtype=float),
        state=np.array(event.state, dtype=float),
        frequency=event.frequency,
        message=message,
        residual_norms=list(history),
    )


def robust_margin(model, spec, events: list[Event], traces: set[str]) -> RobustMargin:
    """The nearest point of every fold and Hopf surface met by the traces' events.

    Parameters
    ----------
    model : branchline.model.build.Model
    spec : branchline.scan.margin_section.RobustMarginSpec
    events : list of Event
        The run's events; the fold and Hopf events of equilibrium traces start the
        searches (events of boundaries and cycles are not used).
    traces : set of str
        The names of the equilibrium traces.

    Returns
    -------
    RobustMargin
    """
    names = tuple(spec.scales)
    indices = tuple(model.parameter_index(name) for name in names)
    scales = np.array([spec.scales[name] for name in names], dtype=float)
    setting = MarginSetting(indices, scales, model.parameter_vector(spec.nominal))
    fixed = [i for i in range(len(model.parameters)) if i not in indices]
    points: list[NearestPoint] = []
    skipped = []
    counters: dict[tuple[str, str], int] = {}
    for event in events:
        if event.kind not in PROBLEMS or event.trace not in traces:
            continue
        key = (event.trace, event.kind)
        counters[key] = counters.get(key, 0) + 1
        number = counters[key]
        off = [
            model.parameters[i]
            for i in fixed
            if abs(event.parameters[i] - setting.nominal[i])
            > SLICE_RTOL * (1.0 + abs(setting.nominal[i]))
        ]
        if off:
            skipped.append(
                f"{event.trace} {event.kind} {number}: lies where {', '.join(off)} differ from "
                "the nominal point and are not uncertain; not used"
            )
            continue
        found = nearest_point(model, event, number, setting)
        points.append(_mark_repeat(found, points))
    return RobustMargin(names, setting.scales, setting.nominal, tuple(points), tuple(skipped))


def _mark_repeat(found: NearestPoint, earlier: list[NearestPoint]) -> NearestPoint:
    """``found`` with ``same_as`` set when an earlier start reached the same point."""
    if found.status != "done":
        return found
    for other in earlier:
        if other.status != "done" or other.kind != found.kind:
            continue
        a = np.concatenate([found.parameters, found.state])
        b = np.concatenate([other.parameters, other.state])
        if np.linalg.norm(a - b) <= SAME_POINT_RTOL * (1.0 + np.linalg.norm(b)):
            return replace(found, same_as=other.same_as or other.label)
    return found
