"""The Hopf curve in two parameters: f = 0 and two minimally augmented Hopf conditions.

Unknowns u = (x, p2, kappa, p1), kappa = omega^2. With M = A^2 + kappa I
(A = f_x), the bordered system

    [[M, W], [V^T, 0]] [Vg; G] = [0; I_2]

gives a 2 x 2 matrix G that vanishes exactly where M has a two-dimensional null
space, i.e. where A has the eigenvalues +-i sqrt(kappa) (Govaerts, Numerical
Methods for Bifurcations of Dynamical Equilibria, SIAM 2000, chapter 4;
Kuznetsov, Elements of Applied Bifurcation Theory, section 10.2.2; from
memory). Two entries of G, chosen where the whole Jacobian is best
conditioned, are the equations besides f = 0. Their derivatives are exact:
G_ij,z = -Wg_i^T M_z Vg_j with M_x v = B(., A v) + A B(., v), M_p likewise from
d/dp (f_x v), M_kappa = I. The borders follow the curve.

Where kappa reaches zero the curve meets a Bogdanov-Takens point and goes on
as a curve of neutral saddles (real eigenvalues +-sqrt(-kappa)), which is no
Hopf curve: :meth:`HopfCurve.observe` refuses such points, so the curve ends
there and the Bogdanov-Takens point is located between its last point and the
refused one.

Test functions (Kuznetsov, sections 8.3-8.6 and 10.3.2): ``bautin`` (the first
Lyapunov coefficient l1), ``zero_hopf`` (the product of the other real
eigenvalues) and ``double_hopf`` (the product of the real parts of the other
complex pairs).
"""

from __future__ import annotations

import itertools
import math
from typing import Any

import numpy as np
import scipy.sparse as sps

from branchline.continuation.engine import ObservationFailed
from branchline.events.normal_forms import hopf_normal_form
from branchline.numerics import eigenvalues as eigen
from branchline.numerics import linalg
from branchline.numerics.eigenvalues import eigenvector_near
from branchline.numerics.policy import ARNOLDI_SMALLEST_SIZE
from branchline.problems.boundary_curve import (
    BoundaryCurve,
    Factored,
    bordered,
    orthonormal,
    signed_product,
)

Array = np.ndarray

HOPF_CURVE_TESTS = ("bautin", "zero_hopf", "double_hopf")
# l1 costs as much as the rest of a point's work together: it is computed at every
# LYAPUNOV_EVERY-th accepted point only (NaN between), and a sign change between two
# computed values is narrowed to neighbouring rows afterwards
# (:func:`branchline.events.codimension_two.find_curve_brackets`).
LYAPUNOV_EVERY = 4
NEUTRAL_SADDLE = "the Hopf curve turns into a curve of neutral saddles (omega -> 0)"


