"""The one set of convergence tolerances and step settings every Newton loop and curve uses.

Every Newton iteration runs :func:`branchline.numerics.newton.iterate` with one
of the stopping rules below; each rule reads only the constants of this module,
and nothing else defines them again. The scan's ``[steps]`` table fills
:class:`StepSettings`.

Scale. An absolute residual tolerance means little for a large or stiff model:
evaluating f rounds each component at about eps times the size of the terms
that make it up, so a model whose terms are large (diffusion entries of 1e7 in
a stiff reaction-diffusion model) or that has many states cannot reach
``RESIDUAL_TOL`` however exact the iterate. The continuation correctors
therefore accept a residual at the *rounding level of the evaluation*,

    |F(u)| <= ROUNDING_FACTOR * eps * || |F_u| |u| ||    (componentwise |.|),

with a small update, as well as one below ``RESIDUAL_TOL`` (the backward-error
view of a stopping test: Higham, Accuracy and Stability of Numerical Algorithms,
2nd ed., sections 1.10 and 7.1, from memory; the componentwise bound is
Oettli-Prager's). For models of order one the level lies far below
``RESIDUAL_TOL`` and nothing changes; it is computed only when the absolute test
fails, so it costs nothing on the usual path. The defining systems have long used
the same idea with the Frobenius norm of their Jacobian (``DefiningSystemRule``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from branchline.numerics.newton import (
    CONTINUE,
    FINISH_NEXT,
    STOP_AT_BEST,
    STOP_HERE,
    NewtonTrouble,
)
from branchline.vocabulary import Status

Array = np.ndarray
EPS = float(np.finfo(float).eps)

# --- every Newton loop ---------------------------------------------------------
# Residual norm (Euclidean) accepted as zero. Tests demand 1e-10 residuals on
# O(1) models; larger or stiffer models are accepted at their rounding level
# (module docstring) or by the update test (STAGNATION_RTOL).
RESIDUAL_TOL = 1e-10
# A Newton update this small relative to 1 + |u| is roundoff: the iteration has
# reached it and further steps cannot reduce the residual.
STAGNATION_RTOL = 16 * EPS
# Rounding in a sum of N products is at most about N eps times the sum of their
# magnitudes (Higham, section 3.1, from memory); a hundred covers the row
# lengths met here with room to spare.
ROUNDING_FACTOR = 100.0

# --- continuation correctors (continuation/correctors.py) ------------------------
# Newton update accepted as converged, relative to 1 + |u|. Quadratic
# convergence makes the error after an update of size d about C d^2, so
# 1e-6 leaves ~1e-12; together with the residual test it stops after two
# iterations on a well-predicted step instead of three.
CORRECTOR_UPDATE_RTOL = 1e-6
MAX_CORRECTOR_ITERATIONS = 6
# A Newton update larger than this times the previous one means divergence
# (an iterate at the rounding level of f is accepted before this test).
DIVERGENCE_RATIO = 1.0
# The chord method (Jacobian frozen at the predicted point) converges linearly;
# it is abandoned when an update does not shrink at least by this factor.
CHORD_CONTRACTION = 0.5
MAX_CHORD_ITERATIONS = 10

# --- one equilibrium (problems/equilibrium.py) ---------------------------------------
# Newton update accepted as converged relative to 1 + |x|. Quadratic
# convergence makes the next error about the square of this.
EQUILIBRIUM_UPDATE_RTOL = 1e-8
MAX_EQUILIBRIUM_ITERATIONS = 50

# --- defining systems of events (events/defining_systems.py) ---------------------------
# Converged when any of these holds:
# - the update is below NEWTON_STEP_RTOL relative to the unknowns (quadratic
#   convergence: the residual is then at rounding level);
# - the residual before the update is at the rounding level of the system, at most
#   ROUNDING_FACTOR * eps * |J| |z| (|J| the Frobenius norm of its Jacobian), and the
#   update is below STALL_RTOL relative: the update taken from there only polishes
#   the last bits (near a singular root a tiny residual alone proves nothing);
# - the update has stalled: below STALL_RTOL relative and no smaller than the
#   one before (STALL_RATIO). Rounding, or the noise of a finite-difference
#   Jacobian (about eps^(2/3), Python models without one), sets a floor that more
#   iterations cannot pass; the iterate with the smallest residual is kept. Linear
#   convergence to a singular solution (a fold system at a pitchfork, say) shrinks
#   every update and so never counts as stalled.
NEWTON_STEP_RTOL = 1e-13
STALL_RTOL = 1e-8
STALL_RATIO = 1.0
NEWTON_MAX_ITERATIONS = 30

# --- step settings: defaults of the [steps] table (arclength units of (state, parameter)) ---
DEFAULT_INITIAL_STEP = 0.01
DEFAULT_SMALLEST_STEP = 1e-8
DEFAULT_LARGEST_STEP = 0.05
DEFAULT_MAX_POINTS = 2000


@dataclass(frozen=True)
class StepSettings:
    """Step lengths of one curve (pseudo-arclength units) and its point budget.

    ``max_points`` counts the start point; for a trace followed to both sides it
    applies to each side separately.
    """

    initial: float = DEFAULT_INITIAL_STEP
    smallest: float = DEFAULT_SMALLEST_STEP
    largest: float = DEFAULT_LARGEST_STEP
    max_points: int = DEFAULT_MAX_POINTS


# ---------------------------------------------------------------------------------
# scale of a problem


def matrix_norm(matrix: Any) -> float:
    """Frobenius norm of a dense or scipy.sparse matrix, or of a structured operator
    that knows its own (a ``norm()`` method, e.g. the bordered sparse Hopf blocks)."""
    if isinstance(matrix, np.ndarray):
        return float(np.linalg.norm(matrix))
    if hasattr(matrix, "norm"):
        return float(matrix.norm())
    return float(np.sqrt(abs(matrix).power(2).sum()))  # scipy.sparse (not imported: start-up)


def evaluation_rounding(jacobian: Any, u: Array) -> float:
    """|| |J| |u| ||_2: the size of the terms a residual F(u) is summed from.

    ``jacobian`` (N, N + 1) or (N, N), dense or scipy.sparse, ``u`` matching its
    columns. Times eps this is the rounding level of evaluating F near u (the
    linear terms exactly, the others to their order of magnitude).
    """
    magnitude = abs(jacobian) @ np.abs(u)
    return float(np.sqrt(np.dot(magnitude, magnitude)))


def residual_at_rounding(residual_norm: float, jacobian: Any, u: Array) -> bool:
    """|F(u)| <= eps || |J| |u| ||: a residual no larger than one rounding unit of the
    terms F is summed from is indistinguishable from zero (module docstring)."""
    if jacobian is None:
        return False
    return residual_norm <= EPS * evaluation_rounding(jacobian, u)


# ---------------------------------------------------------------------------------
# stopping rules of branchline.numerics.newton.iterate


NOT_FINITE = "the right-hand side, its Jacobian or the Newton update is not finite (NaN/overflow)"


def raised(what: str, error: Exception) -> str:
    """The message for an evaluation that raised ``error``."""
    return f"evaluating {what} raised {type(error).__name__}: {error}"


class CorrectorRule:
    """Full Newton and chord correctors of the continuation engine.

    Converged when the residual and the update that led to it are both small
    (|F| <= RESIDUAL_TOL, or at the rounding level of the evaluation, and the
    update <= update_rtol (1 + |u|)), or when the update is down to roundoff.
    An update larger than ``growth`` times the one before fails the step
    (``diverges`` says how); an iterate at the rounding level with a small update
    is accepted before that test is reached, so rounding noise in the updates of a
    converged stiff problem is not taken for divergence.
    """

    # Class-level defaults: one rule is made per corrector call (the engine's hot path).
    final_evaluation = True
    max_iterations = MAX_CORRECTOR_ITERATIONS
    growth = DIVERGENCE_RATIO
    diverges = "Newton's method diverges"
    update_rtol = CORRECTOR_UPDATE_RTOL

    def __init__(self, max_iterations: int | None = None) -> None:
        if max_iterations is not None:
            self.max_iterations = max_iterations
        self.update = math.inf

    def accepts(self, iteration, z, residual, residual_norm, jacobian) -> bool:
        if not iteration:
            return False
        scale = 1.0 + math.sqrt(z.dot(z))
        update = self.update
        if update <= STAGNATION_RTOL * scale:
            return True
        if update > self.update_rtol * scale:
            return False
        return residual_norm <= RESIDUAL_TOL or residual_at_rounding(residual_norm, jacobian, z)

    def after_update(self, iteration, z, z_next, residual_norm, jacobian, update_norm) -> int:
        if iteration and update_norm > self.growth * self.update:
            raise NewtonTrouble(Status.NOT_CONVERGED, self.diverges)
        self.update = update_norm
        return CONTINUE

    def accepts_despite(self, trouble, z, residual_norm) -> bool:
        return False

    def best(self):
        raise NotImplementedError  # this rule never stops at a best iterate

    def evaluation_failed(self, error: Exception) -> str:
        return raised("the model", error)

    def not_finite(self) -> str:
        return NOT_FINITE

    def no_convergence(self, iterations, z, residual_norm) -> str:
        return f"no convergence in {self.max_iterations} Newton iterations (residual {residual_norm:.3g})"


class ChordRule(CorrectorRule):
    """The chord corrector: as :class:`CorrectorRule`, with contraction required."""

    max_iterations = MAX_CHORD_ITERATIONS
    growth = CHORD_CONTRACTION
    diverges = "the chord iteration does not contract"

    def no_convergence(self, iterations, z, residual_norm) -> str:
        return "no convergence of the chord iteration"


class DefiningSystemRule:
    """Newton on the square defining systems of events (see the module constants).

    ``scale`` is added to |z| in the relative tests. ``residual_suffices``: stop
    as soon as the residual is at rounding level, whatever the update (putting
    points on a branch, where any solution near the guess serves).
    """

    __slots__ = ("_best", "previous", "residual_suffices", "scale")
    final_evaluation = False

    def __init__(self, scale: float = 1.0, residual_suffices: bool = False) -> None:
        self.scale, self.residual_suffices = scale, residual_suffices
        self.previous = math.inf
        self._best: tuple | None = None

    def accepts(self, iteration, z, residual, residual_norm, jacobian) -> bool:
        if residual_norm == 0.0:
            return True
        if self._best is None or residual_norm < self._best[0]:
            self._best = (residual_norm, z, (residual, jacobian))
        return False

    def after_update(self, iteration, z, z_next, residual_norm, jacobian, update_norm) -> int:
        size_z = self.scale + math.sqrt(z.dot(z))
        at_rounding = residual_norm <= ROUNDING_FACTOR * EPS * matrix_norm(jacobian) * size_z
        small = update_norm <= STALL_RTOL * size_z  # a residual alone can mislead near singular roots
        if small and update_norm >= STALL_RATIO * self.previous:
            return STOP_AT_BEST
        if at_rounding and self.residual_suffices:
            return STOP_HERE
        if (at_rounding and small) or update_norm <= NEWTON_STEP_RTOL * (
            self.scale + math.sqrt(z_next.dot(z_next))
        ):
            return FINISH_NEXT
        self.previous = update_norm
        return CONTINUE

    def accepts_despite(self, trouble, z, residual_norm) -> bool:
        return False

    def best(self):
        return self._best

    def evaluation_failed(self, error: Exception) -> str:
        return f"evaluation failed: {error}"

    def not_finite(self) -> str:
        return "the residual is not finite"

    def no_convergence(self, iterations, z, residual_norm) -> str:
        return f"no convergence in {NEWTON_MAX_ITERATIONS} iterations"


class EquilibriumRule:
    """Damped Newton for one equilibrium (problems/equilibrium.py).

    Converged when |f| <= ``residual_tol`` and the last update (damping times the
    Newton step) <= ``update_rtol`` (1 + |x|), or when a full step is down to
    roundoff; an iterate whose residual is already below ``residual_tol`` is kept
    when no further step can be made (at a turning point, say). Either residual
    test also passes at the rounding level of evaluating f (module docstring),
    judged with the last Jacobian df/dx. ``where(x)`` names a point in messages.
    The damped update sets ``damping`` and ``jacobian``.
    """

    __slots__ = (
        "damping",
        "jacobian",
        "max_iterations",
        "residual_tol",
        "update",
        "update_rtol",
        "where",
    )
    final_evaluation = True

    def __init__(self, residual_tol: float, update_rtol: float, max_iterations: int, where) -> None:
        self.residual_tol, self.update_rtol = residual_tol, update_rtol
        self.max_iterations, self.where = max_iterations, where
        self.update, self.damping, self.jacobian = math.inf, 1.0, None

    def _small(self, residual_norm: float, z: Array) -> bool:
        return residual_norm <= self.residual_tol or residual_at_rounding(
            residual_norm, self.jacobian, z
        )

    def accepts(self, iteration, z, residual, residual_norm, jacobian) -> bool:
        if not iteration:
            return residual_norm == 0.0
        scale = 1.0 + math.sqrt(float(np.dot(z, z)))
        if self.update <= STAGNATION_RTOL * scale and self.damping == 1.0:
            return True
        return self.update <= self.update_rtol * scale and self._small(residual_norm, z)

    def after_update(self, iteration, z, z_next, residual_norm, jacobian, update_norm) -> int:
        self.update = update_norm
        return CONTINUE

    def accepts_despite(self, trouble, z, residual_norm) -> bool:
        # Already a solution to roundoff; Newton cannot polish it further here.
        return trouble.status != Status.NON_FINITE and self._small(residual_norm, z)

    def best(self):
        raise NotImplementedError  # this rule never stops at a best iterate

    def evaluation_failed(self, error: Exception) -> str:
        return raised("f", error)

    def not_finite(self) -> str:
        return "f is not finite"

    def no_convergence(self, iterations, z, residual_norm) -> str:
        return (
            f"no convergence in {self.max_iterations} Newton iterations; last iterate "
            f"{self.where(z)} with residual {residual_norm:.3g}"
        )
