"""What the fold-curve and Hopf-curve problems share: two parameters, one layout.

A boundary curve lives in (states, second parameter, [extra unknowns], first
parameter): the first parameter (the one the starting trace varied) is the last
component of ``u``, so that the engine's ``bounds`` put the curve's ends exactly
on the window's edges in it; the second parameter is component ``n`` and is
held to its window by an engine ``Limit``. Derivatives of the scalar conditions
come from the compiled model: the bilinear form B(v, .) as one vectorized call
of the exact second derivative (expression models), or finite differences for
Python models (:func:`branchline.events.normal_forms.directional_jacobian`).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import scipy.sparse as sps
import scipy.sparse.linalg as spla

from branchline.events.normal_forms import CENTRAL_STEP, directional_jacobian
from branchline.numerics import eigenvalues, linalg

Array = np.ndarray

# Up to this many states B(v, .) comes from one broadcast call of the exact
# second derivative (an (n, n) array); above it, from the sparse-aware helper.
BROADCAST_SECOND_MAX_SIZE = 400


class BoundaryCurve:
    """Common part of the two-parameter curve problems (see the module docstring).

    Parameters
    ----------
    model : branchline.model.build.Model
    first, second : int
        Indices of the two parameters in the model's parameter vector.
    parameters : ndarray (m,)
        The other parameters' values.
    extra : int
        Unknowns between the second parameter and the first (the Hopf curve's kappa).
    """

    def __init__(self, model, first: int, second: int, parameters: Array, extra: int = 0) -> None:
        self.model = model
        self.n = len(model.states)
        self.first = int(first)
        self.second = int(second)
        self.p = np.array(parameters, dtype=float)
        self.extra = int(extra)
        policy = model.linear_algebra
        sparse_jacobian = bool(getattr(model, "sparse", False))
        self.sparse = policy.sparse_curve(self.n, sparse_jacobian) and policy.sparse_location(
            self.n
        )
        self._eye = None
        self._entries = False  # the model's second-derivative entries, looked up once

    # ------------------------------------------------------------------ layout

    def parameters_at(self, u: Array) -> Array:
        """The full parameter vector at u (a fresh copy)."""
        p = self.p.copy()
        p[self.first] = u[-1]
        p[self.second] = u[self.n]
        return p

    def pack(self, x: Array, first: float, second: float, extra: Array = ()) -> Array:
        """u from its parts."""
        return np.concatenate([x, [second], np.asarray(extra, dtype=float), [first]])

    def describe(self, u: Array) -> str:
        """The point for messages: both parameters and the first few states."""
        model = self.model
        names = model.parameters
        states = ", ".join(
            f"{name}={value:.6g}" for name, value in zip(model.states[:4], u[:4], strict=False)
        )
        more = ", ..." if self.n > 4 else ""
        return (
            f"at {names[self.first]}={u[-1]:.10g}, {names[self.second]}={u[self.n]:.10g} "
            f"({states}{more})"
        )

    # ------------------------------------------------------------------ model pieces

    def state_matrix(self, x: Array, p: Array) -> Any:
        """df/dx: dense, or scipy.sparse CSC for large sparse models."""
        matrix = self.model.jacobian(x, p)
        if self.sparse:
            return sps.csc_matrix(matrix)
        return matrix.toarray() if sps.issparse(matrix) else np.asarray(matrix, dtype=float)

    def parameter_columns(self, x: Array, p: Array, indices: list[int] | None = None) -> Array:
        """df/dp for the given parameter indices (default: second, first), shape (n, k)."""
        indices = [self.second, self.first] if indices is None else indices
        return np.asarray(self.model.parameter_jacobian(x, p), dtype=float)[:, indices]

    def second_matrix(self, x: Array, p: Array, v: Array) -> Any:
        """B(v, .) as an (n, n) matrix: column k is B(v, e_k)."""
        model = self.model
        if getattr(model, "exact_derivatives", False) and self.n <= BROADCAST_SECOND_MAX_SIZE:
            if self._eye is None:
                self._eye = np.eye(self.n)
            return np.asarray(model.second(x, p, v, self._eye))
        return directional_jacobian(model, x, p, v)

    def second_matrices(self, x: Array, p: Array, vectors: Array) -> list:
        """B(v, .) for each column v of ``vectors`` (n, k): one broadcast call when exact."""
        model = self.model
        if getattr(model, "exact_derivatives", False) and self.n <= BROADCAST_SECOND_MAX_SIZE:
            if self._eye is None:
                self._eye = np.eye(self.n)
            stacked = np.asarray(model.second(x, p, vectors[:, :, None], self._eye[:, None, :]))
            return [stacked[:, c, :] for c in range(vectors.shape[1])]
        return [directional_jacobian(model, x, p, v) for v in vectors.T]

    def gradient_forms(self, x: Array, p: Array, terms) -> tuple[Array, Array]:
        """d/dz sum_t (left_t,c^T f_x right_t,c) for each column c, with ``terms`` pairs
        (left_t, right_t) of shape (n, r) and z the states and the (second, first)
        parameters: shapes (n, r) and (2, r).

        Expression models contract the nonzero entries of f_xx and d/dp f_x
        from one fast compiled call (``Model.second_entries``); Python models
        go through B(right, .) and d/dp (f_x right) by differences (on the sparse
        path plain central differences of the sparse Jacobian, each distinct
        direction once: :meth:`_difference_forms`).
        """
        entries = self._second_entries()
        if entries is not None:
            d_x, d_p = entries.contract(x, p, terms)
            return d_x, d_p[[self.second, self.first]]
        if self.sparse:
            return self._difference_forms(x, p, terms)
        d_x, d_p = 0.0, 0.0
        for left, right in terms:
            seconds = self.second_matrices(x, p, right)
            mixed = self.mixed_blocks(x, p, right)
            d_x = d_x + np.column_stack([b.T @ w for b, w in zip(seconds, left.T, strict=True)])
            d_p = d_p + np.column_stack([w @ m for m, w in zip(mixed, left.T, strict=True)])
        return d_x, d_p

    def _difference_forms(self, x: Array, p: Array, terms) -> tuple[Array, Array]:
        """:meth:`gradient_forms` for Python models on the sparse path: B(right, .) as a
        central difference of the sparse Jacobian along each distinct column of the
        rights (two Jacobian calls each), d/dp f_x as one central difference per
        parameter (two calls each; the extrapolated differences of
        ``jacobian_parameter_derivative`` cost tens of calls and every parameter).
        Accurate to about eps^(2/3): these are Newton's derivatives, not its residual."""
        model = self.model
        seconds: dict[bytes, Any] = {}
        r = terms[0][0].shape[1]
        d_x = np.zeros((self.n, r))
        for left, right in terms:
            for c in range(r):
                column = np.ascontiguousarray(right[:, c])
                key = column.tobytes()
                if key not in seconds:
                    seconds[key] = sps.csr_matrix(directional_jacobian(model, x, p, column))
                d_x[:, c] += seconds[key].T @ left[:, c]
        d_p = np.zeros((2, r))
        for row, k in enumerate((self.second, self.first)):
            h = CENTRAL_STEP * max(1.0, abs(float(p[k])))
            up, down = p.copy(), p.copy()
            up[k] += h
            down[k] -= h
            change = sps.csr_matrix(model.jacobian(x, up) - model.jacobian(x, down)) / (up[k] - down[k])
            for left, right in terms:
                d_p[row] += np.einsum("ic,ic->c", left, change @ right)
        return d_x, d_p

    def _second_entries(self):
        """The model's compiled second-derivative entries, or None (Python models)."""
        if self._entries is False:
            getter = getattr(self.model, "second_entries", None)
            exact = getattr(self.model, "exact_derivatives", False)
            self._entries = getter() if (getter is not None and exact) else None
        return self._entries

    def mixed_blocks(self, x: Array, p: Array, vectors: Array) -> list[Array]:
        """d/dp (f_x v) for the (second, first) parameters, (n, 2) per column v of ``vectors``."""
        indices = [self.second, self.first]
        if getattr(self.model, "exact_derivatives", False):
            stacked = np.asarray(self.model.jacobian_parameter_derivative(x, p, vectors))
            return [stacked[:, indices, c] for c in range(vectors.shape[1])]
        return [self.mixed_columns(x, p, v) for v in vectors.T]

    def mixed_columns(self, x: Array, p: Array, v: Array, indices: list[int] | None = None):
        """d/dp_k (f_x v) for the given parameter indices, shape (n, k)."""
        indices = [self.second, self.first] if indices is None else indices
        return np.asarray(self.model.jacobian_parameter_derivative(x, p, v))[:, indices]

    def eigenvalues(self, a_matrix: Any) -> Array:
        """All eigenvalues of a dense Jacobian sorted by decreasing real part; empty
        for large sparse models (their codimension-two tests are not evaluated)."""
        if sps.issparse(a_matrix):
            if self.n <= self.model.linear_algebra.eigenvalues_dense_up_to:
                return eigenvalues.dense_eigenvalues(a_matrix.toarray())
            return np.empty(0, dtype=complex)
        return eigenvalues.sort_eigenvalues(eigenvalues.eigvals_unchecked(a_matrix))

    def stack(self, top_left: Any, top_right: Array, bottom: Array) -> Any:
        """[[A, C], [R]]: A (n, n), C (n, k), R (r, n + k); sparse when A is."""
        if sps.issparse(top_left):
            top = sps.hstack([top_left, sps.csc_matrix(top_right)])
            return sps.vstack([top, sps.csr_matrix(bottom)], format="csc")
        return np.vstack([np.hstack([top_left, top_right]), bottom])


class Factored:
    """Solves with a square (dense or sparse) matrix and its transpose: one SuperLU
    factorization for sparse matrices; LAPACK ``gesv`` per solve for dense ones (the
    matrices here are small, and ``gesv`` avoids scipy's slower ``lu_solve`` wrapper).
    :meth:`border_solutions` gives both bordered solutions at once."""

    def __init__(self, matrix: Any) -> None:
        self.sparse = sps.issparse(matrix)
        self.matrix = matrix
        if self.sparse:
            try:
                self.matrix = sps.csc_matrix(matrix)
                self._lu = linalg.sparse_lu(self.matrix)
            except RuntimeError as exc:
                raise linalg.SingularMatrixError(str(exc)) from exc

    def solve(self, rhs: Array, transposed: bool = False) -> Array:
        if self.sparse:
            rhs = np.ascontiguousarray(rhs)
            trans = "T" if transposed else "N"
            z, accurate = linalg.refined_solve(self._lu, self.matrix, rhs, trans)
            if not accurate:  # diagonal pivots grew the factors: strict pivoting
                self._lu = spla.splu(self.matrix)
                z = self._lu.solve(rhs, trans=trans)
            return z
        matrix = self.matrix.T if transposed else self.matrix
        try:
            return np.linalg.solve(matrix, rhs)
        except np.linalg.LinAlgError as exc:
            raise linalg.SingularMatrixError(str(exc)) from exc

    def border_solutions(self, k: int) -> tuple[Array, Array]:
        """(K^-1 E, K^-T E) with E the last k columns of the identity: the bordered
        system's solutions for its unit right-hand sides, shapes (n + k, k). Dense
        matrices take one inverse (its last columns and rows), cheaper for these small
        systems than two solves."""
        size = self.matrix.shape[0]
        if self.sparse:
            units = np.zeros((size, k))
            units[size - k :] = np.eye(k)
            return self.solve(units), self.solve(units, transposed=True)
        with np.errstate(all="ignore"):
            inverse = linalg.inverse_unchecked(self.matrix)
        if not np.isfinite(inverse).all():
            raise linalg.SingularMatrixError("the bordered matrix is singular or not finite")
        return inverse[:, size - k :], inverse[size - k :].T


def bordered(matrix: Any, columns: Array, rows: Array) -> Any:
    """[[M, columns], [rows^T, 0]] for columns, rows (n, k); dense or sparse like M."""
    n, k = columns.shape
    if sps.issparse(matrix):
        return sps.bmat(
            [[matrix, sps.csc_matrix(columns)], [sps.csr_matrix(rows.T), sps.csr_matrix((k, k))]],
            format="csc",
        )
    out = np.zeros((n + k, n + k))
    out[:n, :n] = matrix
    out[:n, n:] = columns
    out[n:, :n] = rows.T
    return out


def orthonormal(columns: Array) -> Array:
    """An orthonormal basis (n, k) of the span of ``columns`` (reduced QR; two columns by
    Gram-Schmidt with one reorthogonalization, cheaper than LAPACK's call overhead, in
    plain Python floats up to :data:`PLAIN_FLOATS_UP_TO` states)."""
    columns = np.asarray(columns, dtype=float).reshape(columns.shape[0], -1)
    if columns.shape[1] != 2:
        return np.linalg.qr(columns)[0]
    if columns.shape[0] <= PLAIN_FLOATS_UP_TO:
        basis = _two_orthonormal_floats(*columns.T.tolist())
        return np.linalg.qr(columns)[0] if basis is None else np.array(basis).T
    a, b = np.array(columns.T)  # contiguous copies: dot products of strided columns cost more
    first = a / math.sqrt(a.dot(a))
    second = b - first.dot(b) * first
    second -= first.dot(second) * first
    size = math.sqrt(second.dot(second))
    if not size > 1e-12 * math.sqrt(b.dot(b)):
        return np.linalg.qr(columns)[0]
    second /= size
    return np.array([first, second]).T


# Below this many states small vector algebra is cheaper in Python floats than in numpy
# calls (each costs about a microsecond whatever its size).
PLAIN_FLOATS_UP_TO = 16


def _two_orthonormal_floats(a: list, b: list) -> tuple[list, list] | None:
    """:func:`orthonormal` of two columns given as lists; None when b is (nearly) in
    the span of a."""
    scale = math.sqrt(math.fsum(t * t for t in a))
    first = [t / scale for t in a]
    along = math.fsum(f * t for f, t in zip(first, b, strict=True))
    second = [t - along * f for f, t in zip(first, b, strict=True)]
    along = math.fsum(f * t for f, t in zip(first, second, strict=True))
    second = [t - along * f for f, t in zip(first, second, strict=True)]
    size = math.sqrt(math.fsum(t * t for t in second))
    if not size > 1e-12 * math.sqrt(math.fsum(t * t for t in b)):
        return None
    return first, [t / size for t in second]


def signed_product(values: Array) -> float:
    """prod(v / (1 + |v|)): sign of the product, finite for any size (1.0 when empty);
    ``values`` an array or a list of floats."""
    if isinstance(values, list):  # a few Python floats: no numpy calls
        return math.prod(v / (1.0 + abs(v)) for v in values)
    values = np.asarray(values, dtype=float)
    if values.size == 0:
        return 1.0
    return float(np.prod(values / (1.0 + np.abs(values))))
