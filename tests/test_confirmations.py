"""Confirmation by simulation: folds by slow ramps, Hopf points just past the onset,
branch points by nudges. The references are published closed forms and laws (named
beside each check); the simulations themselves are scipy's LSODA integrator."""

from __future__ import annotations

import json
import math
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from scipy.special import ai_zeros

import branchline
from branchline.simulation import folds
from branchline.simulation.branches import rows_beside, run_containing
from branchline.simulation.confirm import (
    MAX_STATES,
    confirm_events,
    confirm_hopf,
)
from branchline.simulation.records import CONFIRMED, MISMATCH, NOT_APPLICABLE

SCANS = Path(__file__).resolve().parents[1] / "scans"
SRC = Path(__file__).resolve().parents[1] / "src"


def _run(scan, confirm=True):
    result = branchline.run(scan, confirm=confirm)
    assert result.status == "done", result.message
    return result


def _by_kind(result, kind):
    return [c for c in result.confirmations if c.kind == kind]


# --------------------------------------------------------------------------- the demo scans


def test_reactor_loop_jumps_past_the_ignition_fold_by_the_slow_passage_delay():
    result = _run(SCANS / "cooled_reactor.toml")
    ignition, extinction = sorted(_by_kind(result, "fold"), key=lambda c: -c.value)
    assert ignition.status == CONFIRMED and "Hysteresis loop traced both ways" in ignition.summary
    # The jump comes after the located fold, by about the delay the slow-passage law
    # predicts (Haberman 1979; Berglund and Gentz 2006, section 2.2; from memory).
    delay, predicted = ignition.numbers["delay"], ignition.numbers["predicted_delay"]
    assert 0.0 < delay and delay == pytest.approx(predicted, rel=0.15)
    assert ignition.numbers["departure"] == pytest.approx(ignition.value + delay, rel=1e-12)
    # The hot branch loses stability at the Hopf point before the lower fold is met:
    # the way back leaves after that Hopf point, and the lower fold has no stable side.
    (hopf_event,) = [e for e in result.events if e.kind == "hopf"]
    assert ignition.numbers["return_expected"] == pytest.approx(hopf_event.value, rel=1e-12)
    assert ignition.numbers["return_departure"] < hopf_event.value
    assert extinction.status == NOT_APPLICABLE
    (hopf,) = _by_kind(result, "hopf")
    assert hopf.status == CONFIRMED and hopf.numbers["observed"] == "departure"


def test_stock_collapse_and_recovery_loop_confirms_both_folds():
    result = _run(SCANS / "harvested_stock.toml")
    upper, lower = sorted(_by_kind(result, "fold"), key=lambda c: -c.value)
    assert upper.status == CONFIRMED and lower.status == CONFIRMED
    folds_found = sorted(e.value for e in result.events if e.kind == "fold")
    assert upper.numbers["departure"] > folds_found[1]
    assert upper.numbers["return_departure"] < folds_found[0]
    assert upper.numbers["return_expected"] == pytest.approx(folds_found[0], rel=1e-12)


def test_pond_hopf_amplitude_matches_the_normal_form_and_invasion_exchanges_stability():
    result = _run(SCANS / "enriched_pond.toml")
    (hopf,) = _by_kind(result, "hopf")
    assert hopf.status == CONFIRMED
    measured, predicted = hopf.numbers["measured_half_range"], hopf.numbers["predicted_half_range"]
    assert measured == pytest.approx(predicted, rel=0.1)
    (invasion,) = _by_kind(result, "branch_point")
    assert invasion.status == CONFIRMED and invasion.numbers["exchange"]


def test_switch_pitchfork_hands_stability_to_the_asymmetric_states():
    result = _run(SCANS / "toggle_switch.toml")
    (pitchfork,) = result.confirmations
    assert pitchfork.status == CONFIRMED
    assert "symmetric (unstable): left for trace symmetric." in pitchfork.summary


# --------------------------------------------------------------------------- published models

BRUSSELATOR = {
    # Prigogine and Lefever, J. Chem. Phys. 48 (1968); Strogatz, Nonlinear Dynamics and
    # Chaos, exercise 8.3.1 (from memory): Hopf point at b = 1 + a^2, supercritical.
    "model": {
        "parameters": {"a": 1.0, "b": 1.5},
        "equations": {"x": "a - (b + 1)*x + x^2*y", "y": "b*x - x^2*y"},
    },
    "trace": [{"vary": "b", "interval": [1.5, 2.6], "start": {"x": 1.0, "y": 1.5}}],
}


def test_brusselator_hopf_small_cycle_of_the_predicted_amplitude():
    result = _run(BRUSSELATOR)
    (event,) = [e for e in result.events if e.kind == "hopf"]
    assert event.value == pytest.approx(2.0, rel=1e-10)
    (hopf,) = _by_kind(result, "hopf")
    assert hopf.status == CONFIRMED
    assert hopf.numbers["measured_half_range"] == pytest.approx(
        hopf.numbers["predicted_half_range"], rel=0.1
    )


