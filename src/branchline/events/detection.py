"""The equilibrium branch's test functions, and its Hopf brackets from eigenvalue pairs.

The test functions an equilibrium-branch problem evaluates at every accepted
point (:mod:`branchline.problems.equilibrium_branch` names them):

- ``hopf``: a function that vanishes when a pair of eigenvalues sums to zero:
  the determinant of the bialternate product 2A (.) I, i.e.
  prod_{i<j} (lambda_i + lambda_j) (Kuznetsov, Elements of Applied Bifurcation
  Theory, section 10.2.2), for up to ``BIALTERNATE_MAX_SIZE`` eigenvalues, and
  for longer rows (large models) a function of the leading eigenvalues only
  (see :func:`hopf_test`). Neutral saddles (real lambda, -lambda) change its
  sign too and are rejected at location.
- ``branch_point``: the determinant of the bordered Jacobian [[f_x, f_p], [t^T]],
  which changes sign where two branches cross (Allgower & Georg, Introduction
  to Numerical Continuation Methods, section 8.1).

(The ``fold`` test, the tangent's parameter component, needs no code.)
:func:`hopf_brackets` turns sign changes of the Hopf test, and complex pairs
crossing the imaginary axis between rows (:mod:`branchline.events.eigenvalue_pairs`,
two pairs crossing in one step leave the test's sign unchanged), into
brackets with a frequency seed for location (:mod:`branchline.events.location`).
"""

from __future__ import annotations

import cmath
import math

import numpy as np
import scipy.sparse as sps

from branchline.events.brackets import Bracket, sign_changes
from branchline.events.eigenvalue_pairs import (
    COMPLEX_RTOL,
    complex_count_changes,
    hopf_crossings,
    nearest_pair,
    pair_indices,
)
from branchline.numerics.linalg import (
    bordered_matrix,
    bordered_square,
    determinant_unchecked,
    from_signed_log,
    signed_product,
    sparse_slogdet,
)
from branchline.numerics.policy import DEFAULT, LinearAlgebraPolicy
from branchline.vocabulary import EventKind

Array = np.ndarray

# Rows with up to this many eigenvalues use the full bialternate product
# (n (n - 1) / 2 factors); longer rows use the leading eigenvalues only.
BIALTERNATE_MAX_SIZE = 50

# Up to this many eigenvalues the pair product is a plain Python loop (faster
# than numpy's per-call overhead for a handful of factors).
PYTHON_PRODUCT_MAX_SIZE = 8


# ----------------------------------------------------------------------------
# test functions (hot path)


def hopf_test(eigenvalues: Array) -> float:
    """The Hopf test function from a row of eigenvalues (sorted by decreasing real part).

    Up to ``BIALTERNATE_MAX_SIZE`` eigenvalues: prod_{i<j} (lambda_i + lambda_j),
    the determinant of the bialternate product 2A (.) I (smooth in the
    Jacobian's entries, so the engine's step control can extrapolate it; its
    magnitude is clipped at exp(+-LOG_CLIP) instead of overflowing). Longer rows
    (large models): (-1)^(number of complex pairs with positive real part) times
    the smallest |Re lambda| over complex pairs, which is continuous through a
    Hopf crossing and blind to eigenvalues entering or leaving the row.
    """
    values = eigenvalues.tolist()
    count = len(values)
    if count > BIALTERNATE_MAX_SIZE:
        return _leading_pairs_test(np.asarray(eigenvalues))
    lam = np.asarray(eigenvalues)
    if count <= PYTHON_PRODUCT_MAX_SIZE:
        product = 1.0 + 0.0j
        for i in range(count - 1):
            first = values[i]
            for j in range(i + 1, count):
                product *= first + values[j]
    else:
        i, j = pair_indices(count)
        with np.errstate(all="ignore"):
            product = complex(np.prod(lam[i] + lam[j]))
    if cmath.isfinite(product) and product != 0.0:
        return product.real
    lam = lam[np.isfinite(lam)]
    if lam.shape[0] < 2:
        return 1.0
    i, j = pair_indices(lam.shape[0])
    return signed_product(lam[i] + lam[j])


