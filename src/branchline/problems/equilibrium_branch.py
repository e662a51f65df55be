"""The equilibrium branch as one unit: f(x, p) = 0 followed in u = (x, p).

Everything that makes an equilibrium branch is declared here:

- unknowns u = (x, p_vary), residual f(x, p), Jacobian [f_x, f_p]
  (:class:`EquilibriumBranch`, the problem handed to the continuation engine);
- its test functions, by name (:data:`TEST_FUNCTIONS`: ``fold``, the tangent's
  parameter component; ``hopf`` and ``branch_point`` from
  :mod:`branchline.events.detection`), evaluated in ``observe``;
- how each event is located (:data:`LOCATORS`, defining systems and normal
  forms in :mod:`branchline.events.location`), in which order, and when two are
  one (:func:`branchline.events.locate.same_event`): :func:`locate_events`;
- its record (:class:`branchline.results.records.Branch`, assembled by
  :func:`trace_branch`) and the stability columns of its table
  (:func:`stability_columns`).

Tracing both sides, joining them in trace order, finding sign changes of named
test functions and dispatching brackets are problem-independent
(:mod:`branchline.problems.tracing`, :mod:`branchline.events.brackets`).

Example
-------
>>> import numpy as np
>>> from branchline.model.build import build_model
>>> from branchline.scan.loader import ExpressionModelSpec, StepSettings
>>> model = build_model(ExpressionModelSpec(parameters={"h": 0.1},
...                                         equations={"N": "N*(1 - N) - h"}))
>>> branch = trace_branch(model, "t", "h", model.defaults, np.array([0.9]),
...                       (0.0, 0.4), "both", StepSettings())
>>> [(str(e.kind), e.value) for e in locate_events(model, branch)]
[('fold', 0.25)]
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import replace
from functools import partial
from typing import TYPE_CHECKING, Any

import numpy as np

from branchline.continuation import step_control
from branchline.continuation.engine import ObservationFailed
from branchline.events import location
from branchline.events.brackets import (
    Bracket,
    locate_brackets,
    sign_change_brackets,
    vanishing_end_brackets,
)
from branchline.events.detection import bordered_determinant, hopf_brackets, hopf_test
from branchline.events.locate import same_event
from branchline.numerics import linalg
from branchline.numerics.eigen_tracking import SpectrumTrack, track_leading_eigenvalues
from branchline.numerics.eigenvalues import dense_eigenvalues, sort_eigenvalues
from branchline.numerics.policy import DEFAULT, LinearAlgebraPolicy, policy_of
from branchline.problems.equilibrium import solve_equilibrium
from branchline.problems.jacobian_watch import watch_for
from branchline.problems.tracing import (
    DIRECTIONS,
    TraceRequest,
    in_trace_order,
    summarize,
    total_counts,
    trace_sides,
)
from branchline.results.records import Branch, Event
from branchline.vocabulary import EventKind, Status

if TYPE_CHECKING:
    from branchline.model.build import Model
    from branchline.numerics.tolerances import StepSettings

Array = np.ndarray

# The test functions, by name: the columns of Branch.test_values in this order.
TEST_FUNCTIONS = (EventKind.FOLD, EventKind.HOPF, EventKind.BRANCH_POINT)
# Brackets are located in this order, so that a fold that is really a branch
# point is met after the branch point and dropped as its duplicate.
LOCATION_ORDER = (EventKind.BRANCH_POINT, EventKind.HOPF, EventKind.FOLD)
# An eigenvalue counts as unstable when its real part exceeds this fraction of
# the spectral radius: roundoff in LAPACK eigenvalues is about eps * |J|, so a
# zero eigenvalue (a conserved quantity, say) never flickers into "unstable".
UNSTABLE_RTOL = 1e-10
# Why a point's stability is unknown, when Arnoldi cannot find the leading eigenvalues.
EIGENVALUES_FAILED = "eigenvalues near the imaginary axis could not be computed"
# A start point given for branch switching is accepted as is when its residual
# is below this (it is a located branch point, where Newton in x alone is singular).
SWITCH_START_RESIDUAL = 1e-8


def equilibrium_tests(
    jac_x: Any,
    jac_p: Array,
    tangent: Array,
    eigenvalues: Array,
    policy: LinearAlgebraPolicy = DEFAULT,
) -> Array:
    """Test-function values at one point of an equilibrium branch.

    Parameters
    ----------
    jac_x : ndarray (n, n) or scipy.sparse matrix
        df/dx at the point.
    jac_p : ndarray (n,)
        df/dp for the varied parameter.
    tangent : ndarray (n + 1,)
        Unit tangent (states, then parameter), in trace order.
    eigenvalues : ndarray (r,) complex
        Eigenvalues of ``jac_x`` (all, or the r leading ones), NaN-padded allowed.
    policy : LinearAlgebraPolicy
        The model's dense/sparse policy.

    Returns
    -------
    ndarray (3,)
        Values in the order of :data:`TEST_FUNCTIONS`. Only their signs, zeros
        and local smoothness carry meaning.
    """
    return np.array(
        [
            float(tangent[-1]),
            hopf_test(eigenvalues),
            bordered_determinant(jac_x, jac_p, tangent, policy),
        ]
    )


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
    Uses ``model.derivatives(x, p, vary_index) -> (f_x, f_p column)`` when the
    model has it (only the varied parameter's column is computed), else
    ``model.jacobian`` and ``model.parameter_jacobian``.
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
        self.policy = policy_of(model)
        # Only a policy that forces dense or sparse changes what the model returns.
        self._forced = self.policy.force is not None
        # Large sparse models: the leading eigenvalues tracked from point to point,
        # and the branch-point test read from the tangent's factorization.
        self.spectrum: SpectrumTrack | None = None
        # (start point, its leading eigenvalues, their track), shared by the sides of a trace
        self.start_spectrum: tuple | None = None
        self._determinant: tuple[Any, float] | None = None
        # A user's own Jacobian is checked again where the corrector keeps struggling.
        self.watch = watch_for(model)
        # The engine may keep points rejected by its test-function rule and record them
        # later (continuation/revisit.py) when observe is pure: a dense Jacobian (no
        # eigenvalues tracked, no factorization hook) and no Jacobian watch.
        dense = not self.policy.sparse_curve(self.size, self.sparse)
        self.revisit_rejected = (
            dense and self.watch is None and self.size > self.policy.reuse_rejected_points_above
        )
        # Names for the rule that stops a branch running off to infinity (continuation/escape).
        self.escape_names = (tuple(model.states), model.parameters[self.vary_index])

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
            fx, fp = self._derivatives(x, p, self.vary_index)
        else:
            fx = self._jacobian_x(x, p)
            fp = np.asarray(self._jacobian_p(x, p), dtype=float)[:, self.vary_index]
        if self._forced:
            fx = self._as_policy_says(fx)
        if linalg.is_sparse(fx):
            return linalg.append_column(fx, np.asarray(fp, dtype=float))
        n = self.size
        jac = np.empty((n, n + 1))
        jac[:, :n] = fx
        jac[:, n] = fp
        return jac

    def _as_policy_says(self, fx: Any) -> Any:
        """f_x converted to sparse CSC or dense, as the model's policy forces."""
        sparse = linalg.is_sparse(fx)
        if self.policy.sparse_curve(self.size, sparse) == sparse:
            return fx
        if sparse:
            return fx.toarray()
        import scipy.sparse as sp

        return sp.csc_matrix(fx)

    def jacobian(self, u: Array) -> Any:
        """[f_x, f_p] at u, shape (n, n + 1): ndarray, or scipy.sparse CSC for sparse models."""
        if self.watch is not None:
            self.watch.evaluations += 1
        return self._stacked(u[:-1], self._parameters(u))

    def evaluate(self, u: Array) -> tuple[Array, Any]:
        """(residual, jacobian) at u in one call, sharing the parameter vector."""
        if self.watch is not None:
            self.watch.evaluations += 1
        x = u[:-1]
        p = self._parameters(u)
        return np.asarray(self._rhs(x, p), dtype=float), self._stacked(x, p)

    def tangent_factorization(self, jacobian: Any, lu: Any, z: Array) -> None:
        """Keep the branch-point test from the engine's tangent factorization (its hook).

        ``lu`` factorizes [G_u; previous^T] at a corrected point with sparse Jacobian
        ``jacobian`` = [f_x, f_p], and z solves it for e_(n+1). With t = z / |z|,
        det [G_u; t^T] = |z| det [G_u; previous^T] (the last row changes by a
        rank-one term whose factor is 1 + (t - previous) . z = |z|, since G_u z = 0
        and previous . z = 1), so no second factorization is needed.
        """
        length = linalg.norm(z)
        sign, log_det = linalg.lu_slogdet(lu)
        value = 0.0 if sign == 0.0 else linalg.from_signed_log(sign, log_det + np.log(length))
        self._determinant = (jacobian, value)

    def observe(self, u: Array, tangent: Array, jacobian: Any) -> tuple[Array, Array]:
        """Eigenvalues of f_x (sorted by decreasing real part) and the test functions.

        Raises
        ------
        ObservationFailed
            When a large sparse model's leading eigenvalues cannot be computed
            (the engine then stops the branch there, status ``failed``): a row
            of unknown stability would hide stability changes. Also when the
            model's own Jacobian fails its check where the corrector keeps
            struggling (:mod:`branchline.problems.jacobian_watch`).
        """
        n = self.size
        if self.watch is not None:
            trouble = self.watch.verdict(u[:-1], self._parameters(u).copy())
            if trouble:
                raise ObservationFailed(trouble)
        if linalg.is_sparse(jacobian):
            fx, fp = linalg.split_last_column(jacobian)
            if n <= self.policy.eigenvalues_dense_up_to:
                eigenvalues = dense_eigenvalues(fx.toarray())
            else:
                search = self._leading_eigenvalues(u, fx, jacobian, tangent)
                if not search.found:
                    raise ObservationFailed(f"{EIGENVALUES_FAILED} ({search.message})")
                eigenvalues = search.values
        else:
            fx = jacobian[:, :n]
            fp = jacobian[:, n]
            eigenvalues = sort_eigenvalues(linalg.eigvals_unchecked(fx))
        oriented = tangent if self.orientation > 0 else -tangent
        known = self._determinant
        if known is not None and known[0] is jacobian:
            # the tangent's factorization gave det [G_u; t^T] (see ``tangent``)
            tests = np.array([float(oriented[-1]), hopf_test(eigenvalues), known[1]])
            if self.orientation < 0:
                tests[2] = -tests[2]  # the last row is -t in trace order
            return eigenvalues, tests
        return eigenvalues, equilibrium_tests(fx, fp, oriented, eigenvalues, self.policy)

    def _leading_eigenvalues(self, u: Array, fx: Any, jacobian: Any, tangent: Array):
        """The leading eigenvalues of a large sparse f_x, tracked from the last point.

        The first point of a side is the trace's start point, whose full search the
        side traced before already ran (``start_spectrum``): it is taken from there,
        not searched again (a full search costs ~1.5 s at 1,000 states, and the side
        leaving the interval at a start on its edge has no other point).
        """
        sign = self._jacobian_sign(jacobian, tangent)
        known = self.start_spectrum
        if self.spectrum is None and known is not None and np.array_equal(known[0], u):
            search, track = known[1], known[2]
            # counted once, by the side that ran it
            self.spectrum = replace(track, tracked=0, full_searches=0, determinant_sign=sign)
            return search
        first = self.spectrum is None
        search, self.spectrum = track_leading_eigenvalues(
            fx, self.spectrum, policy=self.policy, determinant_sign=sign
        )
        if first and search.found:
            self.start_spectrum = (u.copy(), search, self.spectrum)
        return search

    def _jacobian_sign(self, jacobian: Any, tangent: Array) -> float | None:
        """The sign of det f_x from the tangent's factorization, or None when unknown.

        With the unit tangent t = (t_x, t_p) in the direction of travel and
        f_x t_x + f_p t_p = 0, the Schur complement of f_x in [G_u; t^T] is
        t_p + |t_x|^2 / t_p = 1 / t_p, so det f_x = det [G_u; t^T] t_p.
        """
        known = self._determinant
        if known is None or known[0] is not jacobian:
            return None
        sign = float(np.sign(known[1]) * np.sign(tangent[-1]))
        return sign or None

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
    newton: str = "auto",
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
    newton : {"auto", "full", "chord", "reuse"}
        Corrector of the engine (:func:`branchline.continuation.engine.follow_curve`);
        "auto": "reuse" (one factorization per point) for sparse models above the
        policy's ``eigenvalues_dense_up_to`` states, else "full".
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
    record = partial(_branch_record, model, name, vary, parameters, (lo, hi), parent)
    u0, failure, start_counts = _start_point(
        model, vary, vary_index, parameters, x_start, (lo, hi), start_tangent
    )
    if failure:
        return record([], Status.FAILED, failure, start_counts)
    for limit in state_limits:
        if step_control.beyond_limit(u0[limit.index], limit) is not None:
            message = (
                f"the start equilibrium has {limit.name}={u0[limit.index]:.10g}, outside "
                f"its limits [{limit.lo:.10g}, {limit.hi:.10g}] (trace limits)"
            )
            return record([], Status.FAILED, message, start_counts)
    if newton == "auto":
        large = bool(getattr(model, "sparse", False)) and (
            len(model.states) > policy_of(model).eigenvalues_dense_up_to
        )
        newton = "reuse" if large else "full"
    request = TraceRequest(
        start=u0,
        bounds=(lo, hi),
        direction=direction,
        steps=steps,
        newton=newton,
        limits=state_limits,
        start_tangent=start_tangent,
        progress=progress,
    )
    problems: list[EquilibriumBranch] = []

    def make_problem(orientation: int) -> EquilibriumBranch:
        problem = EquilibriumBranch(model, vary_index, parameters, orientation)
        if problems:  # the start point's leading eigenvalues, found by the side before
            problem.start_spectrum = problems[-1].start_spectrum
        problems.append(problem)
        return problem

    curves = trace_sides(make_problem, request)
    status, message = summarize(curves)
    return record(curves, status, message, {**start_counts, **eigenvalue_counts(problems)})