def _polar_normal_form(s: float) -> dict:
    # x' = mu x - y + s x (x^2 + y^2), y' = x + mu y + s y (x^2 + y^2): in polar form
    # r' = r (mu + s r^2), theta' = 1 (Strogatz, Nonlinear Dynamics and Chaos, section
    # 8.2): for s < 0 a stable cycle of radius sqrt(-mu / s) exactly; for s > 0 none.
    return {
        "model": {
            "parameters": {"mu": -0.5, "s": s},
            "equations": {
                "x": "mu*x - y + s*x*(x^2 + y^2)",
                "y": "x + mu*y + s*y*(x^2 + y^2)",
            },
        },
        "trace": [{"vary": "mu", "interval": [-0.5, 0.5], "start": {"x": 0.0, "y": 0.0}}],
    }


def test_supercritical_normal_form_cycle_has_the_exact_radius():
    result = _run(_polar_normal_form(-1.0))
    (hopf,) = _by_kind(result, "hopf")
    mu = hopf.numbers["simulated_value"]
    assert hopf.status == CONFIRMED
    assert hopf.numbers["measured_half_range"] == pytest.approx(math.sqrt(mu), rel=2e-3)


@pytest.mark.parametrize("s", [-1.0, 1.0])
def test_a_wrong_lyapunov_sign_is_reported_as_a_mismatch(s):
    # A test double: the located event with the sign of l1 (and its criticality)
    # flipped. The simulation is the same; the confirmation must contradict it.
    result = _run(_polar_normal_form(s), confirm=False)
    events = list(result.events)
    index = next(i for i, e in enumerate(events) if e.kind == "hopf")
    honest = confirm_hopf(result.model, result.branches, events, index)
    assert honest.status == CONFIRMED
    wrong = replace(
        events[index],
        lyapunov=-events[index].lyapunov,
        criticality="subcritical" if s < 0 else "supercritical",
    )
    events[index] = wrong
    flipped = confirm_hopf(result.model, result.branches, events, index)
    assert flipped.status == MISMATCH
    if s < 0:
        assert "predicted a departure" in flipped.summary
        assert "simulated: a small stable cycle" in flipped.summary
    else:
        assert "predicted a small stable cycle" in flipped.summary
        assert "simulated: the state departed" in flipped.summary


SPRUCE_BUDWORM = {
    # Ludwig, Jones and Holling, J. Animal Ecology 47 (1978), in the dimensionless form
    # of Strogatz, Nonlinear Dynamics and Chaos, section 3.7: x' = r x (1 - x/k) - x^2/(1+x^2).
    "model": {
        "parameters": {"r": 0.3, "k": 20.0},
        "equations": {"x": "r*x*(1 - x/k) - x^2/(1 + x^2)"},
    },
    "trace": [{"vary": "r", "interval": [0.1, 0.7], "start": {"x": 0.45}}],
}


def test_budworm_outbreak_and_recovery_loop_at_the_published_folds():
    # The folds lie on the curve r = 2 x^3 / (1 + x^2)^2, k = 2 x^3 / (x^2 - 1)
    # (Strogatz, section 3.7, from memory): for k = 20 solve 2 x^3 = 20 (x^2 - 1).
    roots = sorted(z.real for z in np.roots([2.0, -20.0, 0.0, 20.0]) if z.real > 1.0)
    r_folds = sorted(2 * x**3 / (1 + x**2) ** 2 for x in roots)
    result = _run(SPRUCE_BUDWORM)
    assert sorted(e.value for e in result.events if e.kind == "fold") == pytest.approx(
        r_folds, rel=1e-10
    )
    outbreak = max(_by_kind(result, "fold"), key=lambda c: c.value)
    assert outbreak.status == CONFIRMED
    assert 0.0 < outbreak.numbers["delay"] < 4 * outbreak.numbers["predicted_delay"]
    assert r_folds[0] > outbreak.numbers["return_departure"]


LASER = {
    # Strogatz, Nonlinear Dynamics and Chaos, section 3.3 (laser threshold):
    # n' = G n N0 - k n - alpha G n^2 has a transcritical point at N0 = k / G.
    "model": {
        "parameters": {"N0": 0.5, "G": 1.0, "k": 1.0, "alpha": 0.5},
        "equations": {"n": "G*n*N0 - k*n - alpha*G*n^2"},
    },
    "trace": [{"vary": "N0", "interval": [0.5, 1.5], "start": {"n": 0.0}}],
}


def test_laser_threshold_exchange_of_stability():
    result = _run(LASER)
    (event,) = [e for e in result.events if e.kind == "branch_point"]
    assert event.value == pytest.approx(1.0, rel=1e-12)
    (bp,) = _by_kind(result, "branch_point")
    assert bp.status == CONFIRMED and bp.numbers["exchange"]


# --------------------------------------------------------------------------- the ramp law

FOLD_NORMAL_FORM = {
    "model": {"parameters": {"p": -1.0}, "equations": {"x": "p + x^2"}},
    "trace": [{"vary": "p", "interval": [-1.0, 0.5], "start": {"x": -1.0}}],
}


