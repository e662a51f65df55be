"""Test functions along equilibrium branches, and location of events.

Test functions (evaluated at every accepted point, in this order):

- ``fold``: the parameter component of the unit tangent; changes sign at a
  turning point of the branch.
- ``hopf``: a function that vanishes when a pair of eigenvalues sums to zero:
  the determinant of the bialternate product 2A (.) I, i.e.
  prod_{i<j} (lambda_i + lambda_j) (Kuznetsov, Elements of Applied Bifurcation
  Theory, section 10.2.2), for up to ``BIALTERNATE_MAX_SIZE`` eigenvalues, and
  for longer rows (large models) a function of the leading eigenvalues only
  (see :func:`hopf_test`). Neutral saddles (real lambda, -lambda) change its
  sign too and are rejected at location.
- ``branch_point``: the determinant of the bordered Jacobian [[f_x, f_p], [t^T]],
  which changes sign where two branches cross (Allgower & Georg, Introduction
  to Numerical Continuation Methods, section 8.1).

Each sign change brackets an event, which :func:`locate_events` refines by
Newton's method on the event's defining system:

- fold: the minimally augmented system f = 0, g = 0 with g from a bordered
  system (Govaerts, Numerical Methods for Bifurcations of Dynamical Equilibria,
  SIAM 2000, chapter 4; Kuznetsov, section 10.2.1; section numbers from memory);
- Hopf: the standard extended system f = 0, A q = i omega q, <c, q> = 1
  (Kuznetsov, section 10.2.2; Griewank & Reddien 1983);
- branch point: the extended system f + mu psi = 0, [f_x, f_p]^T psi = 0,
  psi^T psi = 1 (Moore, "The numerical treatment of non-trivial bifurcation
  points", Numer. Funct. Anal. Optim. 2 (1980); Allgower & Georg, section 8.1).

Only when Newton fails is the event placed by bisection on the test function
along the branch (the event's ``note`` says so); if that fails too, the event
is still reported, placed by interpolation, with the reason in ``note``.

Besides sign changes of the Hopf test, complex eigenvalues are matched between
consecutive rows, so that two pairs crossing within one step (which leave the
product's sign unchanged) are both found. Models with more than
``normal_forms.LARGE_MODEL_SIZE`` states are located with sparse linear
algebra (SuperLU, shift-invert Arnoldi); their branch points by bisection on
the sparse bordered determinant (Moore's system needs a dense Hessian).

Example
-------
>>> import numpy as np
>>> from branchline.branches import trace_branch
>>> from branchline.model import build_model
>>> from branchline.scan import ExpressionModelSpec, StepSettings
>>> model = build_model(ExpressionModelSpec(parameters={"h": 0.1},
...                                         equations={"N": "N*(1 - N) - h"}))
>>> branch = trace_branch(model, "t", "h", model.defaults, np.array([0.9]),
...                       (0.0, 0.4), "both", StepSettings())
>>> [(e.kind, e.value) for e in locate_events(model, branch)]
[('fold', 0.25)]
"""

from __future__ import annotations

import cmath
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
import scipy.sparse as sps
import scipy.sparse.linalg as spla
from scipy.optimize import linear_sum_assignment

from branchline.normal_forms import (
    branch_point_normal_form,
    branch_tangent,
    dense,
    directional_jacobian,
    eigenvector_near,
    fold_normal_form,
    hopf_normal_form,
    is_large,
    leading_eigenvalues,
    null_vectors,
    parameter_second_derivative,
    solve,
    state_jacobian,
)
from branchline.results import Branch, Event

Array = np.ndarray

TEST_FUNCTIONS = ("fold", "hopf", "branch_point")

# Rows with up to this many eigenvalues use the full bialternate product
# (n (n - 1) / 2 factors); longer rows use the leading eigenvalues only.
BIALTERNATE_MAX_SIZE = 50

# Up to this many eigenvalues the pair product is a plain Python loop (faster
# than numpy's per-call overhead for a handful of factors).
PYTHON_PRODUCT_MAX_SIZE = 8

# Test values are returned as sign * exp(log|value|) with the logarithm
# clipped here, so that products of many factors never overflow to inf or
# underflow to 0 (which would hide a sign).
LOG_CLIP = 600.0

# Newton on the defining systems: stop when the update is this small relative
# to the unknowns (one more iteration then only polishes the last bits).
NEWTON_STEP_RTOL = 1e-13
NEWTON_MAX_ITERATIONS = 30
# A converged event must lie within this many bracket lengths of its bracket;
# further away, Newton has found some other point.
BRACKET_REACH = 2.0

# Complex eigenvalues: |Im| above this fraction of the spectral scale.
COMPLEX_RTOL = 1e-8
# A located Hopf point with omega below this fraction of the Jacobian's scale
# is a Bogdanov-Takens-like degenerate point, not reported as Hopf.
SMALLEST_RELATIVE_FREQUENCY = 1e-6

# An eigenvalue this small relative to the spectral radius counts as zero
# (A is then too close to singular for A^-1 in the Lyapunov coefficient).
ZERO_EIGENVALUE_RTOL = 1e-8

# Bisection fallback: stop at this relative bracket width in arclength.
BISECTION_RTOL = 1e-14
BISECTION_MAX_ITERATIONS = 200
# If the branch cannot be corrected at a bisection point, a bracket already
# shorter than this fraction of the step is still reported (with its width).
BISECTION_GIVE_UP_WIDTH = 1e-6

# Two located events of one kind closer than this (relative) are one event.
SAME_EVENT_RTOL = 1e-7
# A fold located at a branch point solves a singular system: the state is then
# only good to about the square root of rounding, so a looser match.
FOLD_AT_BRANCH_POINT_RTOL = 1e-5


