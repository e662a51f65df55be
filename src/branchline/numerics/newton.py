"""The one Newton loop: the continuation correctors, the equilibrium solve and the defining systems.

Every Newton iteration in branchline runs :func:`iterate`. The loop owns what
they share: evaluating the system, recording the residual norm of every
iterate, catching arithmetic trouble, the iteration cap and the result record
(:class:`NewtonResult`, with a :class:`~branchline.vocabulary.Status` whose
``hint`` suggests the fix). What differs between its users is passed in:

``evaluate(z) -> (F, J)``
    The system at z (``J`` may be None when the update computes it itself).
``advance(z, F, J, |F|) -> (z_next, update_norm, evaluation_or_None)``
    One update: a plain Newton step, a bordered one, or a damped one whose line
    search has already evaluated the system at ``z_next`` (then returned as the
    third item, so that the loop does not evaluate it again). It raises
    :class:`NewtonTrouble` when there is no update (a singular matrix, say).
a stopping rule
    When an iterate is accepted and when the iteration stops without moving
    (see :class:`StoppingRule`); the rules and their tolerances live with the
    tolerances in :mod:`branchline.numerics.tolerances`.

Newton's method itself: Deuflhard, Newton Methods for Nonlinear Problems
(Springer 2004), chapters 1-3; Kelley, Iterative Methods for Linear and
Nonlinear Equations (SIAM 1995), chapter 5.

>>> import numpy as np
>>> from branchline.numerics.tolerances import DefiningSystemRule
>>> def evaluate(z):
...     return np.array([z[0] ** 2 - 2.0]), np.array([[2.0 * z[0]]])
>>> def advance(z, f, jac, size):
...     step = -f / jac[0, 0]
...     return z + step, float(abs(step[0])), None
>>> result = iterate(evaluate, np.array([1.0]), advance, DefiningSystemRule(), 30)
>>> result.converged, abs(float(result.solution[0]) - 2.0 ** 0.5) < 1e-15, str(result.status)
(True, True, 'converged')
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any, NamedTuple, Protocol

import numpy as np

from branchline.vocabulary import Status

Array = np.ndarray
Evaluation = tuple[Array, Any]

# What a stopping rule says after an update (see StoppingRule.after_update).
CONTINUE = 0  # take the update and go on
STOP_HERE = 1  # converged at the current iterate (the update only polishes rounding)
STOP_AT_BEST = 2  # converged: the updates stalled, keep the iterate with the smallest residual
FINISH_NEXT = 3  # take the update, evaluate there once more and stop converged

# Exceptions of a model evaluation that count as numerical trouble (never a crash).
EVALUATION_ERRORS = (ArithmeticError, ValueError, np.linalg.LinAlgError)


class NewtonTrouble(Exception):
    """Raised by an update or a rule: the iteration cannot go on (with a status and why)."""

    def __init__(self, status: Status, message: str) -> None:
        super().__init__(message)
        self.status = status
        self.message = message


class NewtonResult(NamedTuple):
    """How one Newton iteration ended (immutable; a named tuple because the
    continuation corrector builds one per step on the engine's hot path, where a
    frozen dataclass costs measurably more).

    Attributes
    ----------
    status : Status
        ``converged``, ``not_converged``, ``singular_jacobian`` or ``non_finite``;
        ``status.hint`` suggests a fix.
    solution : ndarray
        The solution when converged, else the last iterate.
    iterations : int
        Updates applied.
    residual_norm : float
        |F(solution)| (NaN when the evaluation failed there).
    residual_norms : tuple of float
        |F| of every iterate evaluated, the start first.
    residual, jacobian : ndarray, ndarray or scipy.sparse matrix, or None
        F and J at the solution when converged, else None.
    message : str
        "" when converged, else why not.
    """

    status: Status
    solution: Array
    iterations: int
    residual_norm: float
    residual_norms: tuple[float, ...] = ()
    residual: Any = None
    jacobian: Any = None
    message: str = ""

    @property
    def converged(self) -> bool:
        """True when the iteration converged."""
        return self.status is Status.CONVERGED

    @property
    def advice(self) -> str:
        """The message and the status's suggested fix, as one sentence for a person."""
        hint = self.status.hint
        return f"{self.message} ({hint})" if hint and self.message else self.message


def failure(
    solution: Array, message: str, status: Status = Status.NOT_CONVERGED, *,
    iterations: int = 0, residual_norm: float = math.nan, residual_norms: tuple = (),
) -> NewtonResult:
    """A result that did not converge (for callers that give up before or after the loop)."""
    return NewtonResult(status, solution, iterations, residual_norm, tuple(residual_norms),
                        message=message)


