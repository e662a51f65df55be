"""Putting the last point of a curve exactly on the edge of its parameter interval.

The case that needs the least-squares fallback: a chemostat at zero dilution, D = 0,
where s' = D (1 - s) - x s, x' = x s - D x (a dimensionless chemostat with a linear
uptake rate; Smith and Waltman, The Theory of the Chemostat, 1995, chapter 1). At
D = 0 every point with x s = 0 is an equilibrium: the washout line x = 0 and the line
s = 0 meet, the state Jacobian there is singular (rank one) and Newton's square
solve with the parameter fixed breaks down, although the edge point exists.
"""

from __future__ import annotations

import numpy as np
import pytest

from branchline.continuation import correctors
from branchline.continuation.correctors import EvaluationCounts, correct_on_edge


def chemostat(u):
    """G(u) and G_u(u) (2 x 3) for u = (s, x, D)."""
    s, x, dilution = u
    g = np.array([dilution * (1.0 - s) - x * s, x * s - dilution * x])
    jac = np.array([[-dilution - x, -s, 1.0 - s], [x, s - dilution, -x]])
    return g, jac


GUESS = np.array([0.02, 0.3, 0.01])  # near the line s = 0 of equilibria at D = 0


def test_square_newton_fails_on_the_singular_edge():
    # The premise of the fallback: with the parameter fixed at D = 0 the state
    # Jacobian [[-x, -s], [x, s]] is singular at every equilibrium of the line s = 0.
    result = correctors._newton_with_fixed(chemostat, GUESS, 0.0, -1, EvaluationCounts())
    assert not result.converged


def test_least_squares_fallback_lands_on_the_line_of_equilibria():
    result = correct_on_edge(chemostat, GUESS, 0.0, EvaluationCounts())
    assert result.converged, result.message
    s, x, dilution = result.solution
    assert dilution == 0.0  # exactly on the edge
    assert abs(x * s) < 1e-12  # an equilibrium of the D = 0 system
    assert np.linalg.norm(chemostat(result.solution)[0]) < 1e-12


def test_sparse_curves_skip_the_dense_fallback():
    result = correct_on_edge(chemostat, GUESS, 0.0, EvaluationCounts(), sparse=True)
    assert not result.converged and result.message


def test_a_failed_singular_value_decomposition_is_reported_not_raised(monkeypatch):
    def refuse(*args, **kwargs):
        raise np.linalg.LinAlgError("SVD did not converge")

    monkeypatch.setattr(np.linalg, "lstsq", refuse)
    result = correctors._least_squares_on_edge(chemostat, GUESS, 0.0, EvaluationCounts())
    assert not result.converged
    assert "least squares failed on the edge" in result.message


@pytest.mark.parametrize("edge", [0.25, 0.5])
def test_a_regular_edge_is_solved_by_newton_to_the_closed_form(edge):
    # For 0 < D < 1 the surviving equilibrium is s = D, x = 1 - D (from x s = D x and
    # D (1 - s) = x s): the same chapter.
    result = correct_on_edge(chemostat, np.array([edge + 0.05, 0.9 - edge, edge + 0.02]), edge,
                             EvaluationCounts())
    assert result.converged
    np.testing.assert_allclose(result.solution, [edge, 1.0 - edge, edge], rtol=0, atol=1e-13)
