"""One equilibrium: damped Newton, linearization and equilibrium type.

``solve_equilibrium`` finds x with f(x, p) = 0 near a guess by Newton's method
with backtracking on the residual norm (damped Newton; Deuflhard, Newton
Methods for Nonlinear Problems, section 3.1, in its simplest Armijo form).
It never raises on numerical trouble: the returned record carries a status
and a message saying where and why.

``linearize`` computes the Jacobian there, its eigenvalues and the type of
the equilibrium. Planar types follow the trace-determinant classification
(Strogatz, Nonlinear Dynamics and Chaos, section 5.2); larger systems are
described by the numbers of eigenvalues in each half-plane and the leading
eigenvalues.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from branchline.numerics import linalg
from branchline.numerics.eigenvalues import (
    count_by_half_plane,
    dense_eigenvalues,
    leading_eigenvalues,
)
from branchline.numerics.newton import NewtonTrouble, iterate
from branchline.numerics.policy import LinearAlgebraPolicy, policy_of
from branchline.numerics.tolerances import (
    EQUILIBRIUM_UPDATE_RTOL,
    MAX_EQUILIBRIUM_ITERATIONS,
    RESIDUAL_TOL,
    EquilibriumRule,
)
from branchline.vocabulary import Status

if TYPE_CHECKING:
    from branchline.model.build import Model

Array = np.ndarray

# --- Newton settings -------------------------------------------------------
# Backtracking: halve the step until the residual norm drops by at least this
# fraction of the step length (Armijo's sufficient-decrease constant, common practice).
SUFFICIENT_DECREASE = 1e-4
SMALLEST_DAMPING = 2.0**-20
# A Jacobian whose 2-norm condition number exceeds this is treated as singular
# (past it the Newton step has no correct digits).
SINGULAR_CONDITION = 1e14

# --- Classification settings -----------------------------------------------
# The one hyperbolicity rule: an eigenvalue whose real part is at most this
# fraction of |J| (the model's rates, :func:`rate_scale`) counts as lying on the
# imaginary axis, and that single count decides both the type and the verdict.
# Rounding leaves simple eigenvalues uncertain by about eps |J| (1e-16), but a
# point given to rounding (relative eps) from a fold has an eigenvalue of about
# sqrt(eps) |J| (1e-8), and defective eigenvalues are only good to that level:
# 1e-7 calls both "on the axis" and keeps every larger real part decisive.
HYPERBOLIC_RTOL = 1e-7
# Relative tolerance for tau^2 - 4 Delta = 0 (stars and degenerate nodes) and
# for equal eigenvalues.
REPEATED_RTOL = 1e-8
# Number of leading eigenvalues reported.
LEADING_COUNT = 3



@dataclass(frozen=True)
class EquilibriumSolution:
    """The outcome of Newton's method for f(x, p) = 0.

    Attributes
    ----------
    state : ndarray (n,)
        The last iterate (the equilibrium when ``converged``).
    parameters : ndarray (m,)
    converged : bool
    iterations : int
        Newton steps taken.
    residual_norm : float
        Euclidean norm of f at ``state``.
    history : tuple of float
        Residual norms, starting with the guess.
    status : str
        ``converged``, ``not_converged``, ``singular_jacobian`` or ``non_finite``.
    message : str
        Empty when converged, else where and why it failed.
    """

    state: Array
    parameters: Array
    converged: bool
    iterations: int
    residual_norm: float
    history: tuple[float, ...]
    status: str
    message: str = ""


@dataclass(frozen=True)
class Linearization:
    """The linearization x' = J (x - x*) at an equilibrium.

    Attributes
    ----------
    jacobian : ndarray (n, n)
    eigenvalues : ndarray (n,) complex
        Sorted by decreasing real part (the r leading ones for sparse models).
    kind : str
        One of ``stable_node``, ``unstable_node``, ``saddle``, ``stable_focus``,
        ``unstable_focus``, ``centre``, ``stable_star``, ``unstable_star``,
        ``stable_degenerate_node``, ``unstable_degenerate_node``,
        ``zero_eigenvalue`` (a zero eigenvalue: a line of equilibria of the
        linearization), ``zero_jacobian`` (J = 0), ``saddle_focus`` (n > 2, a
        saddle with complex eigenvalues), ``non_hyperbolic`` (n > 2, eigenvalues
        on the imaginary axis).
    hyperbolic : bool
        False when some eigenvalue has (near-)zero real part; then the
        linearization does not decide the local behaviour.
    positive, zero, negative : int
        Eigenvalues with positive, (near-)zero and negative real part (for a
        large sparse model: among the r leading eigenvalues that were computed).
    leading : ndarray complex
        Up to ``LEADING_COUNT`` eigenvalues with the largest real parts.
    description : str
        One or two plain sentences for a person.
    axis_tolerance : float
        The hyperbolicity rule's threshold: eigenvalues with |Re| at most this
        lie on the imaginary axis (``HYPERBOLIC_RTOL`` times ``jacobian_norm``).
    jacobian_norm : float
        |J|, the yardstick of the rule (:func:`rate_scale`).
    """

    jacobian: Array
    eigenvalues: Array
    kind: str
    hyperbolic: bool
    positive: int
    zero: int
    negative: int
    leading: Array
    description: str
    axis_tolerance: float = 0.0
    jacobian_norm: float = 0.0
    trace: float | None = None
    determinant: float | None = None
    notes: tuple[str, ...] = field(default_factory=tuple)


# ---------------------------------------------------------------------------
# Newton's method
# ---------------------------------------------------------------------------


def _evaluate(function, x: Array, p: Array) -> Array | None:
    """f(x, p) as a float array, or None when it is not finite or raises arithmetic errors."""
    try:
        with np.errstate(all="ignore"):
            value = np.asarray(function(x, p), dtype=float)
    except (ArithmeticError, ValueError):
        return None
    if not np.all(np.isfinite(value)):
        return None
    return value


def _start_trouble(model: Model, x: Array, p: Array) -> str:
    """Why f cannot be used at the start guess: the model's own exception, or "not finite"."""
    try:
        with np.errstate(all="ignore"):
            model.rhs(x, p)
    except (ArithmeticError, ValueError) as error:
        return f"evaluating f raised {type(error).__name__}: {error}"
    return "f is not finite"


