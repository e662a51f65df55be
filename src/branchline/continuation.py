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

Full Newton (the Jacobian at every iterate) is the default corrector; the
chord method (the bordered matrix factorized once per step) is available.
Measured on a 2-state model (tests/benchmarks/bench_trace.py), full Newton
is faster: it needs fewer iterations and a small dense factorization costs
about as much as the bookkeeping around it. The chord method pays off when
factorizations dominate (large sparse models).

The problem protocol
--------------------
A *problem* is any object with these members (the equilibrium branch of
:mod:`branchline.branches` is one; fold and Hopf curves, cycles are others):

``residual(u) -> ndarray (N,)``
    G(u). May return non-finite values; the engine treats them as a failed
    corrector step and shrinks the step.
``jacobian(u) -> ndarray (N, N + 1) or scipy.sparse matrix``
    dG/du. Sparse Jacobians switch the engine to sparse LU (SuperLU).
``observe(u, tangent, jacobian) -> (payload, test_values)``
    Called once at every accepted point with the converged point, its unit
    tangent (in the direction of travel) and the Jacobian there. ``payload``
    is anything to keep per point (e.g. eigenvalues); ``test_values`` is a
    1-D float array of test functions whose sign changes mark events.

Optional members:

``evaluate(u) -> (G, G_u)``
    Both at once, when that is cheaper (shared subexpressions).
``describe(u) -> str``
    A short text naming the point for messages ("at D=0.3, S=1.2").

Rules a problem must follow: ``u``'s last component is the curve's parameter
(the one the ``bounds`` apply to); the functions must not modify ``u``, print
or write files; for numerical trouble they return NaN rather than raise
(ArithmeticError and ValueError are caught anyway and count as a failed step).
The engine runs under ``np.errstate(all="ignore")``.

Step control (all factors are named constants below)
----------------------------------------------------
- Grow the step by ``GROW_FACTOR`` after a corrector that converged in at most
  ``EASY_ITERATIONS`` iterations; shrink it by ``SHRINK_FACTOR`` and retry
  when the corrector fails (no convergence, divergence, singular bordered
  matrix, non-finite residual). At the smallest step a failure stops the
  curve with status ``failed``.
- Shrink and retry when the tangent turns by more than ``MAX_TANGENT_ANGLE``
  in one step (the predictor would be poor, and a sharp turn may hide a fold
  pair).
- Test-function rule, so that two events close together are not stepped
  over: with the slope of each test function from the last step, the value
  at the new point is predicted linearly. If a test function deviates from
  that prediction by more than ``TEST_CHANGE_LIMIT`` times its local size
  (the larger of its magnitudes at the two ends of the step, plus
  ``TEST_SCALE_FLOOR`` times the largest magnitude seen on the curve), the
  step is rejected and shrunk. A test function that dips through zero and
  back within one step must curve strongly relative to its size, which this
  rule catches. The rule never shrinks below ``TEST_STEP_FLOOR`` times the
  largest step (nor below the smallest step).
- Leaving the parameter bounds: the last point is put exactly on the edge by
  solving G(u) = 0 with the parameter fixed at the edge value; status ``done``.
- Passing by the start point again with the same orientation closes the curve
  (an isola): the start point is appended as the last point; status ``closed``.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np
import scipy.sparse.linalg as spla

from branchline import linalg

Array = np.ndarray

# --- Corrector -------------------------------------------------------------
# Residual norm accepted as zero (Euclidean); see equilibrium.RESIDUAL_TOL.
RESIDUAL_TOL = 1e-10
# Newton update accepted as converged, relative to 1 + |u|. Quadratic
# convergence makes the error after an update of size d about C d^2, so
# 1e-6 leaves ~1e-12; together with the residual test it stops after two
# iterations on a well-predicted step instead of three.
UPDATE_RTOL = 1e-6
# Updates this small (relative) are roundoff: the residual cannot drop further.
STAGNATION_RTOL = 16 * np.finfo(float).eps
MAX_CORRECTOR_ITERATIONS = 6
# A Newton update larger than this times the previous one means divergence.
DIVERGENCE_RATIO = 1.0
# The chord method (Jacobian frozen at the predicted point) converges linearly;
# it is abandoned when an update does not shrink at least by this factor.
CHORD_CONTRACTION = 0.5
MAX_CHORD_ITERATIONS = 10

