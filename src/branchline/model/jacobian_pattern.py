"""A Python model's Jacobian sparsity pattern (``model.python.jacobian_pattern``).

The user names ``"module:function"``; branchline calls ``function(size)`` once,
when the model is built, and reads what it returns as the structure of df/dx:

- a scipy.sparse matrix of shape (size, size): its stored entries;
- a tuple ``(rows, cols)`` of integer index arrays of equal length;
- a dense numpy array of shape (size, size): its nonzero entries.

Anything else, a wrong shape, an index out of range, an empty pattern or an
exception in the function is a :class:`~branchline.errors.ScanError` naming the
file, the key and the problem. There is no automatic detection of the pattern:
finding it from f would mean evaluating f at perturbed states, which may lie
outside the model's domain, or reading the user's code.

A model with a pattern and no Jacobian of its own gets its Jacobian from
:func:`branchline.numerics.differences.grouped_central_jacobian`, two calls of f
per group of structurally orthogonal columns instead of two per state.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, NoReturn

import numpy as np
import scipy.sparse as sp

from branchline.errors import ScanError
from branchline.numerics.column_groups import (
    ColumnGroups,
    curtis_powell_reid_groups,
    structure,
)

KEY = "model.python.jacobian_pattern"


@dataclass(frozen=True)
class JacobianPattern:
    """The structural nonzeros of df/dx and their column groups.

    Attributes
    ----------
    entries : scipy.sparse.csc_matrix, shape (n, n)
        Ones at the structural nonzeros, sorted, no duplicates.
    groups : ColumnGroups
        Curtis-Powell-Reid groups of ``entries``' columns.
    source : str
        The user's ``"module:function"``.
    """

    entries: sp.csc_matrix
    groups: ColumnGroups
    source: str


def read_pattern(
    function: Callable[[int], Any], size: int, reference: str, source: str
) -> JacobianPattern:
    """Call the user's pattern function with ``size`` and validate what it returns.

    Raises
    ------
    ScanError
        The function raised, or returned something that is not a pattern of
        shape (size, size) with at least one entry.
    """
    try:
        value = function(size)
    except SystemExit as error:
        raise ScanError(source, KEY, f"'{reference}' called sys.exit({error.code!r})") from None
    except Exception as error:  # the user's own code: report it, never a traceback
        raise ScanError(
            source,
            KEY,
            f"'{reference}' raised {type(error).__name__}: {error} (it is called once as "
            f"function(size) with size = {size} and returns the Jacobian's sparsity structure)",
        ) from None
    entries = _as_entries(value, size, reference, source)
    if entries.nnz == 0:
        raise ScanError(
            source,
            KEY,
            f"'{reference}' returned a pattern with no entries; it must mark every entry of "
            "df/dx that can be nonzero",
        )
    return JacobianPattern(entries, curtis_powell_reid_groups(entries), reference)


def _as_entries(value: Any, size: int, reference: str, source: str) -> sp.csc_matrix:
    expected = (size, size)
    if sp.issparse(value):
        if value.shape != expected:
            _refuse(
                source, reference, f"a sparse matrix of shape {value.shape}; expected {expected}"
            )
        return structure(value)
    if isinstance(value, tuple) and len(value) == 2:
        return _from_indices(value, size, reference, source)
    if isinstance(value, list):
        # A list of two lists could be either form (at size 2): ask for the unambiguous ones.
        _refuse(
            source,
            reference,
            "a list; return index arrays as a tuple (rows, cols) and a dense pattern as a "
            "numpy array or scipy.sparse matrix",
        )
    if isinstance(value, np.ndarray) and value.ndim == 2:
        if value.shape != expected:
            _refuse(
                source,
                reference,
                f"an array of shape {value.shape}; expected {expected} (for index arrays, "
                "return a tuple (rows, cols))",
            )
        if value.dtype.kind not in "biuf":
            _refuse(source, reference, f"an array of {value.dtype}; expected numbers or booleans")
        return structure(sp.csc_matrix(value != 0))
    _refuse(
        source,
        reference,
        f"{type(value).__name__}; expected a scipy.sparse matrix or a dense array of shape "
        f"{expected}, or a pair (rows, cols) of index arrays",
    )


def _from_indices(value, size: int, reference: str, source: str) -> sp.csc_matrix:
    try:
        rows, cols = (np.asarray(part) for part in value)
    except (TypeError, ValueError) as error:
        _refuse(source, reference, f"a pair that is not two index arrays ({error})")
    for name, index in (("rows", rows), ("cols", cols)):
        if index.ndim != 1:
            _refuse(source, reference, f"{name} of shape {index.shape}; expected a 1-D index array")
        if index.size and index.dtype.kind not in "iu":
            _refuse(source, reference, f"{name} of {index.dtype}; expected integer indices")
    if rows.shape != cols.shape:
        _refuse(
            source,
            reference,
            f"{rows.size} rows and {cols.size} cols; expected one row and one column per entry",
        )
    for name, index in (("rows", rows), ("cols", cols)):
        outside = index[(index < 0) | (index >= size)]
        if outside.size:
            _refuse(
                source,
                reference,
                f"{name} with index {int(outside[0])}, outside 0 .. {size - 1} (size = {size})",
            )
    ones = np.ones(rows.size)
    return structure(
        sp.csc_matrix((ones, (rows.astype(np.intp), cols.astype(np.intp))), shape=(size, size))
    )


def _refuse(source: str, reference: str, what: str) -> NoReturn:
    raise ScanError(source, KEY, f"'{reference}' returned {what}")


__all__ = ["KEY", "JacobianPattern", "read_pattern"]
