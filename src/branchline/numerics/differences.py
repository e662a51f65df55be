"""Finite differences for models that supply no exact derivatives.

Used for Python models: the Jacobian when the user gives none, and always for
df/dp, the bilinear and trilinear forms B, C and d/dp (f_x v).

Every formula is a central difference. When differences are nested (B is a
difference of Jacobian actions, C a difference of B), all levels use the same
step h = eps**(1/(k + 2)) for k nested levels: the rounding error then grows
like eps / h**k and the truncation error like h**2, and this step balances the
two (Nocedal & Wright, Numerical Optimization, 2nd ed., section 8.1, for k = 1;
the general k is the same balance). Steps scale with max(1, |z|) so that
z + h stays well resolved in floating point (common practice, as in
``scipy.optimize.approx_fprime``).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

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


__all__ = ["EPS", "central_jacobian", "central_step", "directional_derivative"]
