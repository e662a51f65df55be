"""Shared numerical linear algebra: bordered solves, tangents, dense or sparse solves, norms.

Every curve branchline follows solves square systems bordered by one extra row,

    [ G_u ]          G_u : (N, N + 1) Jacobian of the curve's equations,
    [ c^T ] z = b    c   : (N + 1,) border row (a tangent or a unit vector),

so this module holds the one place where such a system is solved. Dense
Jacobians (numpy arrays) go straight to LAPACK through ``np.linalg.solve``;
scipy.sparse Jacobians are bordered as sparse matrices and factorized with
SuperLU (``scipy.sparse.linalg.splu``). The dispatch is automatic. Eigenvalues
are in :mod:`branchline.numerics.eigenvalues`; which models get sparse methods is
decided by :mod:`branchline.numerics.policy`.

The dense path is the hot path of every continuation run with a small model,
so it avoids scipy calls, validation and temporary objects.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

Array = np.ndarray


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

        def inverse(matrix: Array) -> Array:
            return gufuncs.inv(matrix, signature="d->d")

        def determinant(matrix: Array) -> float:
            return gufuncs.det(matrix, signature="d->d")

        probe = np.array([[2.0, 1.0], [0.0, 3.0]])
        with np.errstate(all="ignore"):
            good = np.allclose(solve(probe, np.array([3.0, 3.0])), [1.0, 1.0]) and np.allclose(
                np.sort(eigvals(probe).real), [2.0, 3.0]
            )
            good = good and np.allclose(inverse(probe) @ probe, np.eye(2))
            good = good and bool(np.isclose(determinant(probe), 6.0))
        if good:
            return solve, eigvals, inverse, determinant
        return _PUBLIC
    except (ImportError, AttributeError, TypeError, ValueError):
        return _PUBLIC


def _public_determinant(matrix: Array) -> float:
    return np.linalg.det(matrix)


def _public_inverse(matrix: Array) -> Array:
    try:
        return np.linalg.inv(matrix)
    except np.linalg.LinAlgError:
        return np.full(matrix.shape, np.nan)


_PUBLIC = (_public_solve, _public_eigvals, _public_inverse, _public_determinant)
solve_unchecked, eigvals_unchecked, inverse_unchecked, determinant_unchecked = _private_gufuncs()
determinant_unchecked.__doc__ = """Dense determinant (float) without checks, the same value as
``np.linalg.det`` (0.0 for a singular matrix, inf or NaN on overflow or non-finite input)."""
inverse_unchecked.__doc__ = """Dense inverse without checks: NaN (not an exception) when singular."""
solve_unchecked.__doc__ = """Dense solve without checks: NaN (not an exception) when singular."""
eigvals_unchecked.__doc__ = """Dense eigenvalues (complex) without checks or sorting."""


# SuperLU keeps a diagonal pivot unless it is below this fraction of its column's
# largest entry (threshold partial pivoting). The sparse matrices solved here are
# bordered, [[A, B], [C^T, D]] with dense border rows: with strict partial
# pivoting (1.0, SuperLU's default) a border row whose entries grow during the
# elimination (near a fold of a chain of diffusively coupled cells they accumulate
# along the null vector) is taken as pivot and fills the rest of the factors in
# completely (measured on a 4,000-state chain at its fold with random borders:
# 8 million nonzeros and 0.75 s per LU, against 24,000 and 2 ms at 1e-6; 1e-3 still
# filled in with random borders and took 4.3 s against 2.4 s at 1e-6 for the fold
# curve of a 2,000-state chain). Newton's residual is exact whatever the pivots, so
# a little growth in the factors costs at most an iteration.
BORDERED_PIVOT_THRESHOLD = 1e-6


# A solve from factors with preferred diagonal pivots is accepted when its residual is
# below this fraction of |M| |z| + |rhs| (max norms), after at most
# REFINEMENT_STEPS steps of iterative refinement (Higham, Accuracy and Stability of
# Numerical Algorithms, 2nd ed., chapter 12); else the matrix is factorized again
# with strict partial pivoting (which may fill in: at 8,000 states, 30 million
# nonzeros). 1e-10: the Newton corrections of an 8,000-state fold curve ended at
# 2e-12 to 4e-11 after refinement, ample for a Newton step, while strict pivoting
# there filled the factors in to a gigabyte.
PIVOT_GROWTH_CHECK = 1e-10
REFINEMENT_STEPS = 2


def sparse_lu(matrix: object) -> object:
    """SuperLU factors of a square sparse (bordered) matrix with diagonal pivots preferred
    (:data:`BORDERED_PIVOT_THRESHOLD`). Raises RuntimeError when exactly singular."""
    return spla.splu(sp.csc_matrix(matrix), diag_pivot_thresh=BORDERED_PIVOT_THRESHOLD)


def refined_solve(lu: object, matrix: object, rhs: Array, trans: str = "N") -> tuple[Array, bool]:
    """(z, accurate): z solves op(matrix) z = rhs from the factors ``lu`` of ``matrix``
    (op per SuperLU's ``trans``: "N", "T" or "H"), refined until its residual passes
    :data:`PIVOT_GROWTH_CHECK` or :data:`REFINEMENT_STEPS` are spent."""
    operator = {"N": matrix, "T": matrix.T, "H": matrix.conj().T}[trans]
    with np.errstate(all="ignore"):
        z = lu.solve(rhs, trans=trans)
        size = float(np.max(np.abs(matrix.data))) if matrix.nnz else 0.0
        for step in range(REFINEMENT_STEPS + 1):
            if not np.all(np.isfinite(z)):
                return z, False
            residual = rhs - operator @ z
            allowed = PIVOT_GROWTH_CHECK * (size * float(np.max(np.abs(z))) + float(np.max(np.abs(rhs))))
            if float(np.max(np.abs(residual))) <= allowed:
                return z, True
            if step < REFINEMENT_STEPS:
                z = z + lu.solve(residual, trans=trans)
    return z, False


def sparse_factor_solve(matrix: object, rhs: Array) -> tuple[object, Array]:
    """(factors, z) with matrix z = rhs: :func:`sparse_lu` and :func:`refined_solve`, strict
    partial pivoting when that is not accurate. Raises RuntimeError when singular."""
    matrix = sp.csc_matrix(matrix)
    lu = sparse_lu(matrix)
    z, accurate = refined_solve(lu, matrix, rhs)
    if accurate:
        return lu, z
    lu = spla.splu(matrix)
    return lu, lu.solve(rhs)


class SingularMatrixError(ArithmeticError):
    """A bordered system could not be solved (exactly singular or non-finite)."""


def is_sparse(matrix: object) -> bool:
    """True for scipy.sparse matrices and arrays."""
    if type(matrix) is np.ndarray:  # the common case, ~10x cheaper than issparse
        return False
    return sp.issparse(matrix)


def dense(matrix: object) -> Array:
    """A matrix as a dense ndarray (scipy.sparse input is converted)."""
    return matrix.toarray() if sp.issparse(matrix) else np.asarray(matrix)


def solve(matrix: object, rhs: Array) -> Array:
    """matrix^-1 rhs for a dense or sparse square matrix; ``rhs`` may be complex.

    Raises ``np.linalg.LinAlgError`` when the matrix is singular.
    """
    if not sp.issparse(matrix):
        return np.linalg.solve(matrix, rhs)
    matrix = sp.csc_matrix(matrix)
    try:
        if np.iscomplexobj(rhs) and not np.iscomplexobj(matrix.data):
            real, imag = np.ascontiguousarray(rhs.real), np.ascontiguousarray(rhs.imag)
            factor, first = sparse_factor_solve(matrix, real)
            second, accurate = refined_solve(factor, matrix, imag)
            if not accurate:
                factor = spla.splu(matrix)
                first, second = factor.solve(real), factor.solve(imag)
            return first + 1j * second
        return sparse_factor_solve(matrix, rhs)[1]
    except RuntimeError as exc:  # SuperLU: "Factor is exactly singular"
        raise np.linalg.LinAlgError(str(exc)) from exc


def identity(size: int, like: object) -> object:
    """The identity, sparse when ``like`` is."""
    return sp.identity(size, format="csc") if sp.issparse(like) else np.eye(size)


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
        return append_row(jacobian, border)
    rows = jacobian.shape[0]
    square = np.empty((rows + 1, rows + 1))
    square[:rows] = jacobian
    square[rows] = border
    return square


def append_row(matrix: object, row: Array) -> object:
    """[matrix; row^T] as CSC, the dense ``row`` stored in full (scipy.sparse ``matrix``).

    Assembled from the CSC arrays directly (one new entry at the end of each
    column): ``sp.vstack`` costs ten times more on large Jacobians (measured ~20 ms
    at 20,000 states), and a detour through CSR two format conversions, every point.
    """
    csc = sp.csc_matrix(matrix)
    csc.sum_duplicates()
    rows, columns = csc.shape
    row = np.asarray(row, dtype=np.result_type(csc.dtype, np.asarray(row).dtype)).ravel()
    indptr = (csc.indptr + np.arange(columns + 1)).astype(np.int64)
    last = indptr[1:] - 1  # the new entry closes each column
    indices = np.empty(csc.nnz + columns, dtype=np.int64)
    data = np.empty(csc.nnz + columns, dtype=row.dtype)
    old = np.ones(csc.nnz + columns, dtype=bool)
    old[last] = False
    indices[old] = csc.indices
    data[old] = csc.data
    indices[last] = rows
    data[last] = row
    return sp.csc_matrix((data, indices, indptr), shape=(rows + 1, columns))


def split_last_column(matrix: object) -> tuple[object, Array]:
    """(matrix[:, :-1] as CSC, its last column as a dense array) of a CSC ``matrix``
    without a format conversion (the first shares the arrays of ``matrix``)."""
    csc = matrix if sp.isspmatrix_csc(matrix) else sp.csc_matrix(matrix)
    rows, columns = csc.shape
    end = csc.indptr[columns - 1]
    head = sp.csc_matrix(
        (csc.data[:end], csc.indices[:end], csc.indptr[:columns]), shape=(rows, columns - 1)
    )
    last = np.zeros(rows, dtype=csc.dtype)
    np.add.at(last, csc.indices[end:], csc.data[end:])
    return head, last


def append_column(matrix: object, column: Array) -> object:
    """[matrix, column] as CSC, the dense ``column`` stored in full (scipy.sparse ``matrix``)."""
    csc = sp.csc_matrix(matrix)
    csc.sum_duplicates()
    rows, columns = csc.shape
    column = np.asarray(column).ravel()
    indptr = np.append(csc.indptr, csc.indptr[-1] + rows).astype(np.int64)
    indices = np.concatenate([csc.indices, np.arange(rows)]).astype(np.int64)
    data = np.concatenate([csc.data, column.astype(np.result_type(csc.dtype, column.dtype))])
    return sp.csc_matrix((data, indices, indptr), shape=(rows, columns + 1))


def solve_square(matrix: object, rhs: Array) -> Array:
    """Solve ``matrix @ z = rhs`` for a dense or sparse square matrix.

    Raises
    ------
    SingularMatrixError
        When the matrix is exactly singular or the solution is not finite.
    """
    try:
        if sp.issparse(matrix):
            solution = sparse_factor_solve(matrix, rhs)[1]
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
    last = np.zeros(size)
    last[-1] = 1.0  # [G_u; b^T] z = e_{N+1}: G_u z = 0 and b . z = 1, whatever the border b
    for index in order:
        border = np.zeros(size)
        border[index] = 1.0
        try:
            z = bordered_solve(jacobian, border, last)
        except SingularMatrixError:
            continue
        z = z / norm(z)
        if z[-1] * parameter_sign < 0.0:
            z = -z
        return z
    raise SingularMatrixError("the Jacobian has no one-dimensional null space")


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
    return lu_slogdet(lu)


def bordered_factor_solve(square: object) -> tuple[object, Array]:
    """(SuperLU factors, z) of a sparse bordered square matrix with z solving square z = e_last.

    Raises
    ------
    SingularMatrixError
        When the matrix is exactly singular.
    """
    rhs = np.zeros(square.shape[0])
    rhs[-1] = 1.0
    try:
        return sparse_factor_solve(square, rhs)
    except RuntimeError as exc:
        raise SingularMatrixError(str(exc)) from exc


# Column orderings of the last few sparsity patterns factorized (key: shape, nnz and
# a hash of the pattern; the pattern itself is kept to rule out collisions). Along a
# branch the Jacobian's pattern stays the same, and SuperLU's default ordering
# (COLAMD) depends on the pattern only, yet costs about half of each factorization
# at 20,000 states (measured: 5.8 ms with, 3.7 ms without). The first matrix of a
# pattern is factorized as usual; later ones are permuted by its ordering and
# factorized without reordering: the same factors SuperLU's own call would compute
# (its partial pivoting still runs on the values).
_ORDERINGS: dict[tuple, tuple[Array, Array, Array]] = {}
_ORDERINGS_KEPT = 4


class PermutedFactors:
    """SuperLU factors of A P (P a column permutation, ``order``) that solve with A.

    ``solve``, ``perm_r``, ``perm_c``, ``L``, ``U`` and ``shape`` as scipy's SuperLU
    object; ``perm_c`` is the composed column permutation (parity included), so
    :func:`lu_slogdet` reads det A from it.
    """

    def __init__(self, factors: object, order: Array) -> None:
        self.factors = factors
        self.order = order
        self.shape = factors.shape
        self.perm_r = factors.perm_r
        self.perm_c = order[factors.perm_c]
        self.nnz = factors.nnz

    # SuperLU builds L and U as new sparse matrices at each access: only on demand
    # (upper-case names as SuperLU's own)
    @property
    def L(self) -> object:
        return self.factors.L

    @property
    def U(self) -> object:
        return self.factors.U

    def solve(self, rhs: Array, trans: str = "N") -> Array:
        # A P y = b  =>  x = P y;   (A P)^T y = P^T A^T y = b  =>  A^T x = b, x = P y
        if trans == "N":
            y = self.factors.solve(rhs)
            x = np.empty_like(y)
            x[self.order] = y
            return x
        permuted = rhs[self.order]
        return self.factors.solve(permuted, trans=trans)


def factor_reusing_ordering(matrix: object) -> object:
    """SuperLU factors of a square CSC ``matrix``, reusing the column ordering of the
    last matrix with the same sparsity pattern (see ``_ORDERINGS``).

    Returns a scipy SuperLU object (first matrix of a pattern) or a
    :class:`PermutedFactors` with the same interface. Raises RuntimeError when
    the matrix is exactly singular (as ``splu``).
    """
    matrix.sort_indices()
    key = (
        matrix.shape,
        matrix.nnz,
        hash(matrix.indptr.tobytes()),
        hash(matrix.indices.tobytes()),
    )
    known = _ORDERINGS.get(key)
    if known is not None and np.array_equal(known[0], matrix.indptr) and np.array_equal(
        known[1], matrix.indices
    ):
        order = known[2]
        return PermutedFactors(spla.splu(matrix[:, order], permc_spec="NATURAL"), order)
    factors = spla.splu(matrix)
    if len(_ORDERINGS) >= _ORDERINGS_KEPT:
        try:
            _ORDERINGS.pop(next(iter(_ORDERINGS)), None)
        except (RuntimeError, StopIteration):  # another thread changed the cache
            pass
    # SuperLU's Pr A Pc = L U with (A Pc)[:, j] = A[:, argsort(perm_c)[j]]
    order = np.argsort(np.asarray(factors.perm_c))
    _ORDERINGS[key] = (matrix.indptr.copy(), matrix.indices.copy(), order)
    return factors


# Block elimination of a bordered sparse system: accepted when the tangent's
# residual |M z - e_last| is below this multiple of eps |M| |z| (after one step of
# iterative refinement), else the bordered matrix itself is factorized.
BLOCK_RESIDUAL_FACTOR = 1e3
# ... and when A is not much worse conditioned than M: the ratio of the lower bounds
# |A| |A^-1 c| / |c| <= cond(A) and |M| |z| <= cond(M) (infinity norms) stays below
# this. Near a fold A is nearly singular while M is not, and every solve through A
# (the corrector's too, not only the tangent's) would lose that many more digits.
BLOCK_GROWTH_LIMIT = 1e6


class BlockBorderedFactors:
    """Solves with M = [[A, c], [r^T, d]] (A sparse n x n) from SuperLU factors of A
    alone: block elimination with the Schur complement s = d - r^T A^-1 c (Keller's
    bordering algorithm; Govaerts, Numerical Methods for Bifurcations of Dynamical
    Equilibria, SIAM 2000, chapter 3, on its stability: the caller checks the
    residual and falls back to factorizing M when A is too ill-conditioned).

    ``solve(rhs)`` as a SuperLU object (``trans`` "N" only); ``slogdet()`` gives
    (sign, log|det M|) = det A * s.
    """

    def __init__(self, factors: object, column: Array, row: Array, corner: float) -> None:
        self.factors = factors
        self.row = row
        self.w = factors.solve(column)
        self.schur = float(corner - row.dot(self.w))
        self.shape = (column.shape[0] + 1, column.shape[0] + 1)

    def solve(self, rhs: Array, trans: str = "N") -> Array:
        if trans != "N":
            raise NotImplementedError("block bordered factors solve with M only")
        n = self.shape[0] - 1
        head = self.factors.solve(rhs[:n])
        last = (rhs[n] - self.row.dot(head)) / self.schur
        out = np.empty(n + 1, dtype=np.result_type(head, last))
        out[:n] = head - self.w * last
        out[n] = last
        return out

    def slogdet(self) -> tuple[float, float]:
        sign, log_det = lu_slogdet(self.factors)
        if sign == 0.0 or self.schur == 0.0 or not math.isfinite(self.schur):
            return 0.0, -math.inf
        return sign * math.copysign(1.0, self.schur), log_det + math.log(abs(self.schur))


def factor_bordered(jacobian: object, border: Array) -> tuple[object, Array]:
    """(factors, z) with z solving [jacobian; border^T] z = e_last, jacobian sparse (N, N + 1).

    Block elimination on the LU of jacobian[:, :N] first (no dense row or column
    in the factorization: measured 4.5 against 7.9 ms at 20,000 states), checked by
    the residual of z and one step of iterative refinement; the bordered matrix's
    own LU when that check fails or jacobian[:, :N] is singular (at a fold).
    The factors solve with the bordered matrix (``solve``) and give its
    determinant through :func:`lu_slogdet`.

    Raises
    ------
    SingularMatrixError
        When the bordered matrix is exactly singular.
    """
    square, column = split_last_column(jacobian)
    border = np.asarray(border, dtype=float)
    n = square.shape[0]
    try:
        factors = BlockBorderedFactors(
            factor_reusing_ordering(square.copy()), column, border[:n], float(border[n])
        )
    except RuntimeError:
        factors = None
    if factors is not None and factors.schur != 0.0 and math.isfinite(factors.schur):
        rhs = np.zeros(n + 1)
        rhs[-1] = 1.0
        z = factors.solve(rhs)
        rows = np.bincount(square.indices, weights=np.abs(square.data), minlength=n)
        scale = float(max(np.max(rows + np.abs(column)), np.sum(np.abs(border))))
        w_size, c_size = float(np.max(np.abs(factors.w))), float(np.max(np.abs(column)))
        z_size = float(np.max(np.abs(z)))
        growth = float(np.max(rows)) * w_size / (c_size * scale * z_size) if c_size else 1.0
        if not growth <= BLOCK_GROWTH_LIMIT:
            return bordered_factor_solve(bordered_matrix(jacobian, border))
        for _ in range(2):
            residual = _bordered_residual(square, column, border, z, rhs)
            size = float(np.max(np.abs(z)))
            if not math.isfinite(size):
                break
            if float(np.max(np.abs(residual))) <= BLOCK_RESIDUAL_FACTOR * EPS * scale * size:
                return factors, z
            z = z - factors.solve(residual)
    return bordered_factor_solve(bordered_matrix(jacobian, border))


EPS = float(np.finfo(float).eps)


def _bordered_residual(square, column: Array, border: Array, z: Array, rhs: Array) -> Array:
    n = square.shape[0]
    out = np.empty(n + 1)
    out[:n] = square @ z[:n] + column * z[n] - rhs[:n]
    out[n] = border.dot(z) - rhs[n]
    return out


def lu_slogdet(lu: object) -> tuple[float, float]:
    """(sign, log|det|) of the matrix a SuperLU object factorized ((0.0, -inf) if singular)."""
    if hasattr(lu, "slogdet"):
        return lu.slogdet()
    diagonal = lu.U.diagonal()
    if np.any(diagonal == 0.0):
        return 0.0, -math.inf
    sign = float(np.prod(np.sign(diagonal)))
    sign *= _permutation_sign(lu.perm_r) * _permutation_sign(lu.perm_c)
    return sign, float(np.sum(np.log(np.abs(diagonal))))


# The parities of the last few permutations met (key: size and a hash of the bytes;
# the array is kept to rule out collisions). Along a traced branch SuperLU's column
# ordering depends on the structure only and its row pivots rarely change, so the
# same permutations come back at every point: the lookup costs a hash and a
# comparison instead of the O(n log n) cycle count (measured about 1 ms at 20,000
# states, twice per point).
_PARITIES: dict[tuple[int, int], tuple[Array, float]] = {}
_PARITIES_KEPT = 4


def _permutation_sign(permutation: Array) -> float:
    """+1 or -1: the parity of a permutation given as an index array (memoized)."""
    permutation = np.asarray(permutation, dtype=np.int64)
    key = (permutation.shape[0], hash(permutation.tobytes()))
    known = _PARITIES.get(key)
    if known is not None and np.array_equal(known[0], permutation):
        return known[1]
    sign = _permutation_parity(permutation)
    if len(_PARITIES) >= _PARITIES_KEPT:
        _PARITIES.pop(next(iter(_PARITIES)))
    _PARITIES[key] = (permutation.copy(), sign)
    return sign


def _permutation_parity(permutation: Array) -> float:
    """+1 or -1: the parity of a permutation given as an index array.

    (-1)^(n - number of cycles); the cycles are counted by following all of
    them at once (pointer doubling: each round squares the permutation and
    keeps, per index, the smallest index met on its cycle), O(n log n) numpy
    work instead of a Python loop over n.
    """
    permutation = np.asarray(permutation, dtype=np.int64)
    size = permutation.shape[0]
    smallest = np.minimum(np.arange(size), permutation)
    step = permutation.copy()
    for _ in range(max(1, int(size).bit_length())):
        smallest = np.minimum(smallest, smallest[step])
        step = step[step]
    cycles = int(np.count_nonzero(smallest == np.arange(size)))
    return -1.0 if (size - cycles) % 2 else 1.0


def zero_crossing_fraction(before: float, after: float) -> float:
    """Where in [0, 1] the straight line from ``before`` to ``after`` crosses zero (0.5 if flat)."""
    if before == after:
        return 0.5
    return float(np.clip(before / (before - after), 0.0, 1.0))
