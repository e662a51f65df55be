"""Periodic orbits of large sparse models: sparse collocation blocks, Floquet multipliers by Arnoldi.

The model is a chain of Brusselator cells coupled by diffusion (tests/sparse_chain.py,
a Python model with a scipy.sparse Jacobian; Prigogine and Lefever, "Symmetry
breaking instabilities in dissipative systems II", J. Chem. Phys. 48, 1968, for
the cell). References, each named beside its check:

- With equal feed in every cell (ramp = 0) the uniform subspace is invariant, the
  Hopf point is the cell's, b = 1 + a^2 with frequency a, and the linearization
  along the uniform orbit splits into one 2 x 2 system per coupling mode k,
  w' = (J_cell(t) - d mu_k I) w, mu_k = 4 sin^2(k pi / (2 c)) (Strang, "The discrete
  cosine transform", SIAM Review 41, 1999, section 2, from memory; see
  tests/cell_chains.py). Its fundamental matrix is exp(-d mu_k t) times the cell's,
  so the Floquet multipliers are exp(-d mu_k T) and exp(-d mu_k T) mu_cell, where
  mu_cell = exp(int_0^T trace J_cell dt) by Liouville's formula (Hartman, Ordinary
  Differential Equations, chapter IV).
- Near a Hopf point the period tends to 2 pi / omega (Hopf's theorem; Kuznetsov,
  Elements of Applied Bifurcation Theory, 3rd ed., section 3.4).
- A non-uniform orbit (ramp > 0) against a shooting reference: Newton on
  x(T; x0) - x0 = 0 with scipy.integrate.solve_ivp (DOP853, rtol = atol = 1e-13) for
  x(T; x0). The Newton matrix uses the collocation's monodromy only to converge
  faster; the fixed point it converges to is the integrator's.
- Arnoldi's multipliers against all eigenvalues of the dense monodromy matrix
  (LAPACK) at 100 states.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from branchline.model.build import build_model
from branchline.numerics import floquet
from branchline.numerics.collocation import evaluate_periodic
from branchline.numerics.policy import DEFAULT, SPARSE
from branchline.problems.cycle_family import (
    corrected_start,
    follow_family,
    hopf_start,
    trace_cycles,
)
from branchline.problems.cycle_runs import run_cycles
from branchline.problems.cycles import PeriodicOrbitProblem
from branchline.runner import run_scan
from branchline.scan.loader import StepSettings, scan_from_dict
from cell_chains import brusselator_equations
from sparse_chain import chain_model, uniform_hopf

CELLS = 30  # 60 states: above the policy's thresholds, so the sparse path
COUPLING = 1.0
WINDOW = (1.9, 2.2)
STEPS = StepSettings(initial=0.5, smallest=1e-8, largest=5.0, max_points=10)
# The dense-block path at every size (the plain baseline of the comparisons).
DENSE_BLOCKS = replace(DEFAULT, cycle_blocks_dense_up_to=10**9, floquet_dense_up_to=10**9)


def mode_rates(cells: int) -> np.ndarray:
    return 4.0 * np.sin(np.arange(cells) * np.pi / (2 * cells)) ** 2


@pytest.fixture(scope="module")
def uniform():
    model = chain_model(CELLS, 2.0, COUPLING, 0.0)
    family = trace_cycles(model, "osc", uniform_hopf(model, CELLS), WINDOW, STEPS)
    assert family.status == "max_points", family.message
    return model, family


@pytest.fixture(scope="module")
def ramped(uniform):
    """Orbits of the chain followed in ``ramp`` from the last uniform orbit: non-uniform."""
    model, family = uniform
    orbit = family.orbits[-1]
    parameters = family.parameters.copy()
    parameters[model.parameter_index("b")] = orbit.parameter
    problem = PeriodicOrbitProblem(
        model, model.parameter_index("ramp"), parameters, orbit.mesh, 4, orbit.values
    )
    assert problem.sparse_blocks and problem.sparse_floquet
    u0 = problem.pack(orbit.values, orbit.period, 0.0)
    tangent = np.zeros_like(u0)
    tangent[-1] = 1.0
    steps = replace(STEPS, max_points=5)
    curve, status, message = follow_family(problem, u0, tangent, steps, (0.0, 0.4))
    assert status == "max_points", message
    last = curve.payloads[-1]
    parameters[model.parameter_index("ramp")] = last.parameter
    return model, parameters, last


def shooting_reference(model, parameters, x0, period, monodromy):
    """(period, start) of the periodic orbit through the section <x - x0, f(x0)> = 0."""
    n = x0.shape[0]

    def field(t, x):
        return model.rhs(x, parameters)

    slope = field(0.0, x0)
    x, t_end = x0.copy(), period
    for _ in range(10):
        end = solve_ivp(field, (0.0, t_end), x, method="DOP853", rtol=1e-13, atol=1e-13).y[:, -1]
        residual = np.concatenate([end - x, [slope @ (x - x0)]])
        matrix = np.zeros((n + 1, n + 1))
        matrix[:n, :n] = monodromy - np.eye(n)
        matrix[:n, n] = field(0.0, end)
        matrix[n, :n] = slope
        step = np.linalg.solve(matrix, residual)
        x, t_end = x - step[:n], t_end - step[n]
        if np.linalg.norm(step) < 1e-12 * (1.0 + np.linalg.norm(x)):
            break
    return t_end, x


def test_period_of_a_non_uniform_orbit_against_shooting(ramped):
    model, parameters, orbit = ramped
    u, _v = orbit.values[:, 0::2], orbit.values[:, 1::2]
    assert np.ptp(u.max(axis=0)) > 0.05  # the cells' orbits differ
    problem = PeriodicOrbitProblem(
        replace(model, linear_algebra=DENSE_BLOCKS),
        model.parameter_index("ramp"),
        parameters,
        orbit.mesh,
        4,
        orbit.values,
    )
    packed = problem.pack(orbit.values, orbit.period, orbit.parameter)
    period, start = shooting_reference(
        model, parameters, orbit.values[0], orbit.period, problem.monodromy(packed)
    )
    assert orbit.period == pytest.approx(period, rel=1e-9)
    assert np.max(np.abs(orbit.values[0] - start)) < 1e-8


def test_uniform_orbit_multipliers_in_closed_form(uniform):
    _model, family = uniform
    rates = mode_rates(CELLS)
    s = np.arange(4000) / 4000
    for orbit in family.orbits[1:]:
        b, period = orbit.parameter, orbit.period
        cell = evaluate_periodic(orbit.mesh, 4, orbit.values, s)[:, :2]
        # Liouville, trapezoid rule on a periodic grid (spectrally accurate)
        trace = -(b + 1.0) + 2.0 * cell[:, 0] * cell[:, 1] - cell[:, 0] ** 2
        cell_multiplier = math.exp(period * float(np.mean(trace)))
        decay = np.exp(-COUPLING * rates * period)
        expected = np.sort(np.concatenate([decay, decay * cell_multiplier]))[::-1]
        kept = orbit.multipliers
        assert kept.size == floquet.KEPT_MULTIPLIERS
        assert np.max(np.abs(kept.imag)) < 1e-10
        np.testing.assert_allclose(np.sort(kept.real)[::-1], expected[: kept.size], rtol=1e-8)
        assert abs(kept[orbit.trivial] - 1.0) < 1e-10


def test_period_tends_to_the_hopf_period(uniform):
    _, family = uniform
    first, second = family.orbits[0], family.orbits[1]
    hopf_period = 2.0 * math.pi  # omega = a = 1 (Prigogine and Lefever 1968)
    # the first orbit lies within 1e-4 of the Hopf value, its period within 1e-5
    assert 0.0 < first.parameter - 2.0 < 1e-4
    assert first.period == pytest.approx(hopf_period, rel=1e-5)
    # T - 2 pi / omega is linear in b - b0 near b0 (the period's normal-form expansion):
    # the chord through the first two orbits meets b0 at 2 pi / omega
    slope = (second.period - first.period) / (second.parameter - first.parameter)
    at_hopf = first.period - slope * (first.parameter - 2.0)
    assert at_hopf == pytest.approx(hopf_period, rel=1e-7)
    assert abs(second.period - hopf_period) > abs(first.period - hopf_period)


def test_arnoldi_multipliers_equal_the_dense_monodromy_at_100_states():
    cells = 50
    model = chain_model(cells, 2.0, COUPLING, 0.0)
    problem, guess, direction = hopf_start(model, uniform_hopf(model, cells), WINDOW, 40, 4, 0.05)
    u, why = corrected_start(problem, guess, direction)
    assert u is not None, why
    assert problem.sparse_floquet and problem.n == 100
    result = problem.leading_floquet(u)
    assert result.method == "Arnoldi"
    everything = np.linalg.eigvals(problem.monodromy(u))
    everything = everything[np.argsort(-np.abs(everything))]
    for value in result.multipliers:
        assert np.min(np.abs(everything - value)) < 1e-8
    # they are the largest ones
    np.testing.assert_allclose(
        np.abs(result.multipliers), np.abs(everything[: result.multipliers.size]), atol=1e-8
    )


def test_sparse_and_dense_blocks_give_the_same_orbit(ramped):
    model, parameters, orbit = ramped
    k = model.parameter_index("ramp")
    problems = [
        PeriodicOrbitProblem(
            replace(model, linear_algebra=policy), k, parameters, orbit.mesh, 4, orbit.values
        )
        for policy in (DEFAULT, DENSE_BLOCKS)
    ]
    assert problems[0].sparse_blocks and not problems[1].sparse_blocks
    u = problems[0].pack(orbit.values, orbit.period, orbit.parameter)
    (r_sparse, j_sparse), (r_dense, j_dense) = (p.evaluate(u) for p in problems)
    np.testing.assert_allclose(r_sparse, r_dense, rtol=0, atol=1e-14)
    scale = abs(j_dense).max()
    assert abs(j_sparse - j_dense).max() <= 1e-14 * scale
    # Newton from a disturbed orbit lands on the same orbit both ways
    disturbed = u.copy()
    disturbed[:-2] *= 1.0 + 1e-3 * np.sin(np.arange(u.size - 2))
    direction = np.zeros_like(u)
    direction[-1] = 1.0
    found = [corrected_start(p, disturbed, direction)[0] for p in problems]
    np.testing.assert_allclose(found[0], found[1], rtol=0, atol=1e-10)


def test_arnoldi_failure_stops_the_family_and_keeps_its_orbits(monkeypatch):
    model = chain_model(CELLS, 2.0, COUPLING, 0.0)
    real = floquet.leading_multipliers
    calls = []

    def starved_after_three(action, *args, **kwargs):
        calls.append(1)
        if len(calls) > 3:
            action.limit = 5  # the work limit: far below what Arnoldi needs
        return real(action, *args, **kwargs)

    monkeypatch.setattr(floquet, "leading_multipliers", starved_after_three)
    family = trace_cycles(model, "osc", uniform_hopf(model, CELLS), WINDOW, STEPS)
    assert family.status == "failed"
    assert "Arnoldi needed more than 5 products with the monodromy matrix" in family.message
    # the orbits before it are kept (a rejected step also asks for multipliers)
    assert 2 <= len(family) < len(calls)
    assert all(orbit.multipliers.size == floquet.KEPT_MULTIPLIERS for orbit in family.orbits)


def test_trivial_multiplier_missing_is_a_clear_failure(ramped):
    model, parameters, orbit = ramped
    problem = PeriodicOrbitProblem(
        model, model.parameter_index("ramp"), parameters, orbit.mesh, 4, orbit.values
    )
    u = problem.pack(orbit.values, orbit.period, orbit.parameter)
    with pytest.raises(floquet.FloquetFailed, match="trivial Floquet multiplier 1 is not among"):
        floquet.leading_multipliers(problem.monodromy_action(u), tolerance=1e-300)


ROESSLER = {"x": "-y - z", "y": "x + a*y", "z": "b + z*(x - c)"}


def test_period_doubling_and_doubled_start_on_the_sparse_path():
    # Roessler, "An equation for continuous chaos", Phys. Lett. A 57 (1976), b = 2,
    # c = 4: its period doubling (confirmed by simulation in tests/test_cycles.py)
    # located and switched at with the sparse blocks and the multipliers from the
    # factored initial-value system, against the dense path of the same run.
    a0 = 0.05
    x0 = (4.0 - math.sqrt(16.0 - 8.0 * a0)) / 2.0
    scan = scan_from_dict(
        {
            "model": {"parameters": {"a": a0, "b": 2.0, "c": 4.0}, "equations": ROESSLER},
            "trace": [
                {
                    "name": "rest",
                    "vary": "a",
                    "interval": [0.0, 0.36],
                    "start": {"x": x0, "y": -x0 / a0, "z": x0 / a0},
                }
            ],
            "cycles": [{"name": "osc", "from": "rest", "interval": [0.0, 0.36], "intervals": 30}],
        }
    )
    dense = run_scan(scan)
    sparse_model = replace(dense.model, linear_algebra=SPARSE)
    families, events = run_cycles(sparse_model, scan.cycles, dense.events)
    doubling = next(e for e in events if e.kind == "period_doubling")
    reference = next(e for e in dense.events if e.kind == "period_doubling")
    assert doubling.value == pytest.approx(reference.value, rel=1e-9)
    assert min(abs(complex(*z) + 1.0) for z in doubling.details["multipliers"]) < 1e-6
    doubled, doubled_dense = families[1], dense.cycles[1]
    assert doubled.name == "osc.2" and len(doubled) > 3
    for ours, theirs in zip(doubled.orbits[:3], doubled_dense.orbits[:3], strict=True):
        assert ours.period == pytest.approx(theirs.period, rel=1e-8)
        assert ours.parameter == pytest.approx(theirs.parameter, rel=1e-8)


def test_expression_chain_on_the_sparse_path_matches_the_dense_blocks():
    # The same chain as an expression model (tests/cell_chains.py, dense Jacobian
    # at 60 states): its per-point Jacobians reach the sparse assembly as one dense
    # stack. Same orbit and same leading multipliers as the dense-block path.
    cells = CELLS
    start = {f"u{i}": 1.0 for i in range(cells)} | {f"v{i}": 2.0 for i in range(cells)}
    scan = scan_from_dict(
        {
            "model": {
                "parameters": {"a": 1.0, "b": 2.0, "d": COUPLING},
                "equations": brusselator_equations(cells),
            },
            "trace": [{"vary": "b", "interval": list(WINDOW), "start": start}],
        }
    )
    model = build_model(scan.model)
    found = []
    for policy in (DEFAULT, DENSE_BLOCKS):
        chosen = replace(model, linear_algebra=policy)
        problem, guess, direction = hopf_start(
            chosen, uniform_hopf(chosen, cells), WINDOW, 20, 4, 0.05
        )
        u, why = corrected_start(problem, guess, direction)
        assert u is not None, why
        found.append((problem.sparse_blocks, u, problem.orbit_point(u).multipliers))
    (sparse, u_sparse, kept), (dense, u_dense, everything) = found
    assert sparse and not dense
    np.testing.assert_allclose(u_sparse, u_dense, rtol=0, atol=1e-11)
    np.testing.assert_allclose(kept, everything[: kept.size], rtol=0, atol=1e-9)