def eigenvalue_counts(problems: list[EquilibriumBranch]) -> dict[str, int]:
    """How the leading eigenvalues of a large sparse model were found, over all sides:
    points where tracking was confident (certified points among them: no
    factorization, rule 7 of eigen_tracking), full multi-shift searches, and
    stability changes accepted from tracking alone (rule 6); none for dense models."""
    tracks = [problem.spectrum for problem in problems if problem.spectrum is not None]
    if not tracks:
        return {}
    return {
        "eigenvalues_tracked": sum(track.tracked for track in tracks),
        "eigenvalue_full_searches": sum(track.full_searches for track in tracks),
        "eigenvalues_certified": sum(track.certified for track in tracks),
        "eigenvalue_crossings_tracked": sum(track.crossings for track in tracks),
    }


def _start_point(model, vary, vary_index, parameters, x_start, interval, start_tangent):
    """(u0, "", counts) of the start equilibrium, or (None, why there is none, counts)."""
    lo, hi = interval
    start_value = float(parameters[vary_index])
    counts = {"rhs_evaluations": 0, "jacobian_evaluations": 0, "newton_iterations": 0}
    if not lo <= start_value <= hi:
        message = (
            f"the start value {vary}={start_value:.10g} lies outside the interval "
            f"[{lo:.10g}, {hi:.10g}]"
        )
        return None, message, counts
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
            message = (
                f"no equilibrium found at the start {vary}={start_value:.10g}: {solution.message}"
            )
            return None, message, counts
        x_start = solution.state
    return np.append(x_start, start_value), "", counts


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


