"""Column groups of a sparse Jacobian: one difference estimates every column of a group.

Two columns are *structurally orthogonal* when no row holds a structural nonzero
in both. Perturbing all columns of such a group at once changes each row through
at most one of them, so one central difference (two calls of f) gives every entry
of every column in the group. The groups come from the greedy method of Curtis,
Powell and Reid ("On the estimation of sparse Jacobian matrices", J. Inst. Maths
Applics 13 (1974) 117-119): the columns are taken in their natural order and
each joins the first group that none of its rows already touches. For a banded
pattern of half-bandwidth w this gives 2 w + 1 groups whatever the size
(3 for a tridiagonal pattern).

>>> import scipy.sparse as sp
>>> groups = curtis_powell_reid_groups(sp.diags([1.0, 1.0, 1.0], [-1, 0, 1], shape=(6, 6)))
>>> groups.count, groups.group_of.tolist()
(3, [0, 1, 2, 0, 1, 2])
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

Array = np.ndarray


@dataclass(frozen=True)
class ColumnGroups:
    """A partition of the columns into structurally orthogonal groups.

    Attributes
    ----------
    group_of : ndarray of int, shape (k,)
        The group of each column, numbered 0 .. count - 1.
    count : int
        Number of groups: a grouped difference Jacobian costs 2 * count calls of f.
    """

    group_of: Array
    count: int

    def members(self, group: int) -> Array:
        """The columns of ``group``, in increasing order."""
        return np.flatnonzero(self.group_of == group)


def structure(pattern: object) -> sp.csc_matrix:
    """The pattern's structural entries as a CSC matrix of ones (sorted, no duplicates).

    Every stored entry counts, an explicitly stored zero included: a pattern says
    where entries may be nonzero, not what they are.
    """
    matrix = sp.csc_matrix(pattern)
    ones = sp.csc_matrix((np.ones(matrix.nnz), matrix.indices, matrix.indptr), shape=matrix.shape)
    ones.sum_duplicates()
    ones.data[:] = 1.0
    ones.sort_indices()
    return ones


def curtis_powell_reid_groups(pattern: object) -> ColumnGroups:
    """Structurally orthogonal column groups by the Curtis-Powell-Reid greedy method.

    Parameters
    ----------
    pattern : scipy.sparse matrix or array_like, shape (n, k)
        The structural nonzeros of a Jacobian (stored entries count).

    Returns
    -------
    ColumnGroups
        Column j joins the lowest-numbered group holding no column that shares a
        row with it (taking the columns in natural order, this is the original
        method's sweep: group 1 gathers every column it can, then group 2 from
        the rest, and so on).
    """
    columns = structure(pattern)
    rows = columns.tocsr()
    # The column intersection graph: columns i, j are neighbours when they share a row.
    neighbours = (columns.T @ rows).tocsr()
    size = columns.shape[1]
    group_of = np.full(size, -1, dtype=np.intp)
    count = 0
    indptr, indices = neighbours.indptr, neighbours.indices
    for j in range(size):
        taken = group_of[indices[indptr[j] : indptr[j + 1]]]
        taken = taken[taken >= 0]
        free = np.ones(count + 1, dtype=bool)
        free[taken] = False
        group = int(np.argmax(free))
        group_of[j] = group
        count = max(count, group + 1)
    return ColumnGroups(group_of=group_of, count=count)


def structurally_orthogonal(pattern: object, groups: ColumnGroups) -> bool:
    """True when no row holds structural nonzeros of two columns of one group."""
    columns = structure(pattern)
    if columns.shape[1] == 0:
        return True
    membership = sp.csc_matrix(
        (np.ones(columns.shape[1]), (np.arange(columns.shape[1]), groups.group_of)),
        shape=(columns.shape[1], groups.count),
    )
    per_row_and_group = columns @ membership
    return bool(per_row_and_group.nnz == 0 or per_row_and_group.max() <= 1.0)


__all__ = [
    "ColumnGroups",
    "curtis_powell_reid_groups",
    "structurally_orthogonal",
    "structure",
]
