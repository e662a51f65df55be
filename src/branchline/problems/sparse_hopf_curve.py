"""The Hopf curve of a large sparse model: f = 0 and one complex bordered condition.

Unknowns u = (x, p2, omega, p1). With A = f_x and complex borders b, c (n,), the
bordered system

    M [v; g] = [0; 1],   M = [[A - i omega I, b], [c^H, 0]],

gives a complex scalar g that vanishes exactly where i omega is an eigenvalue of
A (M stays regular there when b is near the left and c near the right
eigenvector); the equations besides f = 0 are Re g = 0 and Im g = 0. This is the
minimally augmented Hopf system in its complex form (Govaerts, Numerical Methods
for Bifurcations of Dynamical Equilibria, SIAM 2000, chapter 4; Kuznetsov,
Elements of Applied Bifurcation Theory, 3rd ed., section 10.2.2; from memory).
Unlike the A^2 + kappa I form of :mod:`branchline.problems.hopf_curve`, it keeps
A's own sparsity and conditioning: one complex sparse LU of M per evaluation,
no matrix product, no n x n dense array.

Derivatives are exact: with the adjoint solve M^H [w; h] = [0; 1],
g_z = -w^H (d/dz A) v for a state or parameter z, and g_omega = i w^H v; the
state and parameter parts come from one contraction of f_xx and d/dp f_x with the
real and imaginary parts of w and v (:meth:`BoundaryCurve.gradient_forms`). At a
Hopf point v and w are the right and left eigenvectors of i omega: they give l1
directly (:func:`branchline.events.normal_forms.hopf_normal_form` with ``left=``),
and they are the next point's borders.

omega, not omega^2, is the unknown: through a Bogdanov-Takens point the curve
goes on smoothly to omega < 0 (its mirror image), so ``observe`` refuses the
first point with omega <= 0 and the Bogdanov-Takens point is located between the
last point and the refused one on the condition omega = 0, as on the dense curve.

Test functions: ``bautin`` (l1, on the sparse schedule of the dense curve). The
zero-Hopf and double-Hopf tests need the whole spectrum and are not evaluated on
this path.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import scipy.sparse as sps

from branchline.continuation.engine import ObservationFailed
from branchline.events.normal_forms import hopf_normal_form
from branchline.numerics import linalg
from branchline.numerics.eigenvalues import eigenvector_near, null_vectors
from branchline.problems.boundary_curve import BoundaryCurve
from branchline.problems.hopf_curve import LYAPUNOV_EVERY, NEUTRAL_SADDLE

Array = np.ndarray


class SparseHopfCurve(BoundaryCurve):
    """The Hopf curve of a large sparse model in (first, second) parameters.

    Parameters
    ----------
    model, first, second, parameters
        As :class:`branchline.problems.boundary_curve.BoundaryCurve`.
    u0 : ndarray (n + 3,)
        A Hopf point (x, p2, omega, p1); its critical eigenvectors start the borders
        (omega = 0: a Bogdanov-Takens point, the null vectors of A).
    borders : (right, left), optional
        Complex borders (n,) already known at u0.
    """

    kind = "hopf"
    unknown = "omega"  # the extra unknown (the dense curve's is omega^2)
    tests = ("bautin",)
    sparse_tests = ("bautin",)

    def __init__(
        self, model, first: int, second: int, parameters: Array, u0: Array, borders=None
    ) -> None:
        super().__init__(model, first, second, parameters, extra=1)
        self.neutral: Array | None = None
        self._since_lyapunov = LYAPUNOV_EVERY  # the start point gets its l1
        self._lyapunov_pending = False
        self._last = None
        self.factorizations = 0  # complex LUs of M (for benchmarks)
        self.reset_borders(u0, borders)

    # ------------------------------------------------------------------ borders

    def reset_borders(self, u: Array, borders: tuple[Array, Array] | None = None) -> None:
        """Borders from the eigenvectors of A for +-i omega at u (shift-invert Arnoldi)."""
        if borders is not None:
            right, left = borders
        else:
            a_matrix = self._sparse_state_matrix(u)
            omega = float(u[self.n + 1])
            if omega > 0.0:
                _, right = eigenvector_near(a_matrix, 1j * omega)
                # A^T w = -i omega w for real A, i.e. w^H (A - i omega I) = 0
                _, left = eigenvector_near(sps.csc_matrix(a_matrix.T), -1j * omega)
            else:  # a Bogdanov-Takens point: the (real) null vectors of A
                left, right = null_vectors(a_matrix)
        self.right = _unit(np.asarray(right, dtype=complex))
        self.left = _unit(np.asarray(left, dtype=complex))
        self._last = None

    # ------------------------------------------------------------------ the system

    def _sparse_state_matrix(self, u: Array) -> Any:
        return sps.csc_matrix(self.model.jacobian(u[: self.n], self.parameters_at(u)))

    def _parts(self, u: Array, a_matrix) -> tuple[Array, complex, Array]:
        """(v, g, w) of the bordered system at u: one complex sparse LU of M for both
        solves (the last one is kept: the engine observes the point it evaluated)."""
        key = u.tobytes()
        last = self._last
        if last is not None and last[0] == key:
            return last[1]
        n = self.n
        omega = float(u[n + 1])
        shifted = sps.csc_matrix(a_matrix, dtype=complex) - 1j * omega * sps.identity(
            n, dtype=complex, format="csc"
        )
        matrix = sps.bmat(
            [
                [shifted, sps.csc_matrix(self.left.reshape(n, 1))],
                [sps.csr_matrix(self.right.conj().reshape(1, n)), None],
            ],
            format="csc",
        )
        unit = np.zeros(n + 1, dtype=complex)
        unit[n] = 1.0
        try:
            factors, vg = linalg.sparse_factor_solve(matrix, unit)
        except RuntimeError as exc:  # SuperLU: exactly singular
            raise linalg.SingularMatrixError(str(exc)) from exc
        self.factorizations += 1
        wh, _ = linalg.refined_solve(factors, matrix, unit, "H")
        if not (np.isfinite(vg).all() and np.isfinite(wh).all()):
            raise linalg.SingularMatrixError("the bordered Hopf matrix is singular")
        parts = (vg[:n], complex(vg[n]), wh[:n])
        self._last = (key, parts)
        return parts

    def _f_columns(self, x: Array, p: Array) -> Array:
        """df/d(p2, omega, p1), shape (n, 3)."""
        columns = self.parameter_columns(x, p)
        return np.column_stack([columns[:, 0], np.zeros(self.n), columns[:, 1]])

    def _gradient_rows(self, x: Array, p: Array, v: Array, w: Array) -> Array:
        """d(Re g, Im g)/d(x, p2, omega, p1), shape (2, n + 3).

        w^H A v = (wr^T A vr + wi^T A vi) + i (wr^T A vi - wi^T A vr), so the real and
        imaginary parts are two columns of one contraction."""
        wr, wi, vr, vi = w.real, w.imag, v.real, v.imag
        terms = (
            (np.column_stack([wr, wr]), np.column_stack([vr, vi])),
            (np.column_stack([wi, -wi]), np.column_stack([vi, vr])),
        )
        d_x, d_p = self.gradient_forms(x, p, terms)
        along = 1j * complex(np.vdot(w, v))  # g_omega = i w^H v
        rows = np.empty((2, self.n + 3))
        rows[:, : self.n] = -d_x.T
        rows[:, self.n] = -d_p[0]
        rows[:, self.n + 1] = (along.real, along.imag)
        rows[:, self.n + 2] = -d_p[1]
        return rows

    def residual(self, u: Array) -> Array:
        """(f, Re g, Im g), shape (n + 2,)."""
        x, p = u[: self.n], self.parameters_at(u)
        _, g, _ = self._parts(u, self.model.jacobian(x, p))
        return np.concatenate([self.model.rhs(x, p), [g.real, g.imag]])

    def evaluate(self, u: Array) -> tuple[Array, Any]:
        """The residual and its exact Jacobian (n + 2, n + 3), scipy.sparse."""
        n = self.n
        x, p = u[:n], self.parameters_at(u)
        a_matrix = sps.csc_matrix(self.model.jacobian(x, p))
        v, g, w = self._parts(u, a_matrix)
        rows = self._gradient_rows(x, p, v, w)
        values = np.concatenate([self.model.rhs(x, p), [g.real, g.imag]])
        return values, self.stack(a_matrix, self._f_columns(x, p), rows)

    def jacobian(self, u: Array) -> Any:
        return self.evaluate(u)[1]

    # ------------------------------------------------------------------ along the curve

    def observe(self, u: Array, tangent: Array, jacobian: Any) -> tuple[Array, Array]:
        """The Bautin test (l1 on its schedule, NaN between); the borders move here.

        Raises
        ------
        ObservationFailed
            Where omega <= 0: the curve has passed a Bogdanov-Takens point.
        """
        n = self.n
        omega = float(u[n + 1])
        if not omega > 0.0:
            self.neutral = np.array(u, dtype=float)
            raise ObservationFailed(NEUTRAL_SADDLE)
        a_matrix = self._sparse_state_matrix(u)
        v, _, w = self._parts(u, a_matrix)
        self._lyapunov_pending = self._since_lyapunov >= LYAPUNOV_EVERY - 1
        lyapunov = self.lyapunov(u, (v, w)) if self._lyapunov_pending else math.nan
        self._pending = (_unit(v), _unit(w))
        return self.eigenvalues(a_matrix), np.array([lyapunov])

    def adapt(self, u: Array, tangent: Array) -> tuple[Array, Array]:
        """Engine hook after an accepted point: the borders move to its eigenvectors."""
        self.right, self.left = self._pending
        self._last = None
        self._since_lyapunov = 0 if self._lyapunov_pending else self._since_lyapunov + 1
        return u, tangent

    def lyapunov(self, u: Array, vectors: tuple[Array, Array] | None = None) -> float:
        """l1 at the Hopf point u (contract scaling), from the bordered vectors (v, w):
        at a Hopf point they are A's right and left eigenvectors for i omega."""
        x, p = u[: self.n], self.parameters_at(u)
        omega = float(u[self.n + 1])
        if vectors is None:
            vectors = self._parts(u, self._sparse_state_matrix(u))[::2]
        v, w = vectors
        try:
            return hopf_normal_form(self.model, x, p, omega, q=v, left=w).lyapunov
        except (np.linalg.LinAlgError, ArithmeticError, RuntimeError):
            return math.nan

    def condition(self, kind: str, u: Array) -> float:
        """omega (Bogdanov-Takens) or l1 (Bautin) at u."""
        if kind == "bogdanov_takens":
            return float(u[self.n + 1])
        if kind == "bautin":
            return self.lyapunov(u)
        return math.nan

    def frequency(self, u: Array) -> float:
        """omega, the unknown itself (0 at a Bogdanov-Takens point)."""
        return float(max(u[self.n + 1], 0.0))


def _unit(vector: Array) -> Array:
    return vector / np.linalg.norm(vector)