def _branch_record(
    model: Model, name, vary, parameters, interval, parent, curves, status, message, counts
) -> Branch:
    """The Branch record of a trace: its sides' rows joined in trace order."""
    n = len(model.states)
    rows = in_trace_order(curves)
    common = {
        "name": name,
        "vary": vary,
        "parameters": parameters,
        "status": status,
        "message": message,
        "interval": interval,
        "counts": total_counts(curves, counts),
        "parent": parent,
        "test_names": TEST_FUNCTIONS,
    }
    if rows is None:
        return Branch(
            parameter_values=np.empty(0),
            states=np.empty((0, n)),
            arclength=np.empty(0),
            tangents=np.empty((0, n + 1)),
            eigenvalues=np.empty((0, n), dtype=complex),
            unstable_count=np.empty(0, dtype=int),
            test_values=np.empty((0, len(TEST_FUNCTIONS))),
            newton_iterations=np.empty(0, dtype=int),
            residual_norms=np.empty(0),
            **common,
        )
    eigenvalues = rows.payloads.astype(complex)
    return Branch(
        parameter_values=rows.points[:, -1].copy(),
        states=rows.points[:, :-1].copy(),
        arclength=rows.arclength,
        tangents=rows.tangents,
        eigenvalues=eigenvalues,
        unstable_count=unstable_counts(eigenvalues),
        test_values=rows.test_values,
        newton_iterations=rows.newton_iterations,
        residual_norms=rows.residual_norms,
        **common,
    )


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


