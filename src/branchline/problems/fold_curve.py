"""The fold curve in two parameters: f = 0 and one minimally augmented fold condition.

Unknowns u = (x, p2, p1) (see :mod:`branchline.problems.boundary_curve`),
equations

    f(x, p) = 0,   g(x, p) = 0,   [[A, b], [c^T, 0]] [v; g] = [0; 1],

with A = f_x. g vanishes exactly where A is singular, and the bordered matrix
stays regular there when b is near the left and c near the right null vector
(Govaerts, Numerical Methods for Bifurcations of Dynamical Equilibria, SIAM
2000, section 4.2; Kuznetsov, Elements of Applied Bifurcation Theory, section
10.2.1; section numbers from memory). Its derivatives are exact:
g_z = -w^T A_z v with the transposed solve [[A, b], [c^T, 0]]^T [w; h] = [0; 1].
The borders follow the curve: after each accepted point b and c become the
normalized w and v there.

Test functions along the curve (Kuznetsov, section 8.2 and 10.3.1):

- ``cusp``: w^T B(v, v), the fold's quadratic coefficient up to a positive factor;
- ``bogdanov_takens``: w^T v / (|w| |v|), zero when the zero eigenvalue is double;
- ``zero_hopf``: the product of the real parts of the complex pairs (a pair on
  the imaginary axis besides the zero eigenvalue).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from branchline.numerics.eigenvalues import null_vectors
from branchline.problems.boundary_curve import BoundaryCurve, Factored, bordered, signed_product

Array = np.ndarray

FOLD_CURVE_TESTS = ("cusp", "bogdanov_takens", "zero_hopf")


class FoldCurve(BoundaryCurve):
    """The curve problem of fold points in (first, second) parameters.

    Parameters
    ----------
    model, first, second, parameters
        As :class:`branchline.problems.boundary_curve.BoundaryCurve`.
    u0 : ndarray (n + 2,)
        A fold point; its null vectors start the borders.
    """

    kind = "fold"
    tests = FOLD_CURVE_TESTS

    def __init__(
        self, model, first: int, second: int, parameters: Array, u0: Array, borders=None
    ) -> None:
        super().__init__(model, first, second, parameters)
        self.reset_borders(u0, borders)

    def reset_borders(self, u: Array, borders: tuple[Array, Array] | None = None) -> None:
        """Borders from the null vectors of f_x at u (used at a start and before locating).

        ``borders``: the (right, left) borders already computed at the same state and
        parameters (by another problem at this point): used as they are.
        """
        if borders is not None:
            self.right, self.left = borders
            return
        x, p = u[: self.n], self.parameters_at(u)
        left, right = null_vectors(self.state_matrix(x, p))
        self.right = np.real(right) / np.linalg.norm(np.real(right))
        self.left = np.real(left) / np.linalg.norm(np.real(left))

    def _null_at(self, u: Array, a_matrix) -> tuple[Array, float, Array]:
        """(v, g, w) of the bordered system at u: the last one is kept, so that the
        evaluation, the observation and the conditions at one point share one
        factorization of the bordered matrix (one per Newton step on the sparse path)."""
        key = u.tobytes()
        kept = getattr(self, "_kept", None)  # (key, right, left, parts): borders held, not ids
        if kept is not None and kept[0] == key and kept[1] is self.right and kept[2] is self.left:
            return kept[3]
        parts = self._null(a_matrix)
        self._kept = (key, self.right, self.left, parts)
        return parts

    def _null(self, a_matrix) -> tuple[Array, float, Array]:
        """(v, g, w) of the bordered system at A."""
        n = self.n
        factored = Factored(bordered(a_matrix, self.left[:, None], self.right[:, None]))
        unit = np.zeros(n + 1)
        unit[n] = 1.0
        vg = factored.solve(unit)
        w = factored.solve(unit, transposed=True)[:n]
        return vg[:n], float(vg[n]), w

    def residual(self, u: Array) -> Array:
        """(f, g), shape (n + 1,)."""
        x, p = u[: self.n], self.parameters_at(u)
        _, g, _ = self._null_at(u, self.state_matrix(x, p))
        return np.append(self.model.rhs(x, p), g)

    def evaluate(self, u: Array) -> tuple[Array, Any]:
        """(f, g) and their Jacobian (n + 1, n + 2) with exact derivatives of g."""
        x, p = u[: self.n], self.parameters_at(u)
        a_matrix = self.state_matrix(x, p)
        v, g, w = self._null_at(u, a_matrix)
        g_x, g_p = self.gradient_forms(x, p, ((w[:, None], v[:, None]),))
        jacobian = self.stack(
            a_matrix, self.parameter_columns(x, p), -np.concatenate([g_x[:, 0], g_p[:, 0]])[None, :]
        )
        return np.append(self.model.rhs(x, p), g), jacobian

    def jacobian(self, u: Array) -> Any:
        """dG/du, shape (n + 1, n + 2); sparse for large sparse models."""
        return self.evaluate(u)[1]

    def observe(self, u: Array, tangent: Array, jacobian: Any) -> tuple[Array, Array]:
        """Eigenvalues of f_x, and the cusp, Bogdanov-Takens and zero-Hopf tests; the
        borders move to this point's null vectors."""
        x, p = u[: self.n], self.parameters_at(u)
        a_matrix = self.state_matrix(x, p)
        v, _, w = self._null_at(u, a_matrix)
        eigenvalues = self.eigenvalues(a_matrix)
        tests = np.array(
            [
                self.cusp_test(x, p, v, w),
                float(w @ v) / (np.linalg.norm(w) * np.linalg.norm(v)),
                _pairs_test(eigenvalues),
            ]
        )
        self._pending = (v / np.linalg.norm(v), w / np.linalg.norm(w))
        return eigenvalues, tests

    def adapt(self, u: Array, tangent: Array) -> tuple[Array, Array]:
        """Engine hook after an accepted point: the borders move to its null vectors."""
        self.right, self.left = self._pending
        return u, tangent

    def cusp_test(self, x: Array, p: Array, v: Array, w: Array) -> float:
        """w^T B(v, v) / (|w| |v|^2): proportional to the fold's normal-form coefficient."""
        bvv = np.asarray(self.model.second(x, p, v, v), dtype=float)
        return float(w @ bvv) / (np.linalg.norm(w) * float(v @ v))

    def condition(self, kind: str, u: Array) -> float:
        """The scalar whose zero is a codimension-two point of ``kind`` on this curve,
        smooth near it (the extra equation of its defining system)."""
        x, p = u[: self.n], self.parameters_at(u)
        a_matrix = self.state_matrix(x, p)
        v, _, w = self._null_at(u, a_matrix)
        if kind == "cusp":
            return self.cusp_test(x, p, v, w)
        if kind == "bogdanov_takens":
            return float(w @ v) / (np.linalg.norm(w) * np.linalg.norm(v))
        return _nearest_axis_pair(self.eigenvalues(a_matrix)).real

    def parameter_derivatives(self, u: Array, indices: list[int]) -> Array:
        """d(f, g)/dp for the parameters ``indices``, shape (n + 1, k), exact (g_p = -w^T
        d/dp (A v))."""
        x, p = u[: self.n], self.parameters_at(u)
        v, _, w = self._null(self.state_matrix(x, p))
        g_p = -(w @ self.mixed_columns(x, p, v, indices))
        return np.vstack([self.parameter_columns(x, p, indices), g_p[None, :]])

    def surface_normal(self, u: Array, indices: list[int]) -> Array:
        """w^T f_p for the parameters ``indices`` (w the unit left null vector of f_x): the
        normal of the fold surface in those parameters (Dobson 1993), shape (k,)."""
        x, p = u[: self.n], self.parameters_at(u)
        _, _, w = self._null(self.state_matrix(x, p))
        return (w / np.linalg.norm(w)) @ self.parameter_columns(x, p, indices)

    def frequency(self, u: Array) -> float:
        """No frequency on a fold curve (NaN)."""
        return float("nan")


def _without_nearest_zero(eigenvalues: Array) -> Array:
    if eigenvalues.size == 0:
        return eigenvalues
    return np.delete(eigenvalues, int(np.argmin(np.abs(eigenvalues))))


def _pairs_test(eigenvalues: Array) -> float:
    """Product of the real parts of the complex pairs other than the zero eigenvalue (NaN
    when the eigenvalues are not computed)."""
    if eigenvalues.size == 0:
        return float("nan")
    rest = _without_nearest_zero(eigenvalues)
    return signed_product(rest[rest.imag > 0].real)


def _nearest_axis_pair(eigenvalues: Array) -> complex:
    """The complex eigenvalue (positive imaginary part) nearest the imaginary axis, besides
    the zero eigenvalue."""
    rest = _without_nearest_zero(eigenvalues)
    pairs = rest[rest.imag > 0]
    if pairs.size == 0:
        return complex("nan")
    return complex(pairs[int(np.argmin(np.abs(pairs.real)))])
