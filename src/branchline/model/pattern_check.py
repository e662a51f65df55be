"""Checks around a Python model's Jacobian pattern, and the advice to give one.

:func:`check_pattern` runs beside :func:`branchline.model.build.check_jacobian`
at the start of each trace of a model with ``model.python.jacobian_pattern``:

- with the user's own Jacobian too, its nonzero entries outside the pattern;
- whether f's differences have nonzeros the pattern misses. Up to
  ``finite_differences_dense_up_to`` states every entry of the dense difference
  Jacobian is looked at; above, the grouped difference Jacobian times random
  directions is compared with differences of f along them (as check_jacobian
  does), and the first row that disagrees is traced to its column by halving
  the columns outside that row's pattern (about 2 log2(n) calls of f).

:func:`difference_jacobian_warning` is the advice for large Python models that
give neither a Jacobian nor a pattern.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import scipy.sparse as sp

from branchline.model.build import (
    JACOBIAN_CHECK_DIRECTIONS,
    JACOBIAN_CHECK_FLOOR,
    JACOBIAN_CHECK_TOLERANCE,
    Model,
)
from branchline.model.jacobian_pattern import KEY, JacobianPattern
from branchline.numerics.differences import (
    central_jacobian,
    central_step,
    directional_derivative,
    grouped_central_jacobian,
)

Array = np.ndarray

# A Python model with more states than this and neither a Jacobian nor a pattern
# is told what its difference Jacobian costs: 2 n calls of f per Jacobian, which
# at a few hundred states starts to dominate a traced point.
DIFFERENCE_JACOBIAN_ADVICE_ABOVE = 200
# A difference outside the pattern counts as a nonzero when treating it as zero
# would be an error above this, relative to its row's largest entry: the
# threshold of check_jacobian (tolerance 1e-4 on entries floored at 1e-4 of the
# row's largest), so the two checks agree on what "nonzero" means.
OUTSIDE_RELATIVE = 1e-8


def difference_jacobian_warning(model: Model) -> str:
    """The warning for a large Python model without a Jacobian or a pattern, or ''."""
    if (
        model.python_source is None
        or model.jacobian_source is not None
        or model.jacobian_pattern is not None
        or model.size <= DIFFERENCE_JACOBIAN_ADVICE_ABOVE
    ):
        return ""
    n = model.size
    return (
        f"the Python model has {n} states and gives neither model.python.jacobian nor "
        f"model.python.jacobian_pattern, so every Jacobian is a dense difference Jacobian "
        f"costing {2 * n} calls of f (a central difference per state); give "
        'jacobian_pattern = "module:function" returning where df/dx can be nonzero (a '
        "scipy.sparse matrix or (rows, cols) index arrays for the model's size) and a "
        "Jacobian costs 2 calls of f per group of columns that share no row (a handful for "
        "a chain of cells, whatever its length), or give the Jacobian itself"
    )


def check_pattern(model: Model, x: Array, p: Array) -> list[str]:
    """Warnings about the model's Jacobian pattern at (x, p); empty when it fits.

    Parameters
    ----------
    model : Model
        A model with ``jacobian_pattern`` set.
    x : ndarray (n,), p : ndarray (m,)
    """
    pattern = model.jacobian_pattern
    if pattern is None:
        return []
    x = np.asarray(x, dtype=float)
    p = np.asarray(p, dtype=float)
    found = []
    # f or the Jacobian failing at the check point is for the trace to meet and
    # report where it happens; this check then says nothing.
    try:
        if model.jacobian_source is not None:
            outside = _user_entries_outside(model, x, p, pattern)
            if outside:
                found.append(outside)
        with np.errstate(all="ignore"):
            missed = _differences_outside(model, x, p, pattern)
    except (ArithmeticError, ValueError):
        return found
    if missed:
        found.append(missed)
    return found


def _name(model: Model, i: int, j: int) -> str:
    return f"d f[{model.states[i]}] / d {model.states[j]}"


def _user_entries_outside(model: Model, x: Array, p: Array, pattern: JacobianPattern) -> str:
    given = sp.coo_matrix(model.jacobian(x, p))
    nonzero = given.data != 0
    rows, cols, values = given.row[nonzero], given.col[nonzero], given.data[nonzero]
    inside = np.asarray(pattern.entries[rows, cols]).ravel() != 0 if rows.size else rows
    outside = np.flatnonzero(~inside.astype(bool))
    if outside.size == 0:
        return ""
    first = outside[0]
    return (
        f"{model.jacobian_source} has {outside.size} nonzero entries outside {KEY} "
        f"({pattern.source}) at the check point, first {_name(model, rows[first], cols[first])} "
        f"= {values[first]:.6g}; the pattern must hold every entry that can be nonzero"
    )


def _missed(
    model: Model, pattern: JacobianPattern, counted: str, i: int, j: int, value: float
) -> str:
    if model.jacobian_source is None:
        consequence = "the Jacobian by grouped differences is wrong there"
    else:
        consequence = "the pattern does not describe f"
    return (
        f"{KEY} ({pattern.source}) misses nonzeros of f: differences give "
        f"{_name(model, i, j)} = {value:.6g} outside the pattern ({counted}); "
        f"{consequence}: add them to the pattern"
    )


def _differences_outside(model: Model, x: Array, p: Array, pattern: JacobianPattern) -> str:
    def func(z: Array) -> Array:
        return model.rhs(z, p)

    if model.size <= model.linear_algebra.finite_differences_dense_up_to:
        differences = central_jacobian(func, x)
        outside = differences * (1.0 - pattern.entries.toarray())
        scale = np.max(np.abs(differences), axis=1, keepdims=True)
        significant = np.abs(outside) > OUTSIDE_RELATIVE * scale
        significant &= np.isfinite(outside)
        if not np.any(significant):
            return ""
        i, j = np.argwhere(significant)[0]
        counted = f"{int(significant.sum())} such entries"
        return _missed(model, pattern, counted, int(i), int(j), outside[i, j])
    return _missed_by_products(model, func, x, pattern)


def _missed_by_products(model: Model, func: Callable, x: Array, pattern: JacobianPattern) -> str:
    """Missed entries of a large model, seen in products with random directions.

    The grouped difference Jacobian J (2 calls of f per group) times seeded
    random directions is compared with directional differences of f (2 calls
    each), with check_jacobian's tolerance and floor. An entry the pattern misses
    either changes a row J knows nothing of, or is charged by J to another column
    of its group: either way J d and the difference disagree in its row. That
    row's culprit column is then found by halving the columns outside the row's
    pattern: moved together they must not change the row.
    """
    jacobian = grouped_central_jacobian(func, x, pattern.entries, pattern.groups)
    rng = np.random.default_rng(0)
    directions = rng.standard_normal((x.shape[0], JACOBIAN_CHECK_DIRECTIONS))
    given = np.asarray(jacobian @ directions)
    differences = np.column_stack([directional_derivative(func, x, d, 1) for d in directions.T])
    magnitude = np.maximum(np.abs(given), np.abs(differences))
    floor = JACOBIAN_CHECK_FLOOR * np.max(magnitude, axis=1, keepdims=True) + np.finfo(float).tiny
    errors = np.abs(given - differences) / (magnitude + floor)
    wrong_rows = np.flatnonzero(np.any(~(errors <= JACOBIAN_CHECK_TOLERANCE), axis=1))
    if wrong_rows.size == 0:
        return ""
    row = int(wrong_rows[0])
    counted = f"{wrong_rows.size} rows disagree with differences along random directions"
    reached = pattern.entries.tocsr()
    outside = np.setdiff1d(
        np.arange(x.shape[0]), reached.indices[reached.indptr[row] : reached.indptr[row + 1]]
    )
    scale = float(np.max(np.abs(jacobian[[row], :].toarray()), initial=0.0))
    found = _culprit(func, x, outside, row, OUTSIDE_RELATIVE * scale)
    if found is None:
        return (
            f"{KEY} ({pattern.source}): the Jacobian by grouped differences disagrees with "
            f"differences of f along random directions in row {model.states[row]} ({counted}); "
            "check that the pattern holds every entry that can be nonzero"
        )
    return _missed(model, pattern, counted, row, *found)


def _change(func: Callable, x: Array, columns: Array, row: int) -> tuple[float, float]:
    """Row ``row``'s central difference with ``columns`` moved by their steps: (change, step)."""
    steps = central_step(1) * np.maximum(1.0, np.abs(x))
    shift = np.zeros_like(x)
    shift[columns] = steps[columns]
    upper = np.asarray(func(x + shift), dtype=float)[row]
    lower = np.asarray(func(x - shift), dtype=float)[row]
    smallest = float(np.min((x + shift)[columns] - (x - shift)[columns]))
    return float(upper - lower), smallest


def _culprit(
    func: Callable, x: Array, columns: Array, row: int, threshold: float
) -> tuple[int, float] | None:
    """A column among ``columns`` that changes ``row``, and its entry; halving, 2 calls each."""
    if columns.size == 0:
        return None

    def moves(candidates: Array) -> bool:
        change, taken = _change(func, x, candidates, row)
        return bool(np.isfinite(change) and abs(change) / taken > threshold)

    if not moves(columns):
        return None
    while columns.size > 1:
        half = columns[: columns.size // 2]
        columns = half if moves(half) else columns[columns.size // 2 :]
    change, taken = _change(func, x, columns, row)
    return int(columns[0]), change / taken


__all__ = [
    "DIFFERENCE_JACOBIAN_ADVICE_ABOVE",
    "check_pattern",
    "difference_jacobian_warning",
]