def _leading_pairs_test(eigenvalues: Array) -> float:
    lam = eigenvalues[np.isfinite(eigenvalues)]
    if lam.shape[0] == 0:
        return 1.0
    upper = lam[lam.imag > COMPLEX_RTOL * float(np.abs(lam).max())]
    if upper.shape[0] == 0:
        return 1.0
    unstable = int(np.count_nonzero(upper.real > 0.0))
    return (-1.0) ** unstable * float(np.abs(upper.real).min())


def bordered_determinant(
    jac_x: object, jac_p: Array, tangent: Array, policy: LinearAlgebraPolicy = DEFAULT
) -> float:
    """det [[f_x, f_p], [t^T]]: explicit for n <= 2, LAPACK LU, or sparse SuperLU.

    A sparse ``jac_x`` is made dense up to ``policy.determinant_dense_up_to`` states.
    Overflow is avoided by falling back to log-determinants, clipped at exp(+-LOG_CLIP).
    """
    n = jac_x.shape[0]
    if hasattr(jac_x, "toarray"):
        if n > policy.determinant_dense_up_to:
            column = sps.csc_matrix(np.asarray(jac_p, dtype=float).reshape(-1, 1))
            matrix = bordered_matrix(sps.hstack([jac_x, column]), np.asarray(tangent, dtype=float))
            sign, log_det = sparse_slogdet(matrix)
            return 0.0 if sign == 0.0 else from_signed_log(sign, log_det)
        jac_x = jac_x.toarray()
    if n == 1:
        return float(jac_x[0, 0] * tangent[1] - jac_p[0] * tangent[0])
    if n == 2:
        (a, b), (c, d) = jac_x.tolist()
        e, f = float(jac_p[0]), float(jac_p[1])
        g, h, i = tangent.tolist()
        return a * (d * i - f * h) - b * (c * i - f * g) + e * (c * h - d * g)
    bordered = bordered_square(jac_x, jac_p, tangent)
    value = float(determinant_unchecked(bordered))
    if math.isfinite(value) and value != 0.0:
        return value
    sign, log_det = np.linalg.slogdet(bordered)
    if sign == 0.0 or not math.isfinite(log_det):
        return 0.0
    return from_signed_log(float(sign), float(log_det))


# ----------------------------------------------------------------------------
# Hopf brackets


def hopf_brackets(hopf_values: Array, eigenvalues: Array) -> list[Bracket]:
    """Hopf brackets along a curve of equilibria, with a frequency seed in ``hint``.

    Parameters
    ----------
    hopf_values : ndarray (k,)
        The ``hopf`` test per row.
    eigenvalues : ndarray (k, r) complex
        The rows' eigenvalues, sorted by decreasing real part.

    Each complex pair crossing the imaginary axis between two rows is a bracket
    (``hint``: ``omega``, and ``tentative`` when inferred from counts only). A
    sign change of the test with no pair crossing is a neutral saddle, unless a
    pair turned complex within the step (then one tentative bracket).
    """
    brackets: list[Bracket] = []
    hopf_rows = set(sign_changes(hopf_values))
    candidates = sorted(hopf_rows | set(complex_count_changes(eigenvalues)))
    for row in candidates:
        crossings = hopf_crossings(eigenvalues[row], eigenvalues[row + 1])
        for fraction, omega, tentative in crossings:
            hint = {"omega": omega, "tentative": tentative}
            brackets.append(Bracket(EventKind.HOPF, row, fraction, hint))
        if row in hopf_rows and not crossings:
            # the test changed sign but no tracked complex pair crossed: a neutral
            # saddle (kappa < 0) unless a pair turned complex within the step
            for end in (row, row + 1):
                first, second = nearest_pair(eigenvalues[end])
                kappa = (first * second).real
                if kappa > 0.0 and abs(first.imag) > 0.0:
                    hint = {"omega": math.sqrt(kappa), "tentative": True}
                    brackets.append(Bracket(EventKind.HOPF, row, 0.5, hint))
                    break
    return brackets