# --- Step control ----------------------------------------------------------
EASY_ITERATIONS = 2  # converged this fast: the step may grow
GROW_FACTOR = 1.5
SHRINK_FACTOR = 0.5
# Largest angle between successive tangents (radians); ~17 degrees keeps the
# predictor error well inside Newton's convergence region (common practice).
MAX_TANGENT_ANGLE = 0.3
_MIN_TANGENT_COSINE = math.cos(MAX_TANGENT_ANGLE)
# Test-function rule (module docstring): a deviation from the linear prediction
# of half the function's local size means the step does not resolve it.
TEST_CHANGE_LIMIT = 0.5
# Part of the largest magnitude seen that counts as "size" where the function
# is near zero, so that roundoff around a zero does not shrink the step.
TEST_SCALE_FLOOR = 1e-3
# The rule stops shrinking at this fraction of the largest step: it resolves
# events, it must not stall a trace on a test function that is not smooth.
TEST_STEP_FLOOR = 1e-4
# A point closer to the start than this fraction of the step (measured from the
# chord of the step) counts as the start point again (closing an isola).
LOOP_DISTANCE_FRACTION = 0.25
# The progress callback is called every this many accepted points.
PROGRESS_INTERVAL = 50

STATUS_DONE = "done"
STATUS_MAX_POINTS = "max_points"
STATUS_CLOSED = "closed"
STATUS_FAILED = "failed"

COUNT_KEYS = (
    "rhs_evaluations",
    "jacobian_evaluations",
    "factorizations",
    "rejected_steps",
    "newton_iterations",
)


class CurveProblem(Protocol):
    """The protocol a problem hands to :func:`follow_curve` (see the module docstring)."""

    def residual(self, u: Array) -> Array: ...

    def jacobian(self, u: Array) -> Any: ...

    def observe(self, u: Array, tangent: Array, jacobian: Any) -> tuple[Any, Array]: ...


@dataclass(frozen=True)
class StepControl:
    """Step lengths of one curve (pseudo-arclength units).

    Mirrors :class:`branchline.scan.StepSettings`; any object with the
    attributes ``initial``, ``smallest``, ``largest``, ``max_points`` works.
    """

    initial: float = 0.01
    smallest: float = 1e-8
    largest: float = 0.05
    max_points: int = 2000


@dataclass(frozen=True)
class Curve:
    """A followed curve, rows in the order of travel (the start point first).

    Attributes
    ----------
    points : ndarray (k, N + 1)
        Converged points u (the parameter last).
    tangents : ndarray (k, N + 1)
        Unit tangents in the direction of travel.
    arclength : ndarray (k,)
        Distance travelled from the start (sum of chord lengths), increasing.
    newton_iterations : ndarray (k,) int
        Corrector iterations of each point (0 for the start point).
    residual_norms : ndarray (k,)
        |G(u)| at each point.
    test_values : ndarray (k, T)
    payloads : ndarray (k, ...) or tuple
        What ``observe`` returned per point, stacked when possible.
    status : str
        ``done`` (left the bounds, last point on the edge), ``max_points``,
        ``closed`` (isola), ``failed``.
    message : str
        How it ended; on failure where (parameter, state) and why.
    counts : dict[str, int]
        ``rhs_evaluations``, ``jacobian_evaluations``, ``factorizations``,
        ``rejected_steps``, ``newton_iterations`` (total).
    """

    points: Array
    tangents: Array
    arclength: Array
    newton_iterations: Array
    residual_norms: Array
    test_values: Array
    payloads: Any
    status: str
    message: str
    counts: dict[str, int] = field(default_factory=dict)

    def __len__(self) -> int:
        return self.points.shape[0]


