"""Leading eigenvalues of large sparse Jacobians, and what a branch does when they fail.

The reference model is the Brusselator (Prigogine & Lefever, "Symmetry breaking
instabilities in dissipative systems II", J. Chem. Phys. 48, 1968) on a line
with diffusion and no-flux (Neumann) ends, discretized on N equally spaced
nodes (h = 1 / (N - 1), ghost-point boundary rows):

    u' = a - (b + 1) u + u^2 v + d1 (D u),   v' = b u - u^2 v + d2 (D v).

Its uniform state (u, v) = (a, b / a) is exact for the discrete model. The
discrete Neumann Laplacian D has eigenvectors cos(k pi j / (N - 1)),
j = 0 .. N - 1, and eigenvalues -mu_k with mu_k = (4 / h^2) sin^2(k pi / (2 (N - 1))),
k = 0 .. N - 1 (the computation of LeVeque, Finite Difference Methods for Ordinary
and Partial Differential Equations, section 2.10, for the Dirichlet case, carried
over to the ghost-point rows: each row of D times the cosine vector gives
(2 cos(theta) - 2) times its entry, the end rows included). So the Jacobian at the
uniform state splits into one 2 x 2 block per mode k,

    [[b - 1 - d1 mu_k,  a^2         ],
     [-b,               -a^2 - d2 mu_k]],

whose eigenvalues are exact in closed form (the trace/determinant formula of a
2 x 2 matrix). The uniform mode k = 0 is the single cell's linearization, with a
Hopf point at b = 1 + a^2 and frequency a (Prigogine & Lefever 1968; trace zero,
determinant a^2). The other modes are stable there when d1 / d2 = 1/2: no
Turing instability below b = (1 + a sqrt(d1 / d2))^2 (the diffusion-driven
threshold of Turing, "The chemical basis of morphogenesis", 1952, in its
Brusselator form quoted from memory; the exact mode eigenvalues below check it
anyway), and mode 1's own Hopf point lies at b = 1 + a^2 + (d1 + d2) mu_1, about
2.0296 here, outside the traced interval.

With d1 = 0.001, d2 = 0.002 the spectrum clusters near the pair +-i a: the
eigenvalues nearest the origin are not the rightmost ones, which is where
shift-invert Arnoldi at the origin alone went wrong.
"""

from __future__ import annotations

from dataclasses import replace
from functools import lru_cache

import numpy as np
import pytest
import scipy.sparse as sp

from branchline.model.build import build_model
from branchline.numerics import eigen_tracking, eigenvalues
from branchline.numerics.policy import LinearAlgebraPolicy
from branchline.problems.equilibrium_branch import EIGENVALUES_FAILED, locate_events, trace_branch
from branchline.scan.loader import PythonModelSpec, StepSettings
from branchline.vocabulary import Status

A = 1.0
D1, D2 = 0.001, 0.002


# ---------------------------------------------------------------------------
# the model ([model.python] functions; this module is importable: pythonpath = tests)


@lru_cache(maxsize=4)
def neumann_laplacian(nodes: int) -> sp.csr_matrix:
    """The ghost-point Neumann second-difference matrix on [0, 1], scaled by 1 / h^2.

    Cached (callers never modify it): a user's model builds its operator once.
    """
    h = 1.0 / (nodes - 1)
    main = -2.0 * np.ones(nodes)
    off = np.ones(nodes - 1)
    lap = sp.diags([off, main, off], [-1, 0, 1], format="lil")
    lap[0, 1] = 2.0
    lap[nodes - 1, nodes - 2] = 2.0
    return (lap.tocsr() / h**2).tocsr()


def brusselator_rhs(x, p):
    nodes = x.shape[0] // 2
    lap = neumann_laplacian(nodes)
    u, v = x[:nodes], x[nodes:]
    a, b = p["a"], p["b"]
    return np.concatenate(
        [
            a - (b + 1.0) * u + u * u * v + p["d1"] * (lap @ u),
            b * u - u * u * v + p["d2"] * (lap @ v),
        ]
    )


@lru_cache(maxsize=4)
def _diffusion(nodes: int, d1: float, d2: float) -> sp.csr_matrix:
    """blockdiag(d1 D, d2 D): the constant part of the Jacobian, built once per grid."""
    lap = neumann_laplacian(nodes)
    return sp.block_diag([d1 * lap, d2 * lap], format="csr")


