"""Orthogonal collocation on a mesh: the tables and mesh tools periodic orbits need.

A function x(s) on [0, 1] is represented by a piecewise polynomial of degree
``m`` on the mesh 0 = tau_0 < ... < tau_N = 1. On interval j it is given by
its values at the m + 1 equally spaced points tau_j + h_j l / m, l = 0..m
(shared with the neighbouring intervals at the ends), and the differential
equation is imposed at the m Gauss-Legendre points of each interval:
orthogonal collocation (de Boor and Swartz, "Collocation at Gaussian points",
SIAM J. Numer. Anal. 10, 1973; Ascher, Mattheij and Russell, Numerical
Solution of Boundary Value Problems for Ordinary Differential Equations,
chapter 5). At the mesh points the error is of order h^(2m) (superconvergence).

Mesh adaptation equidistributes an estimate of the local error, the
(m+1)-th derivative of the solution to the power 1/(m+1) (de Boor's
equidistribution; Ascher, Mattheij and Russell, section 9.3): with the m-th
derivative constant on each interval, the (m+1)-th is estimated from its jumps
between neighbouring intervals.

Everything here is vectorized over intervals and points; no Python loop runs
per collocation point.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

Array = np.ndarray

# Equidistribution: a floor for the monitor function, as a fraction of its
# mean, so that intervals where the solution is locally a polynomial of degree
# m keep a finite width (common practice: a few percent).
MONITOR_FLOOR = 0.05
# Neighbouring intervals of the new mesh may differ in width by at most this
# factor, keeping the piecewise interpolation and the Newton system well
# conditioned (common practice).
MAX_WIDTH_RATIO = 4.0


@dataclass(frozen=True)
class CollocationTables:
    """The per-interval tables of degree ``m`` collocation (local variable sigma in [0, 1]).

    Attributes
    ----------
    degree : int
        m, the number of Gauss-Legendre points per interval.
    nodes : ndarray (m,)
        Gauss-Legendre points c_k in (0, 1).
    weights : ndarray (m,)
        Their quadrature weights (sum 1).
    values : ndarray (m, m + 1)
        L[k, l] = ell_l(c_k): the Lagrange basis on the points l / m at the nodes.
    slopes : ndarray (m, m + 1)
        D[k, l] = ell_l'(c_k) (derivative in sigma; divide by h for d/ds).
    """

    degree: int
    nodes: Array
    weights: Array
    values: Array
    slopes: Array


def lagrange_basis(points: Array, at: Array, slopes: bool = True) -> tuple[Array, Array | None]:
    """Values and (when ``slopes``) derivatives of the Lagrange basis on ``points`` at ``at``.

    Returns
    -------
    values, slopes : ndarray (len(at), len(points)); slopes is None when not asked for
    """
    points = np.asarray(points, dtype=float)
    at = np.asarray(at, dtype=float)
    count = points.shape[0]
    factors = at[:, None] - points[None, :]  # (k, count)
    values = np.empty((at.shape[0], count))
    derivatives = np.zeros((at.shape[0], count)) if slopes else None
    for column in range(count):
        others = [i for i in range(count) if i != column]
        denominator = np.prod(points[column] - points[others])
        values[:, column] = np.prod(factors[:, others], axis=1) / denominator
        if derivatives is not None:
            for skip in others:
                rest = [i for i in others if i != skip]
                derivatives[:, column] += np.prod(factors[:, rest], axis=1) / denominator
    return values, derivatives


@lru_cache(maxsize=8)
def tables(degree: int) -> CollocationTables:
    """Collocation tables for ``degree`` Gauss-Legendre points per interval (cached)."""
    nodes, weights = np.polynomial.legendre.leggauss(degree)
    nodes = 0.5 * (nodes + 1.0)
    weights = 0.5 * weights
    values, slopes = lagrange_basis(np.linspace(0.0, 1.0, degree + 1), nodes)
    for array in (nodes, weights, values, slopes):
        array.setflags(write=False)
    return CollocationTables(degree, nodes, weights, values, slopes)


def interval_indices(intervals: int, degree: int) -> Array:
    """(N, m + 1) indices of each interval's representation points among the N m
    periodic mesh values (the last point of the last interval wraps to 0)."""
    index = np.arange(intervals)[:, None] * degree + np.arange(degree + 1)[None, :]
    return index % (intervals * degree)


def representation_times(mesh: Array, degree: int) -> Array:
    """The N m times s in [0, 1) of the mesh values (mesh (N + 1,))."""
    widths = np.diff(mesh)
    local = np.arange(degree) / degree
    return (mesh[:-1, None] + widths[:, None] * local[None, :]).ravel()


def evaluate_periodic(mesh: Array, degree: int, values: Array, at: Array) -> Array:
    """The piecewise polynomial given by ``values`` (N m, n) at the times ``at`` (k,).

    Times are taken modulo 1 (the function is periodic).
    """
    at = np.mod(np.asarray(at, dtype=float), 1.0)
    intervals = mesh.shape[0] - 1
    which = np.clip(np.searchsorted(mesh, at, side="right") - 1, 0, intervals - 1)
    sigma = (at - mesh[which]) / (mesh[which + 1] - mesh[which])
    basis, _ = lagrange_basis(np.linspace(0.0, 1.0, degree + 1), sigma, slopes=False)
    index = interval_indices(intervals, degree)[which]  # (k, m + 1)
    return np.einsum("kl,kln->kn", basis, values[index])


def highest_derivative(mesh: Array, degree: int, values: Array) -> Array:
    """The m-th derivative d^m x / ds^m on each interval, shape (N, n) (constant there).

    The m-th forward difference of the m + 1 equally spaced values times
    (m / h)^m.
    """
    intervals = mesh.shape[0] - 1
    blocks = values[interval_indices(intervals, degree)]  # (N, m + 1, n)
    signs = np.array([(-1.0) ** (degree - i) * math.comb(degree, i) for i in range(degree + 1)])
    difference = np.einsum("l,jln->jn", signs, blocks)
    return difference * ((degree / np.diff(mesh)) ** degree)[:, None]


def error_monitor(mesh: Array, degree: int, values: Array) -> Array:
    """Per-interval monitor |x^(m+1)|^(1/(m+1)) (N,), from jumps of the m-th derivative.

    The jumps to both neighbours (periodic) over the distance between interval
    midpoints estimate the (m+1)-th derivative; the larger is kept, with a floor of
    ``MONITOR_FLOOR`` times the mean.
    """
    top = highest_derivative(mesh, degree, values)
    middle = 0.5 * (mesh[:-1] + mesh[1:])
    gap_next = np.mod(np.roll(middle, -1) - middle, 1.0)
    jump_next = np.linalg.norm(np.roll(top, -1, axis=0) - top, axis=1) / gap_next
    jump_before = np.roll(jump_next, 1)
    monitor = np.maximum(jump_next, jump_before) ** (1.0 / (degree + 1))
    mean = float(np.mean(monitor))
    if not math.isfinite(mean) or mean <= 0.0:
        return np.ones_like(monitor)
    return np.maximum(monitor, MONITOR_FLOOR * mean)


def equidistribution_ratio(mesh: Array, degree: int, values: Array) -> float:
    """max / mean of the per-interval error shares h_j * monitor_j (1 when equidistributed)."""
    shares = np.diff(mesh) * error_monitor(mesh, degree, values)
    return float(np.max(shares) / np.mean(shares))


def equidistributed_mesh(mesh: Array, degree: int, values: Array) -> Array:
    """A new mesh of the same N intervals equidistributing h_j * monitor_j.

    The cumulative error share is inverted piecewise linearly; neighbouring widths
    are then limited to ``MAX_WIDTH_RATIO`` by blending with the uniform mesh.
    """
    intervals = mesh.shape[0] - 1
    monitor = error_monitor(mesh, degree, values)
    cumulative = np.concatenate([[0.0], np.cumsum(np.diff(mesh) * monitor)])
    targets = np.linspace(0.0, cumulative[-1], intervals + 1)
    new = np.interp(targets, cumulative, mesh)
    new[0], new[-1] = 0.0, 1.0
    uniform = np.linspace(0.0, 1.0, intervals + 1)
    for blend in (0.0, 0.25, 0.5, 0.75, 1.0):
        candidate = (1.0 - blend) * new + blend * uniform
        widths = np.diff(candidate)
        ratios = widths / np.roll(widths, 1)
        if np.all(widths > 0) and np.max(np.maximum(ratios, 1.0 / ratios)) <= MAX_WIDTH_RATIO:
            return candidate
    return uniform


def interval_transfers(blocks: Array, size: int) -> Array:
    """Interior values of each interval as linear maps of its first value, by condensation.

    Parameters
    ----------
    blocks : ndarray (N, m n, (m + 1) n)
        Interval j's linearized collocation equations in its m + 1 representation
        points, columns of point 0 first.
    size : int
        n.

    Returns
    -------
    ndarray (N, m n, n)
        Rows l n .. (l + 1) n - 1 map the value at point 0 of interval j to its value at
        point l + 1; the last n rows are the interval's transfer matrix P_j.
    """
    return np.linalg.solve(blocks[:, :, size:], -blocks[:, :, :size])


def transfer_product(blocks: Array, degree: int, size: int) -> Array:
    """The monodromy matrix from the linearized collocation blocks, by condensation.

    Parameters
    ----------
    blocks : ndarray (N, m n, (m + 1) n)
        Interval j's linearized collocation equations in its m + 1 representation
        points: columns of point 0 first.
    degree, size : int
        m and n.

    Returns
    -------
    ndarray (n, n)
        P_(N-1) ... P_0, where P_j maps the value at the start of interval j to the
        value at its end (the interior unknowns eliminated: condensation of the
        collocation system; Ascher, Mattheij and Russell, section 5.6; from memory).
    """
    transfers = interval_transfers(blocks, size)[:, -size:, :]
    product = np.eye(size)
    for transfer in transfers:
        product = transfer @ product
    return product


__all__ = [
    "CollocationTables",
    "equidistributed_mesh",
    "equidistribution_ratio",
    "error_monitor",
    "evaluate_periodic",
    "highest_derivative",
    "interval_indices",
    "interval_transfers",
    "lagrange_basis",
    "representation_times",
    "tables",
    "transfer_product",
]
