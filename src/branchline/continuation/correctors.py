"""Correctors on the bordered system of the continuation engine, and its tangent.

A corrector solves the N + 1 equations

    G(u) = 0,   b . u = c

for u in R^(N+1), starting from a predicted point. With ``border_value``
c = None the second equation is the pseudo-arclength condition through the
predicted point, b . (u - u_predicted) = 0 (Keller, "Numerical solution of
bifurcation and nonlinear eigenvalue problems", 1977; Allgower & Georg,
Introduction to Numerical Continuation Methods, chapter 2), whose residual
stays zero since every update is orthogonal to b; with a number it fixes
b . u, e.g. the parameter on an interval edge.

The correctors are plain functions running the one Newton loop
(:func:`branchline.numerics.newton.iterate`) and returning its
:class:`~branchline.numerics.newton.NewtonResult`: the status, the updates applied,
the solution (or last iterate), its residual norm, G and G_u there (when
converged) and why it failed ("" when converged). Their stopping rules and
tolerances are :class:`~branchline.numerics.tolerances.CorrectorRule` and
:class:`~branchline.numerics.tolerances.ChordRule`. The correctors are:

- :func:`correct_newton`, full Newton: the Jacobian at every iterate. The
  engine's default. Measured on a 2-state model
  (tests/benchmarks/bench_trace.py) it is faster than the chord method: it
  needs fewer iterations and a small dense factorization costs about as much
  as the bookkeeping around it.
- :func:`correct_chord`, the chord method: the bordered matrix factorized once
  at the predicted point. Pays off when factorizations dominate (large sparse
  models).
- :func:`correct_on_edge`, full Newton with one component of u fixed (the last
  point of a curve put exactly on the edge of its parameter interval, or on a
  limit of one of its states); :func:`correct_on_limit` for a state limit, with a
  fallback along the curve where fixing the state leaves a singular system.

:func:`unit_tangent` gives the tangent at a corrected point from the same
bordered matrix with the previous tangent as border.

The Newton and chord iterations stop early when the updates say they diverge;
all correctors count model evaluations and factorizations in an
:class:`EvaluationCounts` and report numerical trouble in the message instead
of raising.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
import scipy.sparse.linalg as spla

from branchline.numerics import linalg
from branchline.numerics.newton import (
    CONTINUE,
    FINISH_NEXT,
    NewtonResult,
    NewtonTrouble,
    failure,
    iterate,
)
from branchline.numerics.tolerances import (
    MAX_CORRECTOR_ITERATIONS,
    NOT_FINITE,
    RESIDUAL_TOL,
    STAGNATION_RTOL,
    ChordRule,
    CorrectorRule,
    raised,
)
from branchline.vocabulary import Status

Array = np.ndarray
# u -> (G(u) (N,), G_u(u) (N, N + 1), dense or sparse): see :func:`evaluator`.
Evaluate = Callable[[Array], tuple[Array, Any]]

# A point on a state limit interpolated from points either side of it (correct_on_limit,
# singular case) is accepted when its residual is this small: Newton's points carry
# residuals below RESIDUAL_TOL, interpolation adds at most about as much.
INTERPOLATED_RESIDUAL = 10 * RESIDUAL_TOL

COUNT_KEYS = (
    "rhs_evaluations",
    "jacobian_evaluations",
    "factorizations",
    "rejected_steps",
    "newton_iterations",
)

# Dot products of short vectors on the hot path are written x.dot(y): the same dot routine as
# x @ y, bit for bit, at well under half the call overhead for N of a few (numpy 2.x).


class EvaluationCounts:
    """Running counts of one curve (mutable; the engine and correctors add to it)."""

    __slots__ = ("factorizations", "jacobian", "newton", "rejected", "rhs")

    def __init__(self) -> None:
        self.rhs = self.jacobian = self.factorizations = self.rejected = self.newton = 0

    def as_dict(self) -> dict[str, int]:
        """The counts under the names of ``COUNT_KEYS``."""
        values = (self.rhs, self.jacobian, self.factorizations, self.rejected, self.newton)
        return dict(zip(COUNT_KEYS, values, strict=True))


def evaluator(problem: Any) -> Evaluate:
    """``u -> (G(u), G_u(u))``: ``problem.evaluate`` if it has one, else both calls."""
    evaluate = getattr(problem, "evaluate", None)
    if evaluate is not None:
        return evaluate
    residual, jacobian = problem.residual, problem.jacobian

    def both(u: Array) -> tuple[Array, Any]:
        return residual(u), jacobian(u)

    return both


def safe_evaluate(evaluate: Evaluate, u: Array) -> tuple[Array | None, Any, str]:
    """(G, G_u, message): message is "" or why the evaluation failed.

    Runs inside the engine's ``np.errstate(all="ignore")``; a non-finite
    residual is caught by the correctors, a non-finite Jacobian by the update
    it produces.
    """
    try:
        g, jac = evaluate(u)
    except (ArithmeticError, ValueError) as exc:
        return None, None, raised("the model", exc)
    return g, jac, ""


def _failed(u: Array, iterations: int, residual: float, message: str) -> NewtonResult:
    return failure(u, message, iterations=iterations, residual_norm=residual)


def _success(u: Array, iterations: int, g: Array, jac: Any) -> NewtonResult:
    residual = linalg.norm(g)
    return NewtonResult(Status.CONVERGED, u, iterations, residual, (residual,), g, jac)


def correct_newton(
    evaluate: Evaluate,
    u: Array,
    border: Array,
    border_value: float | None,
    counts: EvaluationCounts,
    max_iterations: int = MAX_CORRECTOR_ITERATIONS,
) -> NewtonResult:
    """Newton's method on [G(u); border . u - border_value] = 0 (full Newton).

    Parameters
    ----------
    evaluate : callable
        ``u -> (G(u), G_u(u))``, see :func:`evaluator`.
    u : ndarray (N + 1,)
        Start (the predicted point).
    border : ndarray (N + 1,)
        Last row of the bordered matrix (the tangent for pseudo-arclength).
    border_value : float or None
        None: pseudo-arclength condition through the start ``u``.
    counts : EvaluationCounts
        Incremented for every evaluation and factorization.
    max_iterations : int

    Returns
    -------
    NewtonResult
        See the module docstring.
    """
    size = u.shape[0]
    solve = linalg.solve_unchecked
    sqrt = math.sqrt
    square = None
    rhs = np.zeros(size)

    def advance(z: Array, g: Array, jac: Any, residual: float):
        nonlocal square
        rhs[:-1] = g
        if border_value is not None:
            rhs[-1] = float(border @ z) - border_value
        counts.factorizations += 1
        if type(jac) is not np.ndarray:
            try:
                step = linalg.bordered_solve(jac, border, rhs)
            except linalg.SingularMatrixError:
                raise NewtonTrouble(
                    Status.SINGULAR_JACOBIAN, "the bordered Jacobian is singular"
                ) from None
        else:
            if square is None:
                square = np.empty((size, size))
                square[-1] = border
            square[:-1] = jac
            step = solve(square, rhs)
        update = sqrt(step.dot(step))
        if not update < math.inf:
            raise NewtonTrouble(
                Status.SINGULAR_JACOBIAN, "the bordered Jacobian is singular or not finite"
            )
        return z - step, update, None

    result = iterate(evaluate, u, advance, CorrectorRule(max_iterations), max_iterations)
    # Every evaluation that returned has its residual norm recorded: count them so.
    evaluations = len(result.residual_norms)
    counts.rhs += evaluations
    counts.jacobian += evaluations
    return result


def correct_chord(
    evaluate: Evaluate,
    residual_fn: Callable[[Array], Array],
    jacobian_fn: Callable[[Array], Any],
    u: Array,
    border: Array,
    counts: EvaluationCounts,
) -> NewtonResult:
    """Chord method on [G(u); border . (u - u_start)] = 0.

    The bordered matrix is factorized once at the start ``u`` (the predicted
    point); ``residual_fn`` and ``jacobian_fn`` are the problem's ``residual``
    and ``jacobian`` (the Jacobian is evaluated again only at the solution).
    Otherwise as :func:`correct_newton`.
    """
    g, jac, message = safe_evaluate(evaluate, u)
    counts.rhs += 1
    counts.jacobian += 1
    if message:
        return _failed(u, 0, math.nan, message)
    square = linalg.bordered_matrix(jac, border)
    counts.factorizations += 1
    try:
        if linalg.is_sparse(square):
            solve = spla.splu(square).solve
        else:
            inverse = np.linalg.inv(square)
            if not np.all(np.isfinite(inverse)):
                raise np.linalg.LinAlgError("not finite")
            solve = inverse.__matmul__
    except (np.linalg.LinAlgError, RuntimeError):
        return _failed(u, 0, math.nan, "the bordered Jacobian is singular")
    return _chord_iteration(residual_fn, jacobian_fn, u, g, solve, counts)


def correct_with_factors(
    residual_fn: Callable[[Array], Array],
    jacobian_fn: Callable[[Array], Any],
    u: Array,
    border: Array,
    factors: tuple[Any, Array, Array],
    counts: EvaluationCounts,
) -> NewtonResult:
    """Chord method on [G(u); border . (u - u_start)] = 0 with a factorization already made.

    ``factors`` is (factors solving with M = [G_u(u_prev); b_prev^T], z = M^-1 e_last, b_prev):
    the tangent's factorization at the last accepted point. The iteration matrix
    [G_u(u_prev); border^T] differs from M in its last row only, a rank-one change
    e_last d^T with d = border - b_prev, so its solves come from M's factors by the
    Sherman-Morrison formula (Golub & Van Loan, Matrix Computations, 4th ed.,
    section 2.1.4): x = y - z (d . y) / (1 + d . z), y = M^-1 r; for the tangent
    border (border = z / |z|, b_prev . z = 1) the denominator is |z| >= 1. No
    factorization and no Jacobian at the predicted point; the Jacobian is
    evaluated at the solution only. Otherwise as :func:`correct_chord`.
    """
    lu, z, previous_border = factors
    difference = border - previous_border
    denominator = 1.0 + float(difference.dot(z))
    if not abs(denominator) > 1e-8:
        return _failed(u, 0, math.nan, "the last factorization does not fit this border")
    solve_last = lu.solve

    def solve(rhs: Array) -> Array:
        y = solve_last(rhs)
        return y - z * (float(difference.dot(y)) / denominator)

    try:
        g = residual_fn(u)
    except (ArithmeticError, ValueError) as exc:
        return _failed(u, 0, math.nan, raised("the model", exc))
    counts.rhs += 1
    g = np.asarray(g, dtype=float)
    return _chord_iteration(residual_fn, jacobian_fn, u, g, solve, counts)


def _chord_iteration(residual_fn, jacobian_fn, u: Array, g: Array, solve, counts) -> NewtonResult:
    """The chord loop from u (G(u) = ``g``) with the iteration matrix's ``solve``; the
    Jacobian evaluated at the solution."""
    size = u.shape[0]
    sqrt = math.sqrt
    if not sqrt(g.dot(g)) < math.inf:
        return _failed(u, 0, math.nan, NOT_FINITE)
    rhs = np.zeros(size)

    def residual_only(z: Array) -> tuple[Array, None]:
        counts.rhs += 1
        return residual_fn(z), None

    def advance(z: Array, g: Array, _jac: Any, residual: float):
        rhs[:-1] = -g
        step = solve(rhs)
        update = sqrt(step.dot(step))
        if not update < math.inf:
            raise NewtonTrouble(Status.NOT_CONVERGED, "the chord iteration does not contract")
        return z + step, update, None

    rule = ChordRule()
    result = iterate(residual_only, u, advance, rule, rule.max_iterations, (g, None))
    if not result.converged:
        return result
    try:
        jac = jacobian_fn(result.solution)
    except (ArithmeticError, ValueError) as exc:
        return _failed(result.solution, result.iterations, result.residual_norm,
                       raised("the Jacobian", exc))
    counts.jacobian += 1
    return NewtonResult(Status.CONVERGED, result.solution, result.iterations,
                        result.residual_norm, result.residual_norms, result.residual, jac)


def correct_on_edge(
    evaluate: Evaluate,
    guess: Array,
    edge: float,
    counts: EvaluationCounts,
    index: int = -1,
    *,
    sparse: bool = False,
) -> NewtonResult:
    """Solve G(u) = 0 with the component u[index] fixed at ``edge`` (full Newton).

    ``index`` -1 (the default) fixes the parameter (the edge of the parameter
    interval); a state's index fixes that state (a trace's state limit). The
    bordered matrix is [G_u; e_index^T]. The bordered solve may leave roundoff in
    the fixed component; the solution's component is then set to ``edge`` exactly
    and G, G_u are evaluated there again. ``iterations`` counts the Newton updates only.
    ``sparse`` (the curve's Jacobians are sparse) skips the dense least-squares fallback.
    """
    correction = _newton_with_fixed(evaluate, guess, edge, index, counts)
    if not correction.converged and not sparse:
        # At an edge where the Jacobian without the fixed column is singular (a line of
        # equilibria at a zero dilution rate, say) Newton's square solve fails although
        # the point exists; Gauss-Newton with least-squares steps still converges there.
        fallback = _least_squares_on_edge(evaluate, guess, edge, counts, index)
        if fallback.converged:
            correction = fallback
    return _exactly_on(evaluate, correction, edge, index, counts)


def _newton_with_fixed(
    evaluate: Evaluate, guess: Array, value: float, index: int, counts: EvaluationCounts
) -> NewtonResult:
    """Full Newton on G(u) = 0, u[index] = value (bordered with e_index)."""
    border = np.zeros(guess.shape[0])
    border[index] = 1.0
    return correct_newton(
        evaluate, guess, border, value, counts, max_iterations=2 * MAX_CORRECTOR_ITERATIONS
    )


def _exactly_on(evaluate, correction: NewtonResult, edge: float, index: int, counts) -> NewtonResult:
    """A converged correction with u[index] set to ``edge`` exactly (G, G_u evaluated again)."""
    converged, iterations, u = correction.converged, correction.iterations, correction.solution
    if not converged or u[index] == edge:
        return correction
    u = u.copy()
    u[index] = edge
    g, jac, message = safe_evaluate(evaluate, u)
    counts.rhs += 1
    counts.jacobian += 1
    if message:
        return _failed(u, iterations, math.nan, message)
    return _success(u, iterations, g, jac)


def correct_on_limit(
    evaluate: Evaluate,
    u_in: Array,
    u_out: Array,
    bound: float,
    index: int,
    counts: EvaluationCounts,
) -> NewtonResult:
    """The point of the curve through ``u_in`` where the state u[index] equals ``bound``.

    ``u_in`` is the last point inside the limit, ``u_out`` the corrected point beyond
    it. First Newton on G(u) = 0,
    u[index] = bound (bordered with e_index, as :func:`correct_on_edge`) from the
    chord cut at the bound. Where that system is singular (another branch lies in
    the limit's plane: a washout branch with zero biomass crossing the traced one
    exactly on the limit X = 0, so that every point of it solves the system) the
    point is interpolated from points of the traced curve on both sides of the
    limit, where the system is regular (:func:`_limit_by_interpolation`). Either
    way u[index] is then set to ``bound`` exactly.
    """
    fraction = (bound - u_in[index]) / (u_out[index] - u_in[index])
    guess = u_in + fraction * (u_out - u_in)
    guess[index] = bound
    correction = _newton_with_fixed(evaluate, guess, bound, index, counts)
    if not correction.converged:
        interpolated = _limit_by_interpolation(evaluate, u_in, u_out, bound, index, counts)
        if interpolated.converged:
            correction = interpolated
    return _exactly_on(evaluate, correction, bound, index, counts)


def _limit_by_interpolation(
    evaluate, u_in: Array, u_out: Array, bound: float, index: int, counts: EvaluationCounts
) -> NewtonResult:
    """The curve's point at u[index] = bound, interpolated from points on either side.

    Points of the curve at u[index] = bound + d (d = the offsets of ``u_in`` and ``u_out``
    from the bound, times 1, 2/3 and 1/3) are isolated solutions of the bordered system
    even when the one at d = 0 is not; each component is interpolated as a polynomial in
    u[index] through these six points (barycentric Lagrange) and evaluated at the bound.
    Error ~ d^6 times the sixth derivative; Newton's own accuracy (~1e-12) dominates.
    """
    border = np.zeros(u_in.shape[0])
    border[index] = 1.0
    nodes, points, total = [], [], 0
    for end, fractions in ((u_in, (1.0, 2 / 3, 1 / 3)), (u_out, (1 / 3, 2 / 3, 1.0))):
        for fraction in fractions:
            value = bound + fraction * (end[index] - bound)
            if fraction == 1.0:
                point = end
            else:
                guess = u_in + (value - u_in[index]) / (u_out[index] - u_in[index]) * (u_out - u_in)
                correction = correct_newton(evaluate, guess, border, value, counts)
                total += correction.iterations
                if not correction.converged:
                    return _failed(
                        correction.solution, total, correction.residual_norm, correction.message
                    )
                point = correction.solution
            nodes.append(value)
            points.append(point)
    # Imported here: scipy.interpolate costs ~0.3 s of start-up and this
    # fallback is rare.
    from scipy.interpolate import BarycentricInterpolator

    # A fixed generator: scipy shuffles the nodes when computing the weights, and
    # an unseeded shuffle would change the last digits from run to run.
    interpolate = BarycentricInterpolator(nodes, np.array(points), rng=np.random.default_rng(0))
    u = interpolate(bound)
    u = np.asarray(u, dtype=float).reshape(-1)
    u[index] = bound
    g, jac, message = safe_evaluate(evaluate, u)
    counts.rhs += 1
    counts.jacobian += 1
    residual = linalg.norm(g) if g is not None else math.nan
    if message or not residual <= INTERPOLATED_RESIDUAL:
        return _failed(u, total, residual, message or f"interpolated residual {residual:.3g}")
    return _success(u, total, g, jac)


class _LeastSquaresRule(CorrectorRule):
    """Gauss-Newton on an edge: the corrector's test on the residual before an update."""

    final_evaluation = False

    def accepts(self, iteration, z, residual, residual_norm, jacobian) -> bool:
        return False

    def after_update(self, iteration, z, z_next, residual_norm, jacobian, update_norm) -> int:
        scale = 1.0 + linalg.norm(z_next)
        if (residual_norm <= RESIDUAL_TOL and update_norm <= self.update_rtol * scale) or (
            update_norm <= STAGNATION_RTOL * scale
        ):
            return FINISH_NEXT
        return CONTINUE

    def not_finite(self) -> str:
        return "the model is not finite on the edge"

    def no_convergence(self, iterations, z, residual_norm) -> str:
        return "least-squares Newton did not converge on the edge"


def _least_squares_on_edge(
    evaluate: Evaluate, guess: Array, edge: float, counts: EvaluationCounts, index: int = -1
) -> NewtonResult:
    """Gauss-Newton on G = 0 with u[index] = edge, minimum-norm least-squares steps (dense)."""
    u = np.array(guess, dtype=float)
    u[index] = edge
    free = np.ones(u.shape[0], dtype=bool)
    free[index] = False

    def counted(z: Array) -> tuple[Array, Any]:
        g, jac = evaluate(z)
        counts.rhs += 1
        counts.jacobian += 1
        if linalg.is_sparse(jac):
            raise NewtonTrouble(Status.NOT_CONVERGED, "sparse Jacobian")
        return g, jac

    def advance(z: Array, g: Array, jac: Any, residual: float):
        matrix = np.asarray(jac)[:, free]
        if not np.all(np.isfinite(matrix)):
            raise NewtonTrouble(Status.NON_FINITE, "the model is not finite on the edge")
        try:
            step = np.linalg.lstsq(matrix, -g, rcond=None)[0]
        except np.linalg.LinAlgError as exc:  # SVD did not converge
            raise NewtonTrouble(
                Status.NOT_CONVERGED, f"least squares failed on the edge ({exc})"
            ) from None
        counts.factorizations += 1
        z_next = z.copy()
        z_next[free] += step
        return z_next, linalg.norm(step), None

    iterations = 2 * MAX_CORRECTOR_ITERATIONS
    return iterate(counted, u, advance, _LeastSquaresRule(iterations), iterations)


def unit_tangent(jac: Any, previous: Array, sparse: bool) -> Array:
    """Unit tangent at a point with Jacobian ``jac`` (N, N + 1), oriented like ``previous``.

    Solves [G_u; previous^T] z = e_{N+1} and normalizes z, as
    :func:`branchline.numerics.linalg.tangent`, with a fast path for dense Jacobians
    (no checks but a finite, non-zero z). Since previous . z = 1 > 0 the
    orientation is kept through turning points.

    Raises
    ------
    branchline.numerics.linalg.SingularMatrixError
        When the bordered matrix is singular (a branch point, say).
    """
    if sparse or type(jac) is not np.ndarray:
        return linalg.tangent(jac, previous)
    size = previous.shape[0]
    square = np.empty((size, size))
    square[:-1] = jac
    square[-1] = previous
    rhs = np.zeros(size)
    rhs[-1] = 1.0
    z = linalg.solve_unchecked(square, rhs)
    length = math.sqrt(z.dot(z))
    if not 0.0 < length < math.inf:
        raise linalg.SingularMatrixError("the tangent is not finite")
    return z / length