def brusselator_jacobian(x, p):
    nodes = x.shape[0] // 2
    u, v = x[:nodes], x[nodes:]
    b = p["b"]
    reaction = sp.diags(
        [
            np.concatenate([-(b + 1.0) + 2.0 * u * v, -u * u]),
            u * u,
            b - 2.0 * u * v,
        ],
        [0, nodes, -nodes],
        format="csr",
    )
    return (reaction + _diffusion(nodes, p["d1"], p["d2"])).tocsc()


def brusselator_model(nodes: int, b: float):
    return build_model(
        PythonModelSpec(
            parameters={"a": A, "b": b, "d1": D1, "d2": D2},
            rhs="test_sparse_eigen:brusselator_rhs",
            jacobian="test_sparse_eigen:brusselator_jacobian",
            size=2 * nodes,
        )
    )


def uniform_state(nodes: int, b: float) -> np.ndarray:
    return np.concatenate([np.full(nodes, A), np.full(nodes, b / A)])


# The policy with the dense fallback of the eigenvalue search switched off.
NO_DENSE_FALLBACK = LinearAlgebraPolicy(dense_fallback_up_to=0)


def exact_leading(nodes: int, b: float, count: int = 6) -> np.ndarray:
    """The ``count`` rightmost eigenvalues from the closed-form 2 x 2 mode blocks."""
    k = np.arange(nodes)
    mu = 4.0 * (nodes - 1) ** 2 * np.sin(k * np.pi / (2.0 * (nodes - 1))) ** 2
    trace = (b - 1.0 - D1 * mu) + (-A * A - D2 * mu)
    det = (b - 1.0 - D1 * mu) * (-A * A - D2 * mu) + A * A * b
    root = np.sqrt((trace * trace / 4.0 - det).astype(complex))
    values = np.concatenate([trace / 2.0 + root, trace / 2.0 - root])
    return eigenvalues.sort_by_real_part(values)[:count]


# ---------------------------------------------------------------------------
# leading eigenvalues against the exact mode eigenvalues


@pytest.mark.parametrize("nodes", [200, 1000])  # 400 and 2000 states
@pytest.mark.parametrize("b", [1.9, 2.0, 2.1])
def test_leading_eigenvalues_match_the_exact_mode_eigenvalues(nodes, b):
    jacobian = brusselator_jacobian(uniform_state(nodes, b), {"a": A, "b": b, "d1": D1, "d2": D2})
    search = eigenvalues.search_leading_eigenvalues(jacobian, 6)
    assert search.found, search.message
    assert search.method == "shift-invert Arnoldi"  # not the dense fallback
    exact = exact_leading(nodes, b)
    # the rightmost pair is the uniform mode's, (b - 1 - a^2) / 2 +- i sqrt(...)
    assert exact[0].real == pytest.approx((b - 1.0 - A * A) / 2.0, abs=1e-15)
    np.testing.assert_allclose(search.values, exact, rtol=0.0, atol=1e-8)


def test_the_clustered_case_defeats_a_single_shift_at_the_origin():
    # Why several shifts: the 12 eigenvalues nearest the origin (what one
    # shift-invert run at 0 returns) miss the rightmost pair here.
    nodes, b = 200, 2.0
    jacobian = brusselator_jacobian(uniform_state(nodes, b), {"a": A, "b": b, "d1": D1, "d2": D2})
    run = eigenvalues._shift_invert_run(jacobian.tocsc(), 0.0, 12, 1.0)
    exact = exact_leading(nodes, b, 2)
    assert np.min(np.abs(run.values - exact[0])) > 1e-3
    np.testing.assert_allclose(eigenvalues.leading_eigenvalues(jacobian, 2), exact, atol=1e-8)


# ---------------------------------------------------------------------------
# a trace through the Hopf point of the uniform state


def trace_uniform_through_hopf(model, nodes: int):
    """The uniform state's branch for b in [1.97, 2.02] (also timed by bench_sparse.py)."""
    return trace_branch(
        model,
        "uniform",
        "b",
        model.defaults,
        uniform_state(nodes, 1.97),
        (1.97, 2.02),
        "increasing",
        StepSettings(initial=0.02, largest=0.5, max_points=40),
    )