def _jacobian_dense_or_sparse(model: Model, x: Array, p: Array):
    try:
        with np.errstate(all="ignore"):
            jac = model.jacobian(x, p)
    except (ArithmeticError, ValueError):
        return None
    if linalg.is_sparse(jac):
        return jac if np.all(np.isfinite(jac.data)) else None
    jac = np.asarray(jac, dtype=float)
    return jac if np.all(np.isfinite(jac)) else None


def _where(x: Array, p: Array, model) -> str:
    """Short text naming a point: the first states and the parameters."""
    names = getattr(model, "states", ()) or tuple(f"x{i}" for i in range(len(x)))
    shown = ", ".join(f"{name}={value:.6g}" for name, value in zip(names[:6], x[:6], strict=False))
    if len(x) > 6:
        shown += f", ... ({len(x)} states, |x|={linalg.norm(x):.6g})"
    return f"at {shown}"


def _singular(jac, policy: LinearAlgebraPolicy) -> bool:
    """True when a dense Jacobian is numerically singular (sparse: left to the LU)."""
    if linalg.is_sparse(jac) or jac.shape[0] > policy.condition_check_up_to:
        return False
    with np.errstate(all="ignore"):
        condition = np.linalg.cond(jac)
    return not np.isfinite(condition) or condition > SINGULAR_CONDITION


def solve_equilibrium(
    model: Model,
    x0: Array,
    p: Array,
    *,
    residual_tol: float = RESIDUAL_TOL,
    update_rtol: float = EQUILIBRIUM_UPDATE_RTOL,
    max_iterations: int = MAX_EQUILIBRIUM_ITERATIONS,
) -> EquilibriumSolution:
    """Solve f(x, p) = 0 by damped Newton from the guess ``x0``.

    Each step solves J dx = -f and backtracks (halving) until the residual
    norm decreases sufficiently (Armijo). Converged when |f| <= residual_tol (or
    at the rounding level of evaluating f, for large or stiff models) and the
    last update |dx| <= update_rtol (1 + |x|), or when the update has reached
    roundoff; the loop is the shared one (:func:`branchline.numerics.newton.iterate`
    with :class:`~branchline.numerics.tolerances.EquilibriumRule`).

    Parameters
    ----------
    model : branchline.model.build.Model
        Needs ``rhs(x, p)`` and ``jacobian(x, p)`` (dense or scipy.sparse).
    x0 : array_like (n,)
        Start guess.
    p : array_like (m,)
        Parameter vector.

    Returns
    -------
    EquilibriumSolution
        Never raises for numerical trouble; see ``status`` and ``message``.

    Examples
    --------
    >>> import numpy as np
    >>> from types import SimpleNamespace
    >>> m = SimpleNamespace(rhs=lambda x, p: x**2 - p, jacobian=lambda x, p: np.diag(2 * x),
    ...                     states=("x",))
    >>> sol = solve_equilibrium(m, np.array([1.0]), np.array([2.0]))
    >>> sol.converged, round(float(sol.state[0]), 12)
    (True, 1.414213562373)
    """
    x = np.array(x0, dtype=float).reshape(-1)
    p = np.array(p, dtype=float).reshape(-1)
    with np.errstate(all="ignore"):
        return _newton(model, x, p, residual_tol, update_rtol, max_iterations)