def test_measured_jump_delay_follows_the_two_thirds_law():
    # Slow passage through a fold: with x' = p + x^2 and p = eps t, the state leaves at
    # p = Omega0 eps^(2/3), Omega0 = -a1, a1 the first zero of Airy's Ai (Haberman, SIAM
    # J. Appl. Math. 37, 1979; Berglund and Gentz, Noise-Induced Phenomena in Slow-Fast
    # Dynamical Systems, section 2.2; from memory). The constant comes from scipy.special.
    omega0 = -ai_zeros(1)[0][0]
    assert folds.AIRY_CONSTANT == pytest.approx(omega0, rel=1e-14)
    result = _run(FOLD_NORMAL_FORM, confirm=False)
    (event,) = result.events
    branch = result.branches[0]
    run = run_containing(branch, next(r for r in rows_beside(branch, event) if r is not None))
    rates = np.array([1e-2, 1e-3, 1e-4])
    delays = []
    for rate in rates:
        end = 20 * folds.slow_passage_delay(rate, 1.0, 1.0)
        leg = folds.ramp(result.model, result.branches, result.events, run, -0.5, end, rate, None)
        delays.append(leg.delay)
    delays = np.array(delays)
    assert np.all(np.diff(delays) < 0)  # the jump approaches the fold as the ramp slows
    slope = np.polyfit(np.log(rates), np.log(delays), 1)[0]
    assert slope == pytest.approx(2.0 / 3.0, abs=0.02)
    assert delays[-1] == pytest.approx(omega0 * rates[-1] ** (2 / 3), rel=0.03)


def test_stock_jump_approaches_the_fold_as_the_ramp_slows():
    result = _run(SCANS / "harvested_stock.toml", confirm=False)
    event = max((e for e in result.events if e.kind == "fold"), key=lambda e: e.value)
    branch = result.branches[0]
    row = folds.stable_side(branch, event)
    run = run_containing(branch, row)
    start, end, length = folds.ramp_plan(branch, event, run)
    _, _, form = folds.fold_rate(result.model, event, length)
    measured, predicted = [], []
    for share in (0.04, 0.01, 0.0025):
        rate = folds.rate_for_delay(share * length, form.coefficient, form.parameter_sensitivity)
        leg = folds.ramp(result.model, result.branches, result.events, run, start, end, rate, None)
        measured.append(leg.delay)
        predicted.append(
            folds.slow_passage_delay(rate, form.coefficient, form.parameter_sensitivity)
        )
    assert measured[0] > measured[1] > measured[2] > 0.0
    assert np.array(measured) == pytest.approx(np.array(predicted), rel=0.1)


# --------------------------------------------------------------------------- switches


def _chain(size: int) -> dict:
    equations = {
        f"x{i}": f"p - x{i}" + (f" + 0.1*x{i - 1}^2" if i else " + x0^2") for i in range(size)
    }
    return {
        "model": {"parameters": {"p": -1.0}, "equations": equations},
        "trace": [
            {"vary": "p", "interval": [-1.0, 0.5], "start": {f"x{i}": -0.6 for i in range(size)}}
        ],
    }


def test_large_models_are_skipped_with_a_note(tmp_path):
    result = _run(_chain(MAX_STATES + 1))
    assert result.events and not result.confirmations
    assert "Not simulated" in result.confirmation_note
    branchline.write_results(result, tmp_path / "big")
    assert "Not simulated: the model has 21 states" in (tmp_path / "big" / "report.md").read_text()
    small = _run(_chain(3))
    assert small.confirmations and not small.confirmation_note


def test_the_command_line_switch_turns_confirmations_off(tmp_path):
    env = {"PYTHONPATH": str(SRC), "PATH": "/usr/bin:/bin"}
    for flag, folder in (([], "on"), (["--no-confirm"], "off")):
        subprocess.run(
            [
                sys.executable,
                "-m",
                "branchline",
                "run",
                str(SCANS / "toggle_switch.toml"),
                "--out",
                str(tmp_path / folder),
                "--quiet",
                *flag,
            ],
            check=True,
            env=env,
        )
    on = json.loads((tmp_path / "on" / "run.json").read_text())
    off = json.loads((tmp_path / "off" / "run.json").read_text())
    assert on["confirmations"]["records"][0]["status"] == CONFIRMED
    assert off["confirmations"] is None
    assert (tmp_path / "on" / "confirmations.png").is_file()
    assert not (tmp_path / "off" / "confirmations.png").exists()
    report = subprocess.run(
        [sys.executable, "-m", "branchline", "report", str(tmp_path / "on")],
        check=True,
        env=env,
        capture_output=True,
        text=True,
    ).stdout
    assert "## Confirmation by simulation" in report and "**confirmed**" in report


def test_every_event_gets_one_record_in_order():
    result = _run(SCANS / "cooled_reactor.toml", confirm=False)
    records = confirm_events(result.model, result.branches, result.events)
    assert [r.event for r in records] == list(range(len(result.events)))
    assert all(r.kind == e.kind for r, e in zip(records, result.events))