# ----------------------------------------------------------------------------
# test functions (hot path)


@lru_cache(maxsize=64)
def _pair_indices(count: int) -> tuple[Array, Array]:
    return np.triu_indices(count, 1)


def _signed_log_product(factors: Array) -> float:
    """prod(factors).real as sign * exp(clipped log-magnitude), without overflow."""
    magnitudes = np.abs(factors)
    if not np.all(magnitudes > 0.0):
        return 0.0
    phase = np.prod(factors / magnitudes)
    sign = 1.0 if phase.real >= 0.0 else -1.0
    log_size = float(np.sum(np.log(magnitudes)))
    return sign * math.exp(min(max(log_size, -LOG_CLIP), LOG_CLIP))


def hopf_test(eigenvalues: Array) -> float:
    """The Hopf test function from a row of eigenvalues (sorted by decreasing real part).

    Up to ``BIALTERNATE_MAX_SIZE`` eigenvalues: prod_{i<j} (lambda_i + lambda_j),
    the determinant of the bialternate product 2A (.) I (smooth in the
    Jacobian's entries, so the engine's step control can extrapolate it; its
    magnitude is clipped at exp(+-LOG_CLIP) instead of overflowing). Longer rows
    (large models): (-1)^(number of complex pairs with positive real part) times
    the smallest |Re lambda| over complex pairs, which is continuous through a
    Hopf crossing and blind to eigenvalues entering or leaving the row.
    """
    values = eigenvalues.tolist()
    count = len(values)
    if count > BIALTERNATE_MAX_SIZE:
        return _leading_pairs_test(np.asarray(eigenvalues))
    lam = np.asarray(eigenvalues)
    if count <= PYTHON_PRODUCT_MAX_SIZE:
        product = 1.0 + 0.0j
        for i in range(count - 1):
            first = values[i]
            for j in range(i + 1, count):
                product *= first + values[j]
    else:
        i, j = _pair_indices(count)
        with np.errstate(all="ignore"):
            product = complex(np.prod(lam[i] + lam[j]))
    if cmath.isfinite(product) and product != 0.0:
        return product.real
    lam = lam[np.isfinite(lam)]
    if lam.shape[0] < 2:
        return 1.0
    i, j = _pair_indices(lam.shape[0])
    return _signed_log_product(lam[i] + lam[j])


def _leading_pairs_test(eigenvalues: Array) -> float:
    lam = eigenvalues[np.isfinite(eigenvalues)]
    if lam.shape[0] == 0:
        return 1.0
    upper = lam[lam.imag > COMPLEX_RTOL * float(np.max(np.abs(lam)))]
    if upper.shape[0] == 0:
        return 1.0
    unstable = int(np.count_nonzero(upper.real > 0.0))
    return (-1.0) ** unstable * float(np.min(np.abs(upper.real)))


def equilibrium_tests(
    jac_x: np.ndarray, jac_p: np.ndarray, tangent: np.ndarray, eigenvalues: np.ndarray
) -> np.ndarray:
    """Test-function values at one point of an equilibrium branch.

    Parameters
    ----------
    jac_x : ndarray (n, n) or scipy.sparse matrix
        df/dx at the point.
    jac_p : ndarray (n,)
        df/dp for the varied parameter.
    tangent : ndarray (n + 1,)
        Unit tangent (states, then parameter).
    eigenvalues : ndarray (r,) complex
        Eigenvalues of ``jac_x`` (all, or the r leading ones), NaN-padded allowed.

    Returns
    -------
    ndarray (3,)
        Values in the order of :data:`TEST_FUNCTIONS`. Only their signs, zeros
        and local smoothness carry meaning.
    """
    return np.array(
        [float(tangent[-1]), hopf_test(eigenvalues), bordered_determinant(jac_x, jac_p, tangent)]
    )


def bordered_determinant(jac_x: object, jac_p: Array, tangent: Array) -> float:
    """det [[f_x, f_p], [t^T]]: explicit for n <= 2, LAPACK LU, or sparse SuperLU.

    Overflow is avoided by falling back to log-determinants, clipped at exp(+-LOG_CLIP).
    """
    n = jac_x.shape[0]
    if hasattr(jac_x, "toarray"):
        if n > BIALTERNATE_MAX_SIZE:
            return _sparse_bordered_determinant(jac_x, jac_p, tangent)
        jac_x = jac_x.toarray()
    if n == 1:
        return float(jac_x[0, 0] * tangent[1] - jac_p[0] * tangent[0])
    if n == 2:
        (a, b), (c, d) = jac_x.tolist()
        e, f = float(jac_p[0]), float(jac_p[1])
        g, h, i = tangent.tolist()
        return a * (d * i - f * h) - b * (c * i - f * g) + e * (c * h - d * g)
    bordered = np.empty((n + 1, n + 1))
    bordered[:n, :n] = jac_x
    bordered[:n, n] = jac_p
    bordered[n] = tangent
    value = float(np.linalg.det(bordered))
    if math.isfinite(value) and value != 0.0:
        return value
    sign, log_det = np.linalg.slogdet(bordered)
    if sign == 0.0 or not math.isfinite(log_det):
        return 0.0
    return float(sign) * math.exp(min(max(float(log_det), -LOG_CLIP), LOG_CLIP))