class HopfCurve(BoundaryCurve):
    """The curve problem of Hopf points in (first, second) parameters.

    Parameters
    ----------
    model, first, second, parameters
        As :class:`branchline.problems.boundary_curve.BoundaryCurve`.
    u0 : ndarray (n + 3,)
        A Hopf point (x, p2, omega^2, p1); its critical eigenvectors start the borders.
    """

    kind = "hopf"
    tests = HOPF_CURVE_TESTS
    sparse_tests = ("bautin",)  # computed on a sparser schedule: NaN at most points

    def __init__(
        self, model, first: int, second: int, parameters: Array, u0: Array, borders=None
    ) -> None:
        super().__init__(model, first, second, parameters, extra=1)
        self.neutral: Array | None = None
        self._since_lyapunov = LYAPUNOV_EVERY  # the start point gets its l1
        self._lyapunov_pending = False
        self._last_parts = None
        self._template: tuple[Array, Array, Array] | None = None  # (V, W, bordered zeros)
        self._fused: tuple | None = None  # decided at the first evaluation
        self._zero = np.zeros((self.n, 1))  # df/dkappa
        n, m = self.n, self.p.size  # rows of the fused gradient table in the order of u
        self._order = np.array([*range(n), n + self.second, n + m, n + self.first])
        self.reset_borders(u0, borders)

    # ------------------------------------------------------------------ borders

    def reset_borders(self, u: Array, borders: tuple[Array, Array] | None = None) -> None:
        """Borders from the critical eigenvectors at u, and the pair of entries of G used.

        ``borders``: the (right, left) borders already computed at the same state,
        parameters and kappa (by another problem at this point, whose second parameter
        differs): the eigenvector computation is skipped; the entries are chosen anew.
        """
        if borders is not None:
            self.right, self.left = borders
            self.entries = ((0, 0), (1, 1))
            self.entries = self._best_entries(u)
            return
        x, p, kappa = u[: self.n], self.parameters_at(u), float(u[self.n + 1])
        a_matrix = self.state_matrix(x, p)
        if kappa <= 0.0:  # a Bogdanov-Takens point: A^2 has a two-dimensional null space
            self.right, self.left = _square_null_spaces(a_matrix)
        else:
            omega = np.sqrt(kappa)
            _, q = eigenvector_near(a_matrix, 1j * omega)
            transposed = a_matrix.T.tocsc() if sps.issparse(a_matrix) else a_matrix.T
            _, left = eigenvector_near(transposed, -1j * omega)
            self.right = orthonormal(np.column_stack([q.real, q.imag]))
            self.left = orthonormal(np.column_stack([left.real, left.imag]))
        self.entries = ((0, 0), (1, 1))
        self.entries = self._best_entries(u)

    def _best_entries(self, u: Array) -> tuple[tuple[int, int], tuple[int, int]]:
        """The two entries of G whose rows make the Jacobian best conditioned."""
        x, p = u[: self.n], self.parameters_at(u)
        a_matrix = self.state_matrix(x, p)
        parts = self._parts(u, a_matrix)
        pairs = list(itertools.product((0, 1), (0, 1)))
        rows = dict(zip(pairs, self._gradients(x, p, a_matrix, parts, pairs), strict=True))
        top = None
        if not sps.issparse(a_matrix):
            top = np.hstack([a_matrix, self._f_columns(x, p)])
        best, choice = -1.0, self.entries
        for first, second in itertools.combinations(rows, 2):
            block = np.vstack([rows[first], rows[second]])
            matrix = block if top is None else np.vstack([top, block])
            smallest = float(np.linalg.svd(matrix, compute_uv=False)[-1])
            if smallest > best:
                best, choice = smallest, (first, second)
        return choice

    # ------------------------------------------------------------------ the system

    def _f_columns(self, x: Array, p: Array) -> Array:
        """df/d(p2, kappa, p1), shape (n, 3)."""
        columns = self.parameter_columns(x, p)
        return np.column_stack([columns[:, 0], np.zeros(self.n), columns[:, 1]])

    def _parts(self, u: Array, a_matrix) -> tuple[Array, Array, Array]:
        """(Vg (n, 2), G (2, 2), Wg (n, 2)) of the bordered system at u (the last one is
        kept: the engine observes the point it has just evaluated)."""
        last = self._last_parts
        key = u.tobytes()
        if last is not None and last[1] is self.right and last[2] is self.left and last[0] == key:
            return last[3]
        parts = self._solve_parts(u, a_matrix)
        self._last_parts = (key, self.right, self.left, parts)
        return parts

    def _solve_parts(self, u: Array, a_matrix) -> tuple[Array, Array, Array]:
        n = self.n
        kappa = float(u[n + 1])
        if sps.issparse(a_matrix):
            square = (a_matrix @ a_matrix + kappa * sps.identity(n, format="csc")).tocsc()
            matrix = bordered(square, self.left, self.right)
        else:  # [[A^2 + kappa I, W], [V^T, 0]] filled in place: one inverse
            matrix = self._bordered_template().copy()
            np.matmul(a_matrix, a_matrix, out=matrix[:n, :n])
            matrix.ravel()[: n * (n + 3) : n + 3] += kappa
            with np.errstate(all="ignore"):
                inverse = linalg.inverse_unchecked(matrix)
            if not math.isfinite(inverse.sum()):
                raise linalg.SingularMatrixError("the bordered matrix is singular or not finite")
            return inverse[:n, n:], inverse[n:, n:], inverse[n:, :n].T
        solution, adjoint = Factored(matrix).border_solutions(2)
        return solution[:n], solution[n:], adjoint[:n]

    def _bordered_template(self) -> Array:
        """[[0, W], [V^T, 0]] for the current borders (dense), made once per border."""
        kept = self._template
        if kept is not None and kept[0] is self.right and kept[1] is self.left:
            return kept[2]
        n = self.n
        template = np.zeros((n + 2, n + 2))
        template[:n, n:] = self.left
        template[n:, :n] = self.right.T
        self._template = (self.right, self.left, template)
        return template

    def _gradients(self, x, p, a_matrix, parts, entries) -> Array:
        """d G_ij / d(x, p2, kappa, p1) for each (i, j) of ``entries``, shape (len, n + 3).

        G_ij,z = -(w_i^T B(A v_j, .) + (A^T w_i)^T B(v_j, .)) in x, likewise with
        d/dp (f_x .) in p: both terms of every entry from one contraction
        (:meth:`BoundaryCurve.gradient_forms`)."""
        vg, _, wg = parts
        w = wg[:, [i for i, _ in entries]]
        v = vg[:, [j for _, j in entries]]
        d_x, d_p = self.gradient_forms(x, p, ((w, a_matrix @ v), (a_matrix.T @ w, v)))
        rows = np.empty((len(entries), self.n + 3))
        rows[:, : self.n] = d_x.T
        rows[:, self.n] = d_p[0]
        rows[:, self.n + 1] = (w * v).sum(axis=0)
        rows[:, self.n + 2] = d_p[1]
        return -rows

    def parameter_derivatives(self, u: Array, indices: list[int]) -> Array:
        """d(f, G_e1, G_e2)/dp for the parameters ``indices``, shape (n + 2, k), exact
        (G_ij,p = -Wg_i^T M_p Vg_j with M_p v = d/dp (f_x A v) + A d/dp (f_x v))."""
        x, p = u[: self.n], self.parameters_at(u)
        a_matrix = self.state_matrix(x, p)
        vg, _, wg = self._parts(u, a_matrix)
        rows = []
        for i, j in self.entries:
            v, w = vg[:, j], wg[:, i]
            moved = self.mixed_columns(x, p, a_matrix @ v, indices)
            plain = self.mixed_columns(x, p, v, indices)
            rows.append(-(w @ moved + (a_matrix.T @ w) @ plain))
        return np.vstack([self.parameter_columns(x, p, indices), np.array(rows)])

    def left_null(self, u: Array) -> Array:
        """The left null vector mu of d(f, G_e1, G_e2)/d(x, kappa) at a Hopf point: its
        G part is orthogonal to dG/dkappa, its f part -A^-T G_x^T mu_G (A is regular at
        a Hopf point away from zero-Hopf points). mu^T dE/dp is the normal of the Hopf
        surface in parameter space."""
        n = self.n
        x, p = u[:n], self.parameters_at(u)
        a_matrix = self.state_matrix(x, p)
        rows = self._gradients(x, p, a_matrix, self._parts(u, a_matrix), self.entries)
        g_kappa = rows[:, n + 1]
        mu_g = np.array([g_kappa[1], -g_kappa[0]])
        mu_f = -Factored(a_matrix).solve(rows[:, :n].T @ mu_g, transposed=True)
        mu = np.concatenate([mu_f, mu_g])
        return mu / np.linalg.norm(mu)

    def surface_normal(self, u: Array, indices: list[int]) -> Array:
        """mu^T dE/dp for the parameters ``indices``: the normal of the Hopf surface in
        those parameters, shape (k,) (:meth:`left_null`)."""
        return self.left_null(u) @ self.parameter_derivatives(u, indices)

    def residual(self, u: Array) -> Array:
        """(f, G_e1, G_e2), shape (n + 2,)."""
        x, p = u[: self.n], self.parameters_at(u)
        _, g, _ = self._parts(u, self.state_matrix(x, p))
        values = [g[i, j] for i, j in self.entries]
        return np.concatenate([self.model.rhs(x, p), values])

    def evaluate(self, u: Array) -> tuple[Array, Any]:
        """The residual and its Jacobian (n + 2, n + 3), exact derivatives."""
        n = self.n
        x, p = u[:n], self.parameters_at(u)
        if self._fused is None:
            self._fused = self._fused_pieces()
        if self._fused:
            return self._evaluate_fused(u, x, p, *self._fused)
        together = None if self.sparse else getattr(self.model, "derivatives", None)
        if together is None:
            a_matrix = self.state_matrix(x, p)
            f_p = self.parameter_columns(x, p)
        else:  # A and df/dp from one compiled call (dense models)
            a_matrix, f_all = together(x, p)
            a_matrix = a_matrix.toarray() if sps.issparse(a_matrix) else a_matrix
            f_p = f_all[:, [self.second, self.first]]
        parts = self._parts(u, a_matrix)
        rows = self._gradients(x, p, a_matrix, parts, self.entries)
        g = parts[1]
        values = np.concatenate([self.model.rhs(x, p), [g[self.entries[0]], g[self.entries[1]]]])
        if sps.issparse(a_matrix):
            return values, self.stack(a_matrix, self._f_columns(x, p), rows)
        jacobian = np.zeros((n + 2, n + 3))
        jacobian[:n, :n] = a_matrix
        jacobian[:n, n] = f_p[:, 0]
        jacobian[:n, n + 2] = f_p[:, 1]
        jacobian[n:] = rows
        return values, jacobian

    def _fused_pieces(self) -> tuple:
        """(the (n + m, n * n) second-derivative table's maker,) for small dense
        expression models; () for the others."""
        together = None if self.sparse else getattr(self.model, "derivatives", None)
        entries = self._second_entries()
        if together is None or entries is None or not entries.dense:
            return ()
        return (entries.table,)

    def _evaluate_fused(self, u: Array, x: Array, p: Array, table) -> tuple[Array, Any]:
        """:meth:`evaluate` for small dense expression models: the same values and exact
        Jacobian, assembled in place with as few array operations as possible (at a
        few states numpy's per-call overhead, not arithmetic, is the cost of a point)."""
        n = self.n
        a_matrix = self.model.jacobian(x, p)
        f_p = self.model.parameter_jacobian(x, p)  # one compiled call for all of df/dp
        if type(a_matrix) is not np.ndarray:
            a_matrix = a_matrix.toarray() if sps.issparse(a_matrix) else np.asarray(a_matrix)
        vg, g, wg = self._parts(u, a_matrix)
        (i1, j1), (i2, j2) = self.entries
        w = -wg[:, _columns(i1, i2)]  # negated here: G_ij,z = -(...) below
        v = vg[:, _columns(j1, j2)]
        # G_ij,z = -(w^T f_x,z (A v) + (A^T w)^T f_x,z v): both terms in one product,
        # then G_ij,kappa = -w^T v; rows reordered to (x, p2, kappa, p1) in one take
        outer = w[:, None, :] * (a_matrix @ v)[None, :, :]
        outer += (a_matrix.T @ w)[:, None, :] * v[None, :, :]
        rows = np.empty((n + self.p.size + 1, 2))
        np.matmul(table(x, p), outer.reshape(n * n, 2), out=rows[:-1])
        rows[-1] = (w * v).sum(axis=0)
        second, first = self.second, self.first
        top = (a_matrix, f_p[:, second : second + 1], self._zero, f_p[:, first : first + 1])
        jacobian = np.concatenate((np.concatenate(top, axis=1), rows[self._order].T))
        values = np.empty(n + 2)
        values[:n] = self.model.rhs(x, p)
        values[n] = g[i1, j1]
        values[n + 1] = g[i2, j2]
        return values, jacobian

    def jacobian(self, u: Array) -> Any:
        """dG/du, shape (n + 2, n + 3); sparse for large sparse models."""
        return self.evaluate(u)[1]

    # ------------------------------------------------------------------ along the curve

    def observe(self, u: Array, tangent: Array, jacobian: Any) -> tuple[Array, Array]:
        """Eigenvalues and the Bautin, zero-Hopf and double-Hopf tests; borders move here.

        Raises
        ------
        ObservationFailed
            Where kappa <= 0: the curve has passed a Bogdanov-Takens point
            (``self.neutral`` keeps the refused point for locating it).
        """
        n = self.n
        kappa = float(u[n + 1])
        if not kappa > 0.0:
            self.neutral = np.array(u, dtype=float)
            raise ObservationFailed(NEUTRAL_SADDLE)
        if type(jacobian) is np.ndarray:  # the engine's G_u at u: A is its first block
            a_matrix = jacobian[:n, :n]
        else:
            a_matrix = self.state_matrix(u[:n], self.parameters_at(u))
        vg, _, wg = self._parts(u, a_matrix)
        self._lyapunov_pending = self._since_lyapunov >= LYAPUNOV_EVERY - 1
        if self._lyapunov_pending and type(a_matrix) is np.ndarray:
            # one eigen-decomposition gives the eigenvalues and l1's eigenvector q
            eigenvalues, q = _eigenvalues_and_vector(a_matrix, math.sqrt(kappa))
            lyapunov = self.lyapunov(u, q)
        else:
            eigenvalues = self.eigenvalues(a_matrix)
            lyapunov = self.lyapunov(u) if self._lyapunov_pending else math.nan
        if eigenvalues.size:
            rest = _other_values(eigenvalues.tolist(), math.sqrt(kappa))
            real = [v.real for v in rest if v.imag == 0]
            pairs = [v.real for v in rest if v.imag > 0]
            tests = np.array([lyapunov, signed_product(real), signed_product(pairs)])
        else:
            tests = np.array([lyapunov, math.nan, math.nan])
        self._pending = (orthonormal(vg), orthonormal(wg))
        return eigenvalues, tests

    def adapt(self, u: Array, tangent: Array) -> tuple[Array, Array]:
        """Engine hook after an accepted point: the borders move to its null spaces."""
        self.right, self.left = self._pending
        self._since_lyapunov = 0 if self._lyapunov_pending else self._since_lyapunov + 1
        return u, tangent

    def lyapunov(self, u: Array, q: Array | None = None) -> float:
        """The first Lyapunov coefficient l1 at a Hopf point u (contract scaling); ``q``
        the unit eigenvector of A for i omega when the caller has it."""
        x, p = u[: self.n], self.parameters_at(u)
        omega = float(np.sqrt(max(u[self.n + 1], 0.0)))
        entries = self._second_entries()
        form = entries.bilinear(x, p) if entries is not None else None
        model = self.model if form is None else _WithBilinear(self.model, form)
        try:
            return hopf_normal_form(model, x, p, omega, q=q).lyapunov
        except (np.linalg.LinAlgError, ArithmeticError):  # A singular: zero-Hopf, l1 undefined
            return float("nan")

    def condition(self, kind: str, u: Array) -> float:
        """The scalar whose zero is a codimension-two point of ``kind`` on this curve."""
        n = self.n
        kappa = float(u[n + 1])
        if kind == "bogdanov_takens":
            return kappa
        if kind == "bautin":
            return self.lyapunov(u)
        x, p = u[:n], self.parameters_at(u)
        rest = _other_eigenvalues(self.eigenvalues(self.state_matrix(x, p)), np.sqrt(abs(kappa)))
        if kind == "zero_hopf":
            real = rest[np.abs(rest.imag) <= 1e-12 * (1.0 + np.abs(rest))]
            return float(real[int(np.argmin(np.abs(real)))].real) if real.size else np.nan
        pairs = rest[rest.imag > 0]
        return float(pairs[int(np.argmin(np.abs(pairs.real)))].real) if pairs.size else np.nan

    def frequency(self, u: Array) -> float:
        """omega = sqrt(kappa)."""
        return float(np.sqrt(max(u[self.n + 1], 0.0)))


