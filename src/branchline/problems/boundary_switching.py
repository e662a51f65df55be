"""Start a boundary at a Bogdanov-Takens or zero-Hopf point onto the other curve through it.

At a Bogdanov-Takens point a fold curve and a Hopf curve meet (Kuznetsov,
Elements of Applied Bifurcation Theory, section 8.4); at a zero-Hopf point a
fold curve and a Hopf curve cross (section 8.5). A point located on one of them
starts the other:

- a fold curve starts at the point itself (the fold system is regular there);
- a Hopf curve from a zero-Hopf point starts there with omega the frequency of
  the imaginary pair;
- a Hopf curve from a Bogdanov-Takens point starts with omega = 0, borders
  spanning the null spaces of A^2 (the double zero's generalized eigenvectors),
  and one pseudo-arclength step toward omega^2 > 0 (the other way the curve goes
  on as neutral saddles); tracing it back then ends at the Bogdanov-Takens point
  again, which is located on the new curve as well.
"""

from __future__ import annotations

import numpy as np

from branchline.events.defining_systems import newton
from branchline.numerics import linalg
from branchline.problems.hopf_curve import HopfCurve
from branchline.results.records import Event

Array = np.ndarray

SWITCH_POINTS = ("bogdanov_takens", "zero_hopf")
# The other curve through each point kind, given the curve it was found on.
OTHER_CURVE = {"fold": "hopf", "hopf": "fold"}


def start_event(
    model, point: Event, kind: str, second: str, step: float
) -> tuple[Event | None, str]:
    """A fold or Hopf event to start ``kind``'s curve at the codimension-two ``point``.

    Returns
    -------
    (Event, "") or (None, why not)
    """
    common = {
        "trace": point.trace,
        "vary": point.vary,
        "arclength": 0.0,
        "note": f"started at the {point.kind.replace('_', '-')} point of {point.trace}",
    }
    if kind == "fold":
        return Event(
            kind="fold",
            value=point.value,
            state=np.array(point.state),
            parameters=np.array(point.parameters),
            **common,
        ), ""
    if point.kind == "zero_hopf":
        if not point.frequency or not np.isfinite(point.frequency):
            return None, "the zero-Hopf point has no frequency"
        return Event(
            kind="hopf",
            value=point.value,
            state=np.array(point.state),
            parameters=np.array(point.parameters),
            frequency=float(point.frequency),
            **common,
        ), ""
    return _off_bogdanov_takens(model, point, second, step, common)


def _off_bogdanov_takens(model, point, second, step, common):
    first_index = model.parameter_index(point.vary)
    second_index = model.parameter_index(second)
    n = len(model.states)
    u0 = np.concatenate([point.state, [point.parameters[second_index], 0.0, point.value]])
    with np.errstate(all="ignore"):
        try:
            problem = HopfCurve(model, first_index, second_index, point.parameters, u0)
            tangent = linalg.initial_tangent(problem.jacobian(u0), 1.0)
        except (linalg.SingularMatrixError, np.linalg.LinAlgError, ValueError) as exc:
            return None, f"the Hopf curve's direction is undefined at the point ({exc})"
        if not abs(tangent[n + 1]) > 0.0:
            return None, "the Hopf curve leaves the point with omega^2 not changing"
        tangent = tangent * np.sign(tangent[n + 1])
        predicted = u0 + step * tangent

        def system(u: Array):
            residual, jacobian = problem.evaluate(u)  # sparse for large sparse models
            return np.append(residual, tangent @ (u - predicted)), linalg.bordered_matrix(
                jacobian, tangent
            )

        outcome = newton(system, predicted)
    u = outcome.solution
    if not outcome.converged or not u[n + 1] > 0.0:
        return None, f"no Hopf point one step from the Bogdanov-Takens point ({outcome.message})"
    return Event(
        kind="hopf",
        value=float(u[-1]),
        state=u[:n].copy(),
        parameters=problem.parameters_at(u),
        frequency=float(np.sqrt(u[n + 1])),
        **common,
    ), ""