class _Counter:
    __slots__ = ("factorizations", "jacobian", "newton", "rejected", "rhs")

    def __init__(self) -> None:
        self.rhs = self.jacobian = self.factorizations = self.rejected = self.newton = 0

    def as_dict(self) -> dict[str, int]:
        return {
            "rhs_evaluations": self.rhs,
            "jacobian_evaluations": self.jacobian,
            "factorizations": self.factorizations,
            "rejected_steps": self.rejected,
            "newton_iterations": self.newton,
        }


def _evaluator(problem) -> Callable[[Array], tuple[Array, Any]]:
    evaluate = getattr(problem, "evaluate", None)
    if evaluate is not None:
        return evaluate
    residual, jacobian = problem.residual, problem.jacobian

    def both(u: Array) -> tuple[Array, Any]:
        return residual(u), jacobian(u)

    return both


def describe_point(problem, u: Array) -> str:
    """Text naming a point of a curve, from ``problem.describe`` or generic."""
    describe = getattr(problem, "describe", None)
    if describe is not None:
        return describe(u)
    head = ", ".join(f"{value:.6g}" for value in u[:-1][:6])
    more = ", ..." if u.shape[0] > 7 else ""
    return f"at parameter {u[-1]:.10g}, state ({head}{more})"


# ---------------------------------------------------------------------------
# Correctors: each returns (u, G, J, iterations, residual_norm, reason);
# reason is "" on success, else why it failed.
# ---------------------------------------------------------------------------


def _safe_evaluate(evaluate, u):
    """(G, G_u, reason): reason is "" or why the evaluation failed.

    Runs inside the engine's ``np.errstate(all="ignore")``; a non-finite
    residual is caught here, a non-finite Jacobian by the update it produces.
    """
    try:
        g, jac = evaluate(u)
    except (ArithmeticError, ValueError) as exc:
        return None, None, f"evaluating the model raised {type(exc).__name__}: {exc}"
    return g, jac, ""


_NOT_FINITE = "the right-hand side, its Jacobian or the Newton update is not finite (NaN/overflow)"


def _correct_full(evaluate, u, border, border_value, counter, max_iterations=None):
    """Newton's method on [G(u); border . u - border_value] = 0 (full Newton).

    ``border_value`` None means the pseudo-arclength condition through the
    predicted point (the start ``u``), whose residual stays zero since each
    update is orthogonal to ``border``. Returns (u, G, G_u, iterations,
    |G|, reason), reason "" on success.
    """
    max_iterations = MAX_CORRECTOR_ITERATIONS if max_iterations is None else max_iterations
    size = u.shape[0]
    solve = linalg.solve_unchecked
    sqrt = math.sqrt
    square = None
    rhs = np.zeros(size)
    update = previous_update = math.inf
    residual = math.nan
    iteration = 0
    while True:
        try:
            g, jac = evaluate(u)
        except (ArithmeticError, ValueError) as exc:
            reason = f"evaluating the model raised {type(exc).__name__}: {exc}"
            return u, None, None, iteration, math.nan, reason
        counter.rhs += 1
        counter.jacobian += 1
        residual = sqrt(g @ g)
        if not residual < math.inf:
            return u, None, None, iteration, residual, _NOT_FINITE
        if iteration:
            scale = 1.0 + sqrt(u @ u)
            if (residual <= RESIDUAL_TOL and update <= UPDATE_RTOL * scale) or (
                update <= STAGNATION_RTOL * scale
            ):
                return u, g, jac, iteration, residual, ""
            if iteration >= max_iterations:
                return (
                    u,
                    None,
                    None,
                    iteration,
                    residual,
                    (
                        f"no convergence in {max_iterations} Newton iterations "
                        f"(residual {residual:.3g})"
                    ),
                )
        rhs[:-1] = g
        if border_value is not None:
            rhs[-1] = float(border @ u) - border_value
        counter.factorizations += 1
        if type(jac) is not np.ndarray:
            try:
                step = linalg.bordered_solve(jac, border, rhs)
            except linalg.SingularMatrixError:
                return u, None, None, iteration, residual, "the bordered Jacobian is singular"
        else:
            if square is None:
                square = np.empty((size, size))
                square[-1] = border
            square[:-1] = jac
            step = solve(square, rhs)
        previous_update, update = update, sqrt(step @ step)
        if not update < math.inf:
            return (
                u,
                None,
                None,
                iteration,
                residual,
                ("the bordered Jacobian is singular or not finite"),
            )
        if iteration and update > DIVERGENCE_RATIO * previous_update:
            return u, None, None, iteration, residual, "Newton's method diverges"
        u = u - step
        iteration += 1


