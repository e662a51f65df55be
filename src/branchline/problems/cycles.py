"""Periodic orbits: the collocation problem handed to the continuation engine.

A periodic orbit x(t) = x(t + T) of x' = f(x, p) is written in normalized
time s = t / T in [0, 1): x'(s) = T f(x(s), p). It is represented by
orthogonal collocation on a mesh (:mod:`branchline.numerics.collocation`:
Gauss-Legendre points, de Boor and Swartz 1973; Ascher, Mattheij and Russell,
Numerical Solution of Boundary Value Problems for ODEs, chapter 5), with
periodicity built in (the last mesh value is the first), and the unknowns are

    u = (X / sqrt(N m), T, p),

X (N m, n) the mesh values, T the period, p the varied parameter. The
equations are the N m n collocation equations and the integral phase
condition  int_0^1 <x(s) - x_ref(s), x_ref'(s)> ds = 0  against the previous
orbit (which removes the freedom of a time shift; Doedel, Keller and
Kernevez, Int. J. Bifurcation and Chaos 1, 1991, section 6). Scaling X by
1 / sqrt(N m) makes the engine's Euclidean pseudo-arclength norm in
(orbit, period, parameter) approximately the L2 norm of the orbit.

The Jacobian comes from the model's exact Jacobian evaluated at all
collocation points in one vectorized call and is assembled as a sparse matrix
(or dense, for comparison in the benchmark). The engine hook ``adapt`` moves
the phase reference to the last accepted orbit and re-distributes the mesh
when the error estimate is no longer equidistributed.

Floquet multipliers come from the monodromy matrix obtained by condensing the
linearized collocation system interval by interval
(:func:`branchline.numerics.collocation.transfer_product`).

Large models (the model's :class:`~branchline.numerics.policy.LinearAlgebraPolicy`
decides the size) take the sparse path: the Jacobian is assembled from the
model's sparse df/dx at each collocation point
(:mod:`branchline.numerics.sparse_collocation`) and only the few multipliers of
largest modulus are computed, by Arnoldi on the monodromy matrix's action
(:mod:`branchline.numerics.floquet`); the test functions use those.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import scipy.sparse as sp

from branchline.continuation import engine as continuation
from branchline.numerics import collocation, differences, floquet, sparse_collocation
from branchline.numerics.policy import policy_of

if TYPE_CHECKING:
    from branchline.model.build import Model

Array = np.ndarray

# Re-distribute the mesh when the largest per-interval error share exceeds the
# mean by this factor (1 would remesh at every step; 2 keeps the mesh still
# while the orbit changes little: common practice).
REMESH_RATIO = 2.0
# Sample points per mesh interval for the orbit's extremes; each discrete
# extreme is then refined by the parabola through it and its neighbours.
EXTREME_SAMPLES = 32


@dataclass(frozen=True)
class OrbitPoint:
    """What is kept of one computed orbit (the engine's payload).

    Attributes
    ----------
    period : float
    parameter : float
    mesh : ndarray (N + 1,)
        The mesh in normalized time the orbit was computed on.
    values : ndarray (N m, n)
        The mesh values (the orbit at ``collocation.representation_times(mesh, m)``).
    multipliers : ndarray (n,) or (k,) complex
        All Floquet multipliers, sorted by decreasing modulus; on the sparse
        path only the trivial one and the others of largest modulus
        (``floquet.KEPT_MULTIPLIERS`` in all).
    trivial : int
        Index in ``multipliers`` of the trivial one (nearest to 1).
    minima, maxima : ndarray (n,)
        Each state's extremes over the orbit.
    """

    period: float
    parameter: float
    mesh: Array
    values: Array
    multipliers: Array
    trivial: int
    minima: Array
    maxima: Array

    @property
    def nontrivial(self) -> Array:
        """The multipliers other than the trivial one, shape (n - 1,)."""
        return np.delete(self.multipliers, self.trivial)

    @property
    def largest_multiplier(self) -> float:
        """Largest modulus among the nontrivial multipliers (0 for a one-state model)."""
        rest = self.nontrivial
        return float(np.max(np.abs(rest))) if rest.size else 0.0

    @property
    def stable(self) -> bool:
        """All nontrivial multipliers inside the unit circle."""
        return self.largest_multiplier < 1.0


def cycle_tests(tangent: Array, multipliers: Array, trivial: int) -> Array:
    """Test functions of an orbit: (cycle fold, period doubling, torus).

    - cycle fold: the parameter component of the unit tangent (it changes sign
      where the family turns back in the parameter);
    - period doubling: prod (mu + 1) over the nontrivial multipliers (real: complex
      pairs contribute |mu + 1|^2), zero when one passes through -1;
    - torus: prod_(i<j) (mu_i mu_j - 1) over the nontrivial multipliers, zero when a
      complex pair crosses the unit circle (also for real pairs with product 1,
      neutral saddles, which location discards).

    On the sparse path ``multipliers`` holds a fixed number of the largest ones:
    the factors of the left-out ones (|mu| smaller than every kept one) keep their
    signs along a family, so the sign changes are the same.

    These are the discrete-time analogues of the equilibrium test functions
    (Kuznetsov, Elements of Applied Bifurcation Theory, section 10.3; from memory).
    """
    rest = np.delete(multipliers, trivial)
    doubling = float(np.prod(rest + 1.0).real)
    pairs = [rest[i] * rest[j] - 1.0 for i in range(rest.size) for j in range(i + 1, rest.size)]
    torus = float(np.prod(pairs).real) if pairs else 1.0
    return np.array([float(tangent[-1]), doubling, torus])


class PeriodicOrbitProblem:
    """Periodic orbits of x' = f(x, p) by collocation, for the continuation engine.

    Parameters
    ----------
    model : branchline.model.build.Model
    vary_index : int
        Index of the varied parameter in the model's parameter vector.
    parameters : ndarray (m_p,)
        The other parameters' values.
    mesh : ndarray (N + 1,)
        Mesh on [0, 1], increasing.
    degree : int
        Gauss-Legendre points per interval (m).
    reference : ndarray (N m, n)
        Mesh values of the phase reference orbit (on ``mesh``).
    dense : bool
        Assemble dense Jacobians (for the benchmark's comparison) instead of sparse.

    The model's policy chooses the sparse path (``sparse_cycle_blocks``,
    ``sparse_floquet``); ``dense`` always takes the dense blocks.
    """

    def __init__(
        self,
        model: Model,
        vary_index: int,
        parameters: Array,
        mesh: Array,
        degree: int,
        reference: Array,
        *,
        dense: bool = False,
    ) -> None:
        self.model = model
        self.n = len(model.states)
        self.vary_index = int(vary_index)
        self.p = np.array(parameters, dtype=float)
        self.degree = int(degree)
        self.intervals = int(len(mesh) - 1)
        self.table = collocation.tables(self.degree)
        self.index = collocation.interval_indices(self.intervals, self.degree)
        self.points = self.intervals * self.degree
        self.scale = 1.0 / math.sqrt(self.points)
        self.dense = bool(dense)
        self.unknowns = self.points * self.n + 2
        self._vectorized = model.derivatives is not None and not model.python_source
        policy = policy_of(model)
        self.sparse_blocks = not self.dense and policy.sparse_cycle_blocks(self.n)
        self.sparse_floquet = policy.sparse_floquet(self.n) and self.intervals >= 2
        if not self.sparse_blocks:
            self._pattern()
        self.set_mesh(np.array(mesh, dtype=float), np.array(reference, dtype=float))

    # -- layout ---------------------------------------------------------------

    def _pattern(self) -> None:
        """Row and column indices of the collocation blocks (fixed for the problem)."""
        n, m, intervals = self.n, self.degree, self.intervals
        j = np.arange(intervals)[:, None, None, None, None]
        k = np.arange(m)[None, :, None, None, None]
        i = np.arange(n)[None, None, :, None, None]
        c = np.arange(n)[None, None, None, None, :]
        shape = (intervals, m, n, m + 1, n)
        self._rows = np.broadcast_to((j * m + k) * n + i, shape).ravel()
        point = self.index[:, None, None, :, None]
        self._cols = np.broadcast_to(point * n + c, shape).ravel()
        # The sparsity pattern never changes: find once where each entry of the assembly
        # order goes in CSC storage, so that each Jacobian is one gather (no sorting).
        size = self.points * n
        rows = np.concatenate(
            [self._rows, np.arange(size), np.arange(size), np.full(size + 2, size)]
        )
        cols = np.concatenate(
            [self._cols, np.full(size, size), np.full(size, size + 1), np.arange(size + 2)]
        )
        pattern = sp.csc_matrix(
            (np.arange(rows.size, dtype=float), (rows, cols)), shape=(size + 1, size + 2)
        )
        pattern.sort_indices()
        self._csc = (pattern.data.astype(np.intp), pattern.indices, pattern.indptr)

    def set_mesh(self, mesh: Array, reference: Array) -> None:
        """Use ``mesh`` and take the orbit ``reference`` (N m, n) on it as phase reference."""
        self.mesh = mesh
        self.widths = np.diff(mesh)
        blocks = reference[self.index]
        slopes = np.einsum("kl,jln->jkn", self.table.slopes, blocks)
        self._reference_at_nodes = np.einsum("kl,jln->jkn", self.table.values, blocks)
        self._phase_weights = self.table.weights[None, :, None] * slopes
        # d(phase)/dX: sum over nodes of w_k L[k, l] x_ref'(node), accumulated per mesh value.
        per_point = np.einsum("kl,jkc->jlc", self.table.values, self._phase_weights)
        row = np.zeros((self.points, self.n))
        np.add.at(row, self.index, per_point)
        self._phase_row = np.concatenate([row.ravel() / self.scale, [0.0, 0.0]])

    def pack(self, values: Array, period: float, parameter: float) -> Array:
        """u from mesh values (N m, n), the period and the parameter."""
        return np.concatenate([values.ravel() * self.scale, [period, parameter]])

    def unpack(self, u: Array) -> tuple[Array, float, float]:
        """(mesh values (N m, n), period, parameter) of u."""
        values = u[:-2].reshape(self.points, self.n) / self.scale
        return values, float(u[-2]), float(u[-1])

    def _parameters(self, value: float) -> Array:
        p = self.p.copy()
        p[self.vary_index] = value
        return p

    # -- model at the collocation points --------------------------------------

    def _model_at(self, points: Array, p: Array, derivatives: bool = True):
        """f (P, n), and when asked df/dx (P, n, n) and df/dp_vary (P, n), at ``points`` (P, n)."""
        model = self.model
        if self._vectorized:
            f = np.asarray(model.rhs(points.T, p), dtype=float).reshape(self.n, -1).T
            if not derivatives:
                return f, None, None
            fx, fp = model.derivatives(points.T, p)
            fx = np.broadcast_to(fx, (self.n, self.n, points.shape[0]))
            fp = np.broadcast_to(fp[:, self.vary_index], (self.n, points.shape[0]))
            return f, np.moveaxis(fx, 2, 0), fp.T
        f = np.array([model.rhs(x, p) for x in points], dtype=float)
        if not derivatives:
            return f, None, None
        fx = np.array([_dense(model.jacobian(x, p)) for x in points], dtype=float)
        fp = np.array([model.parameter_jacobian(x, p)[:, self.vary_index] for x in points])
        return f, fx, fp

    def _sparse_model_at(self, points: Array, p: Array):
        """f (P, n), df/dx at each point as :class:`PointJacobians`, df/dp_vary (P, n).

        Never forms the dense (P, n, n) stack for models with a sparse Jacobian: their
        Jacobian is asked for point by point.
        """
        model = self.model
        if self._vectorized and not model.sparse:
            f, fx, fp = self._model_at(points, p)
            return f, sparse_collocation.from_dense_stack(fx), fp
        if self._vectorized:
            f = np.asarray(model.rhs(points.T, p), dtype=float).reshape(self.n, -1).T
            fp = np.asarray(model.parameter_jacobian(points.T, p))[:, self.vary_index].T
        else:
            f = np.array([model.rhs(x, p) for x in points], dtype=float)
            fp = np.array([self._parameter_column(x, p) for x in points])
        matrices = [model.jacobian(x, p) for x in points]
        return f, sparse_collocation.from_matrices(matrices, self.n), fp

    def _parameter_column(self, x: Array, p: Array) -> Array:
        """df/dp_vary at one point (n,): for Python models the one central difference of
        that parameter (the same column as their full df/dp, at 2 instead of 2 m calls)."""
        model, k = self.model, self.vary_index
        if not model.python_source:
            return model.parameter_jacobian(x, p)[:, k]

        def along(value: Array) -> Array:
            shifted = p.copy()
            shifted[k] = value[0]
            return model.rhs(x, shifted)

        return differences.central_jacobian(along, p[k : k + 1])[:, 0]

    def _nodes(self, values: Array) -> tuple[Array, Array]:
        """Orbit and its s-derivative times h at the nodes: two (N, m, n) arrays."""
        blocks = values[self.index]
        at_nodes = np.einsum("kl,jln->jkn", self.table.values, blocks)
        slopes = np.einsum("kl,jln->jkn", self.table.slopes, blocks)
        return at_nodes, slopes

    # -- the protocol -----------------------------------------------------------

    def residual(self, u: Array) -> Array:
        """Collocation equations (N m n,) then the phase condition, shape (N m n + 1,)."""
        values, period, parameter = self.unpack(u)
        at_nodes, slopes = self._nodes(values)
        f, _, _ = self._model_at(at_nodes.reshape(-1, self.n), self._parameters(parameter), False)
        return self._residual(at_nodes, slopes, f, period)

    def _residual(self, at_nodes, slopes, f, period) -> Array:
        h_t = (self.widths * period)[:, None, None]
        equations = slopes - h_t * f.reshape(at_nodes.shape)
        phase = float(np.sum((at_nodes - self._reference_at_nodes) * self._phase_weights))
        return np.concatenate([equations.ravel(), [phase]])

    def evaluate(self, u: Array) -> tuple[Array, Any]:
        """(residual, Jacobian) sharing one evaluation of the model at the nodes."""
        values, period, parameter = self.unpack(u)
        at_nodes, slopes = self._nodes(values)
        points, p = at_nodes.reshape(-1, self.n), self._parameters(parameter)
        if self.sparse_blocks:
            f, jacobians, fp = self._sparse_model_at(points, p)
            residual = self._residual(at_nodes, slopes, f, period)
            return residual, self._assemble_sparse(f, jacobians, fp, period)
        f, fx, fp = self._model_at(points, p)
        residual = self._residual(at_nodes, slopes, f, period)
        return residual, self._assemble(f, fx, fp, period)

    def jacobian(self, u: Array) -> Any:
        """G_u, shape (N m n + 1, N m n + 2): scipy.sparse CSC (or dense, see ``dense``)."""
        return self.evaluate(u)[1]

    def blocks(self, fx: Array, period: float) -> Array:
        """Linearized collocation blocks [j, k, i, l, c] (N, m, n, m + 1, n), unscaled X."""
        n, m = self.n, self.degree
        jac = fx.reshape(self.intervals, m, n, n)
        h_t = (self.widths * period)[:, None, None, None, None]
        table = self.table
        eye = np.eye(n)[None, None, :, None, :]
        return (
            table.slopes[None, :, None, :, None] * eye
            - h_t * table.values[None, :, None, :, None] * jac[:, :, :, None, :]
        )

    def _assemble(self, f: Array, fx: Array, fp: Array, period: float) -> Any:
        data = self.blocks(fx, period).ravel() / self.scale
        size = self.points * self.n
        period_column, parameter_column = self._border(f, fp, period)
        if self.dense:
            jac = np.zeros((size + 1, size + 2))
            jac[self._rows, self._cols] = data
            jac[:size, size] = period_column
            jac[:size, size + 1] = parameter_column
            jac[size] = self._phase_row
            return jac
        entries = np.concatenate([data, period_column, parameter_column, self._phase_row])
        order, indices, indptr = self._csc
        return sp.csc_matrix((entries[order], indices, indptr), shape=(size + 1, size + 2))

    def _border(self, f: Array, fp: Array, period: float) -> tuple[Array, Array]:
        h = np.repeat(self.widths, self.degree * self.n)
        return -h * f.ravel(), -h * period * fp.ravel()

    def _assemble_sparse(self, f: Array, jacobians, fp: Array, period: float) -> sp.csc_matrix:
        period_column, parameter_column = self._border(f, fp, period)
        return sparse_collocation.collocation_jacobian(
            self.table,
            self.widths,
            self.index,
            period,
            jacobians,
            self.scale,
            period_column,
            parameter_column,
            self._phase_row,
        )

    def monodromy_action(self, u: Array, jacobian: Any = None) -> floquet.MonodromyAction:
        """v -> M v for the orbit u, from one SuperLU factorization (sparse path).

        ``jacobian`` is G_u at u when the caller has it (sparse), else it is evaluated.
        """
        size = self.points * self.n
        if not sp.issparse(jacobian) or jacobian.shape != (size + 1, size + 2):
            jacobian = self.evaluate(u)[1]
            if not sp.issparse(jacobian):
                jacobian = sp.csc_matrix(jacobian)
        system = sparse_collocation.initial_value_matrix(
            jacobian, self.n, self.intervals, self.degree, self.scale
        )
        return floquet.MonodromyAction(system, self.n)

    def monodromy(self, u: Array) -> Array:
        """The monodromy matrix (n, n) of the orbit u, by condensation of the collocation system."""
        values, period, parameter = self.unpack(u)
        at_nodes, _ = self._nodes(values)
        _, fx, _ = self._model_at(at_nodes.reshape(-1, self.n), self._parameters(parameter))
        size = self.n * self.degree
        blocks = self.blocks(fx, period).reshape(self.intervals, size, size + self.n)
        return collocation.transfer_product(blocks, self.degree, self.n)

    def leading_floquet(self, u: Array, jacobian: Any = None) -> floquet.FloquetResult:
        """The kept Floquet multipliers of u by Arnoldi (sparse path); raises FloquetFailed."""
        return floquet.leading_multipliers(self.monodromy_action(u, jacobian))

    def orbit_point(self, u: Array, jacobian: Any = None) -> OrbitPoint:
        """The payload of the orbit u: multipliers, extremes, mesh and values.

        On the sparse path ``jacobian`` (G_u at u) saves an evaluation; a failure of
        the multipliers raises :class:`branchline.numerics.floquet.FloquetFailed`.
        """
        values, period, parameter = self.unpack(u)
        if self.sparse_floquet:
            result = self.leading_floquet(u, jacobian)
            multipliers, trivial = result.multipliers, result.trivial
        else:
            multipliers = np.linalg.eigvals(self.monodromy(u)).astype(complex)
            multipliers = multipliers[np.argsort(-np.abs(multipliers), kind="stable")]
            trivial = int(np.argmin(np.abs(multipliers - 1.0)))
        minima, maxima = orbit_extremes(self.mesh, self.degree, values)
        return OrbitPoint(
            period, parameter, self.mesh.copy(), values, multipliers, trivial, minima, maxima
        )

    def observe(self, u: Array, tangent: Array, jacobian: Any) -> tuple[OrbitPoint, Array]:
        """(OrbitPoint, test values (cycle fold, period doubling, torus))."""
        try:
            point = self.orbit_point(u, jacobian)
        except floquet.FloquetFailed as failure:
            raise continuation.ObservationFailed(str(failure)) from None
        if not np.all(np.isfinite(point.multipliers)):
            raise continuation.ObservationFailed("the Floquet multipliers are not finite")
        if point.period <= 0.0:
            raise continuation.ObservationFailed(f"the period became {point.period:.6g}")
        return point, cycle_tests(tangent, point.multipliers, point.trivial)

    def adapt(self, u: Array, tangent: Array) -> tuple[Array, Array]:
        """Move the phase reference to u; re-distribute the mesh when it is unbalanced."""
        values, period, parameter = self.unpack(u)
        ratio = collocation.equidistribution_ratio(self.mesh, self.degree, values)
        if not ratio > REMESH_RATIO:
            self.set_mesh(self.mesh, values)
            return u, tangent
        new_mesh = collocation.equidistributed_mesh(self.mesh, self.degree, values)
        times = collocation.representation_times(new_mesh, self.degree)
        new_values = collocation.evaluate_periodic(self.mesh, self.degree, values, times)
        direction, _, _ = self.unpack(tangent)
        new_direction = collocation.evaluate_periodic(self.mesh, self.degree, direction, times)
        self.set_mesh(new_mesh, new_values)
        u_new = self.pack(new_values, period, parameter)
        t_new = self.pack(new_direction, tangent[-2], tangent[-1])
        return u_new, t_new / np.linalg.norm(t_new)

    def describe(self, u: Array) -> str:
        """The orbit for messages: parameter, period and the first states' ranges."""
        values, period, parameter = self.unpack(u)
        name = self.model.parameters[self.vary_index]
        ranges = ", ".join(
            f"{state} in [{lo:.6g}, {hi:.6g}]"
            for state, lo, hi in zip(
                self.model.states[:4], values.min(axis=0), values.max(axis=0), strict=False
            )
        )
        return f"at {name}={parameter:.10g} (period {period:.8g}; {ranges})"


def _dense(matrix: Any) -> Array:
    return matrix.toarray() if sp.issparse(matrix) else np.asarray(matrix, dtype=float)


def _state_columns(mesh: Array, degree: int, values: Array, at: Array) -> Array:
    """State i of the piecewise polynomial at the times ``at[i]``: (n, k) from (n, k) times."""
    at = np.mod(at, 1.0)
    intervals = mesh.shape[0] - 1
    which = np.clip(np.searchsorted(mesh, at, side="right") - 1, 0, intervals - 1)
    sigma = (at - mesh[which]) / (mesh[which + 1] - mesh[which])
    basis, _ = collocation.lagrange_basis(
        np.linspace(0.0, 1.0, degree + 1), sigma.ravel(), slopes=False
    )
    index = collocation.interval_indices(intervals, degree)[which]  # (n, k, m + 1)
    state = np.arange(values.shape[1])[:, None, None]
    gathered = values[index, state]  # (n, k, m + 1)
    return np.einsum("kl,kl->k", basis, gathered.reshape(-1, degree + 1)).reshape(at.shape)


def orbit_extremes(mesh: Array, degree: int, values: Array) -> tuple[Array, Array]:
    """Each state's minimum and maximum over the orbit, shapes (n,), (n,).

    The piecewise polynomial is sampled at ``EXTREME_SAMPLES`` points per
    interval; around each discrete extreme it is sampled again on a uniform
    grid as fine, and the vertex of the parabola through the best sample and
    its neighbours is taken.
    """
    local = np.arange(EXTREME_SAMPLES) / EXTREME_SAMPLES
    times = (mesh[:-1, None] + np.diff(mesh)[:, None] * local[None, :]).ravel()
    samples = collocation.evaluate_periodic(mesh, degree, values, times)  # (S, n)
    spacing = float(np.max(np.diff(mesh))) / EXTREME_SAMPLES
    offsets = np.linspace(-1.0, 1.0, 2 * EXTREME_SAMPLES + 1) * spacing
    states = np.arange(values.shape[1])
    found = []
    # every state at once (one gather per side): the loop over states cost seconds at
    # a thousand states
    for sign in (-1.0, 1.0):
        centres = times[np.argmax(sign * samples, axis=0)]  # (n,)
        columns = _state_columns(mesh, degree, values, centres[:, None] + offsets[None, :])
        best = np.clip(np.argmax(sign * columns, axis=1), 1, columns.shape[1] - 2)
        left, middle, right = (columns[states, best + shift] for shift in (-1, 0, 1))
        curvature = left - 2.0 * middle + right
        with np.errstate(divide="ignore", invalid="ignore"):
            shift = 0.5 * (left - right) / curvature
            vertex = middle - (right - left) ** 2 / (8.0 * curvature)
        refine = (curvature * sign < 0.0) & (np.abs(shift) <= 1.0)
        found.append(np.where(refine, vertex, middle))
    minima, maxima = found
    return minima, maxima


__all__ = ["OrbitPoint", "PeriodicOrbitProblem", "cycle_tests", "orbit_extremes"]