def _newton(model: Model, x, p, residual_tol, update_rtol, max_iterations) -> EquilibriumSolution:
    """Damped Newton as the shared loop: f evaluated by the line search, J by the update."""
    rule = EquilibriumRule(residual_tol, update_rtol, max_iterations, lambda z: _where(z, p, model))

    def start(z: Array) -> tuple[Array, None]:
        f = _evaluate(model.rhs, z, p)
        if f is None:
            message = f"{_start_trouble(model, z, p)} {_where(z, p, model)} (start guess)"
            raise NewtonTrouble(Status.NON_FINITE, message)
        return f, None

    def advance(z: Array, f: Array, _jac: None, residual: float):
        status, message, step, rule.jacobian = _newton_direction(model, z, p, f, residual)
        if status:
            raise NewtonTrouble(status, message)
        damping, trial, f_trial, _ = _backtrack(model, z, p, step, residual)
        if trial is None:
            raise NewtonTrouble(
                Status.NOT_CONVERGED,
                f"Newton's method stalled {_where(z, p, model)} with residual "
                f"{residual:.3g}: no step along the Newton direction reduces |f|; "
                "there may be no equilibrium near the guess, try another guess",
            )
        rule.damping = damping
        return trial, damping * linalg.norm(step), (f_trial, None)

    result = iterate(start, x, advance, rule, max_iterations)
    history = result.residual_norms or (math.nan,)
    return EquilibriumSolution(
        result.solution,
        p,
        result.converged,
        result.iterations,
        float(result.residual_norm),
        history,
        result.status,
        result.message,
    )


def _newton_direction(model: Model, x, p, f, residual):
    """(status, message, step, J): status "" and the Newton step, or why there is none."""
    jac = _jacobian_dense_or_sparse(model, x, p)
    if jac is None:
        return Status.NON_FINITE, f"the Jacobian is not finite {_where(x, p, model)}", None, None
    if _singular(jac, policy_of(model)):
        return Status.SINGULAR_JACOBIAN, _singular_message(x, p, residual, model), None, jac
    try:
        return "", "", -linalg.solve_square(jac, f), jac
    except linalg.SingularMatrixError:
        return Status.SINGULAR_JACOBIAN, _singular_message(x, p, residual, model), None, jac


def _backtrack(model: Model, x, p, step, residual):
    """Halve the Newton step until |f| decreases sufficiently; (damping, x, f, |f|) or Nones."""
    damping = 1.0
    while damping >= SMALLEST_DAMPING:
        trial = x + damping * step
        f_trial = _evaluate(model.rhs, trial, p)
        if f_trial is not None:
            residual_trial = linalg.norm(f_trial)
            if residual_trial <= (1.0 - SUFFICIENT_DECREASE * damping) * residual:
                return damping, trial, f_trial, residual_trial
        damping *= 0.5
    return damping, None, None, None


def _singular_message(x, p, residual, model) -> str:
    return (
        f"the Jacobian df/dx is singular {_where(x, p, model)} (residual {residual:.3g}); "
        "the guess may sit at a turning point or there may be no isolated equilibrium "
        "nearby, try another guess or parameter value"
    )


# ---------------------------------------------------------------------------
# Linearization and equilibrium type
# ---------------------------------------------------------------------------


