"""Tracking the leading eigenvalues of a large sparse Jacobian from point to point.

Along a traced branch the Jacobian changes little between consecutive points,
and so do its leading eigenvalues. :func:`track_leading_eigenvalues` uses that:
it runs shift-invert Arnoldi (ARPACK through ``scipy.sparse.linalg.eigs`` on
(A - sigma I)^-1; Saad, Numerical Methods for Large Eigenvalue Problems, 2nd ed.,
section 7.3) only at the previous point's leading eigenvalues, started from the
previous eigenvectors (ARPACK's start vector), instead of the multi-shift search
of :func:`branchline.numerics.eigenvalues.search_leading_eigenvalues`. That search
is the fallback whenever tracking loses confidence.

The confidence rule (a rule of thumb of the trade for continuation of a few
eigenvalues, with our own thresholds; the constants below):

1. every tracking run converged, so that all eigenvalues inside its *trusted
   disk* (about its shift, through its farthest returned value) were found;
2. each new leading value lies inside some trusted disk;
3. each previous leading value has a new one nearby: within ``MOVE_FRACTION``
   of the trusted radius of the run that covers it. The tracked eigenvalues
   moved little compared with the region searched; if the others moved
   comparably little (the premise of any continuation step), none of them can
   have entered the leading set unseen. One that moves much faster, far from
   every shift, is caught by the next full search at the latest (no method
   short of the whole spectrum excludes it, as for the full search itself);
4. the number of leading values with positive real part is unchanged (or
   changed as rule 6 allows), and fewer than ``REFRESH_POINTS`` points were
   tracked since the last full search: any other stability change, and every
   so many points, is confirmed by the full search;
5. when the caller knows the sign of det A at this point and the last (the
   equilibrium branch reads it off the tangent's factorization at no cost:
   det f_x = det [G_u; t^T] t_p), a change of that sign, which means an odd
   number of real eigenvalues crossed zero anywhere in the spectrum, is matched
   by an odd change in the number of tracked real values above zero. This
   check at every point covers the whole spectrum for real eigenvalues, so the
   periodic full search of rule 4 is rarer than it was (every 200 points, was
   50: at 20,000 states a full search costs about 80 factorizations, and the
   periodic ones were a quarter of the run's time).

6. a stability change seen by tracking is accepted without the full search when
   it is clean: made of complex pairs only (each previous upper value matched one
   to one to a new one, within ``MOVE_FRACTION`` of a covering trusted radius,
   with ``|Im| >= CROSSING_IMAG_RTOL |value|`` on both sides of the axis), the
   real values above zero unchanged in number, and rule 5 satisfied (a pair
   crossing leaves the sign of det A alone). Counted as ``crossings``;
7. the certificate: at most ``CERTIFY_POINTS - 1`` points after a tracking run,
   no factorization at all. Rayleigh-Ritz on the orthonormal basis V of that
   run's eigenvectors (every value it found inside its disks: real and
   imaginary parts), H = V^T A V, costs two sparse products A V and A^T V. Each
   Ritz value theta with right and left Ritz vectors x, y (unit) has residuals
   r = |A x - theta x| and s = |A^T y - conj(theta) y| and the first-order
   bound kappa min(r, s) on its distance to an eigenvalue, kappa = 1 / |y^H x|
   (the eigenvalue's condition number; Wilkinson, The Algebraic Eigenvalue
   Problem, 1965, chapter 2, sections 8-10, from memory). The point is
   accepted when every bound is below ``CERTIFY_RTOL`` |theta| (or, when larger,
   ``CERTIFY_ROUNDING`` eps |A| kappa: the rounding level of any backward-stable
   eigensolver on A, reached on very large stiff matrices) and below
   ``CERTIFY_MARGIN`` times both |Re theta| (the stability of each value is
   certain) and its distance to every other Ritz value (each bound belongs to
   one simple eigenvalue); when the leading values lie in the last run's
   trusted disks and each of that run's leading values has a Ritz value within
   ``MOVE_FRACTION`` of the radius (rule 3, movement counted from the run);
   when the number of unstable values is unchanged; and rule 5 holds.
   Otherwise a tracking run decides. A stability change therefore always goes
   through a tracking run (|Re theta| is then small, or the count differs).
   After ``CERTIFY_MISSES`` points in a row without a certified one, the
   certificate is tried only every ``CERTIFY_RETRY`` points (its cost is
   wasted on models whose eigenvectors turn along the branch).

Clustered spectra (many modes within a small fraction of the leading value's
size) get one more run per cluster with ``CLUSTER_TRACK_VALUES`` values when the
first run's trusted disk does not settle every previous value of the cluster
(see ``CLUSTER_RTOL``); the rules above apply unchanged to the larger run.

Otherwise the full search runs and its values are used; :class:`SpectrumTrack`
counts them (``tracked``, ``certified``, ``crossings`` and ``full_searches``;
run.json carries the counts).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from branchline.numerics import linalg
from branchline.numerics.eigenvalues import (
    ARNOLDI_TOL,
    REAL_AXIS_RTOL,
    SPARSE_EIGEN_COUNT,
    TRUST_MARGIN,
    LeadingEigenvalues,
    norm_estimate,
    search_leading_eigenvalues,
    sort_by_real_part,
)
from branchline.numerics.policy import DEFAULT, LinearAlgebraPolicy

Array = np.ndarray

# Eigenvalues asked of a tracking run: one per previous leading value counted once
# per conjugate pair (a run at a complex shift returns the upper half plane, whose
# mirror images complete the pairs), plus this many, so that its trusted disk
# reaches beyond the leading set.
TRACK_SPARE = 1
# Rule 3: a previous leading value must have moved less than this fraction of the
# trusted radius of the run covering it.
MOVE_FRACTION = 0.25
# Rule 4: a full search at least every this many points (rule 5 checks every point).
REFRESH_POINTS = 200
# At most this many tracking shifts per point (one per cluster of leading values
# that the disks of the runs before do not cover: a real one and a complex pair,
# say); more clusters mean a full search.
MAX_TRACK_SHIFTS = 2
# ARPACK iteration cap of a tracking run: with a start vector from the previous
# point it converges in a few restarts; a run that needs more is not tracking.
# Its Krylov space is the smallest ARPACK allows comfortably (2k + 1, not the
# full search's 20 or more): started from the previous eigenvectors, one sweep of
# 2k + 1 solves suffices (measured at 20,000 states: 14 solves and 0.09 s,
# against 30 solves and 0.21 s from a random start with 20 vectors).
TRACK_MAX_ITERATIONS = 60
# Clustered spectra (a chain of many identical cells, a fine grid: hundreds of
# modes within a small fraction of the leading value's size, e.g. the 1,000-state
# Brusselator chain near -0.5 +/- 1.94i) defeat a run of a few values: its trusted
# disk ends at the few nearest modes and misses where the previous values moved.
# Previous leading values within CLUSTER_RTOL * |value| of each other form a
# cluster; a run that does not settle all of them (rules 2 and 3 for each) is
# repeated once with CLUSTER_TRACK_VALUES values, whose disk reaches past the
# crowd. The confidence rules themselves are unchanged: the larger run only
# widens the region in which every eigenvalue is known to have been found.
CLUSTER_RTOL = 1e-2
CLUSTER_TRACK_VALUES = 40
# Shifts are placed this far right of a previous value (relative to its size,
# with a floor relative to the matrix's scale), so that the LU is never singular
# and the value itself is found accurately near the shift.
SHIFT_OFFSET_RTOL = 1e-3
SHIFT_OFFSET_FLOOR = 1e-9
# Values with |Im| below this fraction of the matrix's scale count as real (the
# full search's rule).
REAL_RTOL = REAL_AXIS_RTOL
# Rule 6: a pair crossing the imaginary axis keeps |Im| at least this fraction of
# its modulus at both points (well off the real axis: a genuine complex pair).
CROSSING_IMAG_RTOL = 1e-3
# Rule 7 (the certificate): a tracking run at least every CERTIFY_POINTS points;
# each Ritz value's error bound below CERTIFY_RTOL times its modulus, or below
# CERTIFY_ROUNDING eps |A| kappa when that is larger (rounding alone puts the
# eigenvalues of any backward-stable method, the tracking run's included, that
# far off: eps |A| is the backward error of one product with A), and below CERTIFY_MARGIN
# times its distance to the imaginary axis and to every other Ritz value; at most
# CERTIFY_MAX_COLUMNS basis vectors (a cluster run's 80 would cost more than it
# saves); basis vectors whose pivoted-QR diagonal falls below CERTIFY_RANK_RTOL of
# the first are dependent and dropped.
CERTIFY_POINTS = 20
CERTIFY_ROUNDING = 10.0
# Rule 7's back-off: after this many points in a row without a certified one, the
# certificate (two sparse products and small dense work: about half an LU at
# 20,000 states) is tried only every CERTIFY_RETRY points.
CERTIFY_MISSES = 3
CERTIFY_RETRY = 8
EPS = float(np.finfo(float).eps)
CERTIFY_RTOL = 1e-9
CERTIFY_MARGIN = 1e-3
CERTIFY_MAX_COLUMNS = 16
CERTIFY_RANK_RTOL = 1e-8


@dataclass(frozen=True)
class SpectrumTrack:
    """What tracking carries from one point to the next (and its counts).

    Attributes
    ----------
    values : ndarray (count,) complex
        The leading eigenvalues at the last point, by decreasing real part.
    shifts : tuple of complex
        The shifts of the last point's runs, with their trusted ``radii``.
    radii : tuple of float
    vectors : tuple of ndarray (n,) complex or None
        A start vector per shift (eigenvectors of that run), None after a full search.
    since_full : int
        Points tracked since the last full search.
    determinant_sign : float or None
        The sign of det A at the last point when the caller gave it (rule 5).
    tracked, full_searches : int
        Points whose eigenvalues came from tracking (certified points included),
        and full searches run.
    basis : ndarray (n, m) real or None
        Orthonormal basis of the eigenvectors of every value the last tracking run
        found inside its trusted disks (rule 7), None when there is none.
    anchor : ndarray complex
        The leading values of the last tracking run (rule 7 measures movement from them).
    since_solve : int
        Points certified since the last tracking run (rule 7).
    certified, crossings : int
        Points certified without a solve (rule 7), and stability changes accepted
        from tracking alone (rule 6).
    certificate_misses : int
        Points in a row whose values were not certified (rule 7's back-off).
    """

    values: Array
    shifts: tuple = ()
    radii: tuple = ()
    vectors: tuple = ()
    since_full: int = 0
    tracked: int = 0
    full_searches: int = 0
    determinant_sign: float | None = None
    basis: Array | None = None
    anchor: Array | None = None
    since_solve: int = 0
    certified: int = 0
    crossings: int = 0
    certificate_misses: int = 0


def unstable_leading(values: Array, scale: float) -> int:
    """How many of ``values`` have a real part above rounding (``REAL_RTOL * scale``)."""
    return int(np.count_nonzero(values.real > REAL_RTOL * scale))


def track_leading_eigenvalues(
    matrix: object,
    previous: SpectrumTrack | None,
    count: int = SPARSE_EIGEN_COUNT,
    policy: LinearAlgebraPolicy = DEFAULT,
    determinant_sign: float | None = None,
) -> tuple[LeadingEigenvalues, SpectrumTrack]:
    """The ``count`` leading eigenvalues of a large sparse matrix, tracked from ``previous``.

    Parameters
    ----------
    matrix : scipy.sparse matrix (n, n), real
    previous : SpectrumTrack or None
        The track of the previous point of the same branch (None at its first).
    count : int
    policy : LinearAlgebraPolicy
        Passed to the full search.
    determinant_sign : float or None
        +1 or -1, the sign of det ``matrix`` when the caller knows it (rule 5 of
        the module docstring), else None.

    Returns
    -------
    (LeadingEigenvalues, SpectrumTrack)
        The values (``method`` "tracked shift-invert Arnoldi" when tracking was
        confident, else the full search's), and the track for the next point.
    """
    matrix = sp.csc_matrix(matrix, dtype=float)
    if determinant_sign is not None and not determinant_sign:
        determinant_sign = None
    misses = 0 if previous is None else previous.certificate_misses + 1
    if previous is not None and previous.since_full < REFRESH_POINTS:
        if _certificate_worth_trying(previous):
            certified = _certify(matrix, previous, count, determinant_sign)
            if certified is not None:
                return certified
        tracked = _track(matrix, previous, count)
        if tracked is not None and _real_crossings_agree(
            previous, tracked[1].values, determinant_sign
        ):
            search, track = tracked
            return search, replace(
                track, determinant_sign=determinant_sign, certificate_misses=misses
            )
    search = search_leading_eigenvalues(matrix, count, policy)
    base = previous or SpectrumTrack(np.empty(0, dtype=complex))
    counts = {
        "tracked": base.tracked,
        "full_searches": base.full_searches + 1,
        "certified": base.certified,
        "crossings": base.crossings,
        "certificate_misses": misses,
    }
    if not search.found:
        return search, SpectrumTrack(np.empty(0, dtype=complex), **counts)
    track = SpectrumTrack(search.values, since_full=0, determinant_sign=determinant_sign, **counts)
    return search, track


def _certificate_worth_trying(previous: SpectrumTrack) -> bool:
    """Rule 7's back-off: after ``CERTIFY_MISSES`` points in a row without a certified
    one (a model whose eigenvectors turn along the branch: the old basis never
    passes), the certificate is tried only every ``CERTIFY_RETRY`` points."""
    misses = previous.certificate_misses
    return misses < CERTIFY_MISSES or misses % CERTIFY_RETRY == 0


def _real_crossings_agree(previous: SpectrumTrack, values: Array, sign: float | None) -> bool:
    """Rule 5: a change of sign of det A is matched by an odd change in the number of
    real tracked values above zero (True when either sign is unknown)."""
    if sign is None or previous.determinant_sign is None:
        return True
    flipped = sign != previous.determinant_sign

    def real_positive(array: Array) -> int:
        scale = float(np.max(np.abs(array))) if array.size else 0.0
        real = np.abs(array.imag) <= REAL_RTOL * max(scale, 1.0)
        return int(np.count_nonzero(real & (array.real > 0.0)))

    odd = (real_positive(values) - real_positive(previous.values)) % 2 == 1
    return flipped == odd


def _upper_values(values: Array, scale: float) -> list:
    """One of each conjugate pair (the upper one), real values as real, rightmost first."""
    picked: list = []
    for value in sort_by_real_part(values):
        upper = complex(value.real, abs(value.imag))
        if abs(upper.imag) <= REAL_RTOL * scale:
            upper = complex(upper.real, 0.0)
        if upper not in picked:
            picked.append(upper)
    return picked


def _start_vector(shift: complex, previous: SpectrumTrack) -> Array | None:
    """The start vector of the previous run nearest ``shift`` (None if there is none)."""
    if not previous.shifts:
        return None
    distances = [abs(center - shift) for center in previous.shifts]
    return previous.vectors[int(np.argmin(distances))]


def _track(matrix, previous: SpectrumTrack, count: int):
    """Tracking runs at the previous leading values (rightmost first, one per uncovered
    cluster); None when tracking is not confident (see the module docstring)."""
    scale = norm_estimate(matrix)
    if scale == 0.0 or previous.values.shape[0] < count:
        return None
    runs: list = []
    pending = _upper_values(previous.values, scale)
    nev = len(pending) + TRACK_SPARE
    while pending:
        if len(runs) == MAX_TRACK_SHIFTS:
            return None
        value = pending[0]
        shift = value + max(SHIFT_OFFSET_RTOL * abs(value), SHIFT_OFFSET_FLOOR * scale)
        run = _covering_run(matrix, shift, nev, _start_vector(shift, previous), pending)
        if run is None:
            return None
        runs.append(run)
        pending = [v for v in pending if not any(_distance(v, r) < r[1] for r in runs)]
        if pending and pending[0] == value:
            return None
    found = _collect(runs, scale)
    leading = sort_by_real_part(found)[:count]
    if leading.shape[0] < count:
        return None
    confident, crossed = _confident(leading, found, previous.values, runs, scale)
    if not confident:
        return None
    track = SpectrumTrack(
        leading,
        shifts=tuple(run[0] for run in runs),
        radii=tuple(run[1] for run in runs),
        vectors=tuple(run[3] for run in runs),
        since_full=previous.since_full + 1,
        tracked=previous.tracked + 1,
        full_searches=previous.full_searches,
        basis=_eigenvector_basis(runs),
        anchor=leading,
        since_solve=0,
        certified=previous.certified,
        crossings=previous.crossings + int(crossed),
    )
    return LeadingEigenvalues(leading, True, "tracked shift-invert Arnoldi"), track


def _cluster(pending: list) -> list:
    """The pending values within ``CLUSTER_RTOL`` of the first (itself included)."""
    first = pending[0]
    reach = CLUSTER_RTOL * max(abs(first), 1e-300)
    return [value for value in pending if abs(value - first) <= reach]


def _covering_run(matrix, shift: complex, nev: int, start: Array | None, pending: list):
    """A tracking run at ``shift``; when the first pending value belongs to a cluster
    of previous values that the run's trusted disk misses, or whose nearest new
    values moved too far for rule 3, once more with ``CLUSTER_TRACK_VALUES`` values
    (a larger Krylov space: the disk then reaches past the crowd of modes)."""
    run = _tracking_run(matrix, shift, nev, start)
    cluster = _cluster(pending)
    if len(cluster) < 2 or nev >= CLUSTER_TRACK_VALUES:
        return run
    if run is not None and all(_settled(value, run) for value in cluster):
        return run
    return _tracking_run(matrix, shift, CLUSTER_TRACK_VALUES, start)


def _settled(value: complex, run) -> bool:
    """Whether ``value`` lies inside the run's trusted disk with a run value within
    ``MOVE_FRACTION`` of its radius (rules 2 and 3 for that one value)."""
    if _distance(value, run) >= run[1]:
        return False
    values = np.concatenate([run[2], np.conj(run[2])])
    return float(np.min(np.abs(values - value))) <= MOVE_FRACTION * run[1]


def _tracking_run(matrix, shift: complex, nev: int, start: Array | None):
    """(shift, trusted radius, values, start vector for next time, eigenvectors (n, k))
    or None on failure."""
    n = matrix.shape[0]
    complex_shift = shift.imag != 0.0
    dtype = complex if complex_shift else float
    center = shift if complex_shift else shift.real
    try:
        lu = linalg.factor_reusing_ordering(shifted_matrix(matrix, center))
    except RuntimeError:
        return None
    operator = spla.LinearOperator((n, n), matvec=lu.solve, dtype=dtype)
    k = max(1, min(nev, n - 2))
    ncv = min(n - 1, 2 * k + 1)
    v0 = None
    if start is not None and start.shape[0] == n:
        v0 = start if complex_shift else start.real
        if not np.any(v0):
            v0 = None
    try:
        mu, vectors = spla.eigs(
            operator,
            k=k,
            which="LM",
            tol=ARNOLDI_TOL,
            maxiter=TRACK_MAX_ITERATIONS,
            ncv=ncv,
            v0=v0,
        )
    except (spla.ArpackNoConvergence, spla.ArpackError, RuntimeError, ValueError):
        return None
    keep = np.isfinite(mu) & (np.abs(mu) > 0.0)
    mu, vectors = mu[keep], vectors[:, keep]
    if mu.shape[0] == 0:
        return None
    values = complex(center) + 1.0 / mu
    radius = float(np.max(np.abs(values - center))) * (1.0 - TRUST_MARGIN)
    # the next start vector: the eigenvectors nearest the shift, summed with
    # weights falling off with distance (ARPACK takes one start vector)
    weights = 1.0 / (1.0 + np.abs(values - center) / max(radius, 1e-300))
    combined = vectors @ weights
    return complex(center), radius, values, combined, vectors


def shifted_matrix(matrix, shift: complex):
    """A - shift I as CSC (complex for a complex shift), A a square scipy.sparse matrix."""
    dtype = complex if complex(shift).imag != 0.0 else float
    identity = sp.identity(matrix.shape[0], format="csc", dtype=dtype)
    return (matrix.astype(dtype) - shift * identity).tocsc()


def _collect(runs, scale: float) -> Array:
    """All run values, conjugate pairs completed, each eigenvalue once (the nearest run's)."""
    kept: list = []
    tol = REAL_RTOL * scale
    for index, run in enumerate(runs):
        values = run[2]
        for value in values:
            value = complex(value.real, 0.0) if abs(value.imag) <= tol else complex(value)
            distances = [_distance(value, run) / run[1] for run in runs]
            if int(np.argmin(distances)) != index:
                continue
            for candidate in (value, value.conjugate()) if value.imag != 0.0 else (value,):
                if not any(
                    abs(candidate - other) <= 1e-8 * max(abs(candidate), 1e-6 * scale)
                    for other in kept
                ):
                    kept.append(candidate)
    return np.array(kept, dtype=complex)


def _distance(value: complex, run) -> float:
    center = run[0]
    return min(abs(value - center), abs(value - center.conjugate()))


def _confident(leading: Array, found: Array, before: Array, runs, scale: float):
    """(confident, crossed): rules 2-4 and 6 of the module docstring (``found``: every
    value inside the disks); ``crossed`` when rule 6 accepted a stability change."""
    for value in leading:
        if not any(_distance(value, run) < run[1] for run in runs):
            return False, False
    for value in before:
        covering = [run for run in runs if _distance(value, run) < run[1]]
        if not covering:
            return False, False
        moved = float(np.min(np.abs(found - value)))
        if moved > MOVE_FRACTION * max(run[1] for run in covering):
            return False, False
    if unstable_leading(leading, scale) == unstable_leading(before, scale):
        return True, False
    crossed = _clean_pair_crossing(leading, before, runs, scale)
    return crossed, crossed


def _clean_pair_crossing(leading: Array, before: Array, runs, scale: float) -> bool:
    """Rule 6: the change in the number of unstable leading values is made of complex
    pairs, each seen moving across the imaginary axis from its previous place.

    Every previous upper value has its own nearest new upper value (one to one),
    within ``MOVE_FRACTION`` of the trusted radius of a run covering both; a pair
    that changes side keeps ``|Im| >= CROSSING_IMAG_RTOL |value|`` at both points
    (a genuine pair, not two real values meeting); the real values above zero are
    as many as before. Then the count changed by exactly those pairs."""
    tol = REAL_RTOL * scale

    def real_unstable(values: Array) -> int:
        return int(np.count_nonzero((np.abs(values.imag) <= tol) & (values.real > tol)))

    if real_unstable(leading) != real_unstable(before):
        return False
    old_upper = [value for value in before if value.imag > tol]
    new_upper = np.array([value for value in leading if value.imag > tol], dtype=complex)
    if not old_upper or new_upper.shape[0] < len(old_upper):
        return False
    taken: set = set()
    change = 0
    for value in old_upper:
        distances = np.abs(new_upper - value)
        index = int(np.argmin(distances))
        if index in taken:
            return False
        taken.add(index)
        partner = complex(new_upper[index])
        covering = [run for run in runs if max(_distance(value, run), _distance(partner, run)) < run[1]]
        if not covering or distances[index] > MOVE_FRACTION * max(run[1] for run in covering):
            return False
        was, now = value.real > tol, partner.real > tol
        if was != now:
            if min(abs(value.imag) / abs(value), abs(partner.imag) / abs(partner)) < CROSSING_IMAG_RTOL:
                return False
            change += 2 if now else -2
    return unstable_leading(leading, scale) - unstable_leading(before, scale) == change != 0


def _eigenvector_basis(runs) -> Array | None:
    """Orthonormal real basis (n, m) of the runs' eigenvectors (real and imaginary parts
    span a conjugate pair's invariant subspace), None beyond ``CERTIFY_MAX_COLUMNS``."""
    parts = []
    for run in runs:
        vectors = run[4]
        parts.append(vectors.real)
        if np.iscomplexobj(vectors) and np.any(vectors.imag):
            parts.append(vectors.imag)
    stacked = np.hstack(parts)
    if stacked.shape[1] > CERTIFY_MAX_COLUMNS or stacked.shape[1] >= stacked.shape[0]:
        return None
    q, r, _ = sla.qr(stacked, mode="economic", pivoting=True)
    diagonal = np.abs(np.diag(r))
    if diagonal.size == 0 or diagonal[0] == 0.0:
        return None
    keep = diagonal > CERTIFY_RANK_RTOL * diagonal[0]
    return np.ascontiguousarray(q[:, keep])


def _certify(matrix, previous: SpectrumTrack, count: int, sign: float | None):
    """Rule 7: (values, track) from the previous eigenvectors without a factorization,
    or None when the certificate does not hold (see the module docstring)."""
    basis = previous.basis
    if (
        basis is None
        or previous.anchor is None
        or previous.since_solve + 1 >= CERTIFY_POINTS
        or basis.shape[0] != matrix.shape[0]
        or basis.shape[1] < count
    ):
        return None
    scale = norm_estimate(matrix)
    # Rayleigh-Ritz on the basis V: H = V^T A V. For a right Ritz pair (theta, s) the
    # residual A V s - theta V s equals (A V - V H) s, for a left one (theta, l)
    # A^T V l - conj(theta) V l = (A^T V - V H^T) l: two real n x m block residuals,
    # their m x m Gram matrices give every residual norm without complex n-vectors.
    product = matrix @ basis
    small = basis.T @ product
    theta, left, right = sla.eig(small, left=True, right=True)
    if not np.all(np.isfinite(theta)):
        return None
    right_gram = _gram(product - basis @ small)
    left_gram = _gram(matrix.T @ basis - basis @ small.T)
    right_residual = _quadratic_norms(right_gram, right)
    left_residual = _quadratic_norms(left_gram, left)
    # with V orthonormal, y^H x = l^H s for the Ritz vectors x = V s, y = V l
    overlap = np.abs(np.sum(np.conj(left) * right, axis=0))
    overlap /= np.linalg.norm(left, axis=0) * np.linalg.norm(right, axis=0)
    if not np.all(overlap > 0.0):
        return None
    bound = np.minimum(right_residual, left_residual) / overlap
    size = np.abs(theta)
    gaps = np.abs(theta[:, None] - theta[None, :])
    np.fill_diagonal(gaps, np.inf)
    # the accuracy asked: CERTIFY_RTOL |theta|, or what any backward-stable method
    # reaches on this matrix (CERTIFY_ROUNDING eps |A| times the condition number)
    # when that is larger: at 100,000 states |A| is 2e7 and eps |A| alone 4e-9
    accuracy = np.maximum(CERTIFY_RTOL * size, CERTIFY_ROUNDING * EPS * scale / overlap)
    if not (
        np.all(bound <= accuracy)
        and np.all(bound <= CERTIFY_MARGIN * np.abs(theta.real))
        and np.all(bound <= CERTIFY_MARGIN * np.min(gaps, axis=1))
    ):
        return None
    theta = np.where(np.abs(theta.imag) <= REAL_RTOL * scale, theta.real + 0j, theta)
    leading = sort_by_real_part(theta)[:count]
    runs = list(zip(previous.shifts, previous.radii, strict=True))
    for value in leading:
        if not any(_distance(value, run) < run[1] for run in runs):
            return None
    for value in previous.anchor:
        covering = [run for run in runs if _distance(value, run) < run[1]]
        if not covering:
            return None
        if float(np.min(np.abs(theta - value))) > MOVE_FRACTION * max(r[1] for r in covering):
            return None
    if unstable_leading(leading, scale) != unstable_leading(previous.values, scale):
        return None
    if not _real_crossings_agree(previous, leading, sign):
        return None
    track = replace(
        previous,
        values=leading,
        since_full=previous.since_full + 1,
        since_solve=previous.since_solve + 1,
        tracked=previous.tracked + 1,
        certified=previous.certified + 1,
        determinant_sign=sign,
        certificate_misses=0,
    )
    return LeadingEigenvalues(leading, True, "certified from the last eigenvectors"), track


def _gram(block: Array) -> Array:
    """block^T block (m x m) of a real n x m block."""
    return block.T @ block


def _quadratic_norms(gram: Array, coefficients: Array) -> Array:
    """|B c| per column c of ``coefficients`` (m x k) from gram = B^T B, divided by |c|;
    rounded up by sqrt(eps) |B| (the Gram matrix's rounding, so never an underestimate)."""
    squares = np.real(np.sum(np.conj(coefficients) * (gram @ coefficients), axis=0))
    lengths = np.linalg.norm(coefficients, axis=0)
    floor = np.sqrt(np.finfo(float).eps * max(float(np.max(np.abs(np.diag(gram)))), 0.0))
    return (np.sqrt(np.maximum(squares, 0.0)) + floor * lengths) / lengths
