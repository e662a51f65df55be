"""Test functions along equilibrium branches, and the brackets where they change sign.

Test functions (evaluated at every accepted point, in this order):

- ``fold``: the parameter component of the unit tangent; changes sign at a
  turning point of the branch.
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

:func:`find_brackets` turns the sign changes between consecutive rows into
:class:`Bracket` records with seeds for location (:mod:`branchline.events.location`);
Hopf brackets also come from matching complex eigenvalues between rows
(:mod:`branchline.events.eigenvalue_pairs`).
"""

from __future__ import annotations

import cmath
import math
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sps

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
    from_signed_log,
    signed_product,
    sparse_slogdet,
    zero_crossing_fraction,
)
from branchline.results.records import Branch

Array = np.ndarray

TEST_FUNCTIONS = ("fold", "hopf", "branch_point")

# Rows with up to this many eigenvalues use the full bialternate product
# (n (n - 1) / 2 factors); longer rows use the leading eigenvalues only.
BIALTERNATE_MAX_SIZE = 50

# Up to this many eigenvalues the pair product is a plain Python loop (faster
# than numpy's per-call overhead for a handful of factors).
PYTHON_PRODUCT_MAX_SIZE = 8
# An end row whose branch-point test is this small relative to its neighbour's
# sits on a zero (roundoff of either sign), e.g. a trace that landed on a state
# limit exactly where another branch crosses.
END_ZERO_RTOL = 1e-9


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
    upper = lam[lam.imag > COMPLEX_RTOL * float(np.max(np.abs(lam)))]
    if upper.shape[0] == 0:
        return 1.0
    unstable = int(np.count_nonzero(upper.real > 0.0))
    return (-1.0) ** unstable * float(np.min(np.abs(upper.real)))


def equilibrium_tests(
    jac_x: np.ndarray, jac_p: np.ndarray, tangent: np.ndarray, eigenvalues: np.ndarray
) -> np.ndarray:
    """Test-function values at one point of an equilibrium branch.

    Parameters
    ----------
    jac_x : ndarray (n, n) or scipy.sparse matrix
        df/dx at the point.
    jac_p : ndarray (n,)
        df/dp for the varied parameter.
    tangent : ndarray (n + 1,)
        Unit tangent (states, then parameter).
    eigenvalues : ndarray (r,) complex
        Eigenvalues of ``jac_x`` (all, or the r leading ones), NaN-padded allowed.

    Returns
    -------
    ndarray (3,)
        Values in the order of :data:`TEST_FUNCTIONS`. Only their signs, zeros
        and local smoothness carry meaning.
    """
    return np.array(
        [float(tangent[-1]), hopf_test(eigenvalues), bordered_determinant(jac_x, jac_p, tangent)]
    )


def bordered_determinant(jac_x: object, jac_p: Array, tangent: Array) -> float:
    """det [[f_x, f_p], [t^T]]: explicit for n <= 2, LAPACK LU, or sparse SuperLU.

    Overflow is avoided by falling back to log-determinants, clipped at exp(+-LOG_CLIP).
    """
    n = jac_x.shape[0]
    if hasattr(jac_x, "toarray"):
        if n > BIALTERNATE_MAX_SIZE:
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
    value = float(np.linalg.det(bordered))
    if math.isfinite(value) and value != 0.0:
        return value
    sign, log_det = np.linalg.slogdet(bordered)
    if sign == 0.0 or not math.isfinite(log_det):
        return 0.0
    return from_signed_log(float(sign), float(log_det))


# ----------------------------------------------------------------------------
# brackets


@dataclass(frozen=True)
class Bracket:
    """Two consecutive rows of a branch between which a test function changes sign."""

    kind: str
    row: int  # the first of the two rows
    fraction: float  # linear-interpolation estimate of the crossing within the step
    hint: dict = field(default_factory=dict)  # kind-specific seed information


def _sign_changes(values: Array) -> list[int]:
    signs = np.sign(values)
    rows = []
    for row in range(values.shape[0] - 1):
        a, b = signs[row], signs[row + 1]
        if a != b and not (a == 0 and row > 0):  # a zero row is counted once, from before
            if np.isfinite(values[row]) and np.isfinite(values[row + 1]):
                rows.append(row)
    return rows


def _vanishing_ends(values: Array) -> list[tuple[int, float]]:
    """(row, fraction) brackets for a trace that ends (or starts) on a zero of ``values``.

    A trace that lands on a state limit exactly where another branch crosses
    ends with a test value that is zero up to roundoff, of either sign: no
    sign change between rows, yet an event sits on the end point.
    """
    found = []
    if values.shape[0] < 2:
        return found
    for end, neighbour, row, fraction in ((-1, -2, values.shape[0] - 2, 1.0), (0, 1, 0, 0.0)):
        a, b = values[end], values[neighbour]
        if a != 0.0 and np.sign(a) == np.sign(b) and abs(a) <= END_ZERO_RTOL * abs(b):
            found.append((row, fraction))
    return found


def find_brackets(branch: Branch) -> list[Bracket]:
    """Every sign change of a test function between consecutive rows, with seeds."""
    tests = branch.test_values
    brackets: list[Bracket] = []
    for column, kind in ((0, "fold"), (2, "branch_point")):
        for row in _sign_changes(tests[:, column]):
            fraction = zero_crossing_fraction(tests[row, column], tests[row + 1, column])
            brackets.append(Bracket(kind, row, fraction))
    for row, fraction in _vanishing_ends(tests[:, 2]):
        brackets.append(Bracket("branch_point", row, fraction))
    hopf_rows = set(_sign_changes(tests[:, 1]))
    candidates = sorted(hopf_rows | set(complex_count_changes(branch.eigenvalues)))
    for row in candidates:
        crossings = hopf_crossings(branch.eigenvalues[row], branch.eigenvalues[row + 1])
        for fraction, omega, tentative in crossings:
            hint = {"omega": omega, "tentative": tentative}
            brackets.append(Bracket("hopf", row, fraction, hint))
        if row in hopf_rows and not crossings:
            # the test changed sign but no tracked complex pair crossed: a neutral
            # saddle (kappa < 0) unless a pair turned complex within the step
            for end in (row, row + 1):
                first, second = nearest_pair(branch.eigenvalues[end])
                kappa = (first * second).real
                if kappa > 0.0 and abs(first.imag) > 0.0:
                    hint = {"omega": math.sqrt(kappa), "tentative": True}
                    brackets.append(Bracket("hopf", row, 0.5, hint))
                    break
    return brackets
