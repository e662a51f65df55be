"""Fold points confirmed by slow parameter ramps: the jump, and the hysteresis loop.

A ramp starts on the stable part of the branch beside a fold and moves the
parameter slowly across it. The state follows the branch, overshoots the fold
a little and then jumps. The overshoot (the jump delay) obeys the slow-passage
law for a fold: with the reduced equation xi' = beta (p - p0) + a xi^2 and the
ramp p - p0 = eps t, the state leaves at

    p - p0 = Omega0 eps^(2/3) / |a beta|^(1/3),   Omega0 = 2.338107...,

Omega0 being minus the first zero of the Airy function Ai. (Haberman, "Slowly
varying jump and transition phenomena associated with algebraic bifurcation
problems", SIAM J. Appl. Math. 37, 1979; Berglund and Gentz, Noise-Induced
Phenomena in Slow-Fast Dynamical Systems, 2006, section 2.2; both from memory.
The constant follows by writing the Riccati equation Y' = T + Y^2 as the Airy
equation.) The ramp rate is chosen so that this predicted delay is a small,
fixed share of the ramp's length; the measured delay is reported beside it.

When the state lands on another traced stable branch whose stable part ends
within the window the other way, the ramp is run back across that end too:
the hysteresis loop, traced both ways.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from branchline.events.normal_forms import fold_normal_form
from branchline.model.build import Model
from branchline.problems.equilibrium import linearize, solve_equilibrium
from branchline.results.records import Branch, Event
from branchline.simulation.branches import (
    Run,
    nearest_traced,
    rows_beside,
    run_containing,
    run_end_event,
    state_scale,
)
from branchline.simulation.integrate import Trajectory, simulate

Array = np.ndarray

# -a1, a1 the first zero of the Airy function Ai (Abramowitz and Stegun, Handbook
# of Mathematical Functions, table 10.13): the slow-passage constant.
AIRY_CONSTANT = 2.338107410459767
# The ramp starts this share of the trace's interval before the fold (less when
# the stable part beside it is shorter).
START_SHARE = 0.25
# The rate is set so that the predicted delay is this share of the ramp's length
# before the fold: slow enough for the law to hold, fast enough to stay cheap.
DELAY_SHARE = 0.01
# The ramp goes on past the fold by this share of its length before the fold
# (and at least this many predicted delays), so that the jump completes.
OVERSHOOT_SHARE = 0.25
OVERSHOOT_DELAYS = 6.0
# The state has departed when its distance from the branch it followed exceeds
# this share of the jump's size.
JUMP_SHARE = 0.5
# A departure earlier than the located end of the stable part by more than this
# share of the ramp's length contradicts the location.
EARLY_SHARE = 0.01
# A fold's measured delay beyond this many predicted delays contradicts the law
# (the state clung to a branch that should have ended).
LATE_FACTOR = 4.0
# A landing state this close (scaled) to a traced equilibrium is on that trace; the
# traced states are linear between computed points, so the match is loose.
LANDING_SHARE = 0.02


@dataclass(frozen=True)
class Leg:
    """One slow ramp: where the state left the branch it followed and where it landed."""

    start: float
    end: float
    rate: float  # parameter units per time unit (signed)
    trajectory: Trajectory
    expected: float | None  # where the followed run's stable part ends (located)
    expected_event: Event | None
    departure: float | None  # where the state left it (None: it never did)
    predicted_delay: float | None
    landing: Array | None  # the equilibrium reached at the end (None: none found)
    landing_stable: bool
    landing_trace: str | None

    @property
    def delay(self) -> float | None:
        """Signed overshoot past the expected end, in the ramp's direction."""
        if self.departure is None or self.expected is None:
            return None
        return (self.departure - self.expected) * np.sign(self.rate)


def slow_passage_delay(rate: float, coefficient: float, sensitivity: float) -> float:
    """Predicted jump delay past a fold for a ramp of ``rate`` (parameter per time unit).

    Omega0 |rate|^(2/3) / |a beta|^(1/3) (Haberman 1979; see the module docstring).
    """
    return AIRY_CONSTANT * abs(rate) ** (2.0 / 3.0) / abs(coefficient * sensitivity) ** (1.0 / 3.0)


def rate_for_delay(delay: float, coefficient: float, sensitivity: float) -> float:
    """The ramp rate whose predicted delay is ``delay`` (the inverse of the law)."""
    return (delay * abs(coefficient * sensitivity) ** (1.0 / 3.0) / AIRY_CONSTANT) ** 1.5


def fold_rate(model: Model, event: Event, length: float) -> tuple[float, float | None, object]:
    """(rate, predicted delay, normal form) for a ramp of ``length`` before the fold."""
    k = model.parameter_index(event.vary)
    form = fold_normal_form(model, event.state, event.parameters, k)
    if form.degenerate or form.coefficient == 0.0 or form.parameter_sensitivity == 0.0:
        return 0.0, None, form
    delay = DELAY_SHARE * length
    return rate_for_delay(delay, form.coefficient, form.parameter_sensitivity), delay, form