def _correct_chord(evaluate, residual_fn, jacobian_fn, u, border, counter):
    """Chord method: the bordered matrix is factorized once at the predicted point."""
    size = u.shape[0]
    g, jac, reason = _safe_evaluate(evaluate, u)
    counter.rhs += 1
    counter.jacobian += 1
    if reason:
        return u, None, None, 0, math.nan, reason
    square = linalg.bordered_matrix(jac, border)
    counter.factorizations += 1
    try:
        if linalg.is_sparse(square):
            solve = spla.splu(square).solve
        else:
            inverse = np.linalg.inv(square)
            if not np.all(np.isfinite(inverse)):
                raise np.linalg.LinAlgError("not finite")
            solve = inverse.__matmul__
    except (np.linalg.LinAlgError, RuntimeError):
        return u, None, None, 0, math.nan, "the bordered Jacobian is singular"
    previous_update = math.inf
    rhs = np.zeros(size)
    if not linalg.norm(g) < math.inf:
        return u, None, None, 0, math.nan, _NOT_FINITE
    for iteration in range(1, MAX_CHORD_ITERATIONS + 1):
        rhs[:-1] = -g
        step = solve(rhs)
        update = linalg.norm(step)
        if not update < math.inf or update > CHORD_CONTRACTION * previous_update:
            return u, None, None, iteration, math.nan, "the chord iteration does not contract"
        previous_update = update
        u = u + step
        try:
            g = residual_fn(u)
        except (ArithmeticError, ValueError) as exc:
            reason = f"evaluating the model raised {type(exc).__name__}: {exc}"
            return u, None, None, iteration, math.nan, reason
        counter.rhs += 1
        residual = linalg.norm(g)
        if not residual < math.inf:
            return u, None, None, iteration, math.nan, _NOT_FINITE
        scale = 1.0 + linalg.norm(u)
        if (residual <= RESIDUAL_TOL and update <= UPDATE_RTOL * scale) or (
            update <= STAGNATION_RTOL * scale
        ):
            try:
                jac = jacobian_fn(u)
            except (ArithmeticError, ValueError) as exc:
                return (
                    u,
                    None,
                    None,
                    iteration,
                    residual,
                    (f"evaluating the Jacobian raised {type(exc).__name__}: {exc}"),
                )
            counter.jacobian += 1
            return u, g, jac, iteration, residual, ""
    return u, None, None, MAX_CHORD_ITERATIONS, math.nan, "no convergence of the chord iteration"


# ---------------------------------------------------------------------------
# The engine
# ---------------------------------------------------------------------------


