"""Points rejected by the test-function rule, kept and recorded later (continuation/revisit.py).

The engine keeps a point whose step the test-function rule rejected, with its
observation, and offers it again once a shorter step is accepted (for problems whose
observe is pure: dense equilibrium branches above
``LinearAlgebraPolicy.reuse_rejected_points_above`` states). These tests check that it
changes where the points lie and nothing else: every recorded row carries its own
point's eigenvalues, the located Hopf points are the same, each spectrum is computed
at most once, and the switch is where the policy says. Also: on sparse branches with
tracked eigenvalues the start point's full search serves both sides of a trace.

The reference model is a chain of Brusselator cells coupled by diffusion
(tests/cell_chains.py; Prigogine & Lefever, "Symmetry breaking instabilities in
dissipative systems II", J. Chem. Phys. 48 (1968) 1695): on the uniform state
(u, v) = (a, b / a) the Jacobian splits into the 2 x 2 blocks
J_k = [[b - 1 - d mu_k, a^2], [-b, -a^2 - d mu_k]], mu_k = 4 sin^2(k pi / (2 m)) the
coupling's eigenvalues (Strang, "The discrete cosine transform", SIAM Review 41 (1999),
section 2, from memory; checked in tests/test_crowded_events.py). So every eigenvalue of
every row, and every Hopf point b_k = 1 + a^2 + 2 d mu_k with frequency
omega_k = sqrt(a^2 - d^2 mu_k^2), is known in closed form.
"""

from __future__ import annotations

import functools
import math
from dataclasses import replace

import numpy as np
import pytest

from branchline.continuation.engine import follow_curve
from branchline.model.build import build_model
from branchline.numerics import linalg
from branchline.numerics.policy import DEFAULT, SPARSE
from branchline.numerics.tolerances import StepSettings
from branchline.problems.crowding import resolve_crowded_steps
from branchline.problems.equilibrium_branch import (
    EquilibriumBranch,
    locate_events,
    trace_branch,
)
from branchline.scan.loader import ExpressionModelSpec
from cell_chains import brusselator_equations, mode_rates

CELLS = 50  # 100 states: above the policy's default reuse_rejected_points_above (50)
A, D = 2.0, 0.1
# The uniform mode's Hopf point b = 1 + a^2 = 5 and the next eleven modes' (up to
# b = 5.1): the Hopf test (+-min |Re lambda| over complex pairs, for rows of more
# than 50 eigenvalues) has a kink at each, so the test-function rule rejects steps.
INTERVAL = (4.95, 5.1)
OFF = 10**9  # a reuse_rejected_points_above no model reaches


@functools.cache
def chain_model(cells: int = CELLS):
    spec = ExpressionModelSpec(
        parameters={"a": A, "b": INTERVAL[0], "d": D}, equations=brusselator_equations(cells)
    )
    return build_model(spec)


def with_reuse_above(model, size: int):
    return replace(model, linear_algebra=replace(DEFAULT, reuse_rejected_points_above=size))


def trace(model, monkeypatch=None):
    """(branch, matrices whose eigenvalues were computed, as bytes) of the uniform branch."""
    computed: list[bytes] = []
    if monkeypatch is not None:
        plain = linalg.eigvals_unchecked

        def counted(matrix):
            computed.append(np.ascontiguousarray(matrix).tobytes())
            return plain(matrix)

        monkeypatch.setattr(linalg, "eigvals_unchecked", counted)
    x = np.empty(model.size)
    x[0::2], x[1::2] = A, INTERVAL[0] / A
    branch = trace_branch(
        model, "uniform", "b", model.defaults, x, INTERVAL, "increasing", StepSettings()
    )
    return branch, computed


def block_eigenvalues(b: float, cells: int = CELLS) -> np.ndarray:
    """The closed-form spectrum of the chain's Jacobian on the uniform state at ``b``."""
    values = []
    for rate in mode_rates(cells):
        trace_k = b - 1.0 - A * A - 2.0 * D * rate
        det_k = (b - 1.0 - D * rate) * (-A * A - D * rate) + A * A * b
        root = np.sqrt(complex(trace_k * trace_k - 4.0 * det_k))
        values += [(trace_k + root) / 2.0, (trace_k - root) / 2.0]
    return np.array(values)


