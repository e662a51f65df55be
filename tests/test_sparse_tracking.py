"""The large sparse path: tracked eigenvalues, Newton on the sparse Hopf system, memory.

The model is the reaction-diffusion Brusselator of tests/test_sparse_eigen.py
(Prigogine & Lefever, "Symmetry breaking instabilities in dissipative systems
II", J. Chem. Phys. 48, 1968), whose Jacobian at the uniform state splits into
one 2 x 2 block per mode of the discrete Neumann Laplacian, so that every
eigenvalue is known in closed form (``exact_leading``; the derivation is in that
module's docstring). The uniform mode has its Hopf point at b = 1 + a^2 with
frequency a (trace zero, determinant a^2 of the single cell's linearization).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp

from branchline.cli import main
from branchline.model.build import build_model
from branchline.numerics import eigen_tracking, linalg
from branchline.problems import equilibrium_branch
from branchline.problems.equilibrium_branch import locate_events, trace_branch
from branchline.results.tables import run_info
from branchline.scan.loader import PythonModelSpec, StepSettings
from branchline.vocabulary import EventKind
from memory_cap import run_under_memory_cap
from test_sparse_eigen import (
    D1,
    D2,
    A,
    brusselator_jacobian,
    brusselator_model,
    exact_leading,
    neumann_laplacian,
    trace_uniform_through_hopf,
    uniform_state,
)

NODES = 200  # 400 states: above the sizes where dense LAPACK decides (200 and 300)
TESTS = Path(__file__).resolve().parent


@pytest.fixture(scope="module")
def traced():
    model = brusselator_model(NODES, 1.97)
    return model, trace_uniform_through_hopf(model, NODES)


def test_tracked_eigenvalues_equal_the_closed_form_mode_eigenvalues_at_every_point(traced):
    _, branch = traced
    assert branch.status == "done", branch.message
    # most points tracked, the full multi-shift search only at the start and to
    # confirm the stability change (the module's rule 4)
    assert branch.counts["eigenvalues_tracked"] >= len(branch) - 3
    assert 1 <= branch.counts["eigenvalue_full_searches"] <= 3
    for row, b in enumerate(branch.parameter_values):
        # exact mode eigenvalues (Prigogine & Lefever 1968 cell, discrete Neumann modes)
        np.testing.assert_allclose(
            branch.eigenvalues[row], exact_leading(NODES, b), rtol=0.0, atol=1e-9
        )


def test_hopf_point_located_by_newton_on_the_sparse_system(traced):
    model, branch = traced
    (hopf,) = locate_events(model, branch)
    assert hopf.kind == EventKind.HOPF
    assert "bisection" not in hopf.note and hopf.details["method"].startswith("Newton")
    # b = 1 + a^2, omega = a (Prigogine & Lefever 1968, the uniform mode)
    assert hopf.value == pytest.approx(1.0 + A * A, abs=1e-10)
    assert hopf.frequency == pytest.approx(A, abs=1e-10)
    np.testing.assert_allclose(hopf.state, uniform_state(NODES, 1.0 + A * A), atol=1e-10)


def test_tracking_that_loses_confidence_falls_back_to_the_full_search():
    b = 1.9
    matrix = brusselator_jacobian(uniform_state(NODES, b), {"a": A, "b": b, "d1": D1, "d2": D2})
    exact = exact_leading(NODES, b)
    # a previous point whose leading values lie far from the present ones (as if
    # the step had been much too long): rule 3 fails, the full search decides
    wrong = eigen_tracking.SpectrumTrack(exact - 0.5, tracked=7, full_searches=1)
    found, track = eigen_tracking.track_leading_eigenvalues(matrix.tocsc(), wrong)
    assert found.found and found.method == "shift-invert Arnoldi"
    assert (track.tracked, track.full_searches) == (7, 2)
    np.testing.assert_allclose(found.values, exact, atol=1e-9)
    # from the right previous values, tracking is confident and agrees
    again, after = eigen_tracking.track_leading_eigenvalues(matrix.tocsc(), track)
    assert again.method == "tracked shift-invert Arnoldi"
    assert (after.tracked, after.full_searches) == (8, 2)
    np.testing.assert_allclose(again.values, exact, atol=1e-9)


def test_one_factorization_per_point_and_every_point_on_the_uniform_state(traced):
    _, branch = traced
    # newton="auto" picks the chord corrector on the tangent's factors for this large
    # sparse model: one factorization per point tried (the tangent's, also at a point
    # the test-function rule rejects, and the edge point's), none for the correctors
    # (full Newton takes two per point here: 53 against 28).
    counts = branch.counts
    assert counts["factorizations"] <= len(branch) + counts["rejected_steps"] + 2
    # every point solves f = 0: the uniform state x = a, y = b / a (Prigogine &
    # Lefever 1968, the homogeneous equilibrium of the Brusselator)
    for row, b in enumerate(branch.parameter_values):
        np.testing.assert_allclose(branch.states[row], uniform_state(NODES, b), atol=1e-9)


def mode_determinant_sign(nodes: int, b: float) -> float:
    """sign det J at the uniform state: the product of the 2 x 2 mode blocks'
    determinants (closed form, as ``exact_leading``)."""
    k = np.arange(nodes)
    mu = 4.0 * (nodes - 1) ** 2 * np.sin(k * np.pi / (2.0 * (nodes - 1))) ** 2
    det = (b - 1.0 - D1 * mu) * (-A * A - D2 * mu) + A * A * b
    return float(np.prod(np.sign(det)))


def test_determinant_sign_of_f_x_from_the_tangent_factorization():
    # det f_x = det [G_u; t^T] t_p for the unit tangent t (Schur complement 1 / t_p),
    # against the closed-form product of the mode determinants
    nodes = 30
    for b in (1.5, 1.97, 2.1):
        params = {"a": A, "b": b, "d1": D1, "d2": D2}
        fx = brusselator_jacobian(uniform_state(nodes, b), params).tocsc()
        # the uniform branch: d(x, y)/db = (0, 1 / a), so f_p = -f_x (0, 1 / a)
        slope = np.concatenate([np.zeros(nodes), np.full(nodes, 1.0 / A)])
        fp = -(fx @ slope)
        tangent = np.append(slope, 1.0)
        tangent /= np.linalg.norm(tangent)
        square = np.vstack([np.column_stack([fx.toarray(), fp]), tangent])
        sign, _ = np.linalg.slogdet(square)
        assert sign * np.sign(tangent[-1]) == mode_determinant_sign(nodes, b)


def test_a_determinant_sign_change_unmatched_by_tracked_values_forces_the_full_search():
    b = 1.9
    matrix = brusselator_jacobian(uniform_state(NODES, b), {"a": A, "b": b, "d1": D1, "d2": D2})
    matrix = matrix.tocsc()
    exact = exact_leading(NODES, b)
    sign = mode_determinant_sign(NODES, b)
    _, first = eigen_tracking.track_leading_eigenvalues(matrix, None, determinant_sign=sign)
    assert (first.tracked, first.full_searches) == (0, 1)
    # the same sign: tracking is confident
    same, second = eigen_tracking.track_leading_eigenvalues(matrix, first, determinant_sign=sign)
    assert same.method == "tracked shift-invert Arnoldi"
    assert (second.tracked, second.full_searches) == (1, 1)
    # the sign flips (a real eigenvalue would have crossed zero somewhere) while the
    # tracked real values did not cross: rule 5 sends it to the full search
    flipped, third = eigen_tracking.track_leading_eigenvalues(
        matrix, second, determinant_sign=-sign
    )
    assert flipped.method != "tracked shift-invert Arnoldi"
    assert (third.tracked, third.full_searches) == (1, 2)
    np.testing.assert_allclose(flipped.values, exact, atol=1e-9)


# ---------------------------------------------------------------------------
# memory: no n x n dense array on the sparse path; a run that runs out keeps its points

CAPPED_SETUP = """
from test_sparse_eigen import brusselator_model, trace_branch, locate_events, uniform_state
from branchline.scan.loader import StepSettings

