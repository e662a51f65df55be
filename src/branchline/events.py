"""Test functions along equilibrium branches, and location of events.

Test functions (evaluated at every accepted point, in this order):

- ``fold``: the parameter component of the unit tangent; changes sign at a
  turning point of the branch.
- ``hopf``: a smooth function that vanishes when a pair of eigenvalues sums to
  zero (determinant of the bialternate product 2A (.) I, i.e. prod_{i<j}
  (lambda_i + lambda_j)); neutral saddles (real lambda, -lambda) are rejected at
  location.
- ``branch_point``: the determinant of the bordered Jacobian [[f_x, f_p],
  [t^T]], which changes sign where two branches cross.
"""

from __future__ import annotations

import numpy as np

TEST_FUNCTIONS = ("fold", "hopf", "branch_point")


def equilibrium_tests(
    jac_x: np.ndarray, jac_p: np.ndarray, tangent: np.ndarray, eigenvalues: np.ndarray
) -> np.ndarray:
    """Test-function values at one point of an equilibrium branch.

    Parameters
    ----------
    jac_x : ndarray (n, n)
        df/dx at the point.
    jac_p : ndarray (n,)
        df/dp for the varied parameter.
    tangent : ndarray (n + 1,)
        Unit tangent (states, then parameter).
    eigenvalues : ndarray (n,) complex
        Eigenvalues of ``jac_x``.

    Returns
    -------
    ndarray (3,)
        Values in the order of :data:`TEST_FUNCTIONS`.
    """
    fold = tangent[-1]
    lam = eigenvalues
    n = lam.shape[0]
    if n < 2:
        hopf = 1.0
    else:
        i, j = np.triu_indices(n, 1)
        hopf = float(np.real(np.prod(lam[i] + lam[j])))
    bordered = np.empty((n + 1, n + 1))
    bordered[:n, :n] = jac_x
    bordered[:n, n] = jac_p
    bordered[n] = tangent
    branch = np.linalg.det(bordered)
    return np.array([fold, hopf, branch])
