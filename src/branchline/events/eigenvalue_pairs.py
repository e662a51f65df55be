"""Complex eigenvalue pairs between consecutive rows of a branch.

The Hopf test function changes sign when one pair crosses the imaginary axis,
but not when two cross within one step. So the complex eigenvalues of two
consecutive rows are matched to each other, and every matched pair whose real
part changes sign seeds a Hopf bracket (:func:`hopf_crossings`). Eigenvalue rows
are sorted by decreasing real part and may be NaN-padded.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

from branchline.numerics.linalg import zero_crossing_fraction

Array = np.ndarray

# Complex eigenvalues: |Im| above this fraction of the spectral scale.
COMPLEX_RTOL = 1e-8
# Frequencies are compared rounded to this many decimals, so that a pair already
# seeded by matching is not seeded again from the counts (equal up to rounding).
FREQUENCY_DIGITS = 12


@lru_cache(maxsize=64)
def pair_indices(count: int) -> tuple[Array, Array]:
    """Index arrays (i, j) of every pair i < j of ``count`` items (cached)."""
    return np.triu_indices(count, 1)


def upper_eigenvalues(row: Array) -> Array:
    """The finite eigenvalues of a row with Im above ``COMPLEX_RTOL`` of the spectral scale."""
    lam = row[np.isfinite(row)]
    if lam.shape[0] == 0:
        return lam
    scale = max(float(np.max(np.abs(lam))), 1e-300)
    return lam[lam.imag > COMPLEX_RTOL * scale]


def hopf_crossings(before: Array, after: Array) -> list[tuple[float, float, bool]]:
    """Complex pairs whose real part changes sign between two rows.

    Returns (fraction, omega guess, tentative) for each crossing; ``tentative`` marks
    crossings inferred from counts only, which location may reject.

    Upper-half-plane eigenvalues of the two rows are matched by the assignment
    that minimizes the sum of squared distances (``linear_sum_assignment``),
    which keeps the order of a cluster of eigenvalues moving together, where
    nearest-neighbour matching would mix them up. If the count of unstable
    pairs changes by more than the matched crossings, the remaining crossings
    are seeded from the pairs nearest the imaginary axis.
    """
    upper_a, upper_b = upper_eigenvalues(before), upper_eigenvalues(after)
    if upper_a.shape[0] == 0 or upper_b.shape[0] == 0:
        return []
    cost = np.abs(upper_a[:, None] - upper_b[None, :]) ** 2
    # Imported here: scipy.optimize costs ~0.2 s of start-up, and only rows
    # with a Hopf candidate get this far.
    from scipy.optimize import linear_sum_assignment

    rows, cols = linear_sum_assignment(cost)
    crossings = []
    for i, j in zip(rows, cols, strict=True):
        value, match = upper_a[i], upper_b[j]
        if (value.real > 0.0) != (match.real > 0.0):
            fraction = zero_crossing_fraction(value.real, match.real)
            omega = float(value.imag + fraction * (match.imag - value.imag))
            crossings.append((fraction, omega, False))
    change = abs(
        int(np.count_nonzero(upper_a.real > 0.0)) - int(np.count_nonzero(upper_b.real > 0.0))
    )
    if change > len(crossings) and upper_a.shape[0] == upper_b.shape[0]:
        used = {round(omega, FREQUENCY_DIGITS) for _, omega, _ in crossings}
        for value in upper_b[np.argsort(np.abs(upper_b.real))]:
            if len(crossings) >= change:
                break
            if round(float(value.imag), FREQUENCY_DIGITS) not in used:
                crossings.append((0.5, float(value.imag), True))
    return crossings


def complex_count_changes(eigenvalues: Array) -> list[int]:
    """Rows after which the number of upper-half-plane eigenvalues with Re > 0 changes.

    ``eigenvalues`` is the branch's (rows, r) complex array.
    """
    if eigenvalues.shape[0] < 2 or eigenvalues.shape[1] == 0:
        return []
    with np.errstate(invalid="ignore"):
        size = np.abs(eigenvalues)
        scale = np.nanmax(np.where(np.isfinite(size), size, np.nan), axis=1, initial=0.0)
        upper = eigenvalues.imag > COMPLEX_RTOL * scale[:, None]
        count = np.count_nonzero(upper & (eigenvalues.real > 0.0), axis=1)
    return [int(row) for row in np.flatnonzero(np.diff(count))]


def nearest_pair(row: Array) -> tuple[complex, complex]:
    """The pair (lambda_i, lambda_j), i < j, with the smallest |lambda_i + lambda_j|."""
    lam = row[np.isfinite(row)]
    if lam.shape[0] < 2:
        return complex(math.nan), complex(math.nan)
    i, j = pair_indices(lam.shape[0])
    best = int(np.argmin(np.abs(lam[i] + lam[j])))
    return complex(lam[i[best]]), complex(lam[j[best]])