def _departure(trajectory: Trajectory, run: Run, end_state: Array, scale: Array) -> float | None:
    """Parameter value where the state first left ``run`` (bisection on the dense solution)."""
    from scipy.optimize import brentq

    reference = run.state_at(trajectory.parameter[-1])
    jump = float(np.max(np.abs(end_state - reference) / scale))

    def gap(t: float, x: Array | None = None) -> float:
        x = trajectory.dense(t) if x is None else x
        p = np.interp(t, trajectory.time, trajectory.parameter)
        return float(np.max(np.abs(x - run.state_at(p)) / scale)) - JUMP_SHARE * jump

    if jump == 0.0:
        return None
    followed = run.state_at(trajectory.parameter)
    gaps = np.max(np.abs(trajectory.states - followed) / scale, axis=1) - JUMP_SHARE * jump
    above = np.nonzero(gaps > 0.0)[0]
    if above.size == 0 or above[0] == 0:
        return None
    i = int(above[0])
    t = brentq(gap, trajectory.time[i - 1], trajectory.time[i], xtol=1e-12 * trajectory.time[-1])
    return float(np.interp(t, trajectory.time, trajectory.parameter))


def ramp(
    model: Model,
    branches: Sequence[Branch],
    events: Sequence[Event],
    run: Run,
    start: float,
    end: float,
    rate: float,
    predicted_delay: float | None,
) -> Leg:
    """Ramp from ``run``'s equilibrium at ``start`` to ``end`` at |rate|; see :class:`Leg`."""
    branch = run.branch
    k = model.parameter_index(branch.vary)
    direction = float(np.sign(end - start))
    params = branch.parameters.copy()
    params[k] = start
    first = solve_equilibrium(model, run.state_at(start), params)
    x0 = first.state if first.converged else run.state_at(start)
    signed = direction * abs(rate)
    trajectory = simulate(model, params, x0, abs(end - start) / abs(rate), index=k, rate=signed)
    ending = run_end_event(run, events, direction)
    expected = ending.value if ending is not None else None
    landing, stable, trace, departure = None, False, None, None
    if trajectory.ok:
        scale = state_scale(branches)
        final = params.copy()
        final[k] = end
        ran_away = trajectory.status == "stopped"
        settled = None if ran_away else solve_equilibrium(model, trajectory.states[-1], final)
        if settled is not None and settled.converged:
            landing = settled.state
            stable = linearize(model, landing, final).positive == 0
            name, gap = nearest_traced(branches, branch.vary, end, landing, scale)
            trace = name if gap <= LANDING_SHARE else None
        departure = _departure(trajectory, run, trajectory.states[-1], scale)
    return Leg(
        start,
        end,
        signed,
        trajectory,
        expected,
        ending,
        departure,
        predicted_delay,
        landing,
        stable,
        trace,
    )


def stable_side(branch: Branch, event: Event) -> int | None:
    """A stable row beside the event (None when the branch is unstable on both sides)."""
    for row in rows_beside(branch, event):
        if row is not None and branch.stable[row]:
            return row
    return None


def ramp_plan(branch: Branch, event: Event, run: Run) -> tuple[float, float, float]:
    """(start, end, length before the event) of a ramp across ``event`` from ``run``."""
    low, high = branch.interval
    lo, hi = run.span
    towards = 1.0 if (lo + hi) / 2 < event.value else -1.0
    far = lo if towards > 0 else hi
    length = min(abs(event.value - far), START_SHARE * (high - low))
    start = event.value - towards * length
    end = float(np.clip(event.value + towards * OVERSHOOT_SHARE * length, low, high))
    return start, end, length


def return_leg(
    model: Model,
    branches: Sequence[Branch],
    events: Sequence[Event],
    leg: Leg,
) -> Leg | None:
    """The ramp back from where ``leg`` landed across the end of that stable branch, if the
    end lies inside the window: the hysteresis loop's other side."""
    if leg.landing is None or not leg.landing_stable or leg.landing_trace is None:
        return None
    back = -np.sign(leg.rate)
    landed = next(b for b in branches if b.name == leg.landing_trace)
    p = landed.parameter_values
    row = int(np.argmin(np.abs(p - leg.end) + np.max(np.abs(landed.states - leg.landing), axis=1)))
    run = run_containing(landed, row)
    if not run.stable:
        return None
    ending = run_end_event(run, events, back)
    if ending is None:
        return None
    length = abs(leg.end - ending.value)
    low, high = landed.interval
    end = float(np.clip(ending.value + back * OVERSHOOT_SHARE * length, low, high))
    rate, delay = abs(leg.rate), None
    if ending.kind == "fold":
        form = fold_normal_form(
            model, ending.state, ending.parameters, model.parameter_index(ending.vary)
        )
        if not form.degenerate:
            delay = slow_passage_delay(rate, form.coefficient, form.parameter_sensitivity)
            end = float(
                np.clip(
                    ending.value + back * max(OVERSHOOT_SHARE * length, OVERSHOOT_DELAYS * delay),
                    low,
                    high,
                )
            )
    return ramp(model, branches, events, run, leg.end, end, rate, delay)
