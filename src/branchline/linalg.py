"""Shared numerical linear algebra: bordered solves, tangents, eigenvalues, norms.

Every curve branchline follows solves square systems bordered by one extra row,

    [ G_u ]          G_u : (N, N + 1) Jacobian of the curve's equations,
    [ c^T ] z = b    c   : (N + 1,) border row (a tangent or a unit vector),

so this module holds the one place where such a system is solved. Dense
Jacobians (numpy arrays) go straight to LAPACK through ``np.linalg.solve``;
scipy.sparse Jacobians are bordered as sparse matrices and factorized with
SuperLU (``scipy.sparse.linalg.splu``). The dispatch is automatic.

The dense path is the hot path of every continuation run with a small model,
so it avoids scipy calls, validation and temporary objects.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

Array = np.ndarray

# Newton for one equilibrium checks the condition number of dense Jacobians up
# to this size (an SVD, O(n^3): ~0.05 s at 400); larger ones rely on LAPACK's
# pivots and the finiteness of the step.
CONDITION_CHECK_LIMIT = 400

# Sparse matrices up to this size are converted to dense for their eigenvalues:
# LAPACK on 200 x 200 takes ~20 ms, less than a few Arnoldi runs, and gives all.
SPARSE_DENSE_LIMIT = 200

# How many eigenvalues to report for a sparse (large) Jacobian: enough to see
# a pair crossing the imaginary axis next to the rightmost real eigenvalue.
SPARSE_EIGEN_COUNT = 6


# numpy's LAPACK gufuncs behind np.linalg.solve / eigvals, called directly on the
# hot path: the public wrappers spend ~3-7 us per call on validation, which is
# most of the cost for a 3x3 system. They return NaN instead of raising for a
# singular matrix, so callers check finiteness (and run under
# np.errstate(invalid="ignore")). If a numpy release moves them, the public
# functions are used instead (checked once at import).
def _public_solve(matrix: Array, rhs: Array) -> Array:
    try:
        return np.linalg.solve(matrix, rhs)
    except np.linalg.LinAlgError:
        return np.full(rhs.shape, np.nan)


def _public_eigvals(matrix: Array) -> Array:
    try:
        return np.linalg.eigvals(matrix).astype(complex, copy=False)
    except np.linalg.LinAlgError:
        return np.full(matrix.shape[0], np.nan + 0j)


def _private_gufuncs():
    try:
        from numpy.linalg import _umath_linalg as gufuncs

        def solve(matrix: Array, rhs: Array) -> Array:
            return gufuncs.solve1(matrix, rhs, signature="dd->d")

        def eigvals(matrix: Array) -> Array:
            return gufuncs.eigvals(matrix, signature="d->D")

        probe = np.array([[2.0, 1.0], [0.0, 3.0]])
        with np.errstate(all="ignore"):
            good = np.allclose(solve(probe, np.array([3.0, 3.0])), [1.0, 1.0]) and np.allclose(
                np.sort(eigvals(probe).real), [2.0, 3.0]
            )
        return (solve, eigvals) if good else (_public_solve, _public_eigvals)
    except (ImportError, AttributeError, TypeError, ValueError):
        return _public_solve, _public_eigvals


solve_unchecked, eigvals_unchecked = _private_gufuncs()
solve_unchecked.__doc__ = """Dense solve without checks: NaN (not an exception) when singular."""
eigvals_unchecked.__doc__ = """Dense eigenvalues (complex) without checks or sorting."""


class SingularMatrixError(ArithmeticError):
    """A bordered system could not be solved (exactly singular or non-finite)."""


def is_sparse(matrix: object) -> bool:
    """True for scipy.sparse matrices and arrays."""
    if type(matrix) is np.ndarray:  # the common case, ~10x cheaper than issparse
        return False
    return sp.issparse(matrix)


def norm(vector: Array) -> float:
    """Euclidean norm of a real 1-D array (cheaper than ``np.linalg.norm`` for short vectors)."""
    return math.sqrt(float(np.dot(vector, vector)))


def bordered_matrix(jacobian: Array, border: Array) -> Array:
    """The square matrix [jacobian; border^T] (dense ndarray or scipy.sparse CSC).

    Parameters
    ----------
    jacobian : ndarray or sparse matrix, shape (N, N + 1)
    border : ndarray, shape (N + 1,)

    Returns
    -------
    ndarray or scipy.sparse.csc_matrix, shape (N + 1, N + 1)
    """
    if sp.issparse(jacobian):
        return sp.vstack([jacobian, sp.csr_matrix(border.reshape(1, -1))], format="csc")
    rows = jacobian.shape[0]
    square = np.empty((rows + 1, rows + 1))
    square[:rows] = jacobian
    square[rows] = border
    return square


def solve_square(matrix: object, rhs: Array) -> Array:
    """Solve ``matrix @ z = rhs`` for a dense or sparse square matrix.

    Raises
    ------
    SingularMatrixError
        When the matrix is exactly singular or the solution is not finite.
    """
    try:
        if sp.issparse(matrix):
            solution = spla.splu(sp.csc_matrix(matrix)).solve(rhs)
        else:
            solution = np.linalg.solve(matrix, rhs)
    except (np.linalg.LinAlgError, RuntimeError, ValueError) as exc:
        raise SingularMatrixError(str(exc)) from exc
    if not np.all(np.isfinite(solution)):
        raise SingularMatrixError("the solution of the linear system is not finite")
    return solution


def bordered_solve(jacobian: object, border: Array, rhs: Array) -> Array:
    """Solve the bordered system [jacobian; border^T] z = rhs.

    Parameters
    ----------
    jacobian : ndarray or sparse matrix, shape (N, N + 1)
    border : ndarray, shape (N + 1,)
    rhs : ndarray, shape (N + 1,)

    Returns
    -------
    ndarray, shape (N + 1,)
    """
    return solve_square(bordered_matrix(jacobian, border), rhs)


def tangent(jacobian: object, previous: Array) -> Array:
    """Unit null vector of an (N, N + 1) Jacobian, oriented like ``previous``.

    Solves [G_u; previous^T] z = e_{N+1} and normalizes z (Keller's
    pseudo-arclength tangent; Allgower & Georg, Introduction to Numerical
    Continuation Methods, section 2.1). Since previous . z = 1 > 0, the new
    tangent keeps the orientation of ``previous`` through turning points.

    Parameters
    ----------
    jacobian : ndarray or sparse matrix, shape (N, N + 1)
    previous : ndarray, shape (N + 1,)
        The tangent at a nearby point (any non-zero scale).

    Returns
    -------
    ndarray, shape (N + 1,), unit Euclidean norm.
    """
    rhs = np.zeros(previous.shape[0])
    rhs[-1] = 1.0
    z = bordered_solve(jacobian, previous, rhs)
    return z / norm(z)


def initial_tangent(jacobian: object, parameter_sign: float = 1.0) -> Array:
    """A unit null vector of an (N, N + 1) Jacobian with no previous tangent.

    Tries the border e_{N+1} first (the parameter direction, right away
    correct away from turning points), then the other unit vectors, and
    orients the result so its last (parameter) component has the sign of
    ``parameter_sign`` (when that component is not zero).

    Raises
    ------
    SingularMatrixError
        If no unit-vector border gives a solvable system (the Jacobian's rank
        is below N).
    """
    size = jacobian.shape[1]
    order = [size - 1, *range(size - 1)]
    for index in order:
        border = np.zeros(size)
        border[index] = 1.0
        try:
            z = bordered_solve(jacobian, border, border)
        except SingularMatrixError:
            continue
        z = z / norm(z)
        if z[-1] * parameter_sign < 0.0:
            z = -z
        return z
    raise SingularMatrixError("the Jacobian has no one-dimensional null space")


def sort_by_real_part(eigenvalues: Array) -> Array:
    """Eigenvalues sorted by decreasing real part (ties: decreasing imaginary part)."""
    order = np.lexsort((-eigenvalues.imag, -eigenvalues.real))
    return eigenvalues[order]


def dense_eigenvalues(matrix: Array) -> Array:
    """All eigenvalues of a dense square matrix, sorted by decreasing real part.

    Non-finite entries or a failed QR iteration give NaN eigenvalues.
    """
    with np.errstate(all="ignore"):
        values = eigvals_unchecked(np.asarray(matrix, dtype=float))
    return sort_eigenvalues(values)


def sort_eigenvalues(values: Array) -> Array:
    """Complex eigenvalues sorted by decreasing real part (cheap for n <= 2)."""
    size = values.shape[0]
    if size == 2:
        if values[1].real > values[0].real:
            return values[::-1].copy()
        return values
    if size > 2:
        return values[np.argsort(-values.real, kind="stable")]
    return values


def leading_eigenvalues(matrix: object, count: int = SPARSE_EIGEN_COUNT) -> Array:
    """The ``count`` eigenvalues with the largest real parts (large sparse: near the axis).

    Dense matrices, and sparse ones with at most ``SPARSE_DENSE_LIMIT`` rows:
    all eigenvalues from LAPACK, then the first ``count``. Larger sparse
    matrices: shift-invert Arnoldi at the origin (ARPACK through
    ``scipy.sparse.linalg.eigs`` on (A - 0 I)^-1, one sparse LU) for the
    ``ARNOLDI_OVERSAMPLING * count`` eigenvalues nearest the origin, sorted by
    decreasing real part and cut to ``count``. For the stiff spectra of
    discretized diffusion-reaction models the eigenvalues that cross the
    imaginary axis (at folds, branch points and Hopf points of slow modes) are
    among those nearest the origin; an eigenvalue with a large positive real
    part far from the origin can be missed (the Cayley transform would catch
    it but converges poorly on stiff spectra; measured, not used).

    Returns
    -------
    ndarray (count,) complex, sorted by decreasing real part, padded with NaN
    when ARPACK found fewer.
    """
    size = matrix.shape[0]
    if not sp.issparse(matrix) or size <= max(count + 2, SPARSE_DENSE_LIMIT):
        dense = matrix.toarray() if sp.issparse(matrix) else np.asarray(matrix)
        return dense_eigenvalues(dense)[:count]
    matrix = sp.csc_matrix(matrix, dtype=float)
    found = _arnoldi_shift_invert(matrix, ARNOLDI_OVERSAMPLING * count)
    found = _unique_eigenvalues(found[np.isfinite(found)].astype(complex))
    found = sort_by_real_part(found)[:count]
    if found.shape[0] < count:
        found = np.concatenate([found, np.full(count - found.shape[0], np.nan + 0j)])
    return found


# Eigenvalues computed near the origin per reported one: a margin so that the
# reported ones are not the outermost (least accurate) Ritz values.
ARNOLDI_OVERSAMPLING = 2
# Arnoldi settings for large sparse Jacobians: the eigenvalues only need a few
# digits (signs of real parts and test functions); the iteration cap keeps a
# hard case from stalling a trace (partial results are used).
ARNOLDI_TOL = 1e-10
ARNOLDI_MAX_ITERATIONS = 300


def _arpack(operator, count):
    """eigs(..., which="LM") values, or the converged part when ARPACK stops early."""
    size = operator.shape[0]
    k = min(count, size - 2)
    try:
        return spla.eigs(
            operator,
            k=k,
            which="LM",
            tol=ARNOLDI_TOL,
            maxiter=ARNOLDI_MAX_ITERATIONS,
            return_eigenvectors=False,
        )
    except spla.ArpackNoConvergence as exc:
        return np.asarray(exc.eigenvalues)
    except (spla.ArpackError, RuntimeError, ValueError):
        return np.empty(0, dtype=complex)


def _factor(matrix):
    try:
        return spla.splu(matrix)
    except RuntimeError:  # exactly singular
        return None


def _arnoldi_shift_invert(matrix, count) -> Array:
    identity = sp.identity(matrix.shape[0], format="csc")
    shift = 0.0
    lu = _factor(matrix)
    if lu is None:  # an exactly zero eigenvalue: shift off it a little
        shift = 1e-8 * max(float(abs(matrix).max()), 1.0)
        lu = _factor((matrix - shift * identity).tocsc())
        if lu is None:
            return np.empty(0, dtype=complex)
    operator = spla.LinearOperator(matrix.shape, matvec=lu.solve, dtype=float)
    mu = _arpack(operator, count)
    mu = mu[np.abs(mu) > 0]
    return shift + 1.0 / mu


def _unique_eigenvalues(values: Array, rtol: float = 1e-8) -> Array:
    """Drop eigenvalues found twice by different Arnoldi runs."""
    kept: list[complex] = []
    for value in values:
        if not any(abs(value - other) <= rtol * max(1.0, abs(other)) for other in kept):
            kept.append(complex(value))
    return np.array(kept, dtype=complex)


def count_by_half_plane(eigenvalues: Array, zero_tolerance: float) -> tuple[int, int, int]:
    """Counts of eigenvalues with positive, (near-)zero and negative real part.

    ``zero_tolerance`` is absolute: |Re lambda| <= zero_tolerance counts as zero.
    """
    real = eigenvalues.real
    positive = int(np.count_nonzero(real > zero_tolerance))
    negative = int(np.count_nonzero(real < -zero_tolerance))
    return positive, real.shape[0] - positive - negative, negative


# ----------------------------------------------------------------------------
# bordered squares, signs of determinants and long products without overflow

# Determinants and long products are returned as sign * exp(log|value|) with the
# logarithm clipped here, so that they never overflow to inf or underflow to 0
# (which would hide the sign, the only part test functions use).
LOG_CLIP = 600.0


def bordered_square(matrix: object, column: Array, row: Array, corner: float = 0.0) -> object:
    """The square matrix [[A, column], [row^T, corner]], dense or sparse like A.

    Parameters
    ----------
    matrix : ndarray or scipy.sparse matrix, shape (n, n)
    column : ndarray, shape (n,)
    row : ndarray, shape (n,) or (n + 1,)
        With n + 1 entries its last one is the corner (``corner`` is then unused).
    corner : float

    Returns
    -------
    ndarray or scipy.sparse.csc_matrix, shape (n + 1, n + 1)
    """
    n = matrix.shape[0]
    last = row[n] if row.shape[0] > n else corner
    if sp.issparse(matrix):
        return sp.bmat(
            [
                [matrix, sp.csc_matrix(np.reshape(column, (n, 1)))],
                [sp.csr_matrix(np.reshape(row[:n], (1, n))), np.array([[last]])],
            ],
            format="csc",
        )
    out = np.empty((n + 1, n + 1))
    out[:n, :n] = matrix
    out[:n, n] = column
    out[n, :n] = row[:n]
    out[n, n] = last
    return out


def from_signed_log(sign: float, log_magnitude: float) -> float:
    """sign * exp(log_magnitude), the exponent clipped to [-LOG_CLIP, LOG_CLIP]."""
    return sign * math.exp(min(max(log_magnitude, -LOG_CLIP), LOG_CLIP))


def signed_product(factors: Array) -> float:
    """The sign of prod(factors).real times exp(sum log|factors|), clipped; 0 if a factor is.

    For products of many complex factors (such as the bialternate product's
    determinant) whose plain product overflows or underflows.
    """
    magnitudes = np.abs(factors)
    if not np.all(magnitudes > 0.0):
        return 0.0
    phase = np.prod(factors / magnitudes)
    sign = 1.0 if phase.real >= 0.0 else -1.0
    return from_signed_log(sign, float(np.sum(np.log(magnitudes))))


def sparse_slogdet(matrix: object) -> tuple[float, float]:
    """(sign, log|det|) of a square scipy.sparse CSC matrix, from its SuperLU factors.

    Like ``np.linalg.slogdet``: (0.0, -inf) when the matrix is exactly singular.
    """
    try:
        lu = spla.splu(matrix)
    except RuntimeError:
        return 0.0, -math.inf
    diagonal = lu.U.diagonal()
    if np.any(diagonal == 0.0):
        return 0.0, -math.inf
    sign = float(np.prod(np.sign(diagonal)))
    sign *= _permutation_sign(lu.perm_r) * _permutation_sign(lu.perm_c)
    return sign, float(np.sum(np.log(np.abs(diagonal))))


def _permutation_sign(permutation: Array) -> float:
    """+1 or -1: the parity of a permutation given as an index array (cycle count)."""
    seen = np.zeros(permutation.shape[0], dtype=bool)
    sign = 1.0
    for start in range(permutation.shape[0]):
        if seen[start]:
            continue
        length = 0
        index = start
        while not seen[index]:
            seen[index] = True
            index = permutation[index]
            length += 1
        if length % 2 == 0:
            sign = -sign
    return sign


def zero_crossing_fraction(before: float, after: float) -> float:
    """Where in [0, 1] the straight line from ``before`` to ``after`` crosses zero (0.5 if flat)."""
    if before == after:
        return 0.5
    return float(np.clip(before / (before - after), 0.0, 1.0))
