"""Hopf points confirmed by a simulation just past the onset.

Just past a Hopf point (on the side where the equilibrium is unstable) the
normal form r' = r (alpha + omega l1 r^2) predicts (Kuznetsov, Elements of
Applied Bifurcation Theory, section 3.5):

- l1 < 0 (supercritical): a small stable cycle of amplitude r = sqrt(-alpha / (omega l1));
  with x = x0 + 2 Re(z q) and <q, q> = 1/2 (the interface contract's scaling)
  state j oscillates with half-range 2 r |q_j|;
- l1 > 0 (subcritical): no small cycle; the state departs from the equilibrium.

The simulation starts beside the equilibrium at 0.9 of the amplitude scale
sqrt(|alpha / (omega l1)|), whatever the sign of l1, so the same run tests
either prediction: a prediction with the wrong sign is contradicted.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from branchline.events.normal_forms import hopf_normal_form
from branchline.model.build import Model
from branchline.problems.equilibrium import linearize, solve_equilibrium
from branchline.results.records import Event
from branchline.simulation.integrate import Trajectory, simulate

Array = np.ndarray

# The simulation sits where the critical pair's real part alpha is this share of
# its frequency: close enough for the normal form to hold to a few per cent
# (its error is of relative order alpha / omega), far enough to settle quickly.
GROWTH_SHARE = 0.02
# Start at this share of the amplitude scale sqrt(|alpha / (omega l1)|).
START_SHARE = 0.9
# Transients toward a cycle decay like exp(-2 alpha t): this many 1/alpha leaves
# exp(-5) of the start's 10 % deviation from a predicted cycle, under 0.1 %.
SETTLE_TIMES = 2.5
# Amplitude measured over this many periods at the end.
MEASURE_PERIODS = 3.0
# Farther than this many amplitude scales from the equilibrium the state has
# departed (no small cycle): the integration stops there.
DEPARTURE_FACTOR = 5.0
# Measured and predicted amplitudes agreeing within this share confirm the
# prediction (the normal form's own error at GROWTH_SHARE is a few per cent).
AMPLITUDE_TOLERANCE = 0.15


@dataclass(frozen=True)
class HopfRun:
    """The simulation just past a Hopf point and what it measured."""

    value: float  # parameter value simulated
    equilibrium: Array
    growth: float  # alpha: real part of the critical pair there
    frequency: float
    predicted: str  # "small stable cycle" or "departure"
    predicted_amplitude: Array | None  # half-range per state (supercritical prediction)
    observed: str  # "small stable cycle", "departure", "decay" or "failed"
    measured_amplitude: Array | None
    trajectory: Trajectory
    focus: int  # the state drawn


def simulate_past_hopf(model: Model, event: Event) -> HopfRun | str:
    """Simulate just past ``event`` on its unstable side; a string says why it could not."""
    k = model.parameter_index(event.vary)
    lyapunov = event.lyapunov
    if lyapunov is None or lyapunov == 0.0 or not event.frequency:
        return "no first Lyapunov coefficient: nothing to predict"
    form = hopf_normal_form(model, event.state, event.parameters, event.frequency, k=k)
    if not form.growth_rate:
        return "the critical pair does not cross the axis at a measurable speed"
    params = event.parameters.copy()
    params[k] += GROWTH_SHARE * form.frequency / form.growth_rate
    solution = solve_equilibrium(model, event.state, params)
    if not solution.converged:
        return f"no equilibrium next to the Hopf point: {solution.message}"
    x0 = solution.state
    eigenvalues = linearize(model, x0, params).eigenvalues
    pair = eigenvalues[np.argmin(np.abs(eigenvalues - complex(0.0, form.frequency)))]
    alpha, omega = float(pair.real), abs(float(pair.imag))
    scale = np.sqrt(abs(alpha / (omega * lyapunov)))
    shape = 2.0 * np.abs(form.right_vector)  # half-range per state for |z| = 1
    focus = int(np.argmax(shape / (np.abs(x0) + shape * scale)))
    start = x0 + 2.0 * np.real(START_SHARE * scale * form.right_vector)
    period = 2.0 * np.pi / omega
    duration = SETTLE_TIMES / alpha + MEASURE_PERIODS * period
    reach = DEPARTURE_FACTOR * scale * shape

    centre, limits = x0.tolist(), reach.tolist()

    def departed(t: float, x: Array) -> float:  # at every step: Python floats are cheaper
        return max(abs(a - b) / r for a, b, r in zip(x.tolist(), centre, limits)) - 1.0

    trajectory = simulate(model, params, start, duration, stop=departed, interpolant=False)
    predicted = "small stable cycle" if lyapunov < 0 else "departure"
    amplitude = scale * shape if lyapunov < 0 else None
    if not trajectory.ok:
        observed, measured = "failed", None
    elif trajectory.status == "stopped":
        observed, measured = "departure", None
    else:
        window = trajectory.time >= trajectory.time[-1] - MEASURE_PERIODS * period
        tail = trajectory.states[window]
        measured = 0.5 * (tail.max(axis=0) - tail.min(axis=0))
        observed = "small stable cycle" if measured[focus] > 0.1 * scale * shape[focus] else "decay"
    return HopfRun(
        float(params[k]),
        x0,
        alpha,
        omega,
        predicted,
        amplitude,
        observed,
        measured,
        trajectory,
        focus,
    )


def agreement(run: HopfRun) -> bool:
    """True when the simulation shows what the normal form predicts."""
    if run.predicted != run.observed:
        return False
    if run.predicted_amplitude is None or run.measured_amplitude is None:
        return True
    j = run.focus
    return abs(run.measured_amplitude[j] / run.predicted_amplitude[j] - 1.0) <= AMPLITUDE_TOLERANCE
