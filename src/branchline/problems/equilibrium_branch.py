"""Equilibrium branches: the problem f(x, p) = 0 in u = (x, p) and ``trace_branch``.

``EquilibriumBranch`` is the problem handed to the continuation engine
(:func:`branchline.continuation.engine.follow_curve`); ``trace_branch`` solves the
start equilibrium, follows the branch to one or both sides and assembles the
:class:`branchline.results.records.Branch` record in trace order.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import TYPE_CHECKING, Any

import numpy as np

from branchline.continuation import engine as continuation
from branchline.continuation import step_control
from branchline.events import locate as events
from branchline.numerics import linalg
from branchline.problems.equilibrium import solve_equilibrium
from branchline.results.records import (
    STATUS_CLOSED,
    STATUS_DONE,
    STATUS_FAILED,
    STATUS_MAX_POINTS,
    Branch,
)

if TYPE_CHECKING:
    from branchline.model.build import Model
    from branchline.scan.loader import StepSettings

Array = np.ndarray

# An eigenvalue counts as unstable when its real part exceeds this fraction of
# the spectral radius: roundoff in LAPACK eigenvalues is about eps * |J|, so a
# zero eigenvalue (a conserved quantity, say) never flickers into "unstable".
UNSTABLE_RTOL = 1e-10
# Why a point's stability is unknown, when Arnoldi cannot find the leading eigenvalues.
EIGENVALUES_FAILED = "eigenvalues near the imaginary axis could not be computed"
# A start point given for branch switching is accepted as is when its residual
# is below this (it is a located branch point, where Newton in x alone is singular).
SWITCH_START_RESIDUAL = 1e-8

DIRECTIONS = ("both", "increasing", "decreasing")


class EquilibriumBranch:
    """The curve problem f(x, p) = 0, u = (x, p_vary), for the continuation engine.

    Parameters
    ----------
    model : branchline.model.build.Model
    vary_index : int
        Index of the varied parameter in the model's parameter vector.
    parameters : ndarray (m,)
        The other parameters' values (the ``vary_index`` entry is overwritten).
    orientation : {1, -1}
        Sign applied to the tangent before the test functions are evaluated,
        so that test values refer to the tangent in trace order (-1 on the
        side traced with decreasing parameter first, whose rows are reversed).

    Notes
    -----
    Uses ``model.derivatives(x, p) -> (f_x, f_p)`` when the model has it (one
    call for both Jacobians), else ``model.jacobian`` and
    ``model.parameter_jacobian``.
    """

    def __init__(self, model, vary_index: int, parameters: Array, orientation: int = 1) -> None:
        self.model = model
        self.size = len(model.states)
        self.vary_index = int(vary_index)
        self.p = np.array(parameters, dtype=float)
        self.orientation = float(orientation)
        self.sparse = bool(getattr(model, "sparse", False))
        self._rhs = model.rhs
        self._derivatives = getattr(model, "derivatives", None)
        self._jacobian_x = model.jacobian
        self._jacobian_p = model.parameter_jacobian
        self._tests = events.equilibrium_tests

    def _parameters(self, u: Array) -> Array:
        # One buffer, updated in place: the model functions read p and keep no
        # reference to it (the compiled ones convert it to a list at once).
        p = self.p
        p[self.vary_index] = u[-1]
        return p

    def residual(self, u: Array) -> Array:
        """f(x, p) at u = (x, p_vary), shape (n,)."""
        return np.asarray(self._rhs(u[:-1], self._parameters(u)), dtype=float)

    def _stacked(self, x: Array, p: Array):
        """[f_x, f_p] as an (n, n + 1) array, or a sparse matrix for sparse models."""
        if self._derivatives is not None:
            fx, fp_all = self._derivatives(x, p)
        else:
            fx, fp_all = self._jacobian_x(x, p), self._jacobian_p(x, p)
        if linalg.is_sparse(fx):
            import scipy.sparse as sp

            fp = np.asarray(fp_all, dtype=float)[:, self.vary_index]
            return sp.hstack([fx, sp.csc_matrix(fp.reshape(-1, 1))], format="csc")
        n = self.size
        jac = np.empty((n, n + 1))
        jac[:, :n] = fx
        jac[:, n] = fp_all[:, self.vary_index]
        return jac

    def jacobian(self, u: Array) -> Any:
        """[f_x, f_p] at u, shape (n, n + 1): ndarray, or scipy.sparse CSC for sparse models."""
        return self._stacked(u[:-1], self._parameters(u))

    def evaluate(self, u: Array) -> tuple[Array, Any]:
        """(residual, jacobian) at u in one call, sharing the parameter vector."""
        x = u[:-1]
        p = self._parameters(u)
        return np.asarray(self._rhs(x, p), dtype=float), self._stacked(x, p)

    def observe(self, u: Array, tangent: Array, jacobian: Any) -> tuple[Array, Array]:
        """Eigenvalues of f_x (sorted by decreasing real part) and the test functions.

        Raises
        ------
        continuation.ObservationFailed
            When a large sparse model's leading eigenvalues cannot be computed
            (the engine then stops the branch there, status ``failed``): a row
            of unknown stability would hide stability changes.
        """
        n = self.size
        if linalg.is_sparse(jacobian):
            jac = jacobian.tocsc()
            fx = jac[:, :n]
            fp = np.asarray(jac[:, n].toarray()).ravel()
            if n <= linalg.SPARSE_DENSE_LIMIT:
                eigenvalues = linalg.dense_eigenvalues(fx.toarray())
            else:
                search = linalg.search_leading_eigenvalues(fx)
                if not search.found:
                    raise continuation.ObservationFailed(f"{EIGENVALUES_FAILED} ({search.message})")
                eigenvalues = search.values
        else:
            fx = jacobian[:, :n]
            fp = jacobian[:, n]
            eigenvalues = linalg.sort_eigenvalues(linalg.eigvals_unchecked(fx))
        oriented = tangent if self.orientation > 0 else -tangent
        return eigenvalues, self._tests(fx, fp, oriented, eigenvalues)

    def describe(self, u: Array) -> str:
        """The point for messages: the varied parameter and the first few states."""
        model = self.model
        vary = model.parameters[self.vary_index]
        states = ", ".join(
            f"{name}={value:.6g}" for name, value in zip(model.states[:6], u[:-1][:6], strict=True)
        )
        if self.size > 6:
            states += f", ... (|x|={linalg.norm(u[:-1]):.6g})"
        return f"at {vary}={u[-1]:.10g} ({states})"


def trace_branch(
    model: Model,
    name: str,
    vary: str,
    parameters: Array,
    x_start: Array,
    interval: tuple[float, float],
    direction: str,
    steps: StepSettings,
    *,
    parent: str | None = None,
    start_tangent: Array | None = None,
    progress: Callable[[int], None] | None = None,
    newton: str = "full",
    limits: Mapping[str | int, tuple[float, float]] | None = None,
) -> Branch:
    """Follow the equilibrium branch through (x_start, parameters) as ``vary`` moves.

    Parameters
    ----------
    model : branchline.model.build.Model
    name : str
        Trace name for the record.
    vary : str
        The continuation parameter (a name in ``model.parameters``).
    parameters : ndarray (m,)
        Full parameter vector; its ``vary`` entry is the start value.
    x_start : ndarray (n,)
        Guess for the start equilibrium (Newton solves it first).
    interval : (lo, hi)
        The window for ``vary``; the branch ends exactly on its edges.
    direction : {"both", "increasing", "decreasing"}
        Sides to trace. "both": the decreasing-parameter side first, then the
        increasing side. Rows are in trace order: the decreasing side
        reversed, the start point, the increasing side.
    steps : branchline.scan.loader.StepSettings
        Step lengths; ``max_points`` applies to each side separately.
    parent : str, optional
        The branch this one was started from at a branch point.
    start_tangent : ndarray (n + 1,), optional
        Branch switching: start at (x_start, p) exactly along this direction
        only (``direction`` is then ignored); the start point is accepted as
        is when its residual is below ``SWITCH_START_RESIDUAL``.
    progress : callable(int), optional
        Called with the number of points computed so far.
    newton : {"full", "chord"}
        Corrector of the engine.
    limits : mapping {state: (lo, hi)}, optional
        Windows for states (by name or index in ``model.states``): a side stops
        when a state leaves its window, its last point exactly on the limit
        (status ``done``). The start equilibrium must lie within them.

    Returns
    -------
    Branch
        Never raises for numerical trouble: ``status`` is ``done``,
        ``max_points``, ``closed`` or ``failed`` and ``message`` says where and
        why, for both sides.

    Raises
    ------
    ValueError
        For an unknown ``vary`` name or ``direction`` (programming errors;
        the scan validator catches them first).
    """
    if direction not in DIRECTIONS:
        raise ValueError(f"direction must be one of {DIRECTIONS}, not {direction!r}")
    if vary not in model.parameters:
        raise ValueError(f"unknown parameter {vary!r}; the model has {model.parameters}")
    state_limits = state_limits_of(model, limits)
    vary_index = model.parameters.index(vary)
    parameters = np.array(parameters, dtype=float)
    lo, hi = sorted((float(interval[0]), float(interval[1])))
    start_value = float(parameters[vary_index])
    n = len(model.states)
    counts = dict.fromkeys(continuation.COUNT_KEYS, 0)

    def record(curves, status, message):
        return _assemble(
            model, name, vary, parameters, (lo, hi), curves, status, message, counts, parent
        )

    if not lo <= start_value <= hi:
        return record(
            [],
            STATUS_FAILED,
            f"the start value {vary}={start_value:.10g} lies outside the interval "
            f"[{lo:.10g}, {hi:.10g}]",
        )

    x_start = np.array(x_start, dtype=float).reshape(-1)
    start_ok = False
    if start_tangent is not None:
        with np.errstate(all="ignore"):
            f0 = np.asarray(model.rhs(x_start, parameters), dtype=float)
        counts["rhs_evaluations"] += 1
        start_ok = bool(np.all(np.isfinite(f0))) and linalg.norm(f0) <= SWITCH_START_RESIDUAL
    if not start_ok:
        solution = solve_equilibrium(model, x_start, parameters)
        counts["rhs_evaluations"] += len(solution.history)
        counts["jacobian_evaluations"] += solution.iterations
        counts["newton_iterations"] += solution.iterations
        if not solution.converged:
            return record(
                [],
                STATUS_FAILED,
                f"no equilibrium found at the start {vary}={start_value:.10g}: {solution.message}",
            )
        x_start = solution.state
    u0 = np.append(x_start, start_value)
    for limit in state_limits:
        if step_control.beyond_limit(u0[limit.index], limit) is not None:
            return record(
                [],
                STATUS_FAILED,
                f"the start equilibrium has {limit.name}={u0[limit.index]:.10g}, outside "
                f"its limits [{limit.lo:.10g}, {limit.hi:.10g}] (trace limits)",
            )
    sides = _sides(direction, start_tangent, n)
    curves: list[tuple[int, continuation.Curve]] = []
    done_points = 0
    for orientation, tangent0, exact in sides:
        problem = EquilibriumBranch(model, vary_index, parameters, orientation)
        if tangent0 is None:
            # One tangent for both sides, reversed for the decreasing one, so that
            # the two sides leave in opposite directions even at a turning point.
            base = _initial_direction(problem, u0)
            if isinstance(base, str):
                curves.append((orientation, continuation.failed_curve(u0, base)))
                continue
            tangent0 = orientation * base

        offset = max(done_points - 1, 0)  # the second side's start row is the first's

        def report(count, offset=offset):
            if progress is not None:
                progress(offset + count)

        curve = continuation.follow_curve(
            problem,
            u0,
            tangent0,
            steps,
            (lo, hi),
            newton=newton,
            progress=report,
            start_tangent_exact=exact,
            limits=state_limits,
        )
        curves.append((orientation, curve))
        done_points += len(curve)
        if curve.status == continuation.STATUS_CLOSED:
            break  # the other side is the same closed curve
    for _, curve in curves:
        for key, value in curve.counts.items():
            counts[key] = counts.get(key, 0) + value
    status, message = _summarize(curves, vary)
    return record(curves, status, message)


def state_limits_of(
    model: Model, limits: Mapping[str | int, tuple[float, float]] | None
) -> tuple[step_control.Limit, ...]:
    """Trace limits {state name or index: (lo, hi)} as the engine's Limit records.

    Raises
    ------
    ValueError
        For an unknown state or bounds not ordered lo < hi (programming errors;
        the scan validator catches them first).
    """
    if not limits:
        return ()
    states = list(model.states)
    records = []
    for key, (lo, hi) in limits.items():
        if isinstance(key, str):
            if key not in states:
                raise ValueError(f"limits: unknown state {key!r}; the model has {states}")
            index = states.index(key)
        else:
            index = int(key)
            if not 0 <= index < len(states):
                raise ValueError(f"limits: state index {index} out of range")
        if not float(lo) < float(hi):
            raise ValueError(f"limits: {states[index]} needs lo < hi, got [{lo}, {hi}]")
        records.append(step_control.Limit(index, float(lo), float(hi), states[index]))
    return tuple(records)


def within_limits(state: Array, limits: tuple[step_control.Limit, ...]) -> bool:
    """True when no state of ``state`` (n,) lies beyond its limit (up to the slack)."""
    return all(step_control.beyond_limit(state[lim.index], lim) is None for lim in limits)


def _sides(direction, start_tangent, n):
    """(orientation, tangent0 or None, exact) for each side to trace, in trace order."""
    if start_tangent is not None:
        tangent = np.array(start_tangent, dtype=float).reshape(-1)
        if tangent.shape[0] != n + 1:
            raise ValueError(f"start_tangent must have {n + 1} components, not {tangent.shape[0]}")
        return [(1, tangent / linalg.norm(tangent), True)]
    if direction == "both":
        return [(-1, None, False), (1, None, False)]
    if direction == "decreasing":
        return [(-1, None, False)]
    return [(1, None, False)]


def _initial_direction(problem, u0):
    """The unit tangent at the start with non-negative parameter component, or a message."""
    with np.errstate(all="ignore"):
        jac = problem.jacobian(u0)
    try:
        return linalg.initial_tangent(jac, 1.0)
    except linalg.SingularMatrixError:
        return (
            f"the branch direction is undefined at the start {problem.describe(u0)}: "
            "the Jacobian [f_x, f_p] has rank below n (a branch point?)"
        )


_STATUS_ORDER = {STATUS_FAILED: 3, STATUS_MAX_POINTS: 2, STATUS_CLOSED: 1, STATUS_DONE: 0}
_SIDE_NAMES = {-1: "decreasing side", 1: "increasing side"}


def _summarize(curves, vary):
    if not curves:
        return STATUS_DONE, ""
    status = max((curve.status for _, curve in curves), key=lambda s: _STATUS_ORDER.get(s, 3))
    if len(curves) == 1:
        return status, curves[0][1].message
    parts = [
        f"{_SIDE_NAMES[orientation]}: {curve.message or curve.status}"
        for orientation, curve in curves
    ]
    return status, "; ".join(parts)


def _assemble(
    model: Model, name, vary, parameters, interval, curves, status, message, counts, parent
):
    """Concatenate the sides in trace order into a Branch record."""
    n = len(model.states)
    pieces = []
    for orientation, curve in curves:
        if len(curve) == 0:
            continue
        pieces.append((orientation, curve))
    if not pieces:
        return Branch(
            name=name,
            vary=vary,
            parameters=parameters,
            parameter_values=np.empty(0),
            states=np.empty((0, n)),
            arclength=np.empty(0),
            tangents=np.empty((0, n + 1)),
            eigenvalues=np.empty((0, n), dtype=complex),
            unstable_count=np.empty(0, dtype=int),
            test_values=np.empty((0, len(events.TEST_FUNCTIONS))),
            newton_iterations=np.empty(0, dtype=int),
            residual_norms=np.empty(0),
            status=status,
            message=message,
            interval=interval,
            counts=dict(counts),
            parent=parent,
        )
    columns = {
        key: []
        for key in (
            "points",
            "tangents",
            "arclength",
            "iterations",
            "residuals",
            "tests",
            "eigenvalues",
        )
    }
    for index, (orientation, curve) in enumerate(pieces):
        rows = slice(None)
        if orientation < 0:
            order = slice(None, None, -1)
            sign = -1.0
        else:
            order = slice(None)
            sign = 1.0
            # The start row is already there when the decreasing side came first.
            if index > 0 and pieces[index - 1][0] < 0:
                rows = slice(1, None)
        select = _compose(order, rows, len(curve))
        columns["points"].append(curve.points[select])
        columns["tangents"].append(sign * curve.tangents[select])
        columns["arclength"].append(sign * curve.arclength[select])
        columns["iterations"].append(curve.newton_iterations[select])
        columns["residuals"].append(curve.residual_norms[select])
        columns["tests"].append(curve.test_values[select])
        columns["eigenvalues"].append(np.asarray(curve.payloads)[select])
    points = np.concatenate(columns["points"])
    eigenvalues = np.concatenate(columns["eigenvalues"]).astype(complex)
    return Branch(
        name=name,
        vary=vary,
        parameters=parameters,
        parameter_values=points[:, -1].copy(),
        states=points[:, :-1].copy(),
        arclength=np.concatenate(columns["arclength"]),
        tangents=np.concatenate(columns["tangents"]),
        eigenvalues=eigenvalues,
        unstable_count=unstable_counts(eigenvalues),
        test_values=np.concatenate(columns["tests"]),
        newton_iterations=np.concatenate(columns["iterations"]).astype(int),
        residual_norms=np.concatenate(columns["residuals"]),
        status=status,
        message=message,
        interval=interval,
        counts=dict(counts),
        parent=parent,
    )


def _compose(order: slice, rows: slice, length: int) -> np.ndarray:
    indices = np.arange(length)[rows]
    return indices[order]


def unstable_counts(eigenvalues: Array) -> Array:
    """Eigenvalues with positive real part per row of a (k, r) complex array.

    A real part counts as positive above ``UNSTABLE_RTOL`` times the row's
    largest eigenvalue modulus (NaN entries, from an Arnoldi run that did not
    converge, count as not unstable).
    """
    if eigenvalues.size == 0:
        return np.zeros(eigenvalues.shape[0], dtype=int)
    with np.errstate(invalid="ignore"):
        radius = np.nanmax(np.abs(eigenvalues), axis=1, keepdims=True)
        radius = np.where(np.isfinite(radius), radius, 0.0)
        positive = eigenvalues.real > UNSTABLE_RTOL * radius
    return np.count_nonzero(positive, axis=1).astype(int)


__all__ = [
    "EquilibriumBranch",
    "state_limits_of",
    "trace_branch",
    "unstable_counts",
    "within_limits",
]