def _sparse_bordered_determinant(jac_x, jac_p: Array, tangent: Array) -> float:
    sp = sps
    column = sp.csc_matrix(np.asarray(jac_p, dtype=float).reshape(-1, 1))
    row = sp.csr_matrix(np.asarray(tangent, dtype=float).reshape(1, -1))
    matrix = sp.vstack([sp.hstack([jac_x, column]), row], format="csc")
    try:
        lu = spla.splu(matrix)
    except RuntimeError:
        return 0.0
    diagonal = lu.U.diagonal()
    if np.any(diagonal == 0.0):
        return 0.0
    sign = float(np.prod(np.sign(diagonal)))
    sign *= _permutation_sign(lu.perm_r) * _permutation_sign(lu.perm_c)
    log_det = float(np.sum(np.log(np.abs(diagonal))))
    return sign * math.exp(min(max(log_det, -LOG_CLIP), LOG_CLIP))


def _permutation_sign(permutation: Array) -> float:
    seen = np.zeros(permutation.shape[0], dtype=bool)
    sign = 1.0
    for start in range(permutation.shape[0]):
        if seen[start]:
            continue
        length = 0
        index = start
        while not seen[index]:
            seen[index] = True
            index = permutation[index]
            length += 1
        if length % 2 == 0:
            sign = -sign
    return sign


# ----------------------------------------------------------------------------
# Newton on a defining system


@dataclass
class NewtonOutcome:
    converged: bool
    solution: Array
    residual_norms: list[float] = field(default_factory=list)
    message: str = ""


def newton(
    system: Callable[[Array], tuple[Array, Array]], z0: Array, scale: float = 1.0
) -> NewtonOutcome:
    """Newton's method on a square system z -> (residual, Jacobian).

    Converged when the update is below ``NEWTON_STEP_RTOL`` relative to |z|
    (the residual is then at rounding level); one more evaluation records the
    final residual norm.
    """
    z = np.array(z0, dtype=float)
    history: list[float] = []
    for _ in range(NEWTON_MAX_ITERATIONS):
        try:
            residual, jacobian = system(z)
        except (ArithmeticError, ValueError, np.linalg.LinAlgError) as exc:
            return NewtonOutcome(False, z, history, f"evaluation failed: {exc}")
        size = float(np.linalg.norm(residual))
        history.append(size)
        if not np.isfinite(size):
            return NewtonOutcome(False, z, history, "the residual is not finite")
        if size == 0.0:
            return NewtonOutcome(True, z, history)
        try:
            step = solve(jacobian, -residual)
        except np.linalg.LinAlgError:
            return NewtonOutcome(False, z, history, "singular Jacobian of the defining system")
        if not np.all(np.isfinite(step)):
            return NewtonOutcome(False, z, history, "the Newton update is not finite")
        z = z + step
        if float(np.linalg.norm(step)) <= NEWTON_STEP_RTOL * (scale + float(np.linalg.norm(z))):
            residual, _ = system(z)
            history.append(float(np.linalg.norm(residual)))
            return NewtonOutcome(True, z, history)
    return NewtonOutcome(False, z, history, f"no convergence in {NEWTON_MAX_ITERATIONS} iterations")


# ----------------------------------------------------------------------------
# the branch as a curve u = (x, p)


@dataclass(frozen=True)
class _Bracket:
    """Two consecutive rows of a branch between which a test function changes sign."""

    kind: str
    row: int  # the first of the two rows
    fraction: float  # linear-interpolation estimate of the crossing within the step
    hint: dict = field(default_factory=dict)  # kind-specific seed information


def _curve_point(branch: Branch, row: int) -> Array:
    return np.append(branch.states[row], branch.parameter_values[row])


def _with_value(params: Array, k: int, value: float) -> Array:
    full = np.array(params, dtype=float)
    full[k] = value
    return full


def _interpolate_fraction(a: float, b: float) -> float:
    if a == b:
        return 0.5
    return float(np.clip(a / (a - b), 0.0, 1.0))


def _bordered(a_matrix: object, column: Array, row: Array, corner: float = 0.0) -> object:
    """[[A, column], [row^T, corner]], dense or sparse like A."""
    n = a_matrix.shape[0]
    if sps.issparse(a_matrix):
        return sps.bmat(
            [
                [a_matrix, sps.csc_matrix(np.reshape(column, (n, 1)))],
                [
                    sps.csr_matrix(np.reshape(row[:n], (1, n))),
                    np.array([[row[n] if row.shape[0] > n else corner]]),
                ],
            ],
            format="csc",
        )
    out = np.empty((n + 1, n + 1))
    out[:n, :n] = a_matrix
    out[:n, n] = column
    out[n, :n] = row[:n]
    out[n, n] = row[n] if row.shape[0] > n else corner
    return out


def correct_on_branch(
    model, params: Array, k: int, guess: Array, direction: Array
) -> NewtonOutcome:
    """The branch point u = (x, p) with f(u) = 0 and direction . (u - guess) = 0 (Newton)."""

    def system(u: Array) -> tuple[Array, Array]:
        full = _with_value(params, k, u[-1])
        x = u[:-1]
        residual = np.append(model.rhs(x, full), direction @ (u - guess))
        a_matrix = state_jacobian(model, x, full)
        fp = model.parameter_jacobian(x, full)[:, k]
        return residual, _bordered(a_matrix, fp, direction)

    return newton(system, guess)


# ----------------------------------------------------------------------------
# brackets


def _sign_changes(values: Array) -> list[int]:
    signs = np.sign(values)
    rows = []
    for row in range(values.shape[0] - 1):
        a, b = signs[row], signs[row + 1]
        if a != b and not (a == 0 and row > 0):  # a zero row is counted once, from before
            if np.isfinite(values[row]) and np.isfinite(values[row + 1]):
                rows.append(row)
    return rows


def _upper_eigenvalues(row: Array) -> Array:
    lam = row[np.isfinite(row)]
    if lam.shape[0] == 0:
        return lam
    scale = max(float(np.max(np.abs(lam))), 1e-300)
    return lam[lam.imag > COMPLEX_RTOL * scale]


