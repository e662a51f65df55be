"""Floquet multipliers of large periodic orbits: Arnoldi on the monodromy matrix's action.

The monodromy matrix M (n x n) of an orbit is never formed. Its action
v -> M v is the end value w(1) of the linearized collocation system cut open
at s = 0 with start w(0) = v (:func:`branchline.numerics.sparse_collocation.initial_value_matrix`);
that sparse system is factored once by SuperLU, and each product is then two
triangular solves. The multipliers of largest modulus, the ones that decide
stability and the cycle bifurcations, come from the implicitly restarted
Arnoldi method (ARPACK through ``scipy.sparse.linalg.eigs``; Lehoucq, Sorensen
and Yang, ARPACK Users' Guide, SIAM 1998) on that action, with a fixed seeded
start vector so that runs repeat exactly. For small n (fewer than
``KEPT_MULTIPLIERS`` + 2 states) M is built column by column from the same
factorization and all its eigenvalues are taken.

The trivial multiplier 1 (the orbit's own tangent) must be among those found,
to ``TRIVIAL_TOLERANCE``; it is the check that the discretization and the
Arnoldi run are both sound. Coarse meshes on stiff models give spurious
multipliers near +1 or -1: Gauss collocation is A-stable but not L-stable, its
stability function tends to (-1)^m for h lambda -> -infinity (Hairer and
Wanner, Solving Ordinary Differential Equations II, section IV.3), so a fast
decaying mode is damped by an interval only when h T |lambda| is moderate.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

Array = np.ndarray

# Multipliers kept per orbit: the trivial one and the others of largest modulus.
# Enough to follow a few unstable or weakly stable directions; a multiplier that
# crosses the unit circle is among them unless more than this many lie outside
# it (common practice: a handful).
KEPT_MULTIPLIERS = 8
# When the trivial multiplier is not among the kept ones (many unstable
# directions), Arnoldi is run again for up to this many.
MOST_MULTIPLIERS = 32
# The trivial multiplier found by the discretization differs from 1 by an error
# of the collocation (h^(2m) at mesh points for smooth orbits) and of Arnoldi
# (tolerance: machine precision). Beyond this the mesh is too coarse for the
# other multipliers to be trusted (common practice; measured below 1e-9 on the
# test chains at 40 x 4 points).
TRIVIAL_TOLERANCE = 1e-5
# Work limit: products with M (pairs of triangular solves) per Arnoldi run.
MAX_PRODUCTS = 3000
# Arnoldi subspace size for k wanted eigenvalues: ARPACK's advice ncv >= 2 k + 1.
SUBSPACE_FACTOR = 3
# Seed of the fixed Arnoldi start vector (reproducible multipliers).
START_SEED = 20261203


class FloquetFailed(RuntimeError):
    """The multipliers could not be computed; the message says why."""


@dataclass(frozen=True)
class FloquetResult:
    """The kept Floquet multipliers of one orbit.

    Attributes
    ----------
    multipliers : ndarray (k,) complex
        Sorted by decreasing modulus; the trivial one and the k - 1 others of largest modulus.
    vectors : ndarray (n, k) complex
        Eigenvectors of M (values at s = 0 of the Floquet eigenfunctions).
    trivial : int
        Index of the trivial multiplier (nearest 1).
    products : int
        Products with M used (pairs of triangular solves).
    method : str
        "Arnoldi" or "dense" (M built column by column, small n).
    """

    multipliers: Array
    vectors: Array
    trivial: int
    products: int
    method: str


class MonodromyAction:
    """v -> M v from one SuperLU factorization of the cut-open collocation system.

    Parameters
    ----------
    system : scipy.sparse matrix ((P + 1) n, (P + 1) n)
        From :func:`branchline.numerics.sparse_collocation.initial_value_matrix`.
    size : int
        n.
    limit : int
        Most products allowed (``MAX_PRODUCTS``); beyond it :class:`FloquetFailed`.
    """

    def __init__(self, system: sp.spmatrix, size: int, limit: int | None = None) -> None:
        self.size = int(size)
        self.limit = int(MAX_PRODUCTS if limit is None else limit)
        self.products = 0
        try:
            self._lu = spla.splu(sp.csc_matrix(system))
        except RuntimeError as error:  # SuperLU: "Factor is exactly singular"
            raise FloquetFailed(
                f"the linearized collocation system is singular ({error})"
            ) from None
        self._rhs = np.zeros(system.shape[0])

    def profile(self, start: Array) -> Array:
        """All values w of the linearized orbit from w(0) = ``start``: shape (P + 1, n)."""
        start = np.asarray(start)
        if np.iscomplexobj(start):
            return self.profile(start.real) + 1j * self.profile(start.imag)
        self._rhs[: self.size] = start
        return self._lu.solve(self._rhs).reshape(-1, self.size)

    def __call__(self, start: Array) -> Array:
        """M v, shape (n,)."""
        self.products += 1
        if self.products > self.limit:
            raise FloquetFailed(
                f"Arnoldi needed more than {self.limit} products with the monodromy matrix"
            )
        return self.profile(np.ravel(start))[-1]

    def matrix(self) -> Array:
        """M (n, n), column by column from the factorization (small n only)."""
        rhs = np.zeros((self._rhs.shape[0], self.size))
        rhs[: self.size] = np.eye(self.size)
        self.products += self.size
        return self._lu.solve(rhs)[-self.size :]


def leading_multipliers(
    action: MonodromyAction, count: int = KEPT_MULTIPLIERS, tolerance: float = TRIVIAL_TOLERANCE
) -> FloquetResult:
    """The trivial multiplier and the ``count`` - 1 others of largest modulus.

    Raises
    ------
    FloquetFailed
        Arnoldi did not converge or exceeded its work limit, or the trivial
        multiplier is not found within ``tolerance`` among up to
        ``MOST_MULTIPLIERS`` of largest modulus.
    """
    n = action.size
    wanted = count
    while True:
        values, vectors, method = _largest(action, wanted)
        distance = np.abs(values - 1.0)
        trivial = int(np.argmin(distance))
        if distance[trivial] <= tolerance:
            break
        if method == "dense" or wanted >= min(MOST_MULTIPLIERS, n - 2):
            nearest = values[trivial]
            raise FloquetFailed(
                f"the trivial Floquet multiplier 1 is not among the {values.size} of largest "
                f"modulus (nearest {nearest.real:.8g}{nearest.imag:+.3g}i, off by "
                f"{distance[trivial]:.2e} > {tolerance:g}): more intervals are needed, or "
                "the orbit has too many unstable directions"
            )
        wanted = min(2 * wanted, MOST_MULTIPLIERS, n - 2)
    keep = _kept(values, trivial, count)
    values, vectors = values[keep], vectors[:, keep]
    trivial = int(np.argmin(np.abs(values - 1.0)))
    return FloquetResult(values, vectors, trivial, action.products, method)


def _largest(action: MonodromyAction, wanted: int) -> tuple[Array, Array, str]:
    """(values, vectors, method): ``wanted`` eigenpairs of M of largest modulus, sorted."""
    n = action.size
    if wanted >= n - 1:
        values, vectors = np.linalg.eig(action.matrix())
        method = "dense"
    else:
        operator = spla.LinearOperator((n, n), matvec=action, dtype=float)
        start = np.random.default_rng(START_SEED).standard_normal(n)
        subspace = min(n, max(SUBSPACE_FACTOR * wanted, 2 * wanted + 1))
        try:
            values, vectors = spla.eigs(
                operator,
                k=wanted,
                which="LM",
                v0=start,
                ncv=subspace,
                tol=0.0,
                maxiter=action.limit,
            )
        except spla.ArpackNoConvergence as error:
            raise FloquetFailed(
                f"Arnoldi did not converge on the monodromy matrix ({len(error.eigenvalues)} "
                f"of {wanted} multipliers after {action.products} products)"
            ) from None
        except spla.ArpackError as error:
            raise FloquetFailed(f"Arnoldi failed on the monodromy matrix ({error})") from None
        method = "Arnoldi"
    values = np.asarray(values, dtype=complex)
    if not np.all(np.isfinite(values)):
        raise FloquetFailed("the Floquet multipliers are not finite")
    order = np.argsort(-np.abs(values), kind="stable")
    return values[order], np.asarray(vectors, dtype=complex)[:, order], method


def _kept(values: Array, trivial: int, count: int) -> Array:
    """Indices (sorted by modulus) of the trivial multiplier and the count - 1 largest others."""
    others = [i for i in range(values.size) if i != trivial][: max(count - 1, 0)]
    return np.array(sorted([trivial, *others]))


def eigenfunction(action: MonodromyAction, vector: Array) -> Array:
    """The Floquet eigenfunction from its value ``vector`` at s = 0: real, (P, n).

    The linearized orbit from w(0) = ``vector`` (real part), at the P
    representation points (the value at s = 1, mu times the start, left out).
    """
    return action.profile(np.real(vector))[:-1]


__all__ = [
    "KEPT_MULTIPLIERS",
    "TRIVIAL_TOLERANCE",
    "FloquetFailed",
    "FloquetResult",
    "MonodromyAction",
    "eigenfunction",
    "leading_multipliers",
]
