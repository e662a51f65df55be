"""The collocation Jacobian of a periodic orbit assembled from sparse model Jacobians.

The dense-block assembly of :mod:`branchline.problems.cycles` builds, for
every interval, an (m n) x ((m + 1) n) block: N m (m + 1) n^2 numbers, most
of them zeros when df/dx is sparse (2-3 GB at 200 states on 40 x 4 points).
Here the same matrix is assembled from the nonzero entries of df/dx at each of
the P = N m collocation points: equation (j, k, i) (interval j, Gauss point
k, state i) reads, in the m + 1 representation points l of interval j,

    sum_l D[k, l] x_(j,l),i  -  h_j T sum_l L[k, l] sum_c J_(j,k)[i, c] x_(j,l),c,

(orthogonal collocation; Ascher, Mattheij and Russell, Numerical Solution of
Boundary Value Problems for ODEs, section 5.6), so each nonzero of J_(j,k)
gives m + 1 entries and each row m + 1 identity entries: N m (m + 1)
(nnz(J) + n) in all. Entries are gathered as coordinates and converted to CSC
once (scipy sums the duplicates on the diagonal), then factored by SuperLU
(Li, "An overview of SuperLU", ACM TOMS 31, 2005) in the engine.

:func:`initial_value_matrix` turns the same Jacobian into the square system of
the linearized orbit on [0, 1] with a given start (the periodicity cut open),
whose solution at s = 1 is the action of the monodromy matrix
(:mod:`branchline.numerics.floquet`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from branchline.numerics.collocation import CollocationTables

Array = np.ndarray


@dataclass(frozen=True)
class PointJacobians:
    """df/dx at the P collocation points as one list of nonzero entries.

    Attributes
    ----------
    size : int
        n, the number of states.
    point : ndarray (e,) int
        Collocation point (j m + k) of each entry.
    rows, cols : ndarray (e,) int
        Position of each entry in its n x n Jacobian.
    values : ndarray (e,)
    """

    size: int
    point: Array
    rows: Array
    cols: Array
    values: Array


def from_matrices(matrices: Sequence[object], size: int) -> PointJacobians:
    """The entries of P Jacobians, each a scipy.sparse matrix or a dense (n, n) array."""
    points, rows, cols, values = [], [], [], []
    for index, matrix in enumerate(matrices):
        coo = matrix.tocoo() if sp.issparse(matrix) else sp.coo_matrix(np.asarray(matrix))
        if coo.shape != (size, size):
            raise ValueError(f"a Jacobian of shape {coo.shape} where ({size}, {size}) was expected")
        rows.append(coo.row)
        cols.append(coo.col)
        values.append(coo.data)
        points.append(np.full(coo.nnz, index, dtype=np.intp))
    return PointJacobians(
        size,
        np.concatenate(points),
        np.concatenate(rows).astype(np.intp),
        np.concatenate(cols).astype(np.intp),
        np.concatenate(values).astype(float),
    )


def from_dense_stack(stack: Array) -> PointJacobians:
    """The entries of a stack of dense Jacobians (P, n, n) on their common nonzero pattern.

    >>> stack = np.array([[[1.0, 0.0], [2.0, 3.0]], [[4.0, 0.0], [5.0, 6.0]]])
    >>> entries = from_dense_stack(stack)
    >>> entries.point.tolist(), entries.rows.tolist(), entries.cols.tolist()
    ([0, 0, 0, 1, 1, 1], [0, 1, 1, 0, 1, 1], [0, 0, 1, 0, 0, 1])
    >>> entries.values.tolist()
    [1.0, 2.0, 3.0, 4.0, 5.0, 6.0]
    """
    stack = np.asarray(stack, dtype=float)
    count, size, _ = stack.shape
    rows, cols = np.nonzero(np.any(stack != 0.0, axis=0))
    values = stack[:, rows, cols]  # (P, e)
    return PointJacobians(
        size,
        np.repeat(np.arange(count), rows.size),
        np.tile(rows, count),
        np.tile(cols, count),
        values.ravel(),
    )


def collocation_jacobian(
    table: CollocationTables,
    widths: Array,
    index: Array,
    period: float,
    jacobians: PointJacobians,
    scale: float,
    period_column: Array,
    parameter_column: Array,
    phase_row: Array,
) -> sp.csc_matrix:
    """The bordered collocation Jacobian G_u, CSC, shape (P n + 1, P n + 2).

    Parameters
    ----------
    table : CollocationTables
        Degree m tables (values L and slopes D at the Gauss points).
    widths : ndarray (N,)
        Mesh interval widths h_j (normalized time).
    index : ndarray (N, m + 1)
        Representation points of each interval (``collocation.interval_indices``).
    period : float
        T.
    jacobians : PointJacobians
        df/dx at the P = N m Gauss points, point j m + k.
    scale : float
        The unknowns are X * scale, so the X columns are divided by it.
    period_column, parameter_column : ndarray (P n,)
        dG/dT and dG/dp of the collocation equations.
    phase_row : ndarray (P n + 2,)
        d(phase condition)/du.
    """
    n, m = jacobians.size, table.degree
    intervals = widths.shape[0]
    points = intervals * m
    size = points * n
    # entries of h_j T L[k, l] J_(j,k): one copy per representation point l
    j, k = jacobians.point // m, jacobians.point % m
    factor = -(widths * period)[j] * jacobians.values / scale
    entry_rows = jacobians.point * n + jacobians.rows
    coupled_rows = np.tile(entry_rows, m + 1)
    coupled_cols = (index[j].T * n + jacobians.cols[None, :]).ravel()
    coupled_values = (table.values[k].T * factor[None, :]).ravel()
    # identity entries D[k, l] delta_ic: point p, state i, representation point l
    point = np.arange(points)
    state = np.arange(n)
    identity_rows = np.broadcast_to(
        (point[:, None, None] * n + state[None, None, :]), (points, m + 1, n)
    ).ravel()
    identity_cols = (index[point // m][:, :, None] * n + state[None, None, :]).ravel()
    identity_values = np.broadcast_to(
        (table.slopes[point % m] / scale)[:, :, None], (points, m + 1, n)
    ).ravel()
    border_rows = np.concatenate([np.arange(size), np.arange(size), np.full(size + 2, size)])
    border_cols = np.concatenate(
        [np.full(size, size), np.full(size, size + 1), np.arange(size + 2)]
    )
    rows = np.concatenate([coupled_rows, identity_rows, border_rows])
    cols = np.concatenate([coupled_cols, identity_cols, border_cols])
    values = np.concatenate(
        [coupled_values, identity_values, period_column, parameter_column, phase_row]
    )
    return sp.csc_matrix((values, (rows, cols)), shape=(size + 1, size + 2))


def initial_value_matrix(
    jacobian: sp.spmatrix, size: int, intervals: int, degree: int, scale: float
) -> sp.csc_matrix:
    """The linearized collocation system cut open at s = 0, with its start as unknown.

    Parameters
    ----------
    jacobian : scipy.sparse matrix (P n + 1, P n + 2)
        The bordered collocation Jacobian of :func:`collocation_jacobian` (or of the
        dense-block assembly), X columns divided by ``scale``.
    size, intervals, degree, scale : n, N, m and the unknowns' scale.

    Returns
    -------
    scipy.sparse.csc_matrix, square, ((P + 1) n)
        Unknowns: the values w at the P representation points and at s = 1
        (the last n); equations: w(0) = (first n rows, identity), then the P n
        collocation equations of w' = T f_x(x(s)) w. Solving with right-hand
        side (v, 0) gives w(1) = M v, M the monodromy matrix. Needs N >= 2 (with one
        interval its first and last points share columns of the periodic Jacobian).
    """
    if intervals < 2:
        raise ValueError("the initial-value system needs at least two mesh intervals")
    n = size
    points = intervals * degree
    block = sp.csc_matrix(jacobian)[: points * n, : points * n].tocoo()
    rows, cols, values = block.row, block.col, block.data * scale
    # the last interval's equations refer to its end point, the new unknown w(1)
    wrapped = (cols < n) & (rows >= (intervals - 1) * degree * n)
    cols = np.where(wrapped, cols + points * n, cols)
    start = np.arange(n)
    total = (points + 1) * n
    return sp.csc_matrix(
        (
            np.concatenate([np.ones(n), values]),
            (np.concatenate([start, rows + n]), np.concatenate([start, cols])),
        ),
        shape=(total, total),
    )


__all__ = [
    "PointJacobians",
    "collocation_jacobian",
    "from_dense_stack",
    "from_matrices",
    "initial_value_matrix",
]