nodes = {nodes}
model = brusselator_model(nodes, 1.999)
"""
CAPPED_BODY = """
branch = trace_branch(model, "u", "b", model.defaults, uniform_state(nodes, 1.999),
                      (1.999, 2.001), "increasing",
                      StepSettings(initial=0.3, largest=0.3, max_points=10))
events = locate_events(model, branch)
print(branch.status, len(branch), [(e.kind, repr(e.value), e.details["method"])
                                   for e in events])
"""


def test_sparse_hopf_location_runs_under_a_memory_cap():
    nodes = 2000  # 4000 states: a dense 4000 x 4000 array takes 128 MB
    lines = run_under_memory_cap(
        CAPPED_SETUP.format(nodes=nodes), CAPPED_BODY, 2 * nodes, 96 * 2**20
    )
    assert lines[0] == "dense refused"
    status, _, rest = lines[1].partition(" ")
    assert status == "done"
    assert "'hopf'" in rest and "Newton" in rest
    value = float(rest.split("'hopf', '")[1].split("'")[0])
    assert value == pytest.approx(1.0 + A * A, abs=1e-10)  # Prigogine & Lefever 1968


FAULT_SCAN = """
title = "a run that runs out of memory part-way"
[model.parameters]
F = 0.0
[model.python]
rhs = "faulty_models:healthy"
size = 2
[[trace]]
name = "short"
vary = "F"
interval = [0.0, 0.9]
start = { x0 = 1.0, x1 = 0.0 }
direction = "increasing"
"""


def test_a_run_that_runs_out_of_memory_part_way_keeps_its_points(tmp_path, capsys, monkeypatch):
    observe = equilibrium_branch.EquilibriumBranch.observe

    def observe_until_memory_runs_out(self, u, tangent, jacobian):
        if u[-1] > 0.3:
            raise MemoryError("Unable to allocate 74.5 GiB")
        return observe(self, u, tangent, jacobian)

    monkeypatch.setattr(
        equilibrium_branch.EquilibriumBranch, "observe", observe_until_memory_runs_out
    )
    scan = tmp_path / "memory.toml"
    scan.write_text(FAULT_SCAN)
    out = tmp_path / "out"
    code = main(["run", str(scan), "--out", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert code == 1 and "Traceback" not in err
    info = json.loads((out / "run.json").read_text())
    (trace,) = info["traces"]
    assert trace["status"] == "failed"
    assert "ran out of memory" in trace["message"] and "74.5 GiB" in trace["message"]
    points = pd.read_csv(out / "points.csv")
    assert points["F"].min() == 0.0 and 0.2 < points["F"].max() <= 0.3
    assert "ran out of memory" in (out / "report.md").read_text()


def wrong_brusselator_jacobian(x, p):
    """The Brusselator's sparse Jacobian with the coupling d(v')/du missing (a user's slip)."""
    nodes = x.shape[0] // 2
    matrix = brusselator_jacobian(x, p).tolil()
    matrix[nodes + 5, 5] = 0.0
    return matrix.tocsc()


def test_a_wrong_sparse_jacobian_is_caught_with_a_clear_warning():
    import branchline

    scan = branchline.scan_from_dict(
        {
            "model": {
                "parameters": {"a": A, "b": 1.9, "d1": D1, "d2": D2},
                "python": {
                    "rhs": "test_sparse_eigen:brusselator_rhs",
                    "jacobian": "test_sparse_tracking:wrong_brusselator_jacobian",
                    "size": 2 * NODES,
                },
            },
            "trace": [
                {
                    "vary": "b",
                    "interval": [1.9, 1.91],
                    "start": "test_sparse_tracking:uniform_start",
                    "direction": "increasing",
                    "steps": {"max_points": 2},
                }
            ],
        }
    )
    result = branchline.run_scan(scan)
    said = [w for w in result.warnings if "disagrees with finite differences" in w]
    assert said, result.warnings  # at the start, and again along the branch
    assert "wrong_brusselator_jacobian" in said[0] and "check the Jacobian function" in said[0]
    # run.json counts how the leading eigenvalues were found
    counts = run_info(result)["counts"]
    assert counts["eigenvalue_full_searches"] >= 1
    assert counts["eigenvalues_tracked"] + counts["eigenvalue_full_searches"] >= counts["points"]


def uniform_start(p):
    return uniform_state(NODES, p["b"])


# ---------------------------------------------------------------------------
# a real leading eigenvalue through a fold: x_i' = p - x_i^2 + D (L x)_i on a line


def fold_chain_rhs(x, p):
    return p["p"] - x * x + p["D"] * (neumann_laplacian(x.shape[0]) @ x)


def fold_chain_jacobian(x, p):
    return (sp.diags(-2.0 * x) + p["D"] * neumann_laplacian(x.shape[0])).tocsc()


def test_tracked_real_eigenvalues_through_a_fold_and_a_branch_point():
    # The uniform states x = +-sqrt(p) meet at the fold p = 0 (the fold normal form
    # x' = p - x^2; Kuznetsov, Elements of Applied Bifurcation Theory, section 3.2).
    # The Jacobian -2 x I + D L has the real eigenvalues -2 x - D mu_k, mu_k of the
    # discrete Neumann Laplacian (module docstring of test_sparse_eigen), so on the
    # lower branch mode 1 crosses zero at the branch point sqrt(p) = D mu_1 / 2.
    nodes, diffusion = 400, 1e-3
    model = build_model(
        PythonModelSpec(
            parameters={"p": 1e-4, "D": diffusion},
            rhs="test_sparse_tracking:fold_chain_rhs",
            jacobian="test_sparse_tracking:fold_chain_jacobian",
            size=nodes,
        )
    )
    branch = trace_branch(
        model,
        "f",
        "p",
        model.defaults,
        np.full(nodes, 1e-2),
        (0.0, 1e-4),
        "decreasing",
        StepSettings(initial=0.01, largest=0.02, max_points=200),
    )
    assert branch.status == "done", branch.message
    mu = 4.0 * (nodes - 1) ** 2 * np.sin(np.arange(nodes) * np.pi / (2.0 * (nodes - 1))) ** 2
    for row in range(len(branch)):
        exact = np.sort(-2.0 * branch.states[row, 0] - diffusion * mu)[::-1][:6]
        np.testing.assert_allclose(branch.eigenvalues[row], exact, rtol=0.0, atol=1e-9)
    assert branch.counts["eigenvalues_tracked"] > branch.counts["eigenvalue_full_searches"]
    fold, point = sorted(locate_events(model, branch), key=lambda e: e.kind != "fold")
    assert fold.kind == "fold" and abs(fold.value) <= 1e-12
    assert point.kind == "branch_point"
    assert point.value == pytest.approx((diffusion * mu[1] / 2.0) ** 2, rel=1e-8)


def _chain_leading(cells: int, a: float, b: float, d: float) -> np.ndarray:
    """The six leading eigenvalues of the Brusselator chain at its uniform state, in
    closed form: lambda(J_cell) - d mu_k per mode (equal diffusion; tests/cell_chains.py,
    Prigogine & Lefever 1968 for the cell, Strang, SIAM Review 41 (1999) section 2 for
    mu_k, from memory)."""
    from cell_chains import mode_rates

    trace, det = b - 1.0 - a * a, a * a
    root = np.sqrt(complex(trace * trace - 4.0 * det))
    cell = np.array([(trace + root) / 2.0, (trace - root) / 2.0])
    values = np.concatenate([cell - d * mu for mu in mode_rates(cells)])
    return values[np.argsort(-values.real, kind="stable")][:6]


def test_tracking_engages_on_a_clustered_chain_spectrum():
    # 600 states: hundreds of modes within 0.1 of the leading pair, the three
    # leading pairs within 1e-4 of each other (the crowd of issue 11)
    from cell_chains import brusselator_jacobian as chain_jacobian
    from cell_chains import coupling_matrix

    cells, a, d = 300, 2.0, 0.1
    coupling = coupling_matrix(cells)

    def matrix(b):
        x = np.empty(2 * cells)
        x[0::2], x[1::2] = a, b / a
        return sp.csc_matrix(chain_jacobian(x, {"b": b, "d": d}, coupling))

    found, track = eigen_tracking.track_leading_eigenvalues(matrix(4.0), None)
    assert found.found and track.full_searches == 1
    for b in (4.01, 4.02):
        found, track = eigen_tracking.track_leading_eigenvalues(matrix(b), track)
        assert found.method == "tracked shift-invert Arnoldi"
        exact = _chain_leading(cells, a, b, d)
        np.testing.assert_allclose(np.sort_complex(found.values), np.sort_complex(exact),
                                   rtol=0.0, atol=1e-9)
    assert (track.tracked, track.full_searches) == (2, 1)


# ---------------------------------------------------------------------------
# the certificate between tracking runs (rule 7) and crossings seen by tracking (rule 6)


def _jacobian_at(b: float, nodes: int = NODES) -> sp.csc_matrix:
    return brusselator_jacobian(uniform_state(nodes, b), {"a": A, "b": b, "d1": D1, "d2": D2})


def test_a_certified_point_matches_the_closed_form_mode_eigenvalues():
    # full search, one tracking run, then points whose eigenvalues are certified
    # from that run's eigenvectors without any factorization; each against the
    # exact mode eigenvalues (Prigogine & Lefever 1968 cell, discrete Neumann modes)
    found, track = eigen_tracking.track_leading_eigenvalues(_jacobian_at(1.9), None)
    found, track = eigen_tracking.track_leading_eigenvalues(_jacobian_at(1.9004), track)
    assert found.method == "tracked shift-invert Arnoldi" and track.basis is not None
    for step in range(1, 4):
        b = 1.9004 + 4e-4 * step
        found, track = eigen_tracking.track_leading_eigenvalues(_jacobian_at(b), track)
        assert found.method == "certified from the last eigenvectors"
        np.testing.assert_allclose(found.values, exact_leading(NODES, b), rtol=0.0, atol=1e-9)
    assert (track.tracked, track.certified, track.full_searches) == (4, 3, 1)


def test_the_certificate_refuses_when_the_eigenvectors_moved():
    # a non-uniform perturbation turns the eigenvectors: the old basis's residual is
    # far above the bound, so a tracking run decides; reference: dense LAPACK
    # (numpy.linalg.eigvals) of the perturbed matrix
    found, track = eigen_tracking.track_leading_eigenvalues(_jacobian_at(1.9), None)
    found, track = eigen_tracking.track_leading_eigenvalues(_jacobian_at(1.9004), track)
    bump = np.zeros(2 * NODES)
    bump[: NODES // 4] = 1e-2  # reaction changed in a quarter of the cells only
    matrix = (_jacobian_at(1.9008) + sp.diags(bump)).tocsc()
    found, after = eigen_tracking.track_leading_eigenvalues(matrix, track)
    assert found.method == "tracked shift-invert Arnoldi"
    assert (after.certified, after.tracked, after.since_solve) == (0, 2, 0)
    dense = np.linalg.eigvals(matrix.toarray())
    exact = dense[np.argsort(-dense.real, kind="stable")][:6]
    np.testing.assert_allclose(np.sort_complex(found.values), np.sort_complex(exact), atol=1e-9)


def test_a_tracking_run_at_least_every_certify_points():
    found, track = eigen_tracking.track_leading_eigenvalues(_jacobian_at(1.9), None)
    methods = []
    for step in range(1, eigen_tracking.CERTIFY_POINTS + 2):
        b = 1.9 + 2e-4 * step
        found, track = eigen_tracking.track_leading_eigenvalues(_jacobian_at(b), track)
        methods.append(found.method)
        np.testing.assert_allclose(found.values, exact_leading(NODES, b), rtol=0.0, atol=1e-9)
    runs = [index for index, method in enumerate(methods) if method.startswith("tracked")]
    # the first point after the full search, and again CERTIFY_POINTS later
    assert runs == [0, eigen_tracking.CERTIFY_POINTS]
    assert track.certified == eigen_tracking.CERTIFY_POINTS - 1


def test_a_clean_pair_crossing_is_accepted_from_tracking_without_the_full_search():
    # the uniform mode's pair crosses at b = 1 + a^2 = 2 (Prigogine & Lefever 1968):
    # the certificate refuses (the number of unstable values changes), the tracking
    # run sees the pair move across the axis and rule 6 accepts it
    found, track = eigen_tracking.track_leading_eigenvalues(_jacobian_at(1.9996), None)
    found, track = eigen_tracking.track_leading_eigenvalues(_jacobian_at(1.9998), track)
    found, track = eigen_tracking.track_leading_eigenvalues(_jacobian_at(2.0002), track)
    assert found.method == "tracked shift-invert Arnoldi"
    assert (track.crossings, track.full_searches) == (1, 1)
    assert np.count_nonzero(found.values.real > 0.0) == 2
    np.testing.assert_allclose(found.values, exact_leading(NODES, 2.0002), rtol=0.0, atol=1e-9)


def test_a_real_value_crossing_still_goes_to_the_full_search():
    # rule 6 is for complex pairs only: a diagonal matrix (its eigenvalues are its
    # entries) whose rightmost real value moved from -1e-3 to +1e-3; tracking sees
    # it, but a real crossing is confirmed by the full search
    n = 400
    diagonal = -np.linspace(0.0, 4.0, n) - 0.5
    before = diagonal.copy()
    before[0] = -1e-3
    after = diagonal.copy()
    after[0] = 1e-3
    previous = eigen_tracking.SpectrumTrack(
        np.sort(before)[::-1][:6] + 0j, tracked=3, full_searches=1
    )
    found, track = eigen_tracking.track_leading_eigenvalues(sp.diags(after).tocsc(), previous)
    assert found.method == "shift-invert Arnoldi"
    assert (track.crossings, track.full_searches) == (0, 2)
    np.testing.assert_allclose(found.values, np.sort(after)[::-1][:6], atol=1e-9)


# ---------------------------------------------------------------------------
# the sparse tangent's factorization: block elimination, the bordered LU as fallback


@pytest.mark.parametrize("pivot", [1.0, 1e-15, 0.0])
def test_block_bordered_factors_agree_with_lapack(pivot):
    # [[A, c], [r^T, d]] z = e_last and its determinant against numpy.linalg.solve
    # and slogdet (LAPACK); A's first diagonal entry ``pivot``: regular, nearly
    # singular (near a fold: every solve through A would lose 15 digits) and exactly
    # singular (a fold: SuperLU refuses A); in both the bordered matrix is factorized
    # instead. The bordered matrix is regular in all three cases.
    n = 60
    rng = np.random.default_rng(11)
    diagonal = np.linspace(1.0, 3.0, n)
    diagonal[0] = pivot
    square = sp.diags([diagonal, 0.3 * np.ones(n - 1)], [0, 1], format="lil")
    square[1, 0] = 0.0
    square = square.tocsc()
    column = rng.normal(size=n)
    column[0] = 1.0
    border = rng.normal(size=n + 1)
    border[0] = 1.0
    jacobian = sp.hstack([square, sp.csc_matrix(column.reshape(-1, 1))], format="csc")
    dense = np.vstack([np.column_stack([square.toarray(), column]), border])
    expected = np.linalg.solve(dense, np.eye(n + 1)[-1])
    rhs = rng.normal(size=n + 1)
    reference_sign, reference_log = np.linalg.slogdet(dense)
    # twice: the second factorization of the pattern reuses the first one's ordering
    for _ in range(2):
        factors, z = linalg.factor_bordered(jacobian, border)
        np.testing.assert_allclose(z, expected, rtol=1e-10, atol=1e-12)
        np.testing.assert_allclose(
            factors.solve(rhs), np.linalg.solve(dense, rhs), rtol=1e-9, atol=1e-12
        )
        sign, log_det = linalg.lu_slogdet(factors)
        assert sign == reference_sign and log_det == pytest.approx(reference_log, abs=1e-9)
        # block elimination only where A is well conditioned
        assert isinstance(factors, linalg.BlockBorderedFactors) == (pivot == 1.0)


def test_the_certificate_backs_off_where_it_keeps_refusing(monkeypatch):
    # a perturbation growing from point to point in a quarter of the cells turns the
    # eigenvectors at every step: the certificate refuses, so after CERTIFY_MISSES
    # refusals it is tried only every CERTIFY_RETRY points; every point's values
    # against dense LAPACK (numpy.linalg.eigvals)
    calls = []
    certify = eigen_tracking._certify

    def counted(*args):
        calls.append(1)
        return certify(*args)

    monkeypatch.setattr(eigen_tracking, "_certify", counted)
    bump = np.zeros(2 * NODES)
    bump[: NODES // 4] = 1.0
    track = None
    points = 12
    for step in range(points + 1):
        matrix = (_jacobian_at(1.9 + 2e-4 * step) + sp.diags(2e-3 * step * bump)).tocsc()
        found, track = eigen_tracking.track_leading_eigenvalues(matrix, track)
        dense = np.linalg.eigvals(matrix.toarray())
        exact = dense[np.argsort(-dense.real, kind="stable")][:6]
        np.testing.assert_allclose(
            np.sort_complex(found.values), np.sort_complex(exact), rtol=0.0, atol=1e-9
        )
    assert track.certified == 0 and track.full_searches == 1
    # tried after the full search and two tracking runs, then again CERTIFY_RETRY
    # points after the first skip
    misses, retry = eigen_tracking.CERTIFY_MISSES, eigen_tracking.CERTIFY_RETRY
    expected = sum(1 for before in range(points) if before < misses or before % retry == 0)
    assert len(calls) == expected < points
