"""Time integration of a model, with the parameter held or ramped.

One function, :func:`simulate`, wraps ``scipy.integrate.solve_ivp`` with the
LSODA method (Petzold, "Automatic selection of methods for solving stiff and
nonstiff systems of ordinary differential equations", SIAM J. Sci. Stat.
Comput. 4, 1983): it switches between Adams and BDF formulas by itself, so
stiff plant models and non-stiff ones go through the same call, and it is the
cheapest of scipy's methods per step on small models. The model's exact
Jacobian is passed to it. Numerical trouble (a failed step, a non-finite
state, an exception raised by a Python model) is a status plus message on the
returned record, never an exception.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from branchline.model.build import Model

Array = np.ndarray

# Tolerances of the integrator. The confirmations compare amplitudes and jump
# points to a few per cent; 1e-7 relative keeps the integration error far below that.
RELATIVE_TOLERANCE = 1e-7
# Absolute tolerance relative to the size of the start state (plus one, so that
# states near zero still get a sensible floor).
ABSOLUTE_SHARE = 1e-10
# A state this many times larger than the start state (plus one) has run away:
# the integration stops there instead of chasing a blow-up.
RUNAWAY_FACTOR = 1e3
# With samples=None each integrator step is split into this many pieces
# (evaluated on the integrator's dense output).
STEP_SPLIT = 6
# Samples kept for figures and for locating crossings between them.
SAMPLES = 800


@dataclass(frozen=True)
class Trajectory:
    """A simulated solution of x' = f(x, p(t)).

    Attributes
    ----------
    time : ndarray (k,)
        Sample times (model time units).
    states : ndarray (k, n)
    parameter : ndarray (k,)
        The ramped (or held) parameter's value at each sample.
    status : str
        ``"done"``, ``"stopped"`` (a stop condition fired) or ``"failed"``.
    message : str
        Why it failed, else empty.
    dense : callable or None
        The integrator's continuous solution t -> x(t) (None when it failed).
    """

    time: Array
    states: Array
    parameter: Array
    status: str
    message: str = ""
    dense: Callable[[float], Array] | None = None

    @property
    def ok(self) -> bool:
        """True unless the integration failed."""
        return self.status != "failed"


def simulate(
    model: Model,
    parameters: Array,
    x0: Array,
    duration: float,
    *,
    index: int | None = None,
    rate: float = 0.0,
    stop: Callable[[float, Array], float] | None = None,
    samples: int | None = SAMPLES,
    backward: bool = False,
    interpolant: bool = True,
) -> Trajectory:
    """Integrate x' = f(x, p(t)) from x0 for ``duration`` time units.

    Parameters
    ----------
    model : Model
    parameters : ndarray (m,)
        The parameter vector at t = 0.
    x0 : ndarray (n,)
    duration : float
        Model time units.
    index, rate : optional
        Ramp parameter ``index`` linearly, p_index(t) = p_index(0) + rate t
        (parameter units per time unit).
    stop : callable (t, x) -> float, optional
        The integration ends where this function crosses zero from below (a
        terminal event of ``solve_ivp``); status ``"stopped"``. It also stops
        when a state grows past ``RUNAWAY_FACTOR`` times the start's size (a
        runaway, e.g. a finite-time blow-up), so that no simulation hangs.
    samples : int or None
        Evenly spaced samples returned; None returns the integrator's own steps
        (dense where the solution turns, as curves in a figure need).
    backward : bool
        Integrate x' = -f(x, p) instead: the flow backward in time (for stable
        manifolds); the ramp is not reversed.
    interpolant : bool
        Keep the integrator's interpolant as ``Trajectory.dense``. Without it (and
        with ``samples``) the integrator builds its local interpolants only at steps
        that hold a sample or an event: the same values, at a fraction of the cost
        of a short simulation.

    Returns
    -------
    Trajectory
    """
    from scipy.integrate import solve_ivp

    base = np.asarray(parameters, dtype=float)
    x0 = np.asarray(x0, dtype=float)

    def at(t: float) -> Array:
        if index is None or rate == 0.0:
            return base
        p = base.copy()
        p[index] += rate * t
        return p

    sign = -1.0 if backward else 1.0

    if backward:

        def rhs(t, x):
            return -model.rhs(x, at(t))

    else:

        def rhs(t, x):
            return model.rhs(x, at(t))

    def jacobian(t, x):
        jac = model.jacobian(x, at(t))
        return sign * (jac.toarray() if hasattr(jac, "toarray") else np.asarray(jac))

    limit = RUNAWAY_FACTOR * (1.0 + float(np.max(np.abs(x0))))

    def event(t, x):  # called at every step: a few states are cheaper as Python floats
        runaway = max(map(abs, x.tolist())) / limit - 1.0
        return runaway if stop is None else max(runaway, stop(t, x))

    event.terminal = True
    event.direction = 1.0
    events = [event]
    grid = None if samples is None else np.linspace(0.0, float(duration), int(samples))
    atol = ABSOLUTE_SHARE * (1.0 + float(np.max(np.abs(x0))))
    try:
        with np.errstate(all="ignore"):
            solution = solve_ivp(
                rhs,
                (0.0, float(duration)),
                x0,
                method="LSODA",
                jac=jacobian,
                t_eval=grid,
                events=events,
                dense_output=interpolant or samples is None,
                rtol=RELATIVE_TOLERANCE,
                atol=atol,
            )
    except Exception as error:  # a Python model's own code may raise anything: report it
        return _failed(base, x0, index, f"the simulation raised {type(error).__name__}: {error}")
    states = solution.y.T
    if not solution.success or not np.all(np.isfinite(states)):
        return _failed(base, x0, index, f"the integrator stopped: {solution.message}")
    times = solution.t
    if samples is None and times.size > 1:
        # the integrator's steps, each split so that curves drawn through them look smooth
        fractions = np.linspace(0.0, 1.0, STEP_SPLIT, endpoint=False)
        times = np.append(
            (times[:-1, None] + np.diff(times)[:, None] * fractions).ravel(), times[-1]
        )
        states = solution.sol(times).T
    status = "done"
    if solution.t_events[0].size:
        stopped = float(solution.t_events[0][0])
        times = np.append(times[times < stopped], stopped)
        states = np.vstack([states[: times.size - 1], solution.y_events[0][0]])
        status = "stopped"
    values = np.array([at(t)[index] for t in times]) if index is not None else np.zeros(times.size)
    return Trajectory(times, states, values, status, "", solution.sol if interpolant else None)


def _failed(base: Array, x0: Array, index: int | None, message: str) -> Trajectory:
    value = np.array([base[index]]) if index is not None else np.zeros(1)
    return Trajectory(np.zeros(1), x0[None, :], value, "failed", message, None)
