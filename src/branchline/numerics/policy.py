"""The one place that decides dense or sparse linear algebra for a model.

Every size threshold that switches between dense LAPACK and sparse methods
(SuperLU, shift-invert Arnoldi) is a field of :class:`LinearAlgebraPolicy`.
A model carries its policy (``Model.linear_algebra``); the code that decides
asks the model's policy, never a module constant. Tests run a case both ways
by giving the model :data:`DENSE` or :data:`SPARSE`:

>>> from dataclasses import replace
>>> SPARSE.sparse_curve(3, jacobian_is_sparse=False), DEFAULT.sparse_curve(3, False)
(True, False)
>>> DEFAULT.sparse_location(301), replace(DEFAULT, location_sparse_above=3).sparse_location(4)
(True, True)
"""

from __future__ import annotations

from dataclasses import dataclass

# ARPACK finds k eigenvalues of an n x n matrix only for k < n - 1, so shift-invert
# Arnoldi (k >= 1) needs at least three states.
ARNOLDI_SMALLEST_SIZE = 3


@dataclass(frozen=True)
class LinearAlgebraPolicy:
    """Size thresholds (numbers of states n) between dense and sparse linear algebra.

    Attributes
    ----------
    force : {None, "dense", "sparse"}
        None decides by the thresholds below and by what the model's Jacobian
        returns; "sparse" makes every decision sparse (bordered solves with
        SuperLU, location with SuperLU and shift-invert Arnoldi), "dense" every
        one dense.
    location_sparse_above : int
        Location and normal forms use sparse linear algebra above this many
        states; below it dense LAPACK is faster.
    eigenvalues_dense_up_to : int
        A sparse Jacobian up to this size is converted to dense for its
        eigenvalues: LAPACK on 200 x 200 takes ~20 ms, less than a few
        Arnoldi runs, and gives them all.
    dense_fallback_up_to : int
        When the leading-eigenvalue search cannot confirm its values, a dense
        eigenvalue computation is the fallback up to this size. Measured on the
        2-core development machine with a Brusselator chain Jacobian (cells
        coupled by diffusion, equal diffusion, hundreds of modes crowded near
        the leading pair; wall seconds, other jobs running, so ranges):
        np.linalg.eigvals took 0.5-1.2 s at 1,000 states, 1.3 s at 1,500 and
        2.6-10.7 s at 2,000, against 1.2-15 s, 2.6 s and 4.5-16 s for the
        multi-shift Arnoldi search of the same matrix. Dense LAPACK is as fast
        or faster up to about 2,000 states and always decides, so the cut-off
        is 2,000 (was 800).
    condition_check_up_to : int
        The equilibrium solve checks the condition number of dense Jacobians
        up to this size (an SVD, O(n^3): ~0.05 s at 400).
    exact_second_up_to : int
        Directional Jacobians B(v, .) from the model's exact bilinear form up
        to this size (one call per column); above, a central difference of the
        Jacobian (two calls).
    finite_differences_dense_up_to : int
        A Python model without a Jacobian gets a dense finite-difference
        Jacobian up to this size, a sparse one above.
    determinant_dense_up_to : int
        The branch-point test (a bordered determinant) of a sparse Jacobian is
        computed densely up to this size, with SuperLU above.
    expression_sparse_above : int
        An expression model with more states than this, whose Jacobian has few
        structural nonzeros, returns it as a scipy.sparse matrix (and is
        continued with sparse LU); smaller ones return dense arrays.
    cycle_blocks_dense_up_to : int
        Periodic orbits of models up to this size assemble their collocation
        Jacobian from dense per-interval blocks (N, m, n, m + 1, n); above, from
        the model's sparse Jacobian at each collocation point
        (:mod:`branchline.numerics.sparse_collocation`). The dense blocks hold
        N m (m + 1) n^2 numbers: ~2-3 GB at 200 states on 40 x 4 points.
    floquet_dense_up_to : int
        Floquet multipliers of models up to this size come from the dense
        monodromy matrix (all n of them); above, the few of largest modulus by
        Arnoldi on its action (:mod:`branchline.numerics.floquet`).
    reuse_rejected_points_above : int
        An equilibrium branch with a dense Jacobian and more states than this keeps
        the points the test-function rule rejects, with their eigenvalues, and
        records them later when they pass (continuation/revisit.py): all eigenvalues
        are most of a point's cost there (~80% at 100 states), and about one step
        in five is rejected. Below it the points stay where plain step control puts
        them (the saving would be small, and small models' tests pin their points).
    hopf_curve_sparse_above : int
        A Hopf curve of a model with a sparse Jacobian and more states than this
        is followed on the complex bordered system [[A - i omega I, b], [c^H, 0]]
        (:mod:`branchline.problems.sparse_hopf_curve`: A's own sparsity, one
        complex LU per evaluation); smaller ones on the A^2 + kappa I system,
        faster for small dense matrices but with A's condition number squared
        (Newton no longer converged on a 2,000-state chain). 300, like
        ``location_sparse_above``: where the rest of the sparse path starts.
    """

    force: str | None = None
    location_sparse_above: int = 300
    eigenvalues_dense_up_to: int = 200
    dense_fallback_up_to: int = 2000
    condition_check_up_to: int = 400
    exact_second_up_to: int = 60
    finite_differences_dense_up_to: int = 200
    determinant_dense_up_to: int = 50
    expression_sparse_above: int = 200
    cycle_blocks_dense_up_to: int = 50
    floquet_dense_up_to: int = 50
    reuse_rejected_points_above: int = 50
    hopf_curve_sparse_above: int = 300

    def sparse_curve(self, size: int, jacobian_is_sparse: bool) -> bool:
        """Whether a curve of a model with ``size`` states is continued with sparse LU."""
        if self.force is not None:
            return self.force == "sparse"
        return jacobian_is_sparse

    def sparse_hopf_curve(self, size: int, jacobian_is_sparse: bool) -> bool:
        """Whether a Hopf curve of a ``size``-state model takes the complex bordered
        system (:mod:`branchline.problems.sparse_hopf_curve`)."""
        if self.force is not None:
            return self.force == "sparse" and size >= ARNOLDI_SMALLEST_SIZE
        return jacobian_is_sparse and size > self.hopf_curve_sparse_above

    def sparse_location(self, size: int) -> bool:
        """Whether events and normal forms of a ``size``-state model use sparse methods.

        Forced sparse applies from ``ARNOLDI_SMALLEST_SIZE`` states: shift-invert
        Arnoldi (ARPACK) cannot work on smaller matrices.
        """
        if self.force is not None:
            return self.force == "sparse" and size >= ARNOLDI_SMALLEST_SIZE
        return size > self.location_sparse_above

    def sparse_cycle_blocks(self, size: int) -> bool:
        """Whether periodic orbits of a ``size``-state model assemble sparse collocation blocks."""
        if self.force is not None:
            return self.force == "sparse"
        return size > self.cycle_blocks_dense_up_to

    def sparse_floquet(self, size: int) -> bool:
        """Whether Floquet multipliers of a ``size``-state model come from Arnoldi.

        Forced sparse applies at every size: below ``ARNOLDI_SMALLEST_SIZE`` + a
        few states the monodromy matrix is built column by column from the same
        factorization instead.
        """
        if self.force is not None:
            return self.force == "sparse"
        return size > self.floquet_dense_up_to


# Decide by size and by the model's own Jacobian (what every scan uses).
DEFAULT = LinearAlgebraPolicy()
# Every decision dense, or every one sparse: for tests that run a case both ways.
DENSE = LinearAlgebraPolicy(force="dense")
SPARSE = LinearAlgebraPolicy(force="sparse")


def policy_of(model: object) -> LinearAlgebraPolicy:
    """The model's policy (:data:`DEFAULT` for a stand-in model without one)."""
    return getattr(model, "linear_algebra", DEFAULT)