def _columns(first: int, second: int) -> Any:
    """Index picking columns (first, second) of an (n, 2) array: a view when it can."""
    if first == second:
        return [first, second]
    return slice(None) if first == 0 else slice(None, None, -1)


def _eigenvalues_and_vector(a_matrix: Array, omega: float) -> tuple[Array, Array | None]:
    """All eigenvalues of a dense A (sorted by decreasing real part) and the unit
    eigenvector of the one nearest i omega (None if LAPACK fails): what
    :func:`~branchline.numerics.eigenvalues.eigenvector_near` gives, from the same call."""
    try:
        values, vectors = np.linalg.eig(a_matrix)
    except np.linalg.LinAlgError:
        return eigen.sort_eigenvalues(eigen.eigvals_unchecked(a_matrix)), None
    index = int(np.argmin(np.abs(values - 1j * omega)))
    q = vectors[:, index] / np.linalg.norm(vectors[:, index])
    return eigen.sort_eigenvalues(values), q


def _square_null_spaces(a_matrix) -> tuple[Array, Array]:
    """Orthonormal bases (n, 2) of the right and left null spaces of A^2 (dense SVD; sparse
    A: the two eigenvectors of A^2 and of its transpose nearest zero by shift-invert
    Arnoldi, no n x n dense array): at a Bogdanov-Takens point they hold the generalized
    eigenvectors of the double zero."""
    if sps.issparse(a_matrix) and a_matrix.shape[0] > ARNOLDI_SMALLEST_SIZE + 1:
        square = sps.csc_matrix(a_matrix @ a_matrix)
        return _near_zero_pair(square), _near_zero_pair(sps.csc_matrix(square.T))
    dense = a_matrix.toarray() if sps.issparse(a_matrix) else np.asarray(a_matrix)
    left, _, right_t = np.linalg.svd(dense @ dense)
    return right_t[-2:].T.copy(), left[:, -2:].copy()