def find_brackets(branch: Branch) -> list[Bracket]:
    """Every bracket of an equilibrium event along a traced branch, with seeds.

    Sign changes of the ``fold`` and ``branch_point`` tests; a ``branch_point``
    test vanishing on an end row; Hopf brackets from the ``hopf`` test and the
    complex eigenvalue pairs (:func:`branchline.events.detection.hopf_brackets`).
    """
    brackets = sign_change_brackets(
        branch.test_values, branch.test_names, (EventKind.FOLD, EventKind.BRANCH_POINT)
    )
    brackets += vanishing_end_brackets(branch.test(EventKind.BRANCH_POINT), EventKind.BRANCH_POINT)
    brackets += hopf_brackets(branch.test(EventKind.HOPF), branch.eigenvalues)
    return brackets


# How each event of an equilibrium branch is located: Newton on its defining
# system from the bracket, bisection on its test function as the fallback.
LOCATORS = {
    EventKind.FOLD: location.locate_fold,
    EventKind.HOPF: location.locate_hopf,
    EventKind.BRANCH_POINT: location.locate_branch_point,
}


def locate_events(model: Model, branch: Branch) -> list[Event]:
    """Locate every stability change along a traced branch.

    Each sign change of a test function between consecutive rows is refined by
    Newton's method on the event's defining system (see
    :mod:`branchline.events.defining_systems`); bisection on the test function is the
    fallback, and says so in ``note``. An event neither can place is still
    reported, placed by interpolation between its rows, with the reason in
    ``note``. Folds that coincide with a branch point (the traced branch
    turning back through a pitchfork) are reported once, as the branch point;
    an event met from two brackets is reported once.

    Returns
    -------
    list of Event, in trace order (by arclength).
    """
    if len(branch) < 2:
        return []
    k = model.parameter_index(branch.vary)
    locators = {kind: partial(locate, model, branch, k) for kind, locate in LOCATORS.items()}
    events = locate_brackets(
        find_brackets(branch),
        locators,
        order=LOCATION_ORDER,
        unrefined=partial(location.unrefined_event, model, branch, k),
        duplicates=same_event,
    )
    forward = branch.arclength[-1] >= branch.arclength[0]
    events.sort(key=lambda e: e.arclength if forward else -e.arclength)
    return events


def stability_columns(branch: Branch) -> dict[str, Array]:
    """The stability columns of the branch's table (points.csv), one value per row."""
    k = len(branch)
    if k and branch.eigenvalues.shape[1]:
        leading = branch.eigenvalues[:, 0]
    else:
        leading = np.full(k, np.nan, dtype=complex)
    return {
        "stable": branch.unstable_count == 0,
        "unstable_count": branch.unstable_count.astype(int),
        "leading_real": leading.real,
        "leading_imag": leading.imag,
    }


__all__ = [
    "LOCATORS",
    "TEST_FUNCTIONS",
    "EquilibriumBranch",
    "equilibrium_tests",
    "find_brackets",
    "locate_events",
    "stability_columns",
    "state_limits_of",
    "trace_branch",
    "unstable_counts",
    "within_limits",
]