def linearize(model: Model, x: Array, p: Array) -> Linearization:
    """Jacobian, eigenvalues and equilibrium type at (x, p).

    Parameters
    ----------
    model : branchline.model.build.Model
    x : ndarray (n,)
        An equilibrium (the classification describes the linearization at any point).
    p : ndarray (m,)

    Returns
    -------
    Linearization
    """
    x = np.asarray(x, dtype=float)
    p = np.asarray(p, dtype=float)
    with np.errstate(all="ignore"):
        jac = model.jacobian(x, p)
    policy = policy_of(model)
    if linalg.is_sparse(jac) and jac.shape[0] > policy.eigenvalues_dense_up_to:
        eigenvalues = leading_eigenvalues(jac, policy=policy)
        jac_dense = None
    else:
        jac_dense = jac.toarray() if linalg.is_sparse(jac) else np.asarray(jac, dtype=float)
        eigenvalues = dense_eigenvalues(jac_dense)
    scale = rate_scale(jac, model.parameter_jacobian(x, p), x, p)
    return classify(jac_dense if jac_dense is not None else jac, eigenvalues, scale)


def rate_scale(jac_x: Any, jac_p: Array, x: Array, p: Array) -> float:
    """|J|: the rates of the model at (x, p), the yardstick of the hyperbolicity rule.

    The Frobenius norm of f_x, or of f_p diag(p) / |x| (the rates at which
    relative parameter changes move the state) when that is larger: at a fold
    of a one-state model f_x itself vanishes, and the rule must still see the
    model's own rates.
    """
    size = float(np.linalg.norm(x))
    response = np.asarray(jac_p, dtype=float) * np.asarray(p, dtype=float)
    through_parameters = float(np.linalg.norm(response)) / size if size > 0.0 else 0.0
    return max(jacobian_norm(jac_x), through_parameters)


def classify(
    jacobian: Any, eigenvalues: Array | None = None, scale: float | None = None
) -> Linearization:
    """Type of the linear system x' = J x from J (and its eigenvalues, if known).

    Planar systems use the trace tau and determinant Delta (Strogatz,
    Nonlinear Dynamics and Chaos, section 5.2): Delta < 0 saddle; Delta > 0
    and tau^2 - 4 Delta > 0 node, < 0 focus (spiral), = 0 star (J a multiple
    of I) or degenerate node; tau = 0 < Delta centre; Delta = 0 a zero
    eigenvalue (non-isolated equilibria of the linear system). Other sizes
    are described by half-plane counts.
    """
    if eigenvalues is None:
        eigenvalues = dense_eigenvalues(np.asarray(jacobian, dtype=float))
    eigenvalues = np.asarray(eigenvalues, dtype=complex)
    if scale is None:
        scale = jacobian_norm(jacobian)
    zero_tol = HYPERBOLIC_RTOL * scale
    positive, zero, negative = count_by_half_plane(eigenvalues, zero_tol)
    hyperbolic = zero == 0 and scale > 0.0
    leading = eigenvalues[:LEADING_COUNT]
    n = eigenvalues.shape[0]
    if n == 2 and not linalg.is_sparse(jacobian):
        kind, tau, delta = _planar_kind(np.asarray(jacobian, dtype=float), eigenvalues, zero_tol)
    else:
        kind, tau, delta = _general_kind(eigenvalues, positive, zero, negative, scale), None, None
    description = _describe(kind, eigenvalues, positive, zero, negative, hyperbolic)
    return Linearization(
        axis_tolerance=zero_tol,
        jacobian_norm=scale,
        jacobian=jacobian,
        eigenvalues=eigenvalues,
        kind=kind,
        hyperbolic=hyperbolic,
        positive=positive,
        zero=zero,
        negative=negative,
        leading=leading,
        description=description,
        trace=tau,
        determinant=delta,
    )


def jacobian_norm(jacobian: Any) -> float:
    """|J|, the Frobenius norm of a dense or sparse Jacobian (0 for an empty one)."""
    if linalg.is_sparse(jacobian):
        import scipy.sparse.linalg as spla

        return float(spla.norm(jacobian))
    jacobian = np.asarray(jacobian, dtype=float)
    return float(np.linalg.norm(jacobian)) if jacobian.size else 0.0


