"""The continuation engine: pseudo-arclength following of one solution curve.

Every curve branchline follows is a curve of solutions of G(u) = 0 with
G: R^(N+1) -> R^N. The engine follows it with Keller's pseudo-arclength
method (Keller, "Numerical solution of bifurcation and nonlinear eigenvalue
problems", 1977; Allgower & Georg, Introduction to Numerical Continuation
Methods, chapter 2): a tangent predictor u + h t, then Newton's method on the
bordered system

    G(u) = 0,   t . (u - u_predicted) = 0,

whose Jacobian is [G_u; t^T], then the tangent at the new point from
[G_u(u_new); t_old^T] z = e_{N+1}, t_new = z / |z|. Since t_old . z = 1 > 0
the orientation is kept through turning points.

The pieces: :mod:`branchline.continuation.correctors` (full Newton and chord correctors
on the bordered system, the tangent), :mod:`branchline.continuation.step_control` (step
lengths, the tangent-angle and test-function rules, the interval edge, closing
an isola); this module holds the problem protocol, the :class:`Curve` record
and the loop that ties them together.

The problem protocol
--------------------
A *problem* is any object with these members (the equilibrium branch of
:mod:`branchline.problems.equilibrium_branch` is one; fold and Hopf curves, cycles are others):

``residual(u) -> ndarray (N,)``
    G(u). May return non-finite values; the engine treats them as a failed
    corrector step and shrinks the step.
``jacobian(u) -> ndarray (N, N + 1) or scipy.sparse matrix``
    dG/du. Sparse Jacobians switch the engine to sparse LU (SuperLU).
``observe(u, tangent, jacobian) -> (payload, test_values)``
    Called once at every accepted point with the converged point, its unit
    tangent (in the direction of travel) and the Jacobian there. ``payload``
    is anything to keep per point (e.g. eigenvalues); ``test_values`` is a
    1-D float array of test functions whose sign changes mark events. When the
    payload cannot be computed (eigenvalues that do not converge, say) it raises
    :class:`ObservationFailed` with the reason: the curve then ends there with
    status ``failed``, keeping the points before it.

Optional members:

``evaluate(u) -> (G, G_u)``
    Both at once, when that is cheaper (shared subexpressions).
``describe(u) -> str``
    A short text naming the point for messages ("at D=0.3, S=1.2").
``tangent_factorization(jacobian, lu, z) -> None``
    For sparse Jacobians only: told the factorization the engine made for the
    tangent at a corrected point (factors ``lu`` of [G_u; previous^T], from
    :func:`branchline.numerics.linalg.factor_bordered`, and
    z = its solution for e_(N+1); the tangent is z / |z|), before the ``observe``
    that follows, so that a problem can keep what it gives (the equilibrium
    branch reads its branch-point test from it).
``tangent(jacobian, previous) -> ndarray (N + 1,)``
    For sparse Jacobians only, instead of the engine's own factorization: the
    unit tangent at a corrected point (raising
    :class:`branchline.numerics.linalg.SingularMatrixError` when undefined); the
    ``reuse`` corrector then has no factors to reuse and runs full Newton.
``adapt(u, tangent) -> (u, tangent)``
    Called after each accepted step, before the next prediction, with the
    point just recorded and its unit tangent; returns the pair (same shapes)
    from which the next prediction u + h t starts. The recorded row keeps the
    point as corrected and observed; the engine normalizes the returned
    tangent. It is not called at the start point, at a point put on an edge or
    limit, or at the closing point of an isola. A periodic-orbit problem
    redistributes its mesh here (and may update its own reference data, such
    as a phase condition); it must return a point on the same curve.
``revisit_rejected`` (bool attribute)
    True when ``observe`` is a pure function of its arguments (nothing carried
    from one call to the next): a point whose step the test-function rule rejects
    is then kept with its observation and offered again as the next point once a
    shorter step is accepted (:mod:`branchline.continuation.revisit`), so that no
    observation is thrown away. Absent or False, or with ``adapt``: every step is
    predicted anew.

Rules a problem must follow: ``u``'s last component is the curve's parameter
(the one the ``bounds`` apply to; ``limits`` may bound any other component); the
functions must not modify ``u``, print or write files; for numerical trouble they
return NaN rather than raise (ArithmeticError and ValueError are caught anyway and
count as a failed step).
The engine runs under ``np.errstate(all="ignore")``.

One factorization per point (sparse Jacobians)
-----------------------------------------------
With ``newton="reuse"`` and a sparse Jacobian the engine factorizes once per
accepted point, for the tangent there (f_x alone with block elimination for the
border, or the bordered matrix near a fold: ``linalg.factor_bordered``), and uses
those factors
three times: the tangent, the problem's ``tangent_factorization`` hook, and the
next step's corrector, a chord iteration on that matrix with the border swapped
for the new tangent by a rank-one update
(:func:`branchline.continuation.correctors.correct_with_factors`). When that
chord iteration does not contract, full Newton from the same predicted point
takes over. The points satisfy the same convergence test either way.

How a curve ends
----------------
``done``: it left the parameter bounds, or a component left its ``limits``, and
its last point lies exactly on that edge or limit. ``closed``: it passed by the
start point again with the same orientation (an isola); the start point is
appended as the last point. ``max_points``: ``settings.max_points`` reached. ``failed``: the corrector failed at the
smallest step, the edge point could not be found, ``observe`` raised
:class:`ObservationFailed`, or memory ran out (``MemoryError``); the message says
where and why.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np

from branchline.continuation import correctors, escape, revisit, step_control
from branchline.continuation.correctors import EvaluationCounts
from branchline.continuation.step_control import Limit
from branchline.numerics import linalg
from branchline.numerics.newton import NewtonResult
from branchline.numerics.tolerances import StepSettings
from branchline.vocabulary import Status

Array = np.ndarray

# The correctors (``newton`` of follow_curve).
CORRECTORS = ("full", "chord", "reuse")
# The progress callback is called every this many accepted points.
PROGRESS_INTERVAL = 50


class ObservationFailed(ArithmeticError):
    """Raised by a problem's ``observe``: this point's payload cannot be computed.

    The engine ends the curve with status ``failed`` and a message naming the
    point and this exception's text (the reason); the points before it are kept.
    """


class CurveProblem(Protocol):
    """The protocol a problem hands to :func:`follow_curve` (see the module docstring)."""

    def residual(self, u: Array) -> Array:
        """G(u), shape (N,); NaN rather than an exception on numerical trouble."""
        ...

    def jacobian(self, u: Array) -> Any:
        """G_u(u), shape (N, N + 1): ndarray or scipy.sparse matrix."""
        ...

    def observe(self, u: Array, tangent: Array, jacobian: Any) -> tuple[Any, Array]:
        """(payload, test values (K,)) at an accepted point; see the module docstring."""
        ...


@dataclass(frozen=True)
class CurveRows:
    """The rows of a curve: one per point, the fields every curve record shares.

    The engine's :class:`Curve` (one side, in the order of travel) and a trace's
    rows joined in trace order (:func:`branchline.problems.tracing.in_trace_order`)
    are both these rows.

    Attributes
    ----------
    points : ndarray (k, N + 1)
        Converged points u (the parameter last).
    tangents : ndarray (k, N + 1)
        Unit tangents in the direction of travel (of the trace, for joined rows).
    arclength : ndarray (k,)
        Distance travelled from the start (sum of chord lengths); signed, negative
        on a trace's decreasing side, for joined rows.
    newton_iterations : ndarray (k,) int
        Corrector iterations of each point (0 for the start point).
    residual_norms : ndarray (k,)
        |G(u)| at each point.
    test_values : ndarray (k, T)
    payloads : ndarray (k, ...) or tuple
        What ``observe`` returned per point, stacked when possible.
    """

    points: Array
    tangents: Array
    arclength: Array
    newton_iterations: Array
    residual_norms: Array
    test_values: Array
    payloads: Any

    def __len__(self) -> int:
        return self.points.shape[0]


@dataclass(frozen=True)
class Curve(CurveRows):
    """A followed curve: its rows (:class:`CurveRows`, the start point first) and how it ended.

    Attributes
    ----------
    status : Status
        ``done`` (left the bounds, last point on the edge), ``max_points``,
        ``closed`` (isola), ``failed``.
    message : str
        How it ended; on failure where (parameter, state) and why.
    counts : dict[str, int]
        ``rhs_evaluations``, ``jacobian_evaluations``, ``factorizations``,
        ``rejected_steps``, ``newton_iterations`` (total); ``revisited_points`` (kept
        points recorded later) for problems with ``revisit_rejected``.
    """

    status: Status
    message: str
    counts: dict[str, int] = field(default_factory=dict)


def failed_curve(u: Array, message: str, counts: dict[str, int] | None = None) -> Curve:
    """A curve with no points and status ``failed`` (it could not start at ``u``)."""
    size = u.shape[0]
    return Curve(
        points=np.empty((0, size)),
        tangents=np.empty((0, size)),
        arclength=np.empty(0),
        newton_iterations=np.empty(0, dtype=int),
        residual_norms=np.empty(0),
        test_values=np.empty((0, 0)),
        payloads=(),
        status=Status.FAILED,
        message=message,
        counts={} if counts is None else counts,
    )


def describe_point(problem: CurveProblem, u: Array) -> str:
    """Text naming a point of a curve, from ``problem.describe`` or generic."""
    describe = getattr(problem, "describe", None)
    if describe is not None:
        return describe(u)
    head = ", ".join(f"{value:.6g}" for value in u[:-1][:6])
    more = ", ..." if u.shape[0] > 7 else ""
    return f"at parameter {u[-1]:.10g}, state ({head}{more})"


def follow_curve(
    problem: CurveProblem,
    u0: Array,
    tangent0: Array,
    settings: StepSettings,
    bounds: tuple[float, float] = (-math.inf, math.inf),
    *,
    newton: str = "full",
    progress: Callable[[int], None] | None = None,
    start_tangent_exact: bool = False,
    limits: Mapping[int, tuple[float, float]] | Sequence[Limit] = (),
) -> Curve:
    """Follow the solution curve of ``problem`` from ``u0`` along ``tangent0``.

    Parameters
    ----------
    problem : CurveProblem
        See the module docstring for the protocol.
    u0 : ndarray (N + 1,)
        A point on the curve (a converged solution; it is recorded as is).
    tangent0 : ndarray (N + 1,)
        Direction of travel. Unless ``start_tangent_exact``, the tangent at
        ``u0`` is recomputed from the Jacobian and oriented like ``tangent0``.
    settings : branchline.numerics.tolerances.StepSettings
        ``initial``, ``smallest``, ``largest`` step (pseudo-arclength units)
        and ``max_points`` (including the start point).
    bounds : (lo, hi)
        Window for the parameter u[-1]; the curve stops on its edge.
    newton : {"full", "chord", "reuse"}
        Corrector: full Newton (Jacobian at every iterate) or the chord method
        (bordered matrix factorized once per step), or for sparse Jacobians the
        chord method on the last point's tangent factorization, full Newton
        when that does not contract (one factorization per point; see "One
        factorization per point" above; dense Jacobians: full Newton). Full Newton needs fewer
        iterations and is faster for small dense models (see
        tests/benchmarks/bench_trace.py); the chord method saves
        factorizations for large sparse ones.
    progress : callable(int), optional
        Called with the number of accepted points every ``PROGRESS_INTERVAL``
        points and at the end.
    start_tangent_exact : bool
        Use ``tangent0`` itself as the start tangent (branch switching at a
        branch point, where the bordered system is singular).
    limits : mapping {index: (lo, hi)} or sequence of Limit, optional
        Windows for other components of u (states): the curve stops when one
        leaves its window, its last point exactly on the limit (G = 0 solved
        with that component fixed there). A :class:`Limit` carries the name
        used in messages; a mapping's entries are named ``u[index]``. With no
        limits the engine's loop does no extra work.

    Returns
    -------
    Curve
        Never raises for numerical trouble; see ``status`` and ``message``.

    Examples
    --------
    The unit circle x^2 + p^2 = 1 is followed once around and closes:

    >>> import numpy as np
    >>> class Circle:
    ...     def residual(self, u): return np.array([u[0] ** 2 + u[1] ** 2 - 1.0])
    ...     def jacobian(self, u): return np.array([[2 * u[0], 2 * u[1]]])
    ...     def observe(self, u, t, jac): return None, np.array([t[-1]])
    >>> curve = follow_curve(Circle(), np.array([1.0, 0.0]), np.array([0.0, 1.0]), StepSettings())
    >>> curve.status, round(float(curve.arclength[-1]), 2)
    ('closed', 6.28)
    """
    if newton not in CORRECTORS:
        raise ValueError(f"newton must be one of {CORRECTORS}, not {newton!r}")
    u0 = np.array(u0, dtype=float)
    with np.errstate(all="ignore"):
        walk = _Walk(problem, settings, bounds, newton, _as_limits(limits, u0.shape[0]))
        why_not = walk.start(u0, np.array(tangent0, dtype=float), start_tangent_exact)
        if why_not:
            return failed_curve(u0, why_not, walk.counts.as_dict())
        while not walk.status:
            try:
                accepted = _move(walk) is _Step.ACCEPT
            except MemoryError as exc:
                # the points so far are kept: the curve ends here like a failed step
                walk.stop(
                    Status.FAILED,
                    f"ran out of memory after the point {describe_point(problem, walk.u)} "
                    f"({exc or 'MemoryError'})",
                )
                break
            if accepted and progress is not None and len(walk.rows) % PROGRESS_INTERVAL == 0:
                progress(len(walk.rows))
    if progress is not None:
        progress(len(walk.rows))
    return _curve_from_rows(walk.rows, walk.status, walk.message, walk.curve_counts())


def _as_limits(limits, size: int) -> tuple[Limit, ...]:
    """``limits`` as a tuple of Limit with indices in 0 .. size - 2 (states only)."""
    if isinstance(limits, Mapping):
        limits = [
            Limit(int(index), float(lo), float(hi), f"u[{int(index)}]")
            for index, (lo, hi) in limits.items()
        ]
    normalized = []
    for limit in limits:
        index = limit.index % size
        if index == size - 1:
            raise ValueError("limits apply to states; bound the parameter with bounds")
        if not limit.lo < limit.hi:
            raise ValueError(f"limit {limit.name} needs lo < hi, got [{limit.lo}, {limit.hi}]")
        normalized.append(Limit(index, float(limit.lo), float(limit.hi), limit.name))
    return tuple(normalized)


class _Step:
    """What one step of the engine did (compared by identity)."""

    ACCEPT = "accept"  # a new point was recorded
    REJECT = "reject"  # the step was shrunk; try again from the same point
    STOP = "stop"  # the curve ended; ``status`` and ``message`` say how


class _Walk:
    """The state of one curve being followed: the last point, its tangent, the step,
    the rows recorded so far and how the curve ended (``status`` "" while it runs)."""

    __slots__ = (
        "adapt",
        "arclength",
        "chord_on_factors",
        "counts",
        "escape",
        "evaluate",
        "factors",
        "factors_hook",
        "hi",
        "kept",
        "kept_at",
        "largest",
        "limits",
        "lo",
        "max_points",
        "message",
        "newton",
        "pending_factors",
        "problem",
        "revisit",
        "revisited",
        "rows",
        "smallest",
        "sparse",
        "status",
        "step",
        "t",
        "t_start",
        "tangent_hook",
        "tests_floor",
        "tracked",
        "u",
        "u_start",
    )

    def __init__(self, problem, settings, bounds, newton: str, limits) -> None:
        self.problem = problem
        self.evaluate = correctors.evaluator(problem)
        self.adapt = getattr(problem, "adapt", None)
        self.tangent_hook = getattr(problem, "tangent", None)
        self.factors_hook = getattr(problem, "tangent_factorization", None)
        self.factors = self.pending_factors = None
        self.chord_on_factors = False
        self.newton = newton
        self.lo, self.hi = float(bounds[0]), float(bounds[1])
        self.limits = limits
        self.smallest, self.largest = float(settings.smallest), float(settings.largest)
        self.max_points = int(settings.max_points)
        self.step = step_control.first_step(float(settings.initial), self.smallest, self.largest)
        self.tests_floor = step_control.tests_step_floor(self.smallest, self.largest)
        self.counts = EvaluationCounts()
        self.rows: list[tuple] = []
        self.status, self.message = "", ""
        self.arclength = 0.0
        self.escape = None
        # Points rejected by the test-function rule, kept with their observation
        # (continuation/revisit.py), for problems whose observe is pure.
        # Not with ``adapt``: a kept point would miss the changes it makes between steps.
        self.revisit = bool(getattr(problem, "revisit_rejected", False)) and self.adapt is None
        self.kept: tuple = ()
        self.kept_at = 0  # the number of rows when the last point was kept
        self.revisited = 0

    def curve_counts(self) -> dict[str, int]:
        """The curve's counts; with ``revisited_points`` when kept points are offered."""
        counts = self.counts.as_dict()
        if self.revisit:
            counts["revisited_points"] = self.revisited
        return counts

    def start(self, u: Array, t: Array, tangent_exact: bool) -> str:
        """Record the start point; "" or why the curve cannot start there."""
        problem = self.problem
        g0, jac, reason = correctors.safe_evaluate(self.evaluate, u)
        self.counts.rhs += 1
        self.counts.jacobian += 1
        if reason:
            return f"cannot start {describe_point(problem, u)}: {reason}"
        t = t / linalg.norm(t)
        self.sparse = linalg.is_sparse(jac)
        if not tangent_exact:
            t, reason = self.tangent_at(
                jac,
                t,
                "the tangent is undefined there (singular bordered Jacobian; a branch point?)",
            )
            if reason:
                return f"cannot start {describe_point(problem, u)}: {reason}"
            self.factors = self.pending_factors
        try:
            payload, tests = problem.observe(u, t, jac)
        except ObservationFailed as exc:
            return f"cannot start {describe_point(problem, u)}: {exc}"
        tests = np.asarray(tests, dtype=float)
        # One tuple per accepted point, in the order of Curve's columns (one append per point).
        self.rows.append((u, t, 0.0, 0, linalg.norm(g0), tests, payload))
        self.tracked = step_control.track_tests(tests.tolist())
        self.u, self.t = self.u_start, self.t_start = u, t
        self.escape = escape.watch_for(problem, u)
        self.status, self.message = _outside_at_start(self, u)
        return ""

    def tangent_at(self, jac, previous: Array, singular_message: str):
        """(unit tangent, "") at a corrected point with Jacobian ``jac``, or (None, why not)."""
        self.pending_factors = None
        try:
            self.counts.factorizations += 1
            if self.sparse and self.tangent_hook is not None:
                return self.tangent_hook(jac, previous), ""
            if self.sparse:
                return self.factored_tangent(jac, previous), ""
            return correctors.unit_tangent(jac, previous, self.sparse), ""
        except linalg.SingularMatrixError:
            return None, singular_message

    def factored_tangent(self, jac, previous: Array) -> Array:
        """The unit tangent from one sparse factorization for [G_u; previous^T] (of f_x
        by block elimination, or of the bordered matrix: ``linalg.factor_bordered``),
        whose factors are kept for the next corrector (see the module docstring)."""
        lu, z = linalg.factor_bordered(jac, previous)
        length = linalg.norm(z)
        if not 0.0 < length < math.inf:
            raise linalg.SingularMatrixError("the tangent is not finite")
        if self.factors_hook is not None:
            self.factors_hook(jac, lu, z)
        self.pending_factors = (lu, z, previous)
        return z / length

    def stop(self, status: Status, message: str) -> str:
        self.status, self.message = status, message
        return _Step.STOP

    def reject(self, floor: float) -> str:
        self.counts.rejected += 1
        self.step = step_control.shrunk(self.step, floor)
        return _Step.REJECT


def _outside_at_start(walk: _Walk, u: Array) -> tuple[str, str]:
    """("", "") or (failed, why) when the start point lies outside the bounds or a limit."""
    where = describe_point(walk.problem, u)
    if not walk.lo <= u[-1] <= walk.hi:
        return Status.FAILED, (
            f"the start point {where} lies outside the parameter "
            f"interval [{walk.lo:.10g}, {walk.hi:.10g}]"
        )
    for limit in walk.limits:
        if step_control.beyond_limit(u[limit.index], limit) is not None:
            return Status.FAILED, (
                f"the start point {where} lies outside the limit "
                f"{limit.name} in [{limit.lo:.10g}, {limit.hi:.10g}]"
            )
    return "", ""


def _correct(walk: _Walk) -> NewtonResult:
    """The corrector's run from the predicted point u + h t (pseudo-arclength border t)."""
    predicted = walk.u + walk.step * walk.t
    problem = walk.problem
    walk.chord_on_factors = False
    if walk.newton == "chord":
        return correctors.correct_chord(
            walk.evaluate, problem.residual, problem.jacobian, predicted, walk.t, walk.counts
        )
    if walk.factors is not None and walk.newton == "reuse":
        reused = correctors.correct_with_factors(
            problem.residual, problem.jacobian, predicted, walk.t, walk.factors, walk.counts
        )
        if reused.converged:
            walk.chord_on_factors = True
            return reused
        walk.counts.newton += reused.iterations
    return correctors.correct_newton(walk.evaluate, predicted, walk.t, None, walk.counts)


def _move(walk: _Walk) -> str:
    """One move along the curve: a kept point offered again (see
    :mod:`branchline.continuation.revisit`), else a new step; then judged."""
    runaway = walk.escape.check(walk.u) if walk.escape is not None else ""
    if runaway:
        return walk.stop(Status.FAILED, runaway)
    if len(walk.rows) >= walk.max_points:
        return walk.stop(
            Status.MAX_POINTS,
            f"stopped after {walk.max_points} points (steps.max_points) "
            f"{describe_point(walk.problem, walk.u)}",
        )
    if walk.kept and len(walk.rows) > walk.kept_at:
        # a point was accepted since the last one was kept (never offered again
        # from the point whose step the rule rejected)
        point, walk.kept = revisit.offered(walk.kept, walk.u, walk.t)
        if point is not None:
            verdict = _judge(walk, point, revisited=True)
            if verdict is _Step.ACCEPT:
                walk.revisited += 1
            if verdict is not _Step.REJECT:
                return verdict
            # not taken from here (it stays kept): a new step follows at once
    candidate = _step(walk)
    if isinstance(candidate, str):
        return candidate
    return _judge(walk, candidate)


def _step(walk: _Walk) -> revisit.ObservedPoint | str:
    """Predict, correct, check the tangent's turn and the window, observe: the new
    point, or what happened instead (a rejected step or the curve's end)."""
    correction = _correct(walk)
    walk.counts.newton += correction.iterations
    failure = correction.message
    if correction.converged:
        t_new, failure = walk.tangent_at(
            correction.jacobian,
            walk.t,
            "the tangent is undefined at the corrected point (singular bordered matrix)",
        )
    if failure:
        if walk.step <= walk.smallest:
            return walk.stop(
                Status.FAILED,
                f"the corrector failed at the smallest step ({walk.smallest:g}) after the "
                f"point {describe_point(walk.problem, walk.u)}: {failure}",
            )
        return walk.reject(walk.smallest)
    if step_control.tangent_turns_too_far(t_new, walk.t, walk.step, walk.smallest):
        return walk.reject(walk.smallest)
    u_new = correction.solution
    if _leaves_window(walk, u_new):
        return _Step.STOP
    try:
        payload, tests = walk.problem.observe(u_new, t_new, correction.jacobian)
    except ObservationFailed as exc:
        return walk.stop(Status.FAILED, f"stopped {describe_point(walk.problem, u_new)}: {exc}")
    return revisit.ObservedPoint(
        u_new,
        t_new,
        correction,
        walk.pending_factors,
        walk.chord_on_factors,
        payload,
        np.asarray(tests, dtype=float),
    )


def _judge(walk: _Walk, point: revisit.ObservedPoint, revisited: bool = False) -> str:
    """The test-function rule and the isola check on the step from the last point to
    ``point``; record it when it passes (a rejected point is kept when the problem
    allows it). A ``revisited`` point's step is its chord, not the current step."""
    u = walk.u
    chord = point.u - u
    chord_length = math.sqrt(chord.dot(chord))  # .dot: see correctors
    values = point.tests.tolist()
    # The limit is read from step_control at run time, so that it can be tuned (or
    # switched off, as tests/test_continuation.py does) in one place.
    if step_control.tests_unresolved(
        walk.tracked,
        values,
        chord_length,
        chord_length if revisited else walk.step,
        walk.tests_floor,
        step_control.TEST_CHANGE_LIMIT,
    ):
        if walk.revisit:
            walk.kept = revisit.kept_with(walk.kept, point, u, walk.t)
            walk.kept_at = len(walk.rows)
        if revisited:
            # an offer declined is no step: neither counted nor shrinking the step, so
            # that a kept point never holds the steps down
            return _Step.REJECT
        return walk.reject(walk.tests_floor)
    if step_control.closes_loop(
        walk.u_start, walk.t_start, u, walk.t, chord, chord_length, len(walk.rows)
    ):
        walk.arclength += linalg.norm(walk.u_start - u)
        walk.rows.append(_start_again(walk.rows[0], walk.arclength))
        return walk.stop(
            Status.CLOSED, "the branch closed on itself (an isola) back at its start point"
        )
    _record(walk, point, chord_length, values)
    return _Step.ACCEPT


def _record(walk: _Walk, point: revisit.ObservedPoint, chord_length: float, values) -> None:
    """Accept the judged point: remember it, adapt it (optional hook), grow the step."""
    walk.tracked = step_control.tracked_after(walk.tracked, values, chord_length)
    walk.arclength += chord_length
    correction = point.correction
    iterations = correction.iterations
    u_new, t_new = point.u, point.tangent
    walk.rows.append(
        (u_new, t_new, walk.arclength, iterations, correction.residual_norm, point.tests,
         point.payload)
    )
    if walk.adapt is not None:
        u_new, t_new = _adapted(walk.adapt, u_new, t_new)
    walk.u, walk.t = u_new, t_new
    walk.factors = point.factors
    easy = (
        step_control.EASY_CHORD_ITERATIONS
        if point.chord_on_factors
        else step_control.EASY_ITERATIONS
    )
    walk.step = step_control.grown(walk.step, iterations, walk.largest, easy)


def _leaves_window(walk: _Walk, u_new: Array) -> bool:
    """True (the curve then ends on the edge or limit) when the step leaves the parameter
    bounds or a state limit; the first one reached along the chord wins."""
    u = walk.u
    edge = step_control.crossed_edge(u_new[-1], walk.lo, walk.hi)
    if walk.limits:
        hit = step_control.first_limit(u, u_new, walk.limits)
        if hit is not None and (
            edge is None or hit[2] <= step_control.edge_fraction(u, u_new, edge)
        ):
            limit, bound, _ = hit
            walk.status, walk.message = _finish_on_edge(walk, u_new, bound, limit)
            return True
    if edge is not None:
        walk.status, walk.message = _finish_on_edge(walk, u_new, edge)
        return True
    return False


def _adapted(adapt, u: Array, t: Array) -> tuple[Array, Array]:
    """The problem's ``adapt(u, t)`` with its shapes checked and the tangent normalized."""
    u_new, t_new = adapt(u, t)
    u_new = np.asarray(u_new, dtype=float)
    t_new = np.asarray(t_new, dtype=float)
    if u_new.shape != u.shape or t_new.shape != t.shape:
        raise ValueError(
            f"adapt must keep the shapes of u and tangent {u.shape}, got {u_new.shape} "
            f"and {t_new.shape}"
        )
    return u_new, t_new / linalg.norm(t_new)


def _finish_on_edge(walk: _Walk, u_out: Array, edge: float, limit=None) -> tuple[str, str]:
    """Append the point exactly on the interval edge to the rows; returns (status, message).

    ``walk.u`` is the last accepted point, ``u_out`` the corrected point beyond ``edge``.
    With a ``limit`` (a :class:`Limit`), ``edge`` is its bound and the point is put
    exactly on that limit of the state instead.
    """
    problem, u, counts = walk.problem, walk.u, walk.counts
    if limit is None:
        index, where = -1, f"the edge {edge:.10g} of the parameter interval"
    else:
        index, where = limit.index, f"the limit {limit.name} = {edge:.10g} of trace limits"
    reached = Status.DONE, f"reached {where}"
    if u[index] == edge:
        return reached
    if limit is None:
        guess = step_control.edge_guess(u, u_out, edge)
        correction = correctors.correct_on_edge(
            walk.evaluate, guess, edge, counts, sparse=walk.sparse
        )
    else:
        correction = correctors.correct_on_limit(walk.evaluate, u, u_out, edge, index, counts)
    counts.newton += correction.iterations
    if not correction.converged:
        return Status.FAILED, (
            f"could not put the last point on {where} (after the point "
            f"{describe_point(problem, u)}): {correction.message}"
        )
    u_edge = correction.solution
    t_edge, singular = walk.tangent_at(correction.jacobian, walk.t, "undefined")
    if singular:
        # The edge point is a solution but a singular one (a branch point or a
        # line of equilibria lies on the edge): keep the last tangent for its row.
        t_edge = walk.t
        reached = Status.DONE, reached[1] + " (a singular point: the tangent there is undefined)"
    try:
        payload, tests = problem.observe(u_edge, t_edge, correction.jacobian)
    except ObservationFailed as exc:
        return Status.FAILED, f"stopped {describe_point(problem, u_edge)}: {exc}"
    arclength = walk.arclength + linalg.norm(u_edge - u)
    residual = linalg.norm(correction.residual)
    walk.rows.append(
        (
            u_edge,
            t_edge,
            arclength,
            correction.iterations,
            residual,
            np.asarray(tests, float),
            payload,
        )
    )
    return reached


def _start_again(first_row: tuple, arclength: float) -> tuple:
    """The start point's row again, at ``arclength`` and with no iterations (a closed curve)."""
    u, t, _, _, residual, tests, payload = first_row
    return u, t, arclength, 0, residual, tests, payload


def _curve_from_rows(rows: list[tuple], status: str, message: str, counts: dict) -> Curve:
    points, tangents, arcs, iterations, residuals, tests, payloads = zip(*rows, strict=True)
    return Curve(
        points=np.array(points),
        tangents=np.array(tangents),
        arclength=np.array(arcs),
        newton_iterations=np.array(iterations, dtype=int),
        residual_norms=np.array(residuals),
        test_values=np.array(tests),
        payloads=_stack(list(payloads)),
        status=status,
        message=message,
        counts=counts,
    )


def _stack(payloads: list) -> Any:
    try:
        return np.array(payloads)
    except (ValueError, TypeError):
        return tuple(payloads)
