"""Defining systems of fold, Hopf and branch points, and Newton's method on them.

Each builder returns a square system z -> (residual, Jacobian) whose regular
solution is the event itself, so that Newton refines it to rounding level:

- fold: the minimally augmented system f = 0, g = 0 with g from a bordered
  system (Govaerts, Numerical Methods for Bifurcations of Dynamical Equilibria,
  SIAM 2000, chapter 4; Kuznetsov, Elements of Applied Bifurcation Theory,
  section 10.2.1; section numbers from memory);
- Hopf: the standard extended system f = 0, A q = i omega q, <c, q> = 1
  (Kuznetsov, section 10.2.2; Griewank & Reddien 1983);
- branch point: the extended system f + mu psi = 0, [f_x, f_p]^T psi = 0,
  psi^T psi = 1 (Moore, "The numerical treatment of non-trivial bifurcation
  points", Numer. Funct. Anal. Optim. 2 (1980); Allgower & Georg, Introduction
  to Numerical Continuation Methods, section 8.1);
- a point on the branch: f = 0 and direction . (u - guess) = 0, which puts a
  guess between two computed rows back on the branch.

Unknowns start with u = (x, p): the states, then the varied parameter (index
``k`` of the full parameter vector). Jacobians are dense, or scipy.sparse where
the model's state Jacobian is (Moore's system is dense only); the Hopf system of
a sparse model keeps its Jacobian in blocks (:class:`HopfBlocks`) and Newton
solves it by bordering, never forming an n x n dense array.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import TYPE_CHECKING

import numpy as np
import scipy.sparse as sps
import scipy.sparse.linalg as spla

from branchline.events.normal_forms import directional_jacobian, parameter_second_derivative
from branchline.numerics.linalg import bordered_square, dense, solve
from branchline.numerics.newton import NewtonResult, NewtonTrouble, iterate
from branchline.numerics.tolerances import NEWTON_MAX_ITERATIONS, DefiningSystemRule
from branchline.vocabulary import Status

if TYPE_CHECKING:
    from branchline.model.build import Model

Array = np.ndarray
System = Callable[[Array], tuple[Array, object]]



def newton(system: System, z0: Array, scale: float = 1.0) -> NewtonResult:
    """Newton's method on a square system z -> (residual, Jacobian), scaled to the problem.

    The shared loop (:func:`branchline.numerics.newton.iterate`) with the rule
    :class:`~branchline.numerics.tolerances.DefiningSystemRule`: converged on a
    small update relative to |z| (``scale`` is added to |z|), on a residual at the
    system's rounding level, or on an update that stalled at that level, so that a
    converged iteration stops also when rounding or finite-difference derivatives
    keep the last bits moving. A system with the attribute ``residual_suffices =
    True`` is solved as soon as its residual is at rounding level, whatever the
    update: putting points on a branch (:func:`on_branch_system`), any solution
    near the guess serves, even beside a branch point where that system is
    near-singular.
    """
    rule = DefiningSystemRule(scale, bool(getattr(system, "residual_suffices", False)))

    def advance(z: Array, residual: Array, jacobian: object, size: float):
        try:
            if isinstance(jacobian, HopfBlocks):
                step = jacobian.solve(-residual)
            else:
                step = solve(jacobian, -residual)
        except np.linalg.LinAlgError:
            raise NewtonTrouble(
                Status.SINGULAR_JACOBIAN, "singular Jacobian of the defining system"
            ) from None
        if not np.all(np.isfinite(step)):
            raise NewtonTrouble(Status.NON_FINITE, "the Newton update is not finite")
        return z + step, float(np.linalg.norm(step)), None

    return iterate(system, np.array(z0, dtype=float), advance, rule, NEWTON_MAX_ITERATIONS)


def with_value(params: Array, k: int, value: float) -> Array:
    """A copy of the parameter vector with entry ``k`` set to ``value``."""
    full = np.array(params, dtype=float)
    full[k] = value
    return full


def on_branch_system(model: Model, params: Array, k: int, guess: Array, direction: Array) -> System:
    """f(u) = 0 and direction . (u - guess) = 0: unknowns u = (x, p), n + 1 equations."""

    def system(u: Array) -> tuple[Array, object]:
        full = with_value(params, k, u[-1])
        x = u[:-1]
        residual = np.append(model.rhs(x, full), direction @ (u - guess))
        a_matrix = model.state_jacobian(x, full)
        fp = model.parameter_jacobian(x, full)[:, k]
        return residual, bordered_square(a_matrix, fp, direction)

    system.residual_suffices = True  # see newton
    return system


def fold_system(model: Model, params: Array, k: int, border_b: Array, border_c: Array) -> System:
    """Minimally augmented fold system: unknowns u = (x, p), equations (f, g)."""
    n = border_b.shape[0]

    def system(u: Array) -> tuple[Array, object]:
        x, full = u[:-1], with_value(params, k, u[-1])
        a_matrix = model.state_jacobian(x, full)
        fp = model.parameter_jacobian(x, full)[:, k]
        bordered = bordered_square(a_matrix, border_b, border_c)
        rhs = np.zeros(n + 1)
        rhs[n] = 1.0
        vg = solve(bordered, rhs)
        wg = solve(bordered.T, rhs)
        v, g, w = vg[:n], vg[n], wg[:n]
        g_x = -(directional_jacobian(model, x, full, v).T @ w)
        g_p = -float(w @ model.jacobian_parameter_derivative(x, full, v)[:, k])
        residual = np.append(model.rhs(x, full), g)
        return residual, bordered_square(a_matrix, fp, np.append(g_x, g_p))

    return system


def hopf_system(model: Model, params: Array, k: int, c: Array) -> System:
    """Extended Hopf system: unknowns (x, p, omega, Re q, Im q), 3n + 2 equations."""
    n = c.shape[0]

    def system(z: Array) -> tuple[Array, object]:
        x, p, omega = z[:n], z[n], z[n + 1]
        qr, qi = z[n + 2 : 2 * n + 2], z[2 * n + 2 :]
        q = qr + 1j * qi
        full = with_value(params, k, p)
        a_matrix = model.state_jacobian(x, full)
        fp = model.parameter_jacobian(x, full)[:, k]
        eigen_residual = a_matrix @ q - 1j * omega * q
        normal = np.vdot(c, q) - 1.0
        residual = np.concatenate(
            [
                model.rhs(x, full),
                eigen_residual.real,
                eigen_residual.imag,
                [normal.real, normal.imag],
            ]
        )
        bq = directional_jacobian(model, x, full, q)
        apq = model.jacobian_parameter_derivative(x, full, q)[:, k]
        if sps.issparse(a_matrix):
            return residual, HopfBlocks(a_matrix, fp, bq, apq, q, omega, c)
        size = 3 * n + 2
        eye = np.eye(n)  # dense models only: a sparse model never builds an n x n array
        jac = np.zeros((size, size))
        jac[:n, :n], jac[:n, n] = a_matrix, fp
        rows_r, rows_i = slice(n, 2 * n), slice(2 * n, 3 * n)
        cols_r, cols_i = slice(n + 2, 2 * n + 2), slice(2 * n + 2, 3 * n + 2)
        jac[rows_r, :n], jac[rows_i, :n] = bq.real, bq.imag
        jac[rows_r, n], jac[rows_i, n] = apq.real, apq.imag
        jac[rows_r, n + 1], jac[rows_i, n + 1] = qi, -qr
        jac[rows_r, cols_r], jac[rows_r, cols_i] = a_matrix, omega * eye
        jac[rows_i, cols_r], jac[rows_i, cols_i] = -omega * eye, a_matrix
        # <c, q> = (cr - i ci) . (qr + i qi)
        jac[3 * n, cols_r], jac[3 * n, cols_i] = c.real, c.imag
        jac[3 * n + 1, cols_r], jac[3 * n + 1, cols_i] = -c.imag, c.real
        return residual, jac

    return system


class HopfBlocks:
    """The extended Hopf system's Jacobian of a large sparse model, kept in blocks.

    Newton's update solves the system by block elimination (a bordering method;
    Govaerts, Numerical Methods for Bifurcations of Dynamical Equilibria, SIAM
    2000, chapter 3, from memory) instead of factorizing the (3n + 2)-square
    matrix, whose LU fills in badly: one real sparse LU of A = f_x and one
    complex sparse LU of the bordered [[A - i omega I, -i q], [c^H, 0]]. With
    r = -residual split into r1 (f), r2 (the eigenvector equation, complex) and
    r3 (the normalization, complex):

        dx = A^-1 r1 - dp A^-1 f_p,
        [[A - i omega I, -i q], [c^H, 0]] (dq, domega) = (r2 - B_q dx - dp A_p q, r3),

    linear in dp, which is fixed by domega being real. No n x n dense array.
    """

    def __init__(self, a_matrix, fp, bq, apq, q, omega, c) -> None:
        self.a_matrix = sps.csc_matrix(a_matrix)
        self.fp, self.bq, self.apq = fp, sps.csc_matrix(bq), apq
        self.q, self.omega, self.c = q, omega, c
        self.shape = (3 * q.shape[0] + 2,) * 2

    def norm(self) -> float:
        """The Frobenius norm of the full Jacobian (for the rounding-level test)."""
        a_squared = float(abs(self.a_matrix).power(2).sum())
        n = self.q.shape[0]
        return float(
            np.sqrt(
                3.0 * a_squared
                + float(self.fp @ self.fp)
                + float(abs(self.bq).power(2).sum())
                + float(np.vdot(self.apq, self.apq).real)
                + float(np.vdot(self.q, self.q).real)
                + 2.0 * n * self.omega**2
                + 2.0 * float(np.vdot(self.c, self.c).real)
            )
        )

    def solve(self, rhs: Array) -> Array:
        """The Newton update for the right-hand side ``rhs`` (3n + 2,), by block elimination.

        Raises ``np.linalg.LinAlgError`` when a block is singular.
        """
        n = self.q.shape[0]
        r1 = rhs[:n]
        r2 = rhs[n : 2 * n] + 1j * rhs[2 * n : 3 * n]
        r3 = complex(rhs[3 * n], rhs[3 * n + 1])
        try:
            real_lu = spla.splu(self.a_matrix)
            a0 = real_lu.solve(np.ascontiguousarray(r1, dtype=float))
            a1 = -real_lu.solve(np.ascontiguousarray(self.fp, dtype=float))
            shifted = self.a_matrix.astype(complex) - 1j * self.omega * sps.identity(
                n, dtype=complex, format="csc"
            )
            bordered = sps.bmat(
                [
                    [shifted, sps.csc_matrix(np.reshape(-1j * self.q, (n, 1)))],
                    [sps.csr_matrix(np.reshape(self.c.conj(), (1, n))), None],
                ],
                format="csc",
            )
            complex_lu = spla.splu(bordered)
        except RuntimeError as exc:  # SuperLU: exactly singular
            raise np.linalg.LinAlgError(str(exc)) from exc
        first = complex_lu.solve(np.append(r2 - self.bq @ a0, r3))
        second = complex_lu.solve(np.append(-(self.bq @ a1 + self.apq), 0.0))
        if second[n].imag == 0.0:
            raise np.linalg.LinAlgError("the Hopf system's parameter direction is singular")
        dp = -first[n].imag / second[n].imag
        dx = a0 + dp * a1
        dq = first[:n] + dp * second[:n]
        domega = (first[n] + dp * second[n]).real
        return np.concatenate([dx, [dp, domega], dq.real, dq.imag])


def branch_point_system(model: Model, params: Array, k: int) -> System:
    """Moore's extended system: unknowns (x, p, psi, mu), 2n + 2 equations."""

    def system(z: Array) -> tuple[Array, Array]:
        n = (z.shape[0] - 2) // 2
        x, p, psi, mu = z[:n], z[n], z[n + 1 : 2 * n + 1], z[2 * n + 1]
        full = with_value(params, k, p)
        a_matrix = dense(model.jacobian(x, full))
        fp = model.parameter_jacobian(x, full)[:, k]
        g_u = np.column_stack([a_matrix, fp])
        residual = np.concatenate(
            [model.rhs(x, full) + mu * psi, g_u.T @ psi, [0.5 * (psi @ psi - 1.0)]]
        )
        hessian = np.empty((n + 1, n + 1))
        for j, unit in enumerate(np.eye(n)):
            hessian[j, :n] = psi @ directional_jacobian(model, x, full, unit)
            hessian[j, n] = psi @ model.jacobian_parameter_derivative(x, full, unit)[:, k]
        hessian[n, :n] = hessian[:n, n]
        hessian[n, n] = psi @ parameter_second_derivative(model, x, full, k)
        size = 2 * n + 2
        jac = np.zeros((size, size))
        jac[:n, : n + 1] = g_u
        jac[:n, n + 1 : 2 * n + 1] = mu * np.eye(n)
        jac[:n, 2 * n + 1] = psi
        jac[n : 2 * n + 1, : n + 1] = hessian
        jac[n : 2 * n + 1, n + 1 : 2 * n + 1] = g_u.T
        jac[2 * n + 1, n + 1 : 2 * n + 1] = psi
        return residual, jac

    return system
