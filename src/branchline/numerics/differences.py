"""Finite differences for models that supply no exact derivatives.

Used for Python models: the Jacobian when the user gives none, df/dp, and the
bilinear and trilinear forms B, C and d/dp (f_x v) when the user gives no
directional derivatives of their own.

Two kinds of step rule:

- :func:`extrapolated_directional` (the normal-form derivatives B, C, d/dp (f_x v)):
  Richardson extrapolation of central differences with the step chosen by its
  own error estimate, Ridders' method (C. J. F. Ridders, "Accurate computation
  of F'(x) and F'(x) F''(x)", Advances in Engineering Software 4 (1982) 75-76;
  Press et al., Numerical Recipes, 3rd ed., section 5.7). It starts from a large
  step and halves it, extrapolating the tableau of quotients to step zero, and
  stops once the estimated error grows: rounding then dominates. A fixed step
  cannot do this for stiff models: the rounding of f_x v is about eps times
  the *largest* terms of f_x (diffusion entries of 1e7, say) while the
  derivative sought is of order one, so the balance point of the rule below
  lies far from its nominal step and l1 lost digits (0.5 % measured).
- a fixed central step (:func:`central_jacobian`, :func:`directional_derivative`:
  the Jacobian, df/dp, the Jacobian check; :func:`grouped_central_jacobian`, the
  Jacobian of a model with a sparsity pattern, one difference per group of
  structurally orthogonal columns, see :mod:`branchline.numerics.column_groups`).

For the fixed steps, every formula is a central difference. When differences are nested (B is a
difference of Jacobian actions, C a difference of B), all levels use the same
step h = eps**(1/(k + 2)) for k nested levels: the rounding error then grows
like eps / h**k and the truncation error like h**2, and this step balances the
two (Nocedal & Wright, Numerical Optimization, 2nd ed., section 8.1, for k = 1;
the general k is the same balance). Steps scale with max(1, |z|) so that
z + h stays well resolved in floating point (common practice, as in
``scipy.optimize.approx_fprime``).
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
import scipy.sparse as sp

from branchline.numerics.column_groups import ColumnGroups, curtis_powell_reid_groups, structure

Array = np.ndarray
VectorFunction = Callable[[Array], Array]

# Machine epsilon of float64; the base of every step rule below.
EPS = float(np.finfo(float).eps)


def central_step(levels: int) -> float:
    """Relative step for ``levels`` nested central differences, eps**(1/(levels + 2))."""
    return EPS ** (1.0 / (levels + 2))


def central_jacobian(func: VectorFunction, z: Array, levels: int = 1) -> Array:
    """Dense Jacobian of ``func`` at ``z`` by central differences, column by column.

    Parameters
    ----------
    func : callable (k,) -> (n,)
    z : ndarray (k,)
    levels : int
        Total nesting depth of differences this Jacobian takes part in (1 when
        it is used on its own); chooses the step, see the module docstring.

    Returns
    -------
    ndarray (n, k)
        Costs 2 k calls of ``func``.
    """
    z = np.array(z, dtype=float)
    base = central_step(levels)
    columns = []
    for j in range(z.shape[0]):
        original = z[j]
        step = base * max(1.0, abs(original))
        z[j] = original + step
        upper = np.asarray(func(z), dtype=float)
        z[j] = original - step
        lower = np.asarray(func(z), dtype=float)
        # Divide by the step as represented in floating point, not the nominal one:
        # z +- h rounds, and the rounding would otherwise bias the quotient.
        taken = (original + step) - (original - step)
        z[j] = original
        columns.append((upper - lower) / taken)
    if not columns:
        size = np.asarray(func(z)).shape[0]
        return np.zeros((size, 0))
    return np.column_stack(columns)


def grouped_central_jacobian(
    func: VectorFunction,
    z: Array,
    pattern: object,
    groups: ColumnGroups | None = None,
    levels: int = 1,
) -> sp.csc_matrix:
    """Sparse Jacobian of ``func`` at ``z`` from one central difference per column group.

    The columns of a group are structurally orthogonal (no row has a structural
    nonzero in two of them), so moving all of them at once, each by its own step,
    changes row i through at most one column j of the group, and
    (f_i(z + h) - f_i(z - h)) / (2 h_j) is entry (i, j). This is the method of
    Curtis, Powell and Reid ("On the estimation of sparse Jacobian matrices",
    J. Inst. Maths Applics 13 (1974) 117-119) with central differences; each
    column has the step of :func:`central_jacobian`, so every entry equals the
    one that function gives up to rounding.

    Parameters
    ----------
    func : callable (k,) -> (n,)
    z : ndarray (k,)
    pattern : scipy.sparse matrix or array_like, shape (n, k)
        Where the Jacobian may be nonzero (stored entries count). Entries
        outside it are taken to be zero and are not looked at.
    groups : ColumnGroups, optional
        Structurally orthogonal column groups of ``pattern``
        (:func:`~branchline.numerics.column_groups.curtis_powell_reid_groups`
        when not given; pass them to save that work on repeated calls).
    levels : int
        Total nesting depth of differences this Jacobian takes part in.

    Returns
    -------
    scipy.sparse.csc_matrix (n, k)
        With exactly the pattern's entries stored. Costs 2 * groups.count calls of ``func``.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> f = lambda x: np.array([x[0] ** 2, x[0] * x[1], np.sin(x[2])])
    >>> pattern = sp.csc_matrix(np.array([[1, 0, 0], [1, 1, 0], [0, 0, 1]]))
    >>> jacobian = grouped_central_jacobian(f, np.array([1.0, 2.0, 0.0]), pattern)
    >>> np.round(jacobian.toarray(), 8)
    array([[2., 0., 0.],
           [2., 1., 0.],
           [0., 0., 1.]])
    """
    z = np.array(z, dtype=float)
    entries = structure(pattern)
    if groups is None:
        groups = curtis_powell_reid_groups(entries)
    steps = central_step(levels) * np.maximum(1.0, np.abs(z))
    # The steps as represented in floating point (see central_jacobian).
    taken = (z + steps) - (z - steps)
    rows = entries.indices
    columns = np.repeat(np.arange(entries.shape[1]), np.diff(entries.indptr))
    entry_groups = groups.group_of[columns]
    order = np.argsort(entry_groups, kind="stable")
    bounds = np.searchsorted(entry_groups[order], np.arange(groups.count + 1))
    values = np.empty(entries.nnz)
    for group in range(groups.count):
        moved = groups.group_of == group
        shift = np.where(moved, steps, 0.0)
        upper = np.asarray(func(z + shift), dtype=float)
        lower = np.asarray(func(z - shift), dtype=float)
        mine = order[bounds[group] : bounds[group + 1]]
        values[mine] = (upper[rows[mine]] - lower[rows[mine]]) / taken[columns[mine]]
    return sp.csc_matrix((values, entries.indices, entries.indptr), shape=entries.shape)


def directional_derivative(
    func: Callable[[Array], Array], z: Array, direction: Array, levels: int
) -> Array:
    """d/ds func(z + s d) at s = 0 by a central difference; ``d`` may be complex.

    ``func`` must accept real points only, so a complex direction is split into
    its real and imaginary parts and the derivative, linear in ``d``, is
    reassembled: D(a + i b) = D(a) + i D(b).

    Parameters
    ----------
    func : callable (k,) -> (n,)
        Its values may be complex.
    z : ndarray (k,) real
    direction : ndarray (k,) real or complex
    levels : int
        Total nesting depth of the difference scheme this call belongs to.
    """
    direction = np.asarray(direction)
    if np.iscomplexobj(direction):
        real_part = _real_directional(func, z, direction.real, levels)
        imag_part = _real_directional(func, z, direction.imag, levels)
        return real_part + 1j * imag_part
    return _real_directional(func, z, direction, levels)


def _real_directional(func: Callable[[Array], Array], z: Array, direction: Array, levels: int):
    scale = float(np.max(np.abs(direction))) if direction.size else 0.0
    if scale == 0.0:
        return 0.0 * np.asarray(func(z))
    unit = direction / scale
    step = central_step(levels) * max(1.0, float(np.max(np.abs(z))) if z.size else 1.0)
    upper = np.asarray(func(z + step * unit))
    lower = np.asarray(func(z - step * unit))
    return (upper - lower) * (scale / (2.0 * step))


# --- Richardson extrapolation (Ridders' method) ---------------------------------
# First step of the tableau, relative to max(1, max|z|), along a direction scaled
# to max-norm 1: large, since the extrapolation removes the truncation error and
# rounding shrinks as the step grows (Numerical Recipes advises a step over which
# f changes substantially). A first step where f is not finite is cut by STEP_CUT.
RICHARDSON_FIRST_STEP = 0.25
RICHARDSON_STEP_CUT = 10.0
RICHARDSON_CUTS = 8
# Each further column halves the step (Richardson's classical ratio).
RICHARDSON_RATIO = 2.0
RICHARDSON_COLUMNS = 14
# Stop once the newest diagonal differs from the last by this many times the best
# error estimate (Numerical Recipes' SAFE): rounding has taken over.
RICHARDSON_SAFE = 2.0


def _quotient(phi: Callable[[float], Array], step: float) -> Array:
    return (np.asarray(phi(step)) - np.asarray(phi(-step))) / (2.0 * step)


def _largest(values: Array) -> float:
    return float(np.max(np.abs(values))) if np.size(values) else 0.0


def extrapolated_derivative(phi: Callable[[float], Array], first_step: float) -> tuple[Array, float]:
    """phi'(0) by Ridders' extrapolation of central differences, and its error estimate.

    Parameters
    ----------
    phi : callable float -> ndarray (n,), real or complex
    first_step : float
        The largest step tried.

    Returns
    -------
    (ndarray (n,), float)
        The estimate with the smallest estimated error (max-norm), and that error.
    """
    step = first_step
    for _ in range(RICHARDSON_CUTS):
        with np.errstate(all="ignore"):
            first = _quotient(phi, step)
        if np.all(np.isfinite(first)):
            break
        step /= RICHARDSON_STEP_CUT
    else:
        return first, math.inf
    previous = [first]
    best, error = first, math.inf
    for _ in range(1, RICHARDSON_COLUMNS):
        step /= RICHARDSON_RATIO
        with np.errstate(all="ignore"):
            row = [_quotient(phi, step)]
        if not np.all(np.isfinite(row[0])):
            break
        factor = RICHARDSON_RATIO**2
        for j in range(1, len(previous) + 1):
            row.append((row[j - 1] * factor - previous[j - 1]) / (factor - 1.0))
            factor *= RICHARDSON_RATIO**2
            estimate = max(_largest(row[j] - row[j - 1]), _largest(row[j] - previous[j - 1]))
            if estimate <= error:
                best, error = row[j], estimate
        if _largest(row[-1] - previous[-1]) >= RICHARDSON_SAFE * error:
            break
        previous = row
    return best, error


def extrapolated_directional(
    func: Callable[[Array], Array], z: Array, direction: Array
) -> Array:
    """d/ds func(z + s d) at s = 0 by :func:`extrapolated_derivative`; ``d`` may be complex.

    ``func`` is evaluated at real points only (a complex direction is split into
    its real and imaginary parts, as in :func:`directional_derivative`); its
    values may be complex.
    """
    direction = np.asarray(direction)
    if np.iscomplexobj(direction):
        real_part = _real_extrapolated(func, z, direction.real)
        return real_part + 1j * _real_extrapolated(func, z, direction.imag)
    return _real_extrapolated(func, z, direction)


def _real_extrapolated(func: Callable[[Array], Array], z: Array, direction: Array) -> Array:
    scale = _largest(direction)
    if scale == 0.0:
        return 0.0 * np.asarray(func(z))
    unit = direction / scale
    first = RICHARDSON_FIRST_STEP * max(1.0, _largest(z))
    value, _ = extrapolated_derivative(lambda s: func(z + s * unit), first)
    return value * scale


__all__ = [
    "EPS",
    "central_jacobian",
    "central_step",
    "directional_derivative",
    "extrapolated_derivative",
    "extrapolated_directional",
    "grouped_central_jacobian",
]