def _near_zero_pair(matrix) -> Array:
    """An orthonormal basis (n, 2) of the span of the two eigenvectors of a sparse matrix
    nearest zero (shift-invert Arnoldi just off zero: the matrix is singular there)."""
    import scipy.sparse.linalg as spla

    scale = max(float(abs(matrix).max()), 1.0)
    try:
        _, vectors = spla.eigs(matrix, k=2, sigma=eigen.SHIFT_OFFSET * scale)
    except (RuntimeError, spla.ArpackNoConvergence, spla.ArpackError) as exc:
        raise linalg.SingularMatrixError(f"no null space of A^2 found ({exc})") from exc
    return np.linalg.qr(np.column_stack([vectors.real, vectors.imag]))[0][:, :2]


def _other_eigenvalues(eigenvalues: Array, omega: float) -> Array:
    """The eigenvalues without the critical pair nearest +-i omega."""
    if eigenvalues.size < 2:
        return eigenvalues[:0]
    # a few values: plain Python beats numpy's call overhead
    return np.array(_other_values(eigenvalues.tolist(), omega), dtype=complex)


def _other_values(values: list, omega: float) -> list:
    """:func:`_other_eigenvalues` on a list of complex numbers."""
    if len(values) < 2:
        return []
    up = min(range(len(values)), key=lambda k: abs(values[k] - 1j * omega))
    down = min(
        (k for k in range(len(values)) if k != up), key=lambda k: abs(values[k] + 1j * omega)
    )
    return [v for k, v in enumerate(values) if k != up and k != down]


class _WithBilinear:
    """The model with B(a, b) from its dense Hessian at one point (x, p): l1 there calls B
    four times, each a numpy-broadcast evaluation otherwise. Valid at that point only."""

    def __init__(self, model, form) -> None:
        self._model, self._form = model, form

    def second(self, x: Array, p: Array, a: Array, b: Array) -> Array:
        return self._form(a, b)

    def __getattr__(self, name: str) -> Any:
        return getattr(self._model, name)
