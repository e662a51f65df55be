"""What a located stability change means: normal-form coefficients.

Pure functions of a model and a located point:

- :func:`fold_normal_form`: the quadratic coefficient ``a`` of the fold normal
  form and the side of the fold on which two equilibria exist.
- :func:`hopf_normal_form`: the frequency and the first Lyapunov coefficient
  (invariant formula; Kuznetsov, Elements of Applied Bifurcation Theory,
  3rd ed., section 3.5 and eq. (5.39) of section 5.4), with the eigenvector
  scaling fixed by the interface contract.
- :func:`branch_point_normal_form`: the tangents of the two crossing branches
  from the algebraic branching equation (Keller, "Numerical solution of
  bifurcation and nonlinear eigenvalue problems", 1977; Allgower & Georg,
  Introduction to Numerical Continuation Methods, section 8.3).

Also the derivative helpers the defining systems in :mod:`branchline.events.defining_systems`
share (directional Jacobians, the second derivative of the (n, n + 1)
equilibrium map). Linear algebra comes from :mod:`branchline.numerics`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import scipy.sparse as sp

from branchline.numerics import eigenvalues
from branchline.numerics.differences import extrapolated_directional
from branchline.numerics.eigenvalues import eigenvector_near, null_vectors
from branchline.numerics.linalg import identity, solve

if TYPE_CHECKING:
    from branchline.model.build import Model

Array = np.ndarray

# Relative step of the central difference used for d2f/dp2 (the model has no
# exact form for it) and for large-model directional Jacobians: eps**(1/3)
# balances truncation (h^2) against rounding (eps/h) (Nocedal & Wright,
# Numerical Optimization, 2nd ed., section 8.1).
CENTRAL_STEP = float(np.finfo(float).eps) ** (1.0 / 3.0)

# |l1| below this fraction of the size of the terms it is summed from: the
# sign is decided by rounding and the Hopf point is close to a Bautin point.
BAUTIN_RELATIVE = 1e-7
# The same for models whose B and C are nested finite differences (Python
# models): those are good to about 1e-6 relative (see branchline.numerics.differences).
BAUTIN_RELATIVE_DIFFERENCES = 1e-5

# The located Hopf value is trusted to this relative accuracy (the defining
# system is solved to a residual near 1e-14; the tests check 1e-10 or better).
# An l1 that moves through zero within this distance along the branch is zero
# to rounding: its sign says nothing (the van der Pol oscillator at mu = 0).
HOPF_LOCATION_RTOL = 1e-12
# Words for an l1 that is zero to rounding, in events and the report.
L1_ZERO_NOTE = "criticality not determined (l1 = 0 to rounding)"

# |a| below this fraction of ||B(q, q)||: the fold is close to a cusp point.
CUSP_RELATIVE = 1e-7

# The branching equation's quadratic form must be indefinite (eigenvalues of both
# signs, each above this fraction of the larger) for two real crossing branches.
INDEFINITE_RTOL = 1e-12

# A crossing branch's unit tangent whose parameter component is below this
# (relative) is taken as turning back in the parameter: a pitchfork. Symmetric
# models give ~1e-15; a generic (transcritical) crossing gives O(1).
PITCHFORK_TANGENT_TOLERANCE = 1e-7


# ----------------------------------------------------------------------------
# derivative helpers


def leading_eigenvalues(matrix: object) -> Array:
    """Eigenvalues sorted by decreasing real part (all of them for dense matrices; the
    leading few, as the engine computes them, for sparse ones)."""
    if sp.issparse(matrix):
        values = eigenvalues.leading_eigenvalues(matrix)
        return values[np.isfinite(values)]
    values = np.linalg.eigvals(matrix).astype(complex)
    return values[np.lexsort((-values.imag, -values.real))]


def branch_tangent(model: Model, x: Array, params: Array, k: int, like: Array) -> Array:
    """Unit null vector of [f_x, f_p] oriented along ``like`` (dense SVD, or for large
    models the bordered solve [f_x, f_p; like^T] t = e_(n+1))."""
    a_matrix = model.state_jacobian(x, params)
    fp = model.parameter_jacobian(x, params)[:, k]
    if sp.issparse(a_matrix):
        bordered = sp.vstack(
            [sp.hstack([a_matrix, sp.csc_matrix(fp.reshape(-1, 1))]), sp.csr_matrix(like)],
            format="csc",
        )
        rhs = np.zeros(x.shape[0] + 1)
        rhs[-1] = 1.0
        t = solve(bordered, rhs)
        t = t / np.linalg.norm(t)
    else:
        t = np.linalg.svd(np.column_stack([a_matrix, fp]))[2][-1]
    return t if t @ like >= 0 else -t


def directional_jacobian(model: Model, x: Array, params: Array, v: Array) -> object:
    """The matrix M(v) = d/de f_x(x + e v, p) at e = 0, i.e. M(v) w = B(v, w).

    Parameters
    ----------
    model : Model
    x : ndarray (n,)
    params : ndarray (m,)
    v : ndarray (n,), real or complex

    Returns
    -------
    ndarray (n, n), complex when ``v`` is; scipy.sparse for large models
    (a central difference of the Jacobian along v).
    """
    n = x.shape[0]
    if n <= model.linear_algebra.exact_second_up_to:
        columns = [model.second(x, params, v, unit) for unit in np.eye(n)]
        return np.array(columns).T
    if np.iscomplexobj(v):
        return directional_jacobian(model, x, params, v.real) + 1j * directional_jacobian(
            model, x, params, v.imag
        )
    size = float(np.linalg.norm(v))
    h = CENTRAL_STEP * max(1.0, float(np.linalg.norm(x))) / max(size, 1e-300)
    plus = model.state_jacobian(x + h * v, params)
    minus = model.state_jacobian(x - h * v, params)
    if size == 0.0:
        return plus * 0.0
    return (plus - minus) / (2.0 * h)


def parameter_second_derivative(model: Model, x: Array, params: Array, k: int) -> Array:
    """d2f/dp_k^2 by a central difference of df/dp_k (the model has no exact form), shape (n,).

    For a model whose df/dp is itself a difference (a Python model,
    ``exact_derivatives`` false) the step is chosen by Richardson extrapolation
    (:func:`branchline.numerics.differences.extrapolated_directional`): nested fixed
    steps would leave only about a third of the digits.
    """
    if not getattr(model, "exact_derivatives", True):
        unit = np.zeros(np.shape(params)[0])
        unit[k] = 1.0
        return extrapolated_directional(
            lambda q: model.parameter_jacobian(x, q)[:, k], np.asarray(params, dtype=float), unit
        )
    h = CENTRAL_STEP * max(1.0, abs(float(params[k])))
    up = np.array(params, dtype=float)
    down = np.array(params, dtype=float)
    up[k] += h
    down[k] -= h
    return (model.parameter_jacobian(x, up)[:, k] - model.parameter_jacobian(x, down)[:, k]) / (
        up[k] - down[k]
    )


def augmented_second(model: Model, x: Array, params: Array, k: int, v: Array, w: Array) -> Array:
    """Second derivative of G(x, p) = f(x, p) (p = params[k]) on R^(n+1): G_uu(v, w), shape (n,).

    ``v`` and ``w`` have n + 1 components: states, then the varied parameter.
    """
    vx, vp = v[:-1], float(v[-1])
    wx, wp = w[:-1], float(w[-1])
    value = np.asarray(model.second(x, params, vx, wx), dtype=float).copy()
    if wp != 0.0:
        value += wp * model.jacobian_parameter_derivative(x, params, vx)[:, k]
    if vp != 0.0:
        value += vp * model.jacobian_parameter_derivative(x, params, wx)[:, k]
    if vp != 0.0 and wp != 0.0:
        value += vp * wp * parameter_second_derivative(model, x, params, k)
    return value


def _smallest_singular_vectors(matrix: Array) -> tuple[Array, Array, float]:
    """Left and right singular vectors of the smallest singular value, and that value."""
    u, s, vh = np.linalg.svd(matrix)
    return u[:, -1], vh[-1].conj(), float(s[-1])


def _orient(vector: Array) -> Array:
    """Scale a vector by a unit factor so that its largest component is real and positive."""
    index = int(np.argmax(np.abs(vector)))
    phase = vector[index] / abs(vector[index])
    return vector / phase


# ----------------------------------------------------------------------------
# fold


@dataclass(frozen=True)
class FoldNormalForm:
    """Fold (saddle-node) point: x' restricted to the centre manifold is
    xi' = beta (p - p0) + a xi^2 + ..., with x = x0 + xi q.

    Attributes
    ----------
    coefficient : float
        a = (1/2) p^T B(q, q) with A q = 0, A^T p = 0, ||q|| = 1, p^T q = 1
        (Kuznetsov, Elements of Applied Bifurcation Theory, sections 3.2 and 5.4;
        from memory);
        q is oriented so that its largest component is positive.
    parameter_sensitivity : float
        beta = p^T df/dp for the varied parameter.
    right_vector, left_vector : ndarray (n,)
        q and p.
    two_equilibria_side : str
        ``"below"`` or ``"above"``: where (in the varied parameter) the two
        nearby equilibria exist; ``""`` when degenerate.
    degenerate : str
        ``""``, ``"cusp"`` (a ~ 0) or ``"branch point"`` (beta ~ 0).
    """

    coefficient: float
    parameter_sensitivity: float
    right_vector: Array
    left_vector: Array
    two_equilibria_side: str
    degenerate: str


def fold_normal_form(model: Model, x: Array, params: Array, k: int) -> FoldNormalForm:
    """Quadratic normal-form coefficient of a fold point.

    Parameters
    ----------
    model : Model
    x : ndarray (n,)
        The fold point's state.
    params : ndarray (m,)
        Full parameter vector at the fold.
    k : int
        Index of the varied parameter.
    """
    left, right = null_vectors(model.state_jacobian(x, params))
    q = _orient(right.real / np.linalg.norm(right.real))
    p = left.real / float(left.real @ q)
    bqq = np.asarray(model.second(x, params, q, q), dtype=float)
    a = 0.5 * float(p @ bqq)
    fp = model.parameter_jacobian(x, params)[:, k]
    beta = float(p @ fp)
    degenerate = ""
    if abs(beta) <= CUSP_RELATIVE * np.linalg.norm(p) * max(np.linalg.norm(fp), 1e-300):
        degenerate = "branch point"
    elif abs(a) <= CUSP_RELATIVE * np.linalg.norm(p) * max(np.linalg.norm(bqq), 1e-300) or a == 0:
        degenerate = "cusp"
    side = "" if degenerate else ("below" if a * beta > 0 else "above")
    return FoldNormalForm(a, beta, q, p, side, degenerate)


# ----------------------------------------------------------------------------
# Hopf


@dataclass(frozen=True)
class HopfNormalForm:
    """Hopf point: first Lyapunov coefficient and the vectors it was computed with.

    Attributes
    ----------
    frequency : float
        omega > 0, the imaginary part of the critical pair (rad per time unit).
    lyapunov : float
        l1 = Re(c1) / omega with A q = i omega q, A^T p = -i omega p, <p, q> = 1,
        <q, q> = 1/2 (the interface contract's scaling: for
        x' = mu x - y + s x (x^2 + y^2), y' = x + mu y + s y (x^2 + y^2), l1 = s).
    c1 : complex
        The cubic coefficient of the complex normal form z' = i omega z + c1 z |z|^2.
    right_vector, left_vector : ndarray (n,) complex
        q and p.
    terms : tuple of three complex
        <p, C(q, q, qbar)>, -2 <p, B(q, A^-1 B(q, qbar))>, <p, B(qbar, (2 i omega - A)^-1 B(q, q))>.
    criticality : str
        ``"supercritical"`` (l1 < 0), ``"subcritical"`` (l1 > 0), or ``""`` when
        l1 is zero to rounding (see ``near_bautin``).
    near_bautin : bool
        l1 is zero to rounding: |l1| is within rounding of zero relative to its
        terms, or below the change of l1 along the branch over the located
        point's own uncertainty (``HOPF_LOCATION_RTOL``; needs ``k``). Then
        ``criticality`` is ``""`` and no cycle side or amplitude is given.
    growth_rate : float or None
        alpha'(p0) = d Re(lambda)/dp of the critical pair along the branch,
        Re <p, (A_p + B(q, x_p)) q> with x_p = -A^-1 f_p (Kuznetsov, section 3.5;
        from memory); None unless the varied parameter's index was given.
    cycle_side : str
        Where the small cycles exist: ``"below"`` or ``"above"`` the Hopf value of
        the varied parameter (r^2 = -alpha' (p - p0) / (omega l1) > 0), or ``""``.
    amplitude_coefficient : float or None
        C in r ~ C sqrt(|p - p0|), C = sqrt(|alpha' / (omega l1)|): the leading-order
        amplitude |z| of the cycles (each state j oscillates with half-range 2 r |q_j|).
    """

    frequency: float
    lyapunov: float
    c1: complex
    right_vector: Array
    left_vector: Array
    terms: tuple[complex, complex, complex]
    criticality: str
    near_bautin: bool
    growth_rate: float | None = None
    cycle_side: str = ""
    amplitude_coefficient: float | None = None


def _inner(a: Array, b: Array) -> complex:
    """<a, b> = sum conj(a_i) b_i."""
    return complex(np.vdot(a, b))


def _lyapunov_terms(model, x, params, omega, q, p, a_matrix, eye) -> tuple[complex, ...]:
    """The three terms of 2 c1 in the invariant formula (see :func:`hopf_normal_form`)."""
    qbar = q.conj()
    h11 = solve(a_matrix, model.second(x, params, q, qbar))
    h20 = solve(2j * omega * eye - a_matrix, model.second(x, params, q, q))
    return (
        _inner(p, model.third(x, params, q, q, qbar)),
        -2.0 * _inner(p, model.second(x, params, q, h11)),
        _inner(p, model.second(x, params, qbar, h20)),
    )


def _lyapunov_rounding(model, x, params, omega, q, p, a_matrix, eye, k, x_p) -> float:
    """How far l1 moves over the located point's uncertainty along the branch.

    The slope of l1 along the branch direction (x_p, 1) is estimated by a central
    difference of the nonlinear terms (A, q, p held fixed: only the order of
    magnitude matters), then scaled by HOPF_LOCATION_RTOL * max(1, |p_k|).
    An l1 below this is zero to rounding, whatever its relative size.
    """
    scale = max(1.0, abs(float(params[k])))
    step = CENTRAL_STEP * scale
    values = []
    for sign in (1.0, -1.0):
        shifted = np.array(params, dtype=float)
        shifted[k] += sign * step
        terms = _lyapunov_terms(model, x + sign * step * x_p, shifted, omega, q, p, a_matrix, eye)
        values.append(0.5 * sum(terms).real / omega)
    slope = abs(values[0] - values[1]) / (2.0 * step)
    if not np.isfinite(slope):
        return 0.0
    return slope * HOPF_LOCATION_RTOL * scale


def hopf_normal_form(
    model: Model,
    x: Array,
    params: Array,
    omega: float,
    q: Array | None = None,
    k: int | None = None,
    left: Array | None = None,
) -> HopfNormalForm:
    """First Lyapunov coefficient of a Hopf point by the invariant formula.

    l1 = Re(c1)/omega, c1 = (1/2) [ <p, C(q, q, qbar)> - 2 <p, B(q, A^-1 B(q, qbar))>
    + <p, B(qbar, (2 i omega I - A)^-1 B(q, q))> ] (Kuznetsov, Elements of Applied
    Bifurcation Theory, 3rd ed., section 5.4, the invariant formula for l1(0); equation
    number from memory), evaluated with <q, q> = 1/2: with x = x0 + 2 Re(z q) + ...,
    |z| = r is the oscillation's amplitude in the states' units and
    r' = r (alpha + omega l1 r^2) + ... (the contract's normalization; Kuznetsov's
    <q, q> = 1 doubles every value, the sign is invariant).

    Parameters
    ----------
    model : Model
    x : ndarray (n,)
    params : ndarray (m,)
    omega : float
        The located frequency (> 0).
    q : ndarray (n,) complex, optional
        A right eigenvector for i omega (computed from the Jacobian if omitted).
    k : int, optional
        Index of the varied parameter: also compute the crossing speed alpha' and
        on which side the cycles are.
    left : ndarray (n,) complex, optional
        A left eigenvector p, p^H (A - i omega I) = 0, when the caller has it (a
        bordered solve on a Hopf curve gives it; otherwise it is computed, by
        shift-invert Arnoldi for sparse models).
    """
    omega = abs(float(omega))
    a_matrix = model.state_jacobian(x, params)
    eye = identity(a_matrix.shape[0], a_matrix)
    if q is None:
        _, q = eigenvector_near(a_matrix, 1j * omega)
    if left is not None:
        p = np.asarray(left, dtype=complex)
    elif sp.issparse(a_matrix):
        _, p = eigenvector_near(sp.csc_matrix(a_matrix.T), -1j * omega)
    else:
        _, p, _ = _smallest_singular_vectors(a_matrix.T + 1j * omega * eye)
    q = _orient(np.asarray(q, dtype=complex))
    q = q / np.sqrt(2.0 * _inner(q, q).real)
    p = p / np.conj(_inner(p, q))
    terms = _lyapunov_terms(model, x, params, omega, q, p, a_matrix, eye)
    c1 = 0.5 * sum(terms)
    lyapunov = c1.real / omega
    size = 0.5 * sum(abs(t) for t in terms) / omega
    exact = getattr(model, "exact_derivatives", True)
    threshold = BAUTIN_RELATIVE if exact else BAUTIN_RELATIVE_DIFFERENCES
    near_bautin = abs(lyapunov) <= threshold * size
    growth, side, coefficient = None, "", None
    if k is not None:
        x_p = -solve(a_matrix, model.parameter_jacobian(x, params)[:, k])
        moved = model.jacobian_parameter_derivative(x, params, q)[:, k] + model.second(
            x, params, q, x_p
        )
        growth = _inner(p, moved).real
        floor = _lyapunov_rounding(model, x, params, omega, q, p, a_matrix, eye, k, x_p)
        near_bautin = near_bautin or abs(lyapunov) <= floor
        if growth != 0.0 and not near_bautin:
            side = "below" if growth * lyapunov > 0 else "above"
            coefficient = float(np.sqrt(abs(growth / (omega * lyapunov))))
    criticality = "" if near_bautin else ("supercritical" if lyapunov < 0 else "subcritical")
    return HopfNormalForm(
        omega, lyapunov, c1, q, p, terms, criticality, near_bautin, growth, side, coefficient
    )


# ----------------------------------------------------------------------------
# branch point


@dataclass(frozen=True)
class BranchPointNormalForm:
    """Simple branch point of f(x, p) = 0: two branches cross transversally.

    Attributes
    ----------
    tangents : ndarray (2, n + 1)
        Unit tangents (states, then parameter) of the two crossing branches, the
        roots of the algebraic branching equation c11 a^2 + 2 c12 a b + c22 b^2 = 0
        on the null space of G_u = [f_x, f_p]. Oriented with a non-negative
        parameter component (or, for a zero one, a positive largest component).
    null_basis : ndarray (2, n + 1)
        Orthonormal basis phi1, phi2 of the null space of G_u.
    left_vector : ndarray (n,)
        psi, the unit left null vector of G_u.
    coefficients : tuple (c11, c12, c22)
        c_ij = psi^T G_uu(phi_i, phi_j).
    discriminant : float
        c12^2 - c11 c22 (> 0 for two real crossing branches).
    branching : str
        ``"transcritical"``, ``"pitchfork"`` or ``""`` (degenerate: no two real
        transversal branches).
    """

    tangents: Array
    null_basis: Array
    left_vector: Array
    coefficients: tuple[float, float, float]
    discriminant: float
    branching: str


def branch_point_normal_form(
    model: Model,
    x: Array,
    params: Array,
    k: int,
    psi: Array | None = None,
    traced_tangent: Array | None = None,
) -> BranchPointNormalForm:
    """Tangents of the branches crossing at a simple branch point (algebraic branching equation).

    Parameters
    ----------
    model : Model
    x : ndarray (n,)
    params : ndarray (m,)
        Full parameter vector at the branch point; ``params[k]`` is varied.
    k : int
    psi : ndarray (n,), optional
        Left null vector of [f_x, f_p] (computed by SVD if omitted).
    traced_tangent : ndarray (n + 1,), optional
        The traced branch's tangent; required for large (sparse) models, where the
        null space is found from the bordered matrix [f_x, f_p; t^T] (singular
        exactly at the branch point) by shift-invert Arnoldi instead of an SVD.
    """
    a_matrix = model.state_jacobian(x, params)
    fp = model.parameter_jacobian(x, params)[:, k]
    if sp.issparse(a_matrix):
        if traced_tangent is None:
            raise ValueError("a large model's branch point needs the traced tangent")
        t = np.asarray(traced_tangent, dtype=float) / np.linalg.norm(traced_tangent)
        bordered = sp.vstack(
            [sp.hstack([a_matrix, sp.csc_matrix(fp.reshape(-1, 1))]), sp.csr_matrix(t)],
            format="csc",
        )
        left, right = null_vectors(bordered)
        if psi is None:
            psi = left.real[:-1]
        # the null space of [f_x, f_p] from the nonsingular bordering
        # [[f_x, f_p, psi], [t^T, 0], [phi^T, 0]] z = e_(n+1), e_(n+2)
        n = a_matrix.shape[0]
        phi = right.real / np.linalg.norm(right.real)
        square = sp.bmat(
            [
                [
                    a_matrix,
                    sp.csc_matrix(fp.reshape(-1, 1)),
                    sp.csc_matrix(np.reshape(psi, (n, 1))),
                ],
                [sp.csr_matrix(t[:n]), np.array([[t[n]]]), None],
                [sp.csr_matrix(phi[:n]), np.array([[phi[n]]]), None],
            ],
            format="csc",
        )
        unit_t, unit_phi = np.zeros(n + 2), np.zeros(n + 2)
        unit_t[n + 1], unit_phi[n] = 1.0, 1.0
        first = solve(square, unit_t)[: n + 1]
        second = solve(square, unit_phi)[: n + 1]
        first = first / np.linalg.norm(first)
        second = second - (second @ first) * first
        basis = np.array([first, second / np.linalg.norm(second)])
    else:
        u, _, vh = np.linalg.svd(np.column_stack([a_matrix, fp]))
        basis = vh[-2:]
        if psi is None:
            psi = u[:, -1]
    psi = np.asarray(psi, dtype=float) / np.linalg.norm(psi)
    c11 = float(psi @ augmented_second(model, x, params, k, basis[0], basis[0]))
    c12 = float(psi @ augmented_second(model, x, params, k, basis[0], basis[1]))
    c22 = float(psi @ augmented_second(model, x, params, k, basis[1], basis[1]))
    discriminant = c12 * c12 - c11 * c22
    values, vectors = np.linalg.eigh(np.array([[c11, c12], [c12, c22]]))
    scale = max(abs(values).max(), 1e-300)
    if values[0] < -INDEFINITE_RTOL * scale and values[1] > INDEFINITE_RTOL * scale:
        # in eigen-coordinates: values[0] y1^2 + values[1] y2^2 = 0
        directions = [
            np.array([np.sqrt(values[1]), sign * np.sqrt(-values[0])]) for sign in (1.0, -1.0)
        ]
        tangents = np.array([basis.T @ (vectors @ d / np.linalg.norm(d)) for d in directions])
        tangents = np.array([_orient_tangent(t) for t in tangents])
        turning = np.abs(tangents[:, -1]) <= PITCHFORK_TANGENT_TOLERANCE
        branching = "pitchfork" if turning.any() else "transcritical"
    else:
        tangents = np.array([_orient_tangent(basis[0]), _orient_tangent(basis[1])])
        branching = ""
    return BranchPointNormalForm(tangents, basis, psi, (c11, c12, c22), discriminant, branching)


def _orient_tangent(t: Array) -> Array:
    t = t / np.linalg.norm(t)
    if abs(t[-1]) > PITCHFORK_TANGENT_TOLERANCE:
        return t if t[-1] > 0 else -t
    return _orient(t).real