def _hopf_crossings(before: Array, after: Array) -> list[tuple[float, float, bool]]:
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
    upper_a, upper_b = _upper_eigenvalues(before), _upper_eigenvalues(after)
    if upper_a.shape[0] == 0 or upper_b.shape[0] == 0:
        return []
    cost = np.abs(upper_a[:, None] - upper_b[None, :]) ** 2
    rows, cols = linear_sum_assignment(cost)
    crossings = []
    for i, j in zip(rows, cols, strict=True):
        value, match = upper_a[i], upper_b[j]
        if (value.real > 0.0) != (match.real > 0.0):
            fraction = _interpolate_fraction(value.real, match.real)
            omega = float(value.imag + fraction * (match.imag - value.imag))
            crossings.append((fraction, omega, False))
    change = abs(
        int(np.count_nonzero(upper_a.real > 0.0)) - int(np.count_nonzero(upper_b.real > 0.0))
    )
    if change > len(crossings) and upper_a.shape[0] == upper_b.shape[0]:
        used = {round(omega, 12) for _, omega, _ in crossings}
        for value in upper_b[np.argsort(np.abs(upper_b.real))]:
            if len(crossings) >= change:
                break
            if round(float(value.imag), 12) not in used:
                crossings.append((0.5, float(value.imag), True))
    return crossings


def _complex_count_changes(eigenvalues: Array) -> list[int]:
    """Rows after which the number of upper-half-plane eigenvalues with Re > 0 changes."""
    if eigenvalues.shape[0] < 2 or eigenvalues.shape[1] == 0:
        return []
    with np.errstate(invalid="ignore"):
        size = np.abs(eigenvalues)
        scale = np.nanmax(np.where(np.isfinite(size), size, np.nan), axis=1, initial=0.0)
        upper = eigenvalues.imag > COMPLEX_RTOL * scale[:, None]
        count = np.count_nonzero(upper & (eigenvalues.real > 0.0), axis=1)
    return [int(row) for row in np.flatnonzero(np.diff(count))]


def _nearest_pair(row: Array) -> tuple[complex, complex]:
    """The pair (lambda_i, lambda_j), i < j, with the smallest |lambda_i + lambda_j|."""
    lam = row[np.isfinite(row)]
    if lam.shape[0] < 2:
        return complex(math.nan), complex(math.nan)
    i, j = _pair_indices(lam.shape[0])
    best = int(np.argmin(np.abs(lam[i] + lam[j])))
    return complex(lam[i[best]]), complex(lam[j[best]])


def find_brackets(branch: Branch) -> list[_Bracket]:
    """Every sign change of a test function between consecutive rows, with seeds."""
    tests = branch.test_values
    brackets: list[_Bracket] = []
    for column, kind in ((0, "fold"), (2, "branch_point")):
        for row in _sign_changes(tests[:, column]):
            fraction = _interpolate_fraction(tests[row, column], tests[row + 1, column])
            brackets.append(_Bracket(kind, row, fraction))
    hopf_rows = set(_sign_changes(tests[:, 1]))
    candidates = sorted(hopf_rows | set(_complex_count_changes(branch.eigenvalues)))
    for row in candidates:
        crossings = _hopf_crossings(branch.eigenvalues[row], branch.eigenvalues[row + 1])
        for fraction, omega, tentative in crossings:
            hint = {"omega": omega, "tentative": tentative}
            brackets.append(_Bracket("hopf", row, fraction, hint))
        if row in hopf_rows and not crossings:
            # the test changed sign but no tracked complex pair crossed: a neutral
            # saddle (kappa < 0) unless a pair turned complex within the step
            for end in (row, row + 1):
                first, second = _nearest_pair(branch.eigenvalues[end])
                kappa = (first * second).real
                if kappa > 0.0 and abs(first.imag) > 0.0:
                    hint = {"omega": math.sqrt(kappa), "tentative": True}
                    brackets.append(_Bracket("hopf", row, 0.5, hint))
                    break
    return brackets


# ----------------------------------------------------------------------------
# defining systems


def _fold_system(model, params: Array, k: int, border_b: Array, border_c: Array):
    """Minimally augmented fold system: unknowns u = (x, p), equations (f, g)."""
    n = border_b.shape[0]

    def system(u: Array) -> tuple[Array, Array]:
        x, full = u[:-1], _with_value(params, k, u[-1])
        a_matrix = state_jacobian(model, x, full)
        fp = model.parameter_jacobian(x, full)[:, k]
        bordered = _bordered(a_matrix, border_b, border_c)
        rhs = np.zeros(n + 1)
        rhs[n] = 1.0
        vg = solve(bordered, rhs)
        wg = solve(bordered.T, rhs)
        v, g, w = vg[:n], vg[n], wg[:n]
        g_x = -(directional_jacobian(model, x, full, v).T @ w)
        g_p = -float(w @ model.jacobian_parameter_derivative(x, full, v)[:, k])
        residual = np.append(model.rhs(x, full), g)
        return residual, _bordered(a_matrix, fp, np.append(g_x, g_p))

    return system


def _hopf_system(model, params: Array, k: int, c: Array):
    """Extended Hopf system: unknowns (x, p, omega, Re q, Im q), 3n + 2 equations."""
    n = c.shape[0]
    eye = np.eye(n)

    def system(z: Array) -> tuple[Array, Array]:
        x, p, omega = z[:n], z[n], z[n + 1]
        qr, qi = z[n + 2 : 2 * n + 2], z[2 * n + 2 :]
        q = qr + 1j * qi
        full = _with_value(params, k, p)
        a_matrix = state_jacobian(model, x, full)
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
            return residual, _sparse_hopf_jacobian(a_matrix, fp, bq, apq, q, omega, c)
        size = 3 * n + 2
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