def _planar_kind(jac: Array, eigenvalues: Array, zero_tol: float) -> tuple[str, float, float]:
    """Strogatz's trace-determinant type; what lies on the axis decides as in :func:`classify`."""
    tau = float(jac[0, 0] + jac[1, 1])
    delta = float(jac[0, 0] * jac[1, 1] - jac[0, 1] * jac[1, 0])
    scale = zero_tol / HYPERBOLIC_RTOL
    if scale == 0.0:
        return "zero_jacobian", tau, delta
    if np.any(np.abs(eigenvalues) <= zero_tol):
        return "zero_eigenvalue", tau, delta
    if np.any(np.abs(eigenvalues.real) <= zero_tol):
        return "centre", tau, delta
    if eigenvalues[0].real > 0.0 > eigenvalues[-1].real:
        return "saddle", tau, delta
    sign = "stable" if tau < 0.0 else "unstable"
    discriminant = tau * tau - 4.0 * delta
    if abs(discriminant) <= REPEATED_RTOL * scale**2:
        half = 0.5 * tau
        off_identity = np.abs(jac - half * np.eye(2)).max()
        if off_identity <= REPEATED_RTOL * scale:
            return f"{sign}_star", tau, delta
        return f"{sign}_degenerate_node", tau, delta
    if discriminant > 0.0:
        return f"{sign}_node", tau, delta
    return f"{sign}_focus", tau, delta


def _general_kind(eigenvalues, positive, zero, negative, scale) -> str:
    n = eigenvalues.shape[0]
    if scale == 0.0:
        return "zero_jacobian"
    if zero:
        if n == 1 or np.any(np.abs(eigenvalues) <= HYPERBOLIC_RTOL * scale):
            return "zero_eigenvalue"
        return "centre" if n == 2 else "non_hyperbolic"
    complex_present = bool(np.any(np.abs(eigenvalues.imag) > HYPERBOLIC_RTOL * scale))
    if positive and negative:
        return "saddle_focus" if complex_present and n > 2 else "saddle"
    sign = "stable" if negative else "unstable"
    # For a sink the slowest (leading) eigenvalues decide whether orbits spiral in.
    decisive = eigenvalues[0] if negative else eigenvalues[-1]
    if abs(decisive.imag) > HYPERBOLIC_RTOL * scale:
        return f"{sign}_focus"
    return f"{sign}_node"


_KIND_TEXT = {
    "stable_node": "stable node: nearby states approach it without oscillating",
    "unstable_node": "unstable node: nearby states move away without oscillating",
    "saddle": "saddle: unstable, some directions attract and others repel",
    "saddle_focus": "saddle focus: unstable, with oscillating attracting or repelling directions",
    "stable_focus": "stable focus: nearby states spiral in (damped oscillation)",
    "unstable_focus": "unstable focus: nearby states spiral out (growing oscillation)",
    "centre": "centre of the linearization: purely imaginary eigenvalues; the nonlinear terms "
    "decide stability",
    "stable_star": "stable star: equal eigenvalues, every direction approaches at the same rate",
    "unstable_star": "unstable star: equal eigenvalues, every direction leaves at the same rate",
    "stable_degenerate_node": "stable degenerate node: a repeated eigenvalue with one eigenvector",
    "unstable_degenerate_node": "unstable degenerate node: a repeated eigenvalue with one "
    "eigenvector",
    "zero_eigenvalue": "zero eigenvalue: the linearization has a line of equilibria (not "
    "isolated); the nonlinear terms decide",
    "zero_jacobian": "zero Jacobian: the linearization says nothing about the local behaviour",
    "non_hyperbolic": "non-hyperbolic: eigenvalues on the imaginary axis; the nonlinear terms "
    "decide",
}


def _describe(kind, eigenvalues, positive, zero, negative, hyperbolic) -> str:
    counts = (
        f"{positive} eigenvalue(s) with positive real part, {zero} on the imaginary axis, "
        f"{negative} with negative real part"
    )
    verdict = (
        "hyperbolic: the linearization decides the local behaviour"
        if hyperbolic
        else "not hyperbolic: the linearization does not decide the local behaviour"
    )
    lead = ", ".join(_format_complex(value) for value in eigenvalues[:LEADING_COUNT])
    return f"{_KIND_TEXT[kind]}. {counts}; leading eigenvalues {lead}; {verdict}."


def _format_complex(value: complex) -> str:
    if value.imag == 0.0:
        return f"{value.real:.6g}"
    sign = "+" if value.imag > 0 else "-"
    return f"{value.real:.6g}{sign}{abs(value.imag):.6g}i"