def as_sorted(values: np.ndarray) -> np.ndarray:
    return np.sort_complex(np.round(values, 9))


def test_kept_points_are_recorded_with_their_own_eigenvalues(monkeypatch):
    # With reuse on, some rows are points first rejected and recorded later; every row
    # must carry the eigenvalues of its own point (closed form above), on the branch.
    branch, _ = trace(chain_model(), monkeypatch)
    assert branch.status == "done"
    assert branch.counts["revisited_points"] >= 3
    for b, state, eigenvalues in zip(
        branch.parameter_values, branch.states, branch.eigenvalues, strict=True
    ):
        np.testing.assert_allclose(state[0::2], A, atol=1e-10)
        np.testing.assert_allclose(state[1::2], b / A, atol=1e-10)
        expected = block_eigenvalues(b)
        assert np.max(np.abs(as_sorted(eigenvalues) - as_sorted(expected))) < 1e-8
    assert np.all(np.diff(branch.parameter_values) > 0.0)


def test_each_spectrum_is_computed_once_and_fewer_are_thrown_away(monkeypatch):
    # An observation is computed at most once per point, accepted or rejected; with
    # reuse, the spectra computed and never recorded (rejected points not taken up
    # later) are fewer than without, where every rejected step's spectrum is lost.
    model = chain_model()
    reused, computed = trace(model, monkeypatch)
    computed_on = list(computed)  # the next trace's calls pass through this list too
    plain, computed_off = trace(with_reuse_above(model, OFF), monkeypatch)
    assert "revisited_points" not in plain.counts
    assert len(set(computed_on)) == len(computed_on)  # no matrix decomposed twice
    lost_on = len(computed_on) - len(reused)  # one side: every row observed once
    lost_off = len(computed_off) - len(plain)
    assert lost_off == plain.counts["rejected_steps"] > 0
    assert lost_on < lost_off / 2
    assert len(computed_on) / len(reused) < len(computed_off) / len(plain)


def test_the_same_hopf_points_are_located_with_reuse_on_and_off():
    # Hopf points of the chain's modes, b_k = 1 + a^2 + 2 d mu_k, omega_k^2 =
    # a^2 - d^2 mu_k^2 (Prigogine & Lefever 1968, one block per mode), refined on the
    # extended Hopf system: the same ones, to rounding, whichever points were recorded.
    model = chain_model()
    rates = [r for r in mode_rates(CELLS) if 1 + A * A + 2 * D * r <= INTERVAL[1]]
    located = {}
    for name, size in (("on", 50), ("off", OFF)):
        chosen = with_reuse_above(model, size)
        branch = trace(chosen)[0]
        events = locate_events(chosen, resolve_crowded_steps(chosen, branch))
        located[name] = sorted((e for e in events if e.kind == "hopf"), key=lambda e: e.value)
    assert len(located["on"]) == len(located["off"]) == len(rates) == 12
    for on, off, rate in zip(located["on"], located["off"], rates, strict=True):
        b_k = 1.0 + A * A + 2.0 * D * rate
        assert on.value == pytest.approx(b_k, abs=1e-11)
        assert off.value == pytest.approx(b_k, abs=1e-11)
        assert on.frequency == pytest.approx(math.sqrt(A * A - (D * rate) ** 2), abs=1e-10)
        assert on.value == pytest.approx(off.value, abs=1e-12)
        assert on.criticality == off.criticality