def _sparse_hopf_jacobian(a_matrix, fp, bq, apq, q, omega, c):
    """The extended Hopf system's Jacobian as one sparse matrix (large models)."""
    n = a_matrix.shape[0]
    eye = sps.identity(n, format="csc")

    def column(v):
        return sps.csc_matrix(np.reshape(v, (n, 1)))

    def row(v):
        return sps.csr_matrix(np.reshape(v, (1, n)))

    bq = sps.csc_matrix(bq)
    return sps.bmat(
        [
            [a_matrix, column(fp), None, None, None],
            [bq.real, column(apq.real), column(q.imag), a_matrix, omega * eye],
            [bq.imag, column(apq.imag), column(-q.real), -omega * eye, a_matrix],
            [
                sps.csr_matrix((1, n)),
                sps.csr_matrix((1, 1)),
                sps.csr_matrix((1, 1)),
                row(c.real),
                row(c.imag),
            ],
            [None, None, None, row(-c.imag), row(c.real)],
        ],
        format="csc",
    )


def _branch_point_system(model, params: Array, k: int):
    """Moore's extended system: unknowns (x, p, psi, mu), 2n + 2 equations."""

    def system(z: Array) -> tuple[Array, Array]:
        n = (z.shape[0] - 2) // 2
        x, p, psi, mu = z[:n], z[n], z[n + 1 : 2 * n + 1], z[2 * n + 1]
        full = _with_value(params, k, p)
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


# ----------------------------------------------------------------------------
# location


def _json_complex(values: Array) -> list[list[float]]:
    return [[float(v.real), float(v.imag)] for v in np.asarray(values, dtype=complex).ravel()]


def _event_tangent(model, x: Array, full: Array, k: int, chord: Array) -> Array:
    return branch_tangent(model, x, full, k, chord)


def _arclength_at(branch: Branch, row: int, u: Array) -> float:
    ua, ub = _curve_point(branch, row), _curve_point(branch, row + 1)
    chord = ub - ua
    length = float(chord @ chord)
    theta = 0.0 if length == 0 else float(np.clip((u - ua) @ chord / length, 0.0, 1.0))
    sa, sb = branch.arclength[row], branch.arclength[row + 1]
    return float(sa + theta * (sb - sa))


def _within_bracket(branch: Branch, row: int, u: Array) -> bool:
    ua, ub = _curve_point(branch, row), _curve_point(branch, row + 1)
    reach = BRACKET_REACH * float(np.linalg.norm(ub - ua))
    middle = 0.5 * (ua + ub)
    return float(np.linalg.norm(u - middle)) <= reach + 1e-12 * (1.0 + float(np.linalg.norm(ua)))


def _seed(branch: Branch, bracket: _Bracket) -> Array:
    ua, ub = _curve_point(branch, bracket.row), _curve_point(branch, bracket.row + 1)
    return ua + bracket.fraction * (ub - ua)


def _bisect_on_branch(
    model, branch: Branch, k: int, row: int, test: Callable[[Array, Array], float]
) -> tuple[Array | None, list[float]]:
    """Fallback: bisection on a test function along the branch between two rows.

    Points between the rows are put on the branch by Newton on
    f = 0, chord . (u - u_guess) = 0. Returns the point and the bracket widths.
    """
    ua, ub = _curve_point(branch, row), _curve_point(branch, row + 1)
    chord = ub - ua

    def value_at(theta: float) -> tuple[float, Array | None]:
        guess = ua + theta * chord
        outcome = correct_on_branch(model, branch.parameters, k, guess, chord)
        if not outcome.converged:
            return math.nan, None
        try:
            return test(outcome.solution, chord), outcome.solution
        except np.linalg.LinAlgError:
            return 0.0, outcome.solution  # exactly singular there: the test's zero

    lo, hi = 0.0, 1.0
    f_lo, point = value_at(lo)
    f_hi, _ = value_at(hi)
    widths: list[float] = []
    if not (np.isfinite(f_lo) and np.isfinite(f_hi)) or np.sign(f_lo) == np.sign(f_hi):
        return None, widths
    for _ in range(BISECTION_MAX_ITERATIONS):
        middle = 0.5 * (lo + hi)
        f_mid, candidate = value_at(middle)
        if candidate is None:
            # the branch cannot be corrected there (singular, e.g. at a branch point
            # that coincides): keep the best point found, if the bracket is short
            return (point if widths and widths[-1] <= BISECTION_GIVE_UP_WIDTH else None), widths
        point = candidate
        if np.sign(f_mid) == np.sign(f_lo):
            lo, f_lo = middle, f_mid
        else:
            hi = middle
        widths.append(hi - lo)
        if hi - lo <= BISECTION_RTOL or f_mid == 0.0:
            break
    return point, widths


def _base_details(branch: Branch, bracket: _Bracket, a_matrix: Array, method: str) -> dict:
    return {
        "method": method,
        "bracket_rows": [int(bracket.row), int(bracket.row + 1)],
        "test_values": {
            "before": [float(v) for v in branch.test_values[bracket.row]],
            "after": [float(v) for v in branch.test_values[bracket.row + 1]],
            "order": list(TEST_FUNCTIONS),
        },
        "eigenvalues": _json_complex(leading_eigenvalues(a_matrix)),
    }


