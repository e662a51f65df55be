"""Confirm every located event by a short simulation: one Confirmation record each.

``confirm_events`` is what a run calls: folds get slow ramps (and the
hysteresis loop both ways), Hopf points a simulation just past the onset,
branch points nudged equilibria on both sides. Each record says plainly
whether the simulation agrees (``confirmed``), contradicts the prediction
(``mismatch``), could not decide (``inconclusive``) or had nothing to show
(``not applicable``), with the numbers.
"""

from __future__ import annotations

import itertools
import time
from collections.abc import Callable, Sequence

import numpy as np

from branchline.model.build import Model
from branchline.results.reading import fmt
from branchline.results.records import Branch, Event
from branchline.simulation import branch_points, folds, hopf
from branchline.simulation.branches import rows_beside, run_containing
from branchline.simulation.records import (
    CONFIRMED,
    INCONCLUSIVE,
    MISMATCH,
    NOT_APPLICABLE,
    ROLE_MARK,
    ROLE_PREDICTION,
    ROLE_SIMULATION,
    ROLE_STABLE,
    ROLE_UNSTABLE,
    Confirmation,
    Curve,
)

# Models with more states than this are not simulated by default (the run's
# report says so): a confirmation should cost a fraction of the run.
MAX_STATES = 20
# Digits of the numbers in a confirmation's sentence.
DIGITS = 5
EVENT_NAMES = {"fold": "fold", "hopf": "Hopf point", "branch_point": "branch point"}
# Samples kept per drawn simulated curve.
DRAWN_SAMPLES = 400