def test_reuse_is_switched_by_the_policy():
    # Only dense equilibrium branches above reuse_rejected_points_above states keep
    # rejected points (their observe is then pure); sparse ones track eigenvalues from
    # point to point, and small ones keep the points of plain step control.
    small = chain_model(10)  # 20 states
    big = chain_model()
    p = big.defaults
    assert not EquilibriumBranch(small, 1, small.defaults).revisit_rejected
    assert EquilibriumBranch(with_reuse_above(small, 19), 1, small.defaults).revisit_rejected
    assert EquilibriumBranch(big, 1, p).revisit_rejected
    assert not EquilibriumBranch(with_reuse_above(big, 100), 1, p).revisit_rejected
    assert not EquilibriumBranch(replace(big, linear_algebra=SPARSE), 1, p).revisit_rejected


class SteepLine:
    """The line x = p with the test function tanh((p - 1/2) / WIDTH), steep at its zero.

    Its observe is pure and counts its calls; the payload is the observed point itself.
    """

    WIDTH = 0.01

    def __init__(self, revisit: bool) -> None:
        self.revisit_rejected = revisit
        self.observed: list[tuple[float, ...]] = []

    def residual(self, u):
        return np.array([u[0] - u[1]])

    def jacobian(self, u):
        return np.array([[1.0, -1.0]])

    def observe(self, u, tangent, jacobian):
        self.observed.append(tuple(u))
        return u.copy(), np.array([math.tanh((u[1] - 0.5) / self.WIDTH)])


@pytest.mark.parametrize("revisit", [True, False])
def test_engine_records_a_kept_point_as_it_was_observed(revisit):
    # The test-function rule rejects steps across the steep zero; kept points come back
    # as rows with the payload of their own observation and none is observed twice.
    problem = SteepLine(revisit)
    settings = StepSettings(initial=0.02, smallest=1e-6, largest=0.1)
    curve = follow_curve(problem, np.zeros(2), np.array([1.0, 1.0]), settings, (0.0, 1.0))
    assert curve.status == "done"
    assert curve.counts["rejected_steps"] > 0
    assert len(set(problem.observed)) == len(problem.observed)
    np.testing.assert_array_equal(curve.payloads, curve.points)
    assert np.all(np.diff(curve.points[:, 1]) > 0.0)
    zero = int(np.flatnonzero(np.diff(np.sign(curve.test_values[:, 0])))[0])
    assert curve.points[zero, 1] <= 0.5 <= curve.points[zero + 1, 1]
    if revisit:
        assert curve.counts["revisited_points"] > 0
        # observed and never recorded: fewer than the rejections
        assert len(problem.observed) - len(curve) < curve.counts["rejected_steps"]
    else:
        assert "revisited_points" not in curve.counts
        assert len(problem.observed) - len(curve) == curve.counts["rejected_steps"]


@pytest.mark.parametrize("start", [INTERVAL[0], 4.97])
def test_the_start_points_full_search_serves_both_sides(start):
    # Sparse tracking (forced here for 100 states): the side traced second takes the
    # start point's leading eigenvalues from the first side's full search instead of
    # searching again, also when the first side leaves the interval at once (a start on
    # its edge). Below b = 5 no stability changes (closed form above), and fewer than
    # 200 points need no periodic search: one full search in all. The start row's
    # values are the closed-form spectrum's leading ones.
    policy = replace(SPARSE, eigenvalues_dense_up_to=20)
    model = replace(chain_model(), linear_algebra=policy)
    x = np.empty(model.size)
    x[0::2], x[1::2] = A, start / A
    p = model.defaults.copy()
    p[model.parameters.index("b")] = start
    interval = (INTERVAL[0], 4.99)
    branch = trace_branch(model, "uniform", "b", p, x, interval, "both", StepSettings())
    assert branch.status == "done"
    assert np.all(branch.unstable_count == 0)
    assert branch.counts["eigenvalue_full_searches"] == 1
    row = int(np.flatnonzero(branch.parameter_values == start)[0])
    leading = branch.eigenvalues[row]
    leading = leading[np.isfinite(leading)]
    expected = block_eigenvalues(start)
    expected = expected[np.argsort(-expected.real, kind="stable")][: leading.shape[0]]
    assert np.max(np.abs(as_sorted(leading) - as_sorted(expected))) < 1e-8