def _make_event(
    model, branch: Branch, k: int, bracket: _Bracket, u: Array, kind: str, details: dict, **fields
) -> Event:
    x = np.array(u[:-1], dtype=float)
    full = _with_value(branch.parameters, k, float(u[-1]))
    chord = _curve_point(branch, bracket.row + 1) - _curve_point(branch, bracket.row)
    if "tangent" not in details:
        details["tangent"] = [float(t) for t in _event_tangent(model, x, full, k, chord)]
    details["residual_norm"] = float(np.linalg.norm(model.rhs(x, full)))
    return Event(
        trace=branch.name,
        kind=kind,
        vary=branch.vary,
        value=float(u[-1]),
        state=x,
        parameters=full,
        arclength=_arclength_at(branch, bracket.row, u),
        details=details,
        **fields,
    )


def _format_value(value: float) -> str:
    return f"{value:.6g}"


def _locate_fold(model, branch: Branch, k: int, bracket: _Bracket) -> Event | None:
    u0 = _seed(branch, bracket)
    full0 = _with_value(branch.parameters, k, u0[-1])
    left, right = null_vectors(state_jacobian(model, u0[:-1], full0))
    system = _fold_system(model, branch.parameters, k, left.real, right.real)
    outcome = newton(system, u0)
    note = ""
    method = "Newton on the minimally augmented fold system (Govaerts)"
    u = outcome.solution
    if not (outcome.converged and _within_bracket(branch, bracket.row, u)):
        point, _ = _bisect_on_branch(
            model, branch, k, bracket.row, lambda u, c: _fold_test(model, branch, k, u, c)
        )
        if point is None:
            raise _LocationFailed(
                f"Newton: {outcome.message or 'left the bracket'}; bisection failed"
            )
        u = point
        method = "bisection on the tangent's parameter component"
        note = f"located by bisection (Newton on the fold system failed: {outcome.message or 'left the bracket'})"
    x, full = u[:-1], _with_value(branch.parameters, k, u[-1])
    a_matrix = state_jacobian(model, x, full)
    form = fold_normal_form(model, x, full, k)
    details = _base_details(branch, bracket, a_matrix, method)
    details["newton_residual_norms"] = [float(r) for r in outcome.residual_norms]
    details["eigenvectors"] = {
        "right": [float(v) for v in form.right_vector],
        "left": [float(v) for v in form.left_vector],
    }
    details["normal_form"] = {
        "coefficient": form.coefficient,
        "parameter_sensitivity": form.parameter_sensitivity,
    }
    side_note = ""
    if form.degenerate == "branch point":
        side_note = (
            "f_p lies in the range of f_x: a branch point where the traced branch turns "
            "(the branch-point location failed)"
        )
    elif form.degenerate == "cusp":
        side_note = "close to a cusp point (quadratic coefficient near zero)"
    else:
        relation = "<" if form.two_equilibria_side == "below" else ">"
        other = ">" if relation == "<" else "<"
        value = _format_value(float(u[-1]))
        side_note = (
            f"two equilibria nearby for {branch.vary} {relation} {value}, "
            f"none for {branch.vary} {other} {value}"
        )
    note = "; ".join(s for s in (side_note, note) if s)
    return _make_event(
        model, branch, k, bracket, u, "fold", details, fold_coefficient=form.coefficient, note=note
    )


def _fold_test(model, branch: Branch, k: int, u: Array, chord: Array) -> float:
    full = _with_value(branch.parameters, k, u[-1])
    return float(_event_tangent(model, u[:-1], full, k, chord)[-1])


def _locate_hopf(model, branch: Branch, k: int, bracket: _Bracket) -> Event | None:
    u0 = _seed(branch, bracket)
    n = u0.shape[0] - 1
    full0 = _with_value(branch.parameters, k, u0[-1])
    a0 = state_jacobian(model, u0[:-1], full0)
    omega_guess = float(bracket.hint.get("omega", 0.0))
    value, q0 = eigenvector_near(a0, 1j * omega_guess)
    if abs(value.imag) <= 0.0:
        return None  # the nearest eigenvalue is real: a neutral saddle, not a Hopf point
    if value.imag < 0:
        q0 = q0.conj()
    z0 = np.concatenate([u0, [abs(value.imag)], q0.real, q0.imag])
    outcome = newton(_hopf_system(model, branch.parameters, k, q0), z0)
    z = outcome.solution
    u, omega = z[: n + 1], float(z[n + 1])
    method = "Newton on the extended Hopf system (A q = i omega q, <c, q> = 1)"
    note = ""
    q = z[n + 2 : 2 * n + 2] + 1j * z[2 * n + 2 :]
    scale = max(abs(value), abs(omega_guess), 1e-300)
    if not (outcome.converged and _within_bracket(branch, bracket.row, u)):
        point, _ = _bisect_on_branch(
            model,
            branch,
            k,
            bracket.row,
            lambda u, c: _hopf_pair_real(model, branch, k, u, omega_guess),
        )
        if point is None and bracket.hint.get("tentative"):
            return None  # inferred from counts only, and not confirmed: no Hopf point
        if point is None:
            raise _LocationFailed(
                f"Newton: {outcome.message or 'left the bracket'}; bisection failed"
            )
        u = point
        full = _with_value(branch.parameters, k, u[-1])
        omega = _crossing_eigenvalue(model, u, full, omega_guess).imag
        q = None
        method = "bisection on the real part of the crossing pair"
        note = f"located by bisection (Newton on the Hopf system failed: {outcome.message or 'left the bracket'})"
    if abs(omega) <= SMALLEST_RELATIVE_FREQUENCY * scale:
        return None  # degenerate (Bogdanov-Takens-like) or a neutral saddle: not a Hopf point
    omega = abs(omega)
    x, full = u[:-1], _with_value(branch.parameters, k, u[-1])
    a_matrix = state_jacobian(model, x, full)
    details = _base_details(branch, bracket, a_matrix, method)
    details["newton_residual_norms"] = [float(r) for r in outcome.residual_norms]
    notes = []
    lyapunov, criticality = None, None
    if _has_zero_eigenvalue(a_matrix, omega):
        notes.append(
            "a zero eigenvalue at the same point (zero-Hopf): "
            "the first Lyapunov coefficient is not defined here"
        )
    else:
        form = hopf_normal_form(
            model, x, full, omega, q if q is not None and z[n + 1] > 0 else None, k=k
        )
        lyapunov, criticality = form.lyapunov, form.criticality
        details["eigenvectors"] = {
            "right": _json_complex(form.right_vector),
            "left": _json_complex(form.left_vector),
            "normalization": "A q = i omega q, A^T p = -i omega p, <p, q> = 1, <q, q> = 1/2",
        }
        details["normal_form"] = {
            "c1": [form.c1.real, form.c1.imag],
            "terms": [[t.real, t.imag] for t in form.terms],
            "growth_rate": form.growth_rate,
            "amplitude_coefficient": form.amplitude_coefficient,
        }
        if form.near_bautin:
            notes.append("close to a Bautin point; criticality uncertain")
        elif form.cycle_side:
            relation = "<" if form.cycle_side == "below" else ">"
            stability = "stable" if form.criticality == "supercritical" else "unstable"
            notes.append(
                f"small {stability} cycles for {branch.vary} {relation} "
                f"{_format_value(float(u[-1]))}"
            )
    if note:
        notes.append(note)
    return _make_event(
        model,
        branch,
        k,
        bracket,
        u,
        "hopf",
        details,
        frequency=omega,
        lyapunov=lyapunov,
        criticality=criticality,
        note="; ".join(notes),
    )