def _thin(values: np.ndarray) -> np.ndarray:
    step = max(1, len(values) // DRAWN_SAMPLES)
    return values[::step]


def _branch_curves(branches: Sequence[Branch], vary: str, j: int) -> list[Curve]:
    """The traced branches, state j against the varied parameter, split by stability."""
    curves = []
    for branch in branches:
        if branch.vary != vary or len(branch) < 2:
            continue
        stable = branch.stable
        cuts = [0, *(np.nonzero(stable[1:] != stable[:-1])[0] + 1), len(branch)]
        for a, b in itertools.pairwise(cuts):
            rows = slice(a, min(b + 1, len(branch)))
            role = ROLE_STABLE if stable[a] else ROLE_UNSTABLE
            curves.append(
                Curve(branch.name, branch.parameter_values[rows], branch.states[rows, j], role)
            )
    return curves


def _jump_state(leg: folds.Leg) -> int:
    states = leg.trajectory.states
    change = np.abs(states[-1] - states[0]) / (np.abs(states).max(axis=0) + 1e-300)
    return int(np.argmax(change))


def _leg_words(leg: folds.Leg, vary: str, names: Sequence[str], j: int) -> str:
    where = "raising" if leg.rate > 0 else "lowering"
    head = f"{where} {vary} (rate {fmt(abs(leg.rate), 3)} per time unit)"
    if leg.departure is None:
        return f"{head} from {fmt(leg.start, DIGITS)} to {fmt(leg.end, DIGITS)}: no jump seen"
    text = f"{head}: jumped at {vary} = {fmt(leg.departure, DIGITS + 2)}"
    ending = leg.expected_event
    if ending is not None:
        text += f", {fmt(leg.delay, 3)} past the {EVENT_NAMES.get(ending.kind, ending.kind)} at {fmt(leg.expected, DIGITS + 2)}"
        if leg.predicted_delay:
            text += f" (slow-passage law: {fmt(leg.predicted_delay, 3)})"
        elif ending.kind == "hopf":
            text += " (a slow passage through a Hopf point delays the departure)"
    if leg.landing is not None:
        text += f", to {names[j]} = {fmt(leg.landing[j], DIGITS)}"
        text += (
            f" on trace {leg.landing_trace}" if leg.landing_trace else " (not on a traced branch)"
        )
    elif leg.trajectory.status == "stopped":
        text += ", then ran away (the state grew without bound)"
    else:
        text += ", and settled on no equilibrium by the end of the ramp"
    return text


def _leg_verdict(leg: folds.Leg) -> str:
    """confirmed / mismatch for one leg against the located end of its stable part."""
    if leg.departure is None or leg.expected is None:
        return MISMATCH
    length = abs(leg.end - leg.start)
    if leg.delay < -folds.EARLY_SHARE * length:
        return MISMATCH
    if (
        leg.expected_event is not None
        and leg.expected_event.kind == "fold"
        and leg.predicted_delay
        and leg.delay > folds.LATE_FACTOR * leg.predicted_delay + folds.EARLY_SHARE * length
    ):
        return MISMATCH
    return CONFIRMED


def confirm_fold(
    model: Model, branches: Sequence[Branch], events: Sequence[Event], index: int
) -> tuple[Confirmation, list[int]]:
    """A ramp across fold ``index`` (and back, when it lands on a branch that ends in
    the window). Returns the confirmation and the indices of other events the loop covers."""
    event = events[index]
    branch = next(b for b in branches if b.name == event.trace)
    row = folds.stable_side(branch, event)
    if row is None:
        return _plain(
            event,
            index,
            NOT_APPLICABLE,
            "no stable state is lost at this fold "
            "(the branch is unstable on both sides): there is no jump to show",
        ), []
    run = run_containing(branch, row)
    start, end, length = folds.ramp_plan(branch, event, run)
    rate, delay, _ = folds.fold_rate(model, event, length)
    if rate == 0.0:
        return _plain(
            event,
            index,
            INCONCLUSIVE,
            "degenerate fold (near a cusp): no ramp rate follows from its normal form",
        ), []
    first = folds.ramp(model, branches, events, run, start, end, rate, delay)
    if not first.trajectory.ok:
        return _plain(event, index, INCONCLUSIVE, first.trajectory.message), []
    second = folds.return_leg(model, branches, events, first)
    legs = [first] + ([second] if second is not None and second.trajectory.ok else [])
    verdicts = [_leg_verdict(leg) for leg in legs]
    status = CONFIRMED if all(v == CONFIRMED for v in verdicts) else MISMATCH
    j = _jump_state(first)
    words = "; ".join(_leg_words(leg, event.vary, model.states, j) for leg in legs)
    if len(legs) == 2 and status == CONFIRMED:
        words = "Hysteresis loop traced both ways: " + words
    elif first.landing is not None and not first.landing_stable:
        words += " (the equilibrium it settled on is unstable)"
    curves = _branch_curves(branches, event.vary, j)
    for leg in legs:
        where = "up" if leg.rate > 0 else "down"
        curves.append(
            Curve(
                f"ramp {where}",
                _thin(leg.trajectory.parameter),
                _thin(leg.trajectory.states[:, j]),
                ROLE_SIMULATION,
            )
        )
    curves.append(Curve("fold", np.array([event.value]), np.array([event.state[j]]), ROLE_MARK))
    numbers = {
        "rate": abs(first.rate),
        "departure": first.departure,
        "delay": first.delay,
        "predicted_delay": first.predicted_delay,
    }
    if len(legs) == 2:
        numbers.update(return_departure=second.departure, return_expected=second.expected)
    covered = []
    if (
        len(legs) == 2
        and second.expected_event is not None
        and second.expected_event.kind == "fold"
    ):
        covered = [i for i, e in enumerate(events) if e is second.expected_event]
    record = _plain(
        event, index, status, words, numbers, tuple(curves), event.vary, model.states[j]
    )
    return record, covered


def confirm_hopf(
    model: Model, branches: Sequence[Branch], events: Sequence[Event], index: int
) -> Confirmation:
    """A simulation just past Hopf point ``index``: amplitude against the normal form."""
    event = events[index]
    branch = next(b for b in branches if b.name == event.trace)
    beside = [r for r in rows_beside(branch, event) if r is not None]
    if beside and not any(branch.stable[r] for r in beside):
        return _plain(
            event,
            index,
            NOT_APPLICABLE,
            "the branch is already unstable on both "
            "sides: no stable state starts to oscillate here",
        )
    outcome = hopf.simulate_past_hopf(model, event)
    if isinstance(outcome, str):
        return _plain(event, index, INCONCLUSIVE, outcome)
    if outcome.observed == "failed":
        return _plain(event, index, INCONCLUSIVE, outcome.trajectory.message)
    j = outcome.focus
    name = model.states[j]
    where = f"at {event.vary} = {fmt(outcome.value, DIGITS + 2)}"
    predicted = (
        f"predicted a small stable cycle, {name} half-range {fmt(outcome.predicted_amplitude[j], 4)}"
        if outcome.predicted_amplitude is not None
        else "predicted a departure (no small stable cycle)"
    )
    if outcome.observed == "small stable cycle":
        seen = f"simulated: a small stable cycle, {name} half-range {fmt(outcome.measured_amplitude[j], 4)}"
    elif outcome.observed == "departure":
        seen = (
            f"simulated: the state departed beyond {fmt(hopf.DEPARTURE_FACTOR, 2)} amplitude scales"
        )
    else:
        seen = "simulated: the oscillation died out"
    status = CONFIRMED if hopf.agreement(outcome) else MISMATCH
    words = f"{where} (growth rate {fmt(outcome.growth, 3)}): {predicted}; {seen}"
    t = outcome.trajectory
    curves = [Curve("simulation", _thin(t.time), _thin(t.states[:, j]), ROLE_SIMULATION)]
    centre = outcome.equilibrium[j]
    curves.append(Curve("equilibrium", t.time[[0, -1]], np.full(2, centre), ROLE_STABLE))
    if outcome.predicted_amplitude is not None:
        half = outcome.predicted_amplitude[j]
        for sign in (-1.0, 1.0):
            curves.append(
                Curve(
                    "normal form: equilibrium ± half-range",
                    t.time[[0, -1]],
                    np.full(2, centre + sign * half),
                    ROLE_PREDICTION,
                )
            )
    numbers = {
        "simulated_value": outcome.value,
        "growth_rate": outcome.growth,
        "lyapunov": event.lyapunov,
        "predicted_half_range": None
        if outcome.predicted_amplitude is None
        else float(outcome.predicted_amplitude[j]),
        "measured_half_range": None
        if outcome.measured_amplitude is None
        else float(outcome.measured_amplitude[j]),
        "observed": outcome.observed,
    }
    return _plain(event, index, status, words, numbers, tuple(curves), "time", name)


def confirm_branch_point(
    model: Model, branches: Sequence[Branch], events: Sequence[Event], index: int
) -> Confirmation:
    """Nudged equilibria on both sides of branch point ``index``: the exchange of stability."""
    event = events[index]
    nudges = branch_points.nudge_both_sides(model, branches, events, event)
    if not nudges:
        return _plain(event, index, INCONCLUSIVE, "no traced equilibrium next to it to simulate")
    failed = [n for n in nudges if not n.trajectory.ok]
    if failed:
        return _plain(event, index, INCONCLUSIVE, failed[0].trajectory.message)
    agree = all(n.returned == n.stable for n in nudges)
    sides = {n.value for n in nudges}
    exchange = len(sides) == 2 and all(any(n.stable for n in nudges if n.value == v) for v in sides)
    parts = []
    for n in nudges:
        if n.returned:
            fate = "returned"
        else:
            fate = f"left for trace {n.reached}" if n.reached else "left"
        parts.append(
            f"{event.vary} = {fmt(n.value, DIGITS)}, trace {n.trace} "
            f"({'stable' if n.stable else 'unstable'}): {fate}"
        )
    status = CONFIRMED if agree else MISMATCH
    lead = "exchange of stability seen: " if agree and exchange else ""
    j = int(np.argmax(np.abs(nudges[0].trajectory.states[-1] - nudges[0].trajectory.states[0])))
    if not np.any(np.abs(nudges[0].trajectory.states[-1] - nudges[0].trajectory.states[0])):
        j = 0
    curves = tuple(
        Curve(
            f"{event.vary} = {fmt(n.value, 4)}, nudged off {n.trace}",
            _thin(n.trajectory.time),
            _thin(n.trajectory.states[:, j]),
            ROLE_SIMULATION,
        )
        for n in nudges
    )
    numbers = {"agree": agree, "exchange": exchange, "simulations": len(nudges)}
    words = lead + "; ".join(parts)
    return _plain(event, index, status, words, numbers, curves, "time", model.states[j])


def _plain(event: Event, index: int, status: str, words: str, *details) -> Confirmation:
    """A Confirmation of event ``index``; ``details`` are numbers, curves and axis labels."""
    return Confirmation(
        index, event.trace, event.kind, event.vary, event.value, status, words, *details
    )


Confirmer = Callable[[Model, Sequence[Branch], Sequence[Event], int], Confirmation]


def _confirm_one(model, branches, events, index) -> tuple[Confirmation, list[int]]:
    kind = events[index].kind
    if kind == "fold":
        return confirm_fold(model, branches, events, index)
    if kind == "hopf":
        return confirm_hopf(model, branches, events, index), []
    if kind == "branch_point":
        return confirm_branch_point(model, branches, events, index), []
    return _plain(events[index], index, NOT_APPLICABLE, "no simulation for this kind of event"), []


def confirm_events(
    model: Model, branches: Sequence[Branch], events: Sequence[Event]
) -> tuple[Confirmation, ...]:
    """One confirmation per located event, in the events' order.

    A fold whose ramp back (the hysteresis loop) already crossed another fold
    shares that loop: the second fold's record says so and repeats no simulation.
    """
    done: dict[int, Confirmation] = {}
    for index, event in enumerate(events):
        if index in done:
            continue
        started = time.perf_counter()
        try:
            record, covered = _confirm_one(model, branches, events, index)
        except Exception as error:  # a confirmation must never break the run it checks
            words = f"the simulation could not be set up ({type(error).__name__}: {error})"
            record, covered = _plain(event, index, INCONCLUSIVE, words), []
        seconds = time.perf_counter() - started
        done[index] = _with_seconds(record, seconds)
        for other in covered:
            if other not in done and other != index:
                partner = events[other]
                words = (
                    f"crossed by the ramp back in the hysteresis loop of the fold at "
                    f"{event.vary} = {fmt(event.value, DIGITS + 2)} (confirmation "
                    f"#{index + 1}); {'confirmed' if record.status == CONFIRMED else 'see there'}"
                )
                done[other] = _plain(partner, other, record.status, words)
    return tuple(done[i] for i in sorted(done))


def _with_seconds(record: Confirmation, seconds: float) -> Confirmation:
    from dataclasses import replace

    return replace(record, seconds=seconds)


def skipped_note(size: int) -> str:
    """The report's note when a model is too large to simulate by default."""
    return (
        f"Not simulated: the model has {size} states, more than {MAX_STATES}; confirmations "
        "by simulation run by default only for small models."
    )