def test_trace_through_the_hopf_point_of_the_uniform_state():
    nodes = 200  # 400 states
    model = brusselator_model(nodes, 1.97)
    branch = trace_uniform_through_hopf(model, nodes)
    assert branch.status == "done", branch.message
    assert np.all(np.isfinite(branch.eigenvalues))
    # every row: the uniform state, and the exact rightmost eigenvalues
    for row in (0, len(branch) - 1):
        b = branch.parameter_values[row]
        np.testing.assert_allclose(branch.states[row], uniform_state(nodes, b), atol=1e-10)
        np.testing.assert_allclose(branch.eigenvalues[row], exact_leading(nodes, b), atol=1e-8)
    below = branch.parameter_values < 2.0
    assert np.all(branch.unstable_count[below] == 0)
    assert np.all(branch.unstable_count[~below] == 2)
    (hopf,) = locate_events(model, branch)
    assert hopf.kind == "hopf"
    assert hopf.value == pytest.approx(1.0 + A * A, rel=1e-8)
    assert hopf.frequency == pytest.approx(A, rel=1e-8)


# ---------------------------------------------------------------------------
# when the eigenvalues cannot be computed


def test_a_branch_stops_where_its_eigenvalues_cannot_be_computed(monkeypatch):
    # ARPACK made to fail from b = 2 on (no dense fallback): the branch ends there
    # with status failed, says where and why, and keeps the points before it.
    nodes = 200
    model = brusselator_model(nodes, 1.9)
    real_run = eigenvalues._shift_invert_run
    failing_from = 2.0

    def run(matrix, sigma, nev, scale):
        # the uniform state's first diagonal entry is -(b + 1) + 2 b - 2 d1 / h^2
        b = matrix[0, 0] + 1.0 + 2.0 * D1 * (nodes - 1) ** 2
        if b >= failing_from:
            return eigenvalues._Run(np.empty(0, dtype=complex), complex(sigma), 0.0, False)
        return real_run(matrix, sigma, nev, scale)

    monkeypatch.setattr(eigenvalues, "_shift_invert_run", run)
    # tracking runs (ARPACK too) fail there as well; otherwise tracking alone would
    # see the clean pair crossing at b = 2 (rule 6 of eigen_tracking) and go on
    real_track = eigen_tracking._tracking_run

    def track_run(matrix, shift, nev, start):
        b = matrix[0, 0] + 1.0 + 2.0 * D1 * (nodes - 1) ** 2
        return None if b >= failing_from else real_track(matrix, shift, nev, start)

    monkeypatch.setattr(eigen_tracking, "_tracking_run", track_run)
    model = replace(model, linear_algebra=NO_DENSE_FALLBACK)
    branch = trace_branch(
        model,
        "uniform",
        "b",
        model.defaults,
        uniform_state(nodes, 1.9),
        (1.9, 2.1),
        "increasing",
        StepSettings(initial=0.02, largest=0.05, max_points=40),
    )
    assert branch.status == Status.FAILED
    assert EIGENVALUES_FAILED in branch.message
    assert "ARPACK did not converge" in branch.message
    assert "at b=" in branch.message and "|x|=" in branch.message
    assert len(branch) >= 2
    assert np.all(branch.parameter_values < failing_from)
    assert np.all(np.isfinite(branch.eigenvalues))
    stopped_at = float(branch.message.split("at b=")[1].split(" ")[0])
    assert stopped_at >= failing_from


def test_a_search_that_fails_says_so_with_nan_values(monkeypatch):
    nodes, b = 200, 2.0
    jacobian = brusselator_jacobian(uniform_state(nodes, b), {"a": A, "b": b, "d1": D1, "d2": D2})

    def no_convergence(operator, nev, which, tol, maxiter, retry=True):
        return np.empty(0, dtype=complex), False

    monkeypatch.setattr(eigenvalues, "_arpack", no_convergence)
    search = eigenvalues.search_leading_eigenvalues(jacobian, 6, NO_DENSE_FALLBACK)
    assert not search.found and search.message == "ARPACK did not converge"
    assert np.all(np.isnan(search.values)) and search.values.shape == (6,)
    # with the dense fallback allowed (400 states <= 800, the default), LAPACK decides
    rescued = eigenvalues.search_leading_eigenvalues(jacobian, 6)
    assert rescued.found and rescued.method == "dense LAPACK after Arnoldi"
    np.testing.assert_allclose(rescued.values, exact_leading(nodes, b), atol=1e-8)