def _has_zero_eigenvalue(a_matrix: object, omega: float) -> bool:
    """True when, besides +-i omega, the Jacobian has an eigenvalue within rounding of 0."""
    if sps.issparse(a_matrix):
        # large model: |A^-1 r| for a random r estimates 1/(smallest |eigenvalue|)
        # well enough to see a near-singular A (common practice of condition estimators)
        scale = max(float(abs(a_matrix).max()), 1e-300)
        try:
            factor = spla.splu(sps.csc_matrix(a_matrix))
        except RuntimeError:
            return True  # exactly singular
        probe = np.random.default_rng(0).standard_normal(a_matrix.shape[0])
        growth = float(np.linalg.norm(factor.solve(probe))) / float(np.linalg.norm(probe))
        return growth * scale >= 1.0 / ZERO_EIGENVALUE_RTOL
    values = np.linalg.eigvals(a_matrix)
    scale = max(float(np.max(np.abs(values))), 1e-300)
    others = values[np.abs(np.abs(values.imag) - omega) > ZERO_EIGENVALUE_RTOL * scale]
    return bool(others.shape[0] and np.min(np.abs(others)) <= ZERO_EIGENVALUE_RTOL * scale)


def _crossing_eigenvalue(model, u: Array, full: Array, omega_guess: float) -> complex:
    """The upper-half-plane eigenvalue nearest i * omega_guess at u (NaN if none)."""
    a_matrix = state_jacobian(model, u[:-1], full)
    if sps.issparse(a_matrix):
        value, _ = eigenvector_near(a_matrix, 1j * omega_guess)
        return complex(value.real, abs(value.imag)) if value.imag != 0 else complex(math.nan)
    values = np.linalg.eigvals(a_matrix)
    upper = values[values.imag > 0]
    if upper.shape[0] == 0:
        return complex(math.nan, 0.0)
    return complex(upper[int(np.argmin(np.abs(upper - 1j * omega_guess)))])


def _hopf_pair_real(model, branch: Branch, k: int, u: Array, omega_guess: float) -> float:
    full = _with_value(branch.parameters, k, u[-1])
    return _crossing_eigenvalue(model, u, full, omega_guess).real


def _locate_branch_point(model, branch: Branch, k: int, bracket: _Bracket) -> Event | None:
    u0 = _seed(branch, bracket)
    n = u0.shape[0] - 1
    full0 = _with_value(branch.parameters, k, u0[-1])
    chord = _curve_point(branch, bracket.row + 1) - _curve_point(branch, bracket.row)
    large = is_large(n)
    if large:
        # Moore's system needs the dense (n+1)^2 Hessian of psi^T f: too costly
        outcome = NewtonOutcome(False, u0, [], "not used for large models")
    else:
        g_u = np.column_stack(
            [dense(model.jacobian(u0[:-1], full0)), model.parameter_jacobian(u0[:-1], full0)[:, k]]
        )
        psi0 = np.linalg.svd(g_u)[0][:, -1]
        z0 = np.concatenate([u0, psi0, [0.0]])
        outcome = newton(_branch_point_system(model, branch.parameters, k), z0)
    z = outcome.solution
    u, psi = z[: n + 1], (None if large else z[n + 1 : 2 * n + 1])
    method = "Newton on Moore's extended branch-point system"
    note = ""
    if not (outcome.converged and _within_bracket(branch, bracket.row, u)):
        point, _ = _bisect_on_branch(
            model,
            branch,
            k,
            bracket.row,
            lambda u, c: _branch_point_test(model, branch, k, u, c),
        )
        if point is None:
            raise _LocationFailed(
                f"Newton: {outcome.message or 'left the bracket'}; bisection failed"
            )
        u, psi = point, None
        method = "bisection on the bordered determinant"
        if not large:
            note = f"located by bisection (Newton on the branch-point system failed: {outcome.message or 'left the bracket'})"
    x, full = u[:-1], _with_value(branch.parameters, k, u[-1])
    traced_guess = branch.tangents[bracket.row] + branch.tangents[bracket.row + 1]
    form = branch_point_normal_form(model, x, full, k, psi, traced_tangent=traced_guess)
    overlap = np.abs(form.tangents @ chord)
    traced = int(np.argmax(overlap))
    details = _base_details(branch, bracket, state_jacobian(model, x, full), method)
    details["newton_residual_norms"] = [float(r) for r in outcome.residual_norms]
    details["eigenvectors"] = {"left": [float(v) for v in form.left_vector]}
    details["tangents"] = [[float(v) for v in t] for t in form.tangents]
    details["traced_tangent_index"] = traced
    details["tangent"] = [
        float(v) for v in form.tangents[traced] * np.sign(form.tangents[traced] @ chord or 1.0)
    ]
    details["normal_form"] = {
        "coefficients": list(form.coefficients),
        "discriminant": form.discriminant,
        "null_basis": [[float(v) for v in t] for t in form.null_basis],
    }
    if not form.branching:
        note = "; ".join(
            s for s in ("degenerate branch point: no two real crossing branches", note) if s
        )
    return _make_event(
        model,
        branch,
        k,
        bracket,
        u,
        "branch_point",
        details,
        branching=form.branching or None,
        note=note,
    )


