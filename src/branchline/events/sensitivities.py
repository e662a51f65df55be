"""How each fold and Hopf point moves with every other parameter: the implicit function theorem.

A located fold or Hopf point solves its defining system F(z, q) = 0 in
z = (x, [kappa], p) for fixed values of the other parameters q. Where F_z is
regular, dz/dq = -F_z^-1 F_q (implicit function theorem), and the parameter
component gives dp_event/dq exactly, with no re-runs. F is the boundary
curve problem's system (:mod:`branchline.problems.fold_curve`,
:mod:`branchline.problems.hopf_curve`, exact derivatives), with q as its second
parameter: F_q is the Jacobian's column of q. The elasticity
(q / p_event) dp_event/dq is the relative effect: the percentage by which the
event moves for a one percent change of q.

Branch points are not generic in two parameters (they break up under almost
any perturbation), so they get none.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import scipy.sparse as sps
import scipy.sparse.linalg as spla

from branchline.problems.boundary import PROBLEMS, start_point
from branchline.results.records import Event

Array = np.ndarray

# Below this |p_event| the event sits at zero and an elasticity (a ratio to it) means nothing.
ZERO_VALUE = 1e-12


def event_sensitivities(model, event: Event) -> dict[str, dict[str, float | None]]:
    """{parameter: {"derivative": dp_event/dq, "elasticity": (q/p_event) dp_event/dq}}.

    Empty for kinds other than fold and Hopf, or when the defining system is singular
    at the event (a degenerate point: the derivative does not exist).
    """
    problem_class = PROBLEMS.get(event.kind)
    if problem_class is None:
        return {}
    first = model.parameter_index(event.vary)
    n = len(model.states)
    out: dict[str, dict[str, float | None]] = {}
    # The borders (critical eigen- or null vectors of f_x) depend on the event's point
    # only, not on which parameter is the second: computed once, for the first problem.
    borders = None
    for index, name in enumerate(model.parameters):
        if index == first:
            continue
        u0 = start_point(problem_class, event, first, index)
        with np.errstate(all="ignore"):
            try:
                problem = problem_class(model, first, index, event.parameters, u0, borders)
                borders = (problem.right, problem.left)
                step = _implicit_step(problem.jacobian(u0), n)
            except (np.linalg.LinAlgError, ArithmeticError, ValueError, RuntimeError):
                return {}
            except MemoryError:  # a large model's system too big: the event keeps the rest
                return {}
        derivative = float(step[-1])
        if not np.isfinite(derivative):
            return {}
        value = float(event.value)
        # an event at p = 0 has no relative change: no elasticity
        elasticity = (
            derivative * float(event.parameters[index]) / value if abs(value) > ZERO_VALUE else None
        )
        out[name] = {"derivative": derivative, "elasticity": elasticity}
    return out


def _implicit_step(jacobian, column: int) -> Array:
    """-F_z^-1 F_q with F_q the Jacobian's ``column`` and F_z the rest (dense or sparse LU)."""
    if sps.issparse(jacobian):
        jacobian = sps.csc_matrix(jacobian)
        keep = [j for j in range(jacobian.shape[1]) if j != column]
        rhs = -jacobian[:, column].toarray().ravel()
        step = spla.splu(jacobian[:, keep].tocsc()).solve(rhs)
        return step
    jacobian = np.asarray(jacobian)
    return np.linalg.solve(np.delete(jacobian, column, axis=1), -jacobian[:, column])


def with_sensitivities(model, events: list[Event]) -> list[Event]:
    """The events with ``details["sensitivities"]`` filled for folds and Hopf points."""
    marked = []
    for event in events:
        found = event_sensitivities(model, event) if event.kind in PROBLEMS else {}
        if found:
            event = replace(event, details={**event.details, "sensitivities": found})
        marked.append(event)
    return marked