class StoppingRule(Protocol):
    """When :func:`iterate` accepts an iterate; one object per solve (it may keep state).

    ``final_evaluation``: whether the iterate reached by the last allowed update
    is evaluated and checked (else the iteration gives up without evaluating it).
    """

    final_evaluation: bool

    def accepts(
        self, iteration: int, z: Array, residual: Array, residual_norm: float, jacobian: Any
    ) -> bool:
        """Converged at z (F = ``residual``), evaluated after ``iteration`` updates?"""
        ...

    def after_update(
        self,
        iteration: int,
        z: Array,
        z_next: Array,
        residual_norm: float,
        jacobian: Any,
        update_norm: float,
    ) -> int:
        """CONTINUE, STOP_HERE, STOP_AT_BEST or FINISH_NEXT; may raise NewtonTrouble."""
        ...

    def accepts_despite(self, trouble: NewtonTrouble, z: Array, residual_norm: float) -> bool:
        """Accept the current iterate z although no update could be made?"""
        ...

    def best(self) -> tuple[float, Array, Evaluation]:
        """(|F|, z, (F, J)) of the iterate with the smallest residual (for STOP_AT_BEST)."""
        ...

    def evaluation_failed(self, error: Exception) -> str:
        """The message when evaluating the system raised ``error``."""
        ...

    def not_finite(self) -> str:
        """The message when the residual is not finite."""
        ...

    def no_convergence(self, iterations: int, z: Array, residual_norm: float) -> str:
        """The message when the iteration cap is reached."""
        ...


def iterate(
    evaluate: Callable[[Array], Evaluation],
    z0: Array,
    advance: Callable[[Array, Array, Any, float], tuple[Array, float, Evaluation | None]],
    rule: StoppingRule,
    max_iterations: int,
    start: Evaluation | None = None,
) -> NewtonResult:
    """Newton's method from ``z0``: see the module docstring for ``evaluate``, ``advance``, ``rule``.

    ``start`` is the evaluation at ``z0`` when the caller already has it. Never
    raises for numerical trouble: the result's status and message say what happened.
    """
    z = z0
    iteration = 0
    norms: list[float] = []
    cached = start
    sqrt = math.sqrt
    residual_norm = math.nan
    # Bound once: this loop runs at every continuation step (the engine's hot path).
    accepts, after_update, append = rule.accepts, rule.after_update, norms.append
    while True:
        if cached is None:
            if iteration >= max_iterations and not rule.final_evaluation:
                message = rule.no_convergence(iteration, z, residual_norm)
                return NewtonResult(
                    Status.NOT_CONVERGED, z, iteration, residual_norm, tuple(norms), message=message
                )
            try:
                f, jac = evaluate(z)
            except NewtonTrouble as trouble:
                return NewtonResult(
                    trouble.status, z, iteration, math.nan, tuple(norms), message=trouble.message
                )
            except EVALUATION_ERRORS as error:
                message = rule.evaluation_failed(error)
                return NewtonResult(
                    Status.NON_FINITE, z, iteration, math.nan, tuple(norms), message=message
                )
        else:
            f, jac = cached
        residual_norm = sqrt(f.dot(f))
        append(residual_norm)
        if not residual_norm < math.inf:
            return NewtonResult(
                Status.NON_FINITE, z, iteration, residual_norm, tuple(norms), message=rule.not_finite()
            )
        if accepts(iteration, z, f, residual_norm, jac):
            return NewtonResult(Status.CONVERGED, z, iteration, residual_norm, tuple(norms), f, jac)
        if iteration >= max_iterations:
            message = rule.no_convergence(iteration, z, residual_norm)
            return NewtonResult(
                Status.NOT_CONVERGED, z, iteration, residual_norm, tuple(norms), message=message
            )
        try:
            z_next, update_norm, cached = advance(z, f, jac, residual_norm)
            verdict = after_update(iteration, z, z_next, residual_norm, jac, update_norm)
        except NewtonTrouble as trouble:
            if rule.accepts_despite(trouble, z, residual_norm):
                return NewtonResult(
                    Status.CONVERGED, z, iteration, residual_norm, tuple(norms), f, jac
                )
            return NewtonResult(
                trouble.status, z, iteration, residual_norm, tuple(norms), message=trouble.message
            )
        if verdict == STOP_HERE:
            norms.append(residual_norm)  # the same iterate evaluated again gives the same norm
            return NewtonResult(Status.CONVERGED, z, iteration, residual_norm, tuple(norms), f, jac)
        if verdict == STOP_AT_BEST:
            best_norm, best_z, (best_f, best_jac) = rule.best()
            norms.append(best_norm)
            return NewtonResult(
                Status.CONVERGED, best_z, iteration, best_norm, tuple(norms), best_f, best_jac
            )
        z = z_next
        iteration += 1
        if verdict == FINISH_NEXT:
            return _finish(evaluate, z, iteration, norms, cached, rule)


def _finish(evaluate, z: Array, iteration: int, norms: list[float], cached, rule) -> NewtonResult:
    """Converged at z once its residual norm is recorded (FINISH_NEXT)."""
    try:
        f, jac = evaluate(z) if cached is None else cached
    except EVALUATION_ERRORS as error:
        return NewtonResult(
            Status.NON_FINITE, z, iteration, math.nan, tuple(norms),
            message=rule.evaluation_failed(error),
        )
    residual_norm = math.sqrt(f.dot(f))
    norms.append(residual_norm)
    return NewtonResult(Status.CONVERGED, z, iteration, residual_norm, tuple(norms), f, jac)


__all__ = [
    "CONTINUE",
    "FINISH_NEXT",
    "STOP_AT_BEST",
    "STOP_HERE",
    "NewtonResult",
    "NewtonTrouble",
    "StoppingRule",
    "failure",
    "iterate",
]