def follow_curve(
    problem,
    u0: Array,
    tangent0: Array,
    settings,
    bounds: tuple[float, float] = (-math.inf, math.inf),
    *,
    newton: str = "full",
    progress: Callable[[int], None] | None = None,
    start_tangent_exact: bool = False,
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
    settings : StepControl or branchline.scan.StepSettings
        ``initial``, ``smallest``, ``largest`` step (pseudo-arclength units)
        and ``max_points`` (including the start point).
    bounds : (lo, hi)
        Window for the parameter u[-1]; the curve stops on its edge.
    newton : {"full", "chord"}
        Corrector: full Newton (Jacobian at every iterate) or the chord method
        (bordered matrix factorized once per step). Full Newton needs fewer
        iterations and is faster for small dense models (see
        tests/benchmarks/bench_trace.py); the chord method saves
        factorizations for large sparse ones.
    progress : callable(int), optional
        Called with the number of accepted points every ``PROGRESS_INTERVAL``
        points and at the end.
    start_tangent_exact : bool
        Use ``tangent0`` itself as the start tangent (branch switching at a
        branch point, where the bordered system is singular).

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
    >>> curve = follow_curve(Circle(), np.array([1.0, 0.0]), np.array([0.0, 1.0]), StepControl())
    >>> curve.status, round(float(curve.arclength[-1]), 2)
    ('closed', 6.28)
    """
    if newton not in ("full", "chord"):
        raise ValueError(f"newton must be 'full' or 'chord', not {newton!r}")
    with np.errstate(all="ignore"):
        return _follow(
            problem,
            np.array(u0, dtype=float),
            np.array(tangent0, dtype=float),
            settings,
            bounds,
            newton,
            progress,
            start_tangent_exact,
        )


def _follow(problem, u, t, settings, bounds, newton, progress, start_tangent_exact) -> Curve:
    """The engine loop: predict, correct, accept or shrink, record, test (under errstate)."""
    lo, hi = float(bounds[0]), float(bounds[1])
    smallest, largest = float(settings.smallest), float(settings.largest)
    max_points = int(settings.max_points)
    step = min(max(float(settings.initial), smallest), largest)
    test_floor = max(smallest, TEST_STEP_FLOOR * largest)
    evaluate = _evaluator(problem)
    residual_fn, jacobian_fn = problem.residual, problem.jacobian
    observe = problem.observe
    counter = _Counter()

    g0, jac, reason = _safe_evaluate(evaluate, u)
    counter.rhs += 1
    counter.jacobian += 1
    if reason:
        return _empty_curve(u, f"cannot start {describe_point(problem, u)}: {reason}", counter)
    t = t / linalg.norm(t)
    if not start_tangent_exact:
        try:
            counter.factorizations += 1
            t = _tangent(jac, t, linalg.is_sparse(jac))
        except linalg.SingularMatrixError:
            return _empty_curve(
                u,
                f"cannot start {describe_point(problem, u)}: the tangent is "
                "undefined there (singular bordered Jacobian; a branch point?)",
                counter,
            )
    payload, tests = observe(u, t, jac)
    tests = np.asarray(tests, dtype=float)
    points, tangents, arcs, iterations = [u], [t], [0.0], [0]
    residuals, test_rows, payloads = [linalg.norm(g0)], [tests], [payload]
    u_start, t_start = u, t
    arclength = 0.0
    # The test-function rule works on plain floats: cheaper than numpy for a few values.
    previous_tests = tests.tolist()
    test_slope: list[float] | None = None
    test_max = [abs(value) for value in previous_tests]
    status, message = "", ""
    sparse = linalg.is_sparse(jac)
    use_chord = newton == "chord"
    sqrt = math.sqrt
    if not lo <= u[-1] <= hi:
        status = STATUS_FAILED
        message = (
            f"the start point {describe_point(problem, u)} lies outside the parameter "
            f"interval [{lo:.10g}, {hi:.10g}]"
        )

    while not status:
        if len(points) >= max_points:
            status = STATUS_MAX_POINTS
            message = (
                f"stopped after {max_points} points (steps.max_points) {describe_point(problem, u)}"
            )
            break
        predicted = u + step * t
        if use_chord:
            u_new, _, jac_new, its, residual, reason = _correct_chord(
                evaluate, residual_fn, jacobian_fn, predicted, t, counter
            )
        else:
            u_new, _, jac_new, its, residual, reason = _correct_full(
                evaluate, predicted, t, None, counter
            )
        counter.newton += its
        if not reason:
            try:
                counter.factorizations += 1
                t_new = _tangent(jac_new, t, sparse)
            except linalg.SingularMatrixError:
                reason = (
                    "the tangent is undefined at the corrected point (singular bordered matrix)"
                )
        if reason:
            if step <= smallest:
                status = STATUS_FAILED
                message = (
                    f"the corrector failed at the smallest step ({smallest:g}) after the "
                    f"point {describe_point(problem, u)}: {reason}"
                )
                break
            counter.rejected += 1
            step = max(step * SHRINK_FACTOR, smallest)
            continue
        if float(t_new @ t) < _MIN_TANGENT_COSINE and step > smallest:
            counter.rejected += 1
            step = max(step * SHRINK_FACTOR, smallest)
            continue
        p_new = u_new[-1]
        if p_new < lo or p_new > hi:
            status, message = _finish_on_edge(
                evaluate,
                problem,
                observe,
                u,
                u_new,
                t,
                lo if p_new < lo else hi,
                counter,
                sparse,
                arclength,
                (points, tangents, arcs, iterations, residuals, test_rows, payloads),
            )
            break
        payload, tests = observe(u_new, t_new, jac_new)
        tests = np.asarray(tests, dtype=float)
        chord = u_new - u
        chord_length = sqrt(chord @ chord)
        values = tests.tolist()
        if (
            test_slope is not None
            and step > test_floor
            and _test_functions_jump(previous_tests, values, test_slope, test_max, chord_length)
        ):
            counter.rejected += 1
            step = max(step * SHRINK_FACTOR, test_floor)
            continue
        if (
            abs(u[-1] - u_start[-1]) <= chord_length
            and len(points) > 2
            and _passes_start(u_start, t_start, u, chord, chord_length, t)
        ):
            arclength += linalg.norm(u_start - u)
            _append(
                (points, tangents, arcs, iterations, residuals, test_rows, payloads),
                u_start,
                t_start,
                arclength,
                0,
                residuals[0],
                test_rows[0],
                payloads[0],
            )
            status = STATUS_CLOSED
            message = "the branch closed on itself (an isola) back at its start point"
            break
        # Accept.
        if chord_length > 0.0:
            test_slope = [
                (new - old) / chord_length for new, old in zip(values, previous_tests, strict=True)
            ]
        test_max = [max(top, abs(value)) for top, value in zip(test_max, values, strict=True)]
        previous_tests = values
        arclength += chord_length
        u, t = u_new, t_new
        points.append(u)
        tangents.append(t)
        arcs.append(arclength)
        iterations.append(its)
        residuals.append(residual)
        test_rows.append(tests)
        payloads.append(payload)
        if progress is not None and len(points) % PROGRESS_INTERVAL == 0:
            progress(len(points))
        if its <= EASY_ITERATIONS:
            step = min(step * GROW_FACTOR, largest)
    if progress is not None:
        progress(len(points))
    return Curve(
        points=np.array(points),
        tangents=np.array(tangents),
        arclength=np.array(arcs),
        newton_iterations=np.array(iterations, dtype=int),
        residual_norms=np.array(residuals),
        test_values=np.array(test_rows),
        payloads=_stack(payloads),
        status=status,
        message=message,
        counts=counter.as_dict(),
    )


def _append(columns, u, t, arclength, iterations, residual, tests, payload) -> None:
    for column, value in zip(
        columns, (u, t, arclength, iterations, residual, tests, payload), strict=True
    ):
        column.append(value)


def _test_functions_jump(previous, values, slope, largest, chord_length) -> bool:
    """The test-function rule of the module docstring: True means shrink the step."""
    for old, new, rate, top in zip(previous, values, slope, largest, strict=True):
        predicted = old + chord_length * rate
        local = max(abs(old), abs(new)) + TEST_SCALE_FLOOR * top
        if abs(new - predicted) > TEST_CHANGE_LIMIT * local:
            return True
    return False


def _finish_on_edge(
    evaluate, problem, observe, u, u_out, t, edge, counter, sparse, arclength, columns
) -> tuple[str, str]:
    """Append the point exactly on the interval edge; returns (status, message)."""
    if u[-1] == edge:
        return STATUS_DONE, f"reached the edge {edge:.10g} of the parameter interval"
    edge_row = _land_on_edge(evaluate, problem, u, u_out, t, edge, counter, sparse)
    if isinstance(edge_row, str):
        return STATUS_FAILED, edge_row
    u_edge, g_edge, jac_edge, its_edge, t_edge = edge_row
    payload, tests = observe(u_edge, t_edge, jac_edge)
    arclength += linalg.norm(u_edge - u)
    _append(
        columns,
        u_edge,
        t_edge,
        arclength,
        its_edge,
        linalg.norm(g_edge),
        np.asarray(tests, dtype=float),
        payload,
    )
    return STATUS_DONE, f"reached the edge {edge:.10g} of the parameter interval"


def _tangent(jac, previous, sparse):
    """Unit tangent at a point with Jacobian ``jac``, oriented like ``previous``."""
    if sparse or type(jac) is not np.ndarray:
        return linalg.tangent(jac, previous)
    size = previous.shape[0]
    square = np.empty((size, size))
    square[:-1] = jac
    square[-1] = previous
    rhs = np.zeros(size)
    rhs[-1] = 1.0
    z = linalg.solve_unchecked(square, rhs)
    length = math.sqrt(z @ z)
    if not 0.0 < length < math.inf:
        raise linalg.SingularMatrixError("the tangent is not finite")
    return z / length


def _passes_start(u_start, t_start, u, chord, chord_length, t) -> bool:
    """True when the step u -> u + chord passes by the start point in its direction."""
    if chord_length == 0.0 or float(t_start @ t) <= 0.0:
        return False
    offset = u_start - u
    along = float(offset @ chord) / (chord_length * chord_length)
    if not 0.0 < along <= 1.0:
        return False
    distance = linalg.norm(offset - along * chord)
    return distance <= LOOP_DISTANCE_FRACTION * chord_length


def _land_on_edge(evaluate, problem, u_in, u_out, t, edge, counter, sparse):
    """Solve G(u) = 0 with u[-1] = edge, starting between u_in and u_out.

    Returns (u, G, J, iterations, tangent) or a failure message.
    """
    fraction = (edge - u_in[-1]) / (u_out[-1] - u_in[-1])
    guess = u_in + fraction * (u_out - u_in)
    guess[-1] = edge
    border = np.zeros(u_in.shape[0])
    border[-1] = 1.0
    u, g, jac, its, _, reason = _correct_full(
        evaluate, guess, border, edge, counter, max_iterations=2 * MAX_CORRECTOR_ITERATIONS
    )
    counter.newton += its
    if not reason:
        if u[-1] != edge:  # the bordered solve may leave roundoff in the fixed component
            u = u.copy()
            u[-1] = edge
            g, jac, reason = _safe_evaluate(evaluate, u)
            counter.rhs += 1
            counter.jacobian += 1
    if not reason:
        try:
            counter.factorizations += 1
            return u, g, jac, its, _tangent(jac, t, sparse)
        except linalg.SingularMatrixError:
            reason = "the tangent is undefined there"
    return (
        f"could not put the last point on the interval edge {edge:.10g} (after the point "
        f"{describe_point(problem, u_in)}): {reason}"
    )


def _stack(payloads: list) -> Any:
    try:
        return np.array(payloads)
    except (ValueError, TypeError):
        return tuple(payloads)


def _empty_curve(u: Array, message: str, counter: _Counter) -> Curve:
    size = u.shape[0]
    return Curve(
        points=np.empty((0, size)),
        tangents=np.empty((0, size)),
        arclength=np.empty(0),
        newton_iterations=np.empty(0, dtype=int),
        residual_norms=np.empty(0),
        test_values=np.empty((0, 0)),
        payloads=(),
        status=STATUS_FAILED,
        message=message,
        counts=counter.as_dict(),
    )
