"""Eigenvalues: dense LAPACK, and the search for the leading ones of large sparse matrices.

- :func:`dense_eigenvalues`, :func:`sort_eigenvalues`, :func:`sort_by_real_part`,
  :func:`count_by_half_plane`: all eigenvalues of small matrices, in the order
  every table uses (decreasing real part).
- :func:`search_leading_eigenvalues` (and :func:`leading_eigenvalues`): the few
  with the largest real parts of a large sparse matrix, by shift-invert Arnoldi
  at several shifts, confirmed across runs, with a dense fallback.
- :func:`eigenvector_near`, :func:`null_vectors`: the eigenpair nearest a shift
  and the near-null vectors, dense or sparse, for location and normal forms.

Size thresholds come from :mod:`branchline.numerics.policy`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from branchline.numerics import linalg
from branchline.numerics.linalg import eigvals_unchecked
from branchline.numerics.policy import DEFAULT, LinearAlgebraPolicy

Array = np.ndarray

# How many eigenvalues to report for a sparse (large) Jacobian: enough to see
# a pair crossing the imaginary axis next to the rightmost real eigenvalue.
SPARSE_EIGEN_COUNT = 6
# Eigenvalues asked of shift-invert Arnoldi around a shift: more than one, so
# that a conjugate pair at equal distance from a real shift does not stall it.
ARNOLDI_COUNT = 4
# Shift-invert Arnoldi at an exactly singular shift fails to factorize; retry
# this far (relative to the matrix's largest entry) from it.
SHIFT_OFFSET = 1e-10


def sort_by_real_part(eigenvalues: Array) -> Array:
    """Eigenvalues sorted by decreasing real part (ties: decreasing imaginary part)."""
    order = np.lexsort((-eigenvalues.imag, -eigenvalues.real))
    return eigenvalues[order]


def dense_eigenvalues(matrix: Array) -> Array:
    """All eigenvalues of a dense square matrix, sorted by decreasing real part.

    Non-finite entries or a failed QR iteration give NaN eigenvalues.
    """
    with np.errstate(all="ignore"):
        values = eigvals_unchecked(np.asarray(matrix, dtype=float))
    return sort_eigenvalues(values)


def sort_eigenvalues(values: Array) -> Array:
    """Complex eigenvalues sorted by decreasing real part (cheap for n <= 2)."""
    size = values.shape[0]
    if size == 2:
        if values[1].real > values[0].real:
            return values[::-1].copy()
        return values
    if size > 2:
        return values[np.argsort(-values.real, kind="stable")]
    return values


@dataclass(frozen=True)
class LeadingEigenvalues:
    """The outcome of a search for the eigenvalues with the largest real parts.

    Attributes
    ----------
    values : ndarray (count,) complex
        Sorted by decreasing real part; NaN where not found (all NaN when
        ``found`` is False, so that nothing half-trusted is used).
    found : bool
        True when all ``count`` values were computed and confirmed.
    method : str
        How: "dense LAPACK", "shift-invert Arnoldi", "dense LAPACK after Arnoldi"
        (the fallback) or "zero matrix".
    message : str
        Why not, when ``found`` is False (else empty).
    """

    values: Array
    found: bool
    method: str
    message: str = ""


def leading_eigenvalues(
    matrix: object, count: int = SPARSE_EIGEN_COUNT, policy: LinearAlgebraPolicy = DEFAULT
) -> Array:
    """The ``count`` eigenvalues with the largest real parts, NaN where they could not be found.

    See :func:`search_leading_eigenvalues` for the method; this returns only its
    ``values`` (all NaN when the search failed).

    Returns
    -------
    ndarray (count,) complex, sorted by decreasing real part.
    """
    return search_leading_eigenvalues(matrix, count, policy).values


def search_leading_eigenvalues(
    matrix: object, count: int = SPARSE_EIGEN_COUNT, policy: LinearAlgebraPolicy = DEFAULT
) -> LeadingEigenvalues:
    """Search for the ``count`` eigenvalues of a square matrix with the largest real parts.

    Dense matrices, and sparse ones with at most ``policy.eigenvalues_dense_up_to``
    rows: all
    eigenvalues from LAPACK (QR algorithm), then the first ``count``.

    Larger sparse matrices: shift-invert Arnoldi (ARPACK's implicitly restarted
    Arnoldi method through ``scipy.sparse.linalg.eigs`` applied to (A - sigma I)^-1,
    one sparse LU per shift; Saad, Numerical Methods for Large Eigenvalue
    Problems, 2nd ed., section 7.3) at several shifts sigma:

    1. the origin, where folds and branch points cross;
    2. the right end of the Gershgorin region (when positive): the rightmost
       real eigenvalues of unstable (e.g. Turing) states lie nearest to it;
    3. the imaginary axis at the frequencies of the candidates found so far (a
       Hopf pair crosses the axis there; up to ``MAX_AXIS_SHIFTS``, skipping
       points already well inside a trusted disk), then ``AXIS_MARCH_STEPS``
       more just above the part of the axis the disks cover;
    4. each leading candidate not yet confirmed (up to ``POLISH_ROUNDS`` times).

    Unshifted Arnoldi for the rightmost eigenvalues ("LR", ``RIGHTMOST_TOL``,
    a short iteration cap) is a cross-check: its values lying right of the
    leading ones become shifts of step 4 (they are not used as results: on
    stiff spectra such Ritz values can be flagged converged and be wrong).

    A complete shift-invert run returning k values has found every eigenvalue
    inside the disk about sigma through its k-th nearest one (its *trusted
    disk*). Each value is taken from the run with it deepest inside a trusted
    disk (Arnoldi is most accurate near its shift; values other runs report
    there are dropped, which also drops poorly converged Ritz values), and the
    result is confirmed when each of the ``count`` leading values lies inside
    some trusted disk. A shift that lands on an eigenvalue to rounding is moved
    off it (Arnoldi loses the other values' digits there). ARPACK runs that stop
    early are retried once with a larger Krylov space and iteration cap, and
    their converged values are kept as unconfirmed candidates. An eigenvalue
    with a large positive real part far from every shift and missed by the
    cross-check can still be missed (no method short of the full spectrum
    excludes that); clustered spectra near the axis, the common trouble of
    discretized reaction-diffusion models, are covered by steps 3 and 4.

    When the search is not confirmed and the matrix has at most
    ``policy.dense_fallback_up_to`` rows, LAPACK on the densified matrix decides.

    Parameters
    ----------
    matrix : ndarray or scipy.sparse matrix, shape (n, n), real
    count : int
    policy : LinearAlgebraPolicy
        Where dense LAPACK takes over (the model's ``linear_algebra``).

    Returns
    -------
    LeadingEigenvalues
        Never raises for numerical trouble: ``found`` is False and ``message``
        says why (``values`` are then NaN).

    Examples
    --------
    The second-difference matrix tridiag(1, -2, 1) of size 300 has eigenvalues
    -4 sin^2(k pi / 602), k = 1 .. 300 (LeVeque, Finite Difference Methods for
    Ordinary and Partial Differential Equations, section 2.10):

    >>> n = 300
    >>> lap = sp.diags([np.ones(n - 1), -2.0 * np.ones(n), np.ones(n - 1)], [-1, 0, 1])
    >>> search = search_leading_eigenvalues(lap, 2)
    >>> search.found, search.method
    (True, 'shift-invert Arnoldi')
    >>> exact = -4.0 * np.sin(np.arange(1, 3) * np.pi / (2 * (n + 1))) ** 2
    >>> bool(np.allclose(search.values.real, exact, rtol=1e-10, atol=0.0))
    True
    """
    size = matrix.shape[0]
    if not sp.issparse(matrix) or size <= max(count + 2, policy.eigenvalues_dense_up_to):
        dense = matrix.toarray() if sp.issparse(matrix) else np.asarray(matrix)
        return _dense_search(dense, count, "dense LAPACK")
    matrix = sp.csc_matrix(matrix, dtype=float)
    if not np.all(np.isfinite(matrix.data)):
        return _not_found(count, "the matrix has non-finite entries")
    search = _arnoldi_search(matrix, count)
    if search.found or size > policy.dense_fallback_up_to:
        return search
    fallback = _dense_search(matrix.toarray(), count, "dense LAPACK after Arnoldi")
    return fallback if fallback.found else search


# Eigenvalues computed per shift-invert run per reported one: a margin so that the
# reported ones lie inside the run's trusted disk, not at its rim.
ARNOLDI_OVERSAMPLING = 2
# Arnoldi settings for large sparse Jacobians. The tolerance is ARPACK's relative
# Ritz tolerance on (A - sigma I)^-1, which gives eigenvalues near sigma to about
# tol * |lambda - sigma|: well below the 1e-8 the test functions and tables need.
ARNOLDI_TOL = 1e-12
ARNOLDI_MAX_ITERATIONS = 300
# A run that does not converge is retried once with a Krylov space this many
# times larger (and as many more iterations) before its partial result is used.
ARNOLDI_RETRY_GROWTH = 3
# Smallest Krylov space per Arnoldi run (ncv): scipy's own default for eigs,
# max(2k + 1, 20), kept so that few wanted values still get room to converge.
ARNOLDI_MIN_SUBSPACE = 20
# A shift that is an eigenvalue to rounding (singular LU) is moved off it by this
# fraction of the matrix's scale: far above rounding, far below eigenvalue gaps.
SINGULAR_SHIFT_NUDGE = 1e-8
# The unshifted "rightmost" cross-check: it converges only when the spectrum is not
# stiff, so a short cap (~10 ms at 2000 states) keeps it cheaper than the
# shift-invert runs; its values are hints for shifts (see _rightmost_hints).
RIGHTMOST_TOL = 1e-10
RIGHTMOST_MAX_ITERATIONS = 20
# Shifts on the imaginary axis at the frequencies of leading candidates (at most
# this many), then this many more marching up the axis, each at the top of the
# highest trusted disk so far, for Hopf pairs whose frequency no candidate hints
# at. (A ladder at fractions of the matrix's norm was measured and dropped: on
# stiff spectra the norm is set by diffusion, far above Hopf frequencies, and
# Arnoldi far from the spectrum converges slowly and inaccurately.)
MAX_AXIS_SHIFTS = 3
AXIS_MARCH_STEPS = 1
# A frequency whose axis point lies this deep inside a trusted disk (relative to
# its radius) needs no shift of its own: the disk covers its neighbourhood.
AXIS_COVERED_DEPTH = 0.5
# A shift closer to an eigenvalue than this fraction of the distance to the next
# one is moved right by SHIFT_OFFSET_FRACTION of that distance (see
# _shift_invert_run); shifts at candidates (Hopf frequencies on the axis, values
# to confirm) are moved right by CANDIDATE_OFFSET_RTOL of their size from the
# start, since a candidate is usually an eigenvalue to rounding.
NEAR_EIGENVALUE_RATIO = 1e-4
SHIFT_OFFSET_FRACTION = 1e-2
CANDIDATE_OFFSET_RTOL = 1e-3
# Rounds of shift-invert runs centred on leading candidates not yet confirmed.
POLISH_ROUNDS = 2
# A value counts as inside a trusted disk below this fraction of its radius (the
# rim value itself, and a pair split at the rim, are not trusted).
TRUST_MARGIN = 1e-6
# Two values from different runs are one eigenvalue when closer than this, relative
# to their size (or to this fraction of the matrix's norm near zero).
DUPLICATE_RTOL = 1e-8
DUPLICATE_SCALE_FLOOR = 1e-6
# Eigenvalues with |Im| below this fraction of the matrix's norm count as real
# when completing conjugate pairs; frequencies closer than AXIS_SHIFT_RTOL
# (relative) share one axis shift.
REAL_AXIS_RTOL = 1e-12
AXIS_SHIFT_RTOL = 1e-3


@dataclass(frozen=True)
class _Run:
    """Eigenvalues from one Arnoldi run; within ``radius`` of ``center`` all were found."""

    values: Array
    center: complex
    radius: float  # 0 when the run stopped early or is not a shift-invert run
    converged: bool


def _not_found(count: int, message: str) -> LeadingEigenvalues:
    return LeadingEigenvalues(np.full(count, np.nan + 0j), False, "shift-invert Arnoldi", message)


def _dense_search(dense: Array, count: int, method: str) -> LeadingEigenvalues:
    values = dense_eigenvalues(dense)[:count]
    if np.all(np.isfinite(values)):
        return LeadingEigenvalues(values, True, method)
    return LeadingEigenvalues(
        np.full(count, np.nan + 0j),
        False,
        method,
        "LAPACK's QR algorithm gave no finite eigenvalues",
    )


def _arnoldi_search(matrix, count: int) -> LeadingEigenvalues:
    """Steps 1-4 of :func:`search_leading_eigenvalues` on a real CSC matrix."""
    scale = norm_estimate(matrix)
    if scale == 0.0:
        return LeadingEigenvalues(np.zeros(count, dtype=complex), True, "zero matrix")
    nev = ARNOLDI_OVERSAMPLING * count
    runs = [_shift_invert_run(matrix, 0.0, nev, scale)]
    right = _gershgorin_right(matrix)
    if right > 0.0:
        runs.append(_shift_invert_run(matrix, right, nev, scale))
    hints = _rightmost_hints(matrix, nev)
    frequencies = _axis_frequencies(_merge(runs, scale), 2 * count, scale)
    for omega in frequencies:
        if not any(_depth(1j * omega, run) < AXIS_COVERED_DEPTH for run in runs):
            runs.append(_shift_invert_run(matrix, _off(1j * omega), nev, scale))
    for omega in _axis_march(runs, frequencies, scale):
        runs.append(_shift_invert_run(matrix, _off(1j * omega), nev, scale))
    for _ in range(POLISH_ROUNDS):
        leading = sort_by_real_part(_merge(runs, scale))[:count]
        doubtful = [value for value in leading if not _trusted(value, runs)]
        if leading.shape[0] == count:
            edge = leading[-1].real
            doubtful += [hint for hint in hints if hint.real > edge and not _trusted(hint, runs)]
        if not doubtful:
            break
        hints = np.empty(0, dtype=complex)  # each hint is followed up once
        for value in _upper_representatives(doubtful, scale)[: 2 * count]:
            runs.append(_shift_invert_run(matrix, _off(value), nev, scale))
    leading = sort_by_real_part(_merge(runs, scale))[:count]
    if leading.shape[0] == count and all(_trusted(value, runs) for value in leading):
        return LeadingEigenvalues(leading, True, "shift-invert Arnoldi")
    if not any(run.converged for run in runs):
        why = "ARPACK did not converge"
    elif leading.shape[0] < count:
        why = f"ARPACK found {leading.shape[0]} of {count}"
    else:
        why = "ARPACK's runs could not confirm the leading ones"
    return _not_found(count, why)


def _off(sigma: complex) -> complex:
    """A shift moved right of a candidate eigenvalue (see ``CANDIDATE_OFFSET_RTOL``)."""
    return sigma + CANDIDATE_OFFSET_RTOL * abs(sigma)


def norm_estimate(matrix) -> float:
    """The infinity norm of a sparse matrix (max row sum of |A|), cheap for CSC/CSR."""
    if sp.isspmatrix_csc(matrix):  # row sums straight from the arrays, no |A| copy
        sums = np.bincount(matrix.indices, weights=np.abs(matrix.data), minlength=matrix.shape[0])
        return float(sums.max()) if sums.size else 0.0
    sums = np.asarray(abs(matrix).sum(axis=1)).ravel()
    return float(sums.max()) if sums.size else 0.0


def _gershgorin_right(matrix) -> float:
    """An upper bound on Re(lambda): the right end of the Gershgorin discs (rows and columns).

    Gershgorin's theorem (Golub & Van Loan, Matrix Computations, 4th ed.,
    theorem 7.2.1), applied to A and A^T; the smaller bound holds.
    """
    diagonal = matrix.diagonal()
    magnitude = abs(matrix)
    rows = np.asarray(magnitude.sum(axis=1)).ravel() - np.abs(diagonal)
    columns = np.asarray(magnitude.sum(axis=0)).ravel() - np.abs(diagonal)
    return float(min(np.max(diagonal + rows), np.max(diagonal + columns)))


def _arpack(operator, nev: int, which: str, tol: float, maxiter: int, retry: bool = True):
    """(eigenvalues, converged): eigs(...), retried larger once; the converged part on failure."""
    size = operator.shape[0]
    k = max(1, min(nev, size - 2))
    ncv = min(size - 1, max(2 * k + 1, ARNOLDI_MIN_SUBSPACE))
    for attempt in range(2):
        try:
            values = spla.eigs(
                operator,
                k=k,
                which=which,
                tol=tol,
                maxiter=maxiter,
                ncv=ncv,
                return_eigenvectors=False,
            )
            return np.asarray(values, dtype=complex), True
        except spla.ArpackNoConvergence as exc:
            partial = np.asarray(exc.eigenvalues, dtype=complex)
            if attempt == 1 or ncv >= size - 1 or not retry:
                return partial, False
            ncv = min(size - 1, ARNOLDI_RETRY_GROWTH * ncv)
            maxiter *= ARNOLDI_RETRY_GROWTH
        except (spla.ArpackError, RuntimeError, ValueError):
            return np.empty(0, dtype=complex), False
    return np.empty(0, dtype=complex), False  # pragma: no cover (the loop returns)


def _factor(matrix):
    # every shift's matrix has the pattern of A plus its diagonal: one column ordering
    try:
        return linalg.factor_reusing_ordering(matrix)
    except RuntimeError:  # exactly singular
        return None


def _shift_invert_run(matrix, sigma: complex, nev: int, scale: float) -> _Run:
    """Eigenvalues nearest ``sigma`` from ARPACK on (A - sigma I)^-1, moved off an eigenvalue.

    A shift on an eigenvalue to rounding makes one |mu| ~ 1/eps, and Arnoldi then
    loses the other values' digits (eps times that ratio: measured errors up to
    1e-2 on a clustered spectrum), so the run is repeated with the shift moved
    right by ``SHIFT_OFFSET_FRACTION`` of the distance to the second-nearest value.
    """
    run = _shift_invert_once(matrix, sigma, nev, scale)
    distances = np.sort(np.abs(run.values - run.center))
    if distances.shape[0] >= 2 and distances[0] < NEAR_EIGENVALUE_RATIO * distances[1]:
        moved = run.center + SHIFT_OFFSET_FRACTION * float(distances[1])
        return _shift_invert_once(matrix, moved, nev, scale)
    return run


def _shift_invert_once(matrix, sigma: complex, nev: int, scale: float) -> _Run:
    """Eigenvalues nearest ``sigma`` from ARPACK on (A - sigma I)^-1 (one sparse LU).

    scipy's ``eigs(A, sigma=...)`` returns wrong values for a real A with a complex
    shift (scipy 1.17), so the complex LU is formed here and ARPACK is given the
    inverse as a complex LinearOperator.
    """
    sigma = complex(sigma)
    shifted_dtype = complex if sigma.imag != 0.0 else float
    identity = sp.identity(matrix.shape[0], format="csc", dtype=shifted_dtype)
    base = matrix.astype(shifted_dtype)
    center = sigma if sigma.imag != 0.0 else sigma.real
    lu = _factor((base - center * identity).tocsc())
    if lu is None:  # sigma is an eigenvalue to rounding: move off it a little
        direction = 1.0 + (1j if shifted_dtype is complex else 0.0)
        center = center + SINGULAR_SHIFT_NUDGE * scale * direction
        lu = _factor((base - center * identity).tocsc())
        if lu is None:
            return _Run(np.empty(0, dtype=complex), complex(center), 0.0, False)
    operator = spla.LinearOperator(matrix.shape, matvec=lu.solve, dtype=shifted_dtype)
    mu, converged = _arpack(operator, nev, "LM", ARNOLDI_TOL, ARNOLDI_MAX_ITERATIONS)
    mu = mu[np.isfinite(mu) & (np.abs(mu) > 0.0)]
    values = complex(center) + 1.0 / mu
    radius = 0.0
    if converged and values.shape[0] > 0:
        radius = float(np.max(np.abs(values - center))) * (1.0 - TRUST_MARGIN)
    return _Run(values, complex(center), radius, converged)


def _rightmost_hints(matrix, nev: int) -> Array:
    """Unshifted Arnoldi for the rightmost eigenvalues: hints for shifts, never results.

    On stiff spectra its Ritz values can be flagged converged and still be wrong
    (measured on discretized diffusion), so each one is only followed by a
    shift-invert run, which finds the eigenvalues there or shows there are none.
    """
    values, _ = _arpack(matrix, nev, "LR", RIGHTMOST_TOL, RIGHTMOST_MAX_ITERATIONS, retry=False)
    return values[np.isfinite(values)]


def _depth(value: complex, run: _Run) -> float:
    """|value - center| / radius for the run (or its mirror image): below 1 inside its disk."""
    if run.radius <= 0.0:
        return math.inf
    distance = min(abs(value - run.center), abs(value - run.center.conjugate()))
    return distance / run.radius


def _trusted(value: complex, runs) -> bool:
    """True when a complete shift-invert run had ``value`` (or its conjugate) inside its disk."""
    return any(_depth(value, run) < 1.0 for run in runs)


def _best_run(value: complex, runs) -> int | None:
    """Index of the complete run with ``value`` deepest inside its disk (None: no such run).

    That run found every eigenvalue of its disk, the ones near its centre most
    accurately (Arnoldi's error grows with the distance from the shift).
    """
    depths = [_depth(value, run) for run in runs]
    best = int(np.argmin(depths)) if depths else 0
    return best if depths and depths[best] < 1.0 else None


def _same(a: complex, b: complex, scale: float) -> bool:
    return abs(a - b) <= DUPLICATE_RTOL * max(abs(a), abs(b), DUPLICATE_SCALE_FLOOR * scale)


def _merge_lists(first: list, second: list, scale: float) -> list:
    """The union of two lists of eigenvalues, a value's multiplicity the larger of the two."""
    merged = list(first)
    claimed = [False] * len(merged)
    for value in second:
        for index, other in enumerate(merged[: len(first)]):
            if not claimed[index] and _same(value, other, scale):
                claimed[index] = True
                break
        else:
            merged.append(value)
    return merged


def _symmetric(values: Array, scale: float) -> list:
    """A real matrix's run values completed to conjugate-symmetric form (upper and real part)."""
    tol = REAL_AXIS_RTOL * scale
    real = [complex(v.real, 0.0) for v in values if abs(v.imag) <= tol]
    upper = [complex(v) for v in values if v.imag > tol]
    reflected = [complex(v).conjugate() for v in values if v.imag < -tol]
    return real + _merge_lists(upper, reflected, scale)


def _merge(runs, scale: float) -> Array:
    """All eigenvalues found by the runs, once each, conjugate pairs complete.

    A value inside some run's trusted disk is taken only from the run with it
    deepest inside (see :func:`_best_run`): a value another run reports there is
    either the same eigenvalue, less accurate, or not an eigenvalue at all (a
    poorly converged Ritz value far from its shift). Values outside every trusted
    disk (from runs that stopped early) are kept as they are.
    """
    kept: list = []
    for index, run in enumerate(runs):
        values = [
            value
            for value in _symmetric(run.values, scale)
            if _best_run(value, runs) in (index, None)
        ]
        kept = _merge_lists(kept, values, scale)
    tol = REAL_AXIS_RTOL * scale
    full = kept + [value.conjugate() for value in kept if value.imag > tol]
    return np.array(full, dtype=complex)


def _axis_frequencies(candidates: Array, how_many: int, scale: float) -> list:
    """Distinct |Im| of the leading candidates: where a Hopf pair would cross the axis."""
    frequencies: list = []
    for value in sort_by_real_part(candidates)[:how_many]:
        omega = abs(value.imag)
        if omega <= REAL_AXIS_RTOL * scale:
            continue
        if any(abs(omega - other) <= AXIS_SHIFT_RTOL * other for other in frequencies):
            continue
        frequencies.append(omega)
        if len(frequencies) == MAX_AXIS_SHIFTS:
            break
    return frequencies


def _axis_march(runs, frequencies: list, scale: float) -> list:
    """Frequencies just above the highest point of the imaginary axis the trusted disks cover."""
    top = 0.0
    for run in runs:
        if run.radius > 0.0 and abs(run.center.real) < run.radius:
            reach = abs(run.center.imag) + math.sqrt(run.radius**2 - run.center.real**2)
            top = max(top, reach)
    if top <= 0.0 or top > scale:
        return []
    return [top * (1.0 + step) for step in range(AXIS_MARCH_STEPS)]


def _upper_representatives(values, scale: float) -> list:
    """One of each conjugate pair (the upper one), once."""
    picked: list = []
    for value in values:
        value = complex(value.real, abs(value.imag))
        if not any(_same(value, other, scale) for other in picked):
            picked.append(value)
    return picked


def count_by_half_plane(eigenvalues: Array, zero_tolerance: float) -> tuple[int, int, int]:
    """Counts of eigenvalues with positive, (near-)zero and negative real part.

    ``zero_tolerance`` is absolute: |Re lambda| <= zero_tolerance counts as zero.
    """
    real = eigenvalues.real
    positive = int(np.count_nonzero(real > zero_tolerance))
    negative = int(np.count_nonzero(real < -zero_tolerance))
    return positive, real.shape[0] - positive - negative, negative



def eigenvector_near(matrix: object, shift: complex) -> tuple[complex, Array]:
    """The eigenvalue of ``matrix`` nearest ``shift`` and a unit eigenvector (dense LAPACK or
    shift-invert Arnoldi, ``scipy.sparse.linalg.eigs``)."""
    if sp.issparse(matrix):
        scale = max(float(abs(matrix).max()), 1.0)
        if complex(shift).imag != 0.0:
            # scipy's eigs returns zeros for a real matrix with a complex shift
            # (observed with scipy 1.17): factorize in complex arithmetic instead
            matrix = sp.csc_matrix(matrix, dtype=complex)
        count = max(1, min(ARNOLDI_COUNT, matrix.shape[0] - 2))
        for offset in (0.0, SHIFT_OFFSET * scale):
            try:
                values, vectors = spla.eigs(matrix, k=count, sigma=shift + offset)
            except (RuntimeError, spla.ArpackNoConvergence, spla.ArpackError):
                continue
            index = int(np.argmin(np.abs(values - shift)))
            return complex(values[index]), vectors[:, index] / np.linalg.norm(vectors[:, index])
        raise np.linalg.LinAlgError(f"no eigenvalue found near {shift}")
    values, vectors = np.linalg.eig(matrix)
    index = int(np.argmin(np.abs(values - shift)))
    return complex(values[index]), vectors[:, index] / np.linalg.norm(vectors[:, index])


def null_vectors(matrix: object) -> tuple[Array, Array]:
    """Unit (left, right) vectors of the smallest singular value of a square matrix.

    Dense: SVD. Sparse: shift-invert Arnoldi near 0 for the matrix and its
    transpose (the eigenvectors of the eigenvalue nearest zero, which for a
    nearly singular matrix span the same near-null spaces).
    """
    if sp.issparse(matrix):
        _, right = eigenvector_near(matrix, 0.0)
        _, left = eigenvector_near(sp.csc_matrix(matrix.T), 0.0)
        return left, right
    u, _, vh = np.linalg.svd(matrix)
    return u[:, -1], vh[-1].conj()