def _branch_point_test(model, branch: Branch, k: int, u: Array, chord: Array) -> float:
    full = _with_value(branch.parameters, k, u[-1])
    a_matrix = state_jacobian(model, u[:-1], full)
    fp = model.parameter_jacobian(u[:-1], full)[:, k]
    t = _event_tangent(model, u[:-1], full, k, chord)
    return bordered_determinant(a_matrix, fp, t)


class _LocationFailed(Exception):
    """Neither Newton on the defining system nor bisection placed the event."""


def _unrefined_event(model, branch: Branch, k: int, bracket: _Bracket, reason: str) -> Event:
    """An event whose location could not be refined: placed by linear interpolation
    between its two rows, and says so (a stability change is never dropped silently)."""
    u = _seed(branch, bracket)
    details = {
        "method": "linear interpolation between rows (not refined)",
        "bracket_rows": [int(bracket.row), int(bracket.row + 1)],
        "test_values": {
            "before": [float(v) for v in branch.test_values[bracket.row]],
            "after": [float(v) for v in branch.test_values[bracket.row + 1]],
            "order": list(TEST_FUNCTIONS),
        },
        "failure": reason,
        "tangent": [float(v) for v in branch.tangents[bracket.row]],
        "eigenvalues": _json_complex(branch.eigenvalues[bracket.row]),
    }
    omega = bracket.hint.get("omega") if bracket.kind == "hopf" else None
    return Event(
        trace=branch.name,
        kind=bracket.kind,
        vary=branch.vary,
        value=float(u[-1]),
        state=np.array(u[:-1]),
        parameters=_with_value(branch.parameters, k, float(u[-1])),
        arclength=_arclength_at(branch, bracket.row, u),
        frequency=float(omega) if omega else None,
        note=(
            f"not refined ({reason}): placed by linear interpolation between "
            f"computed points {bracket.row} and {bracket.row + 1}"
        ),
        details=details,
    )


_LOCATORS = {"fold": _locate_fold, "hopf": _locate_hopf, "branch_point": _locate_branch_point}


def _same_point(a: Event, b: Event, rtol: float = SAME_EVENT_RTOL) -> bool:
    scale = 1.0 + abs(a.value) + float(np.linalg.norm(a.state))
    gap = abs(a.value - b.value) + float(np.linalg.norm(a.state - b.state))
    return gap <= rtol * scale


def _duplicates(event: Event, other: Event) -> bool:
    """The same event met twice, or a fold at a branch point already reported."""
    if event.kind == other.kind:
        return _same_point(event, other)
    if event.kind == "fold" and other.kind == "branch_point":
        same_bracket = event.details["bracket_rows"] == other.details["bracket_rows"]
        return same_bracket or _same_point(event, other, FOLD_AT_BRANCH_POINT_RTOL)
    return False


def locate_events(model, branch: Branch) -> list[Event]:
    """Locate every stability change along a traced branch.

    Each sign change of a test function between consecutive rows is refined by
    Newton's method on the event's defining system (see the module docstring);
    bisection on the test function is the fallback, and says so in ``note``.
    Folds that coincide with a branch point (the traced branch turning back
    through a pitchfork) are reported once, as the branch point; an event met
    from two brackets is reported once.

    Parameters
    ----------
    model : Model
    branch : Branch

    Returns
    -------
    list of Event, in trace order (by arclength).
    """
    if len(branch) < 2:
        return []
    k = model.parameter_index(branch.vary)
    order = {"branch_point": 0, "hopf": 1, "fold": 2}
    brackets = sorted(find_brackets(branch), key=lambda b: order[b.kind])
    events: list[Event] = []
    for bracket in brackets:
        try:
            event = _LOCATORS[bracket.kind](model, branch, k, bracket)
        except _LocationFailed as failure:
            event = _unrefined_event(model, branch, k, bracket, str(failure))
        except (ArithmeticError, ValueError, RuntimeError, np.linalg.LinAlgError) as exc:
            event = _unrefined_event(model, branch, k, bracket, f"{type(exc).__name__}: {exc}")
        if event is None:
            continue
        duplicate = any(_duplicates(event, other) for other in events)
        if not duplicate:
            events.append(event)
    events.sort(
        key=lambda e: e.arclength if branch.arclength[-1] >= branch.arclength[0] else -e.arclength
    )
    return events
