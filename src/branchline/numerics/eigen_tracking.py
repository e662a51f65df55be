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
4. the number of leading values with positive real part is unchanged, and
   fewer than ``REFRESH_POINTS`` points were tracked since the last full
   search: a stability change, and every so many points, is confirmed by the
   full search;
5. when the caller knows the sign of det A at this point and the last (the
   equilibrium branch reads it off the tangent's factorization at no cost:
   det f_x = det [G_u; t^T] t_p), a change of that sign, which means an odd
   number of real eigenvalues crossed zero anywhere in the spectrum, is matched
   by an odd change in the number of tracked real values above zero. This
   check at every point covers the whole spectrum for real eigenvalues, so the
   periodic full search of rule 4 is rarer than it was (every 200 points, was
   50: at 20,000 states a full search costs about 80 factorizations, and the
   periodic ones were a quarter of the run's time).

Clustered spectra (many modes within a small fraction of the leading value's
size) get one more run per cluster with ``CLUSTER_TRACK_VALUES`` values when the
first run's trusted disk does not settle every previous value of the cluster
(see ``CLUSTER_RTOL``); the rules above apply unchanged to the larger run.

Otherwise the full search runs and its values are used; :class:`SpectrumTrack`
counts both (``tracked`` and ``full_searches``; run.json carries the counts).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

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
TRACK_SPARE = 2
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
        Points whose eigenvalues came from tracking, and full searches run.
    """

    values: Array
    shifts: tuple = ()
    radii: tuple = ()
    vectors: tuple = ()
    since_full: int = 0
    tracked: int = 0
    full_searches: int = 0
    determinant_sign: float | None = None


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
    if previous is not None and previous.since_full < REFRESH_POINTS:
        tracked = _track(matrix, previous, count)
        if tracked is not None and _real_crossings_agree(
            previous, tracked[1].values, determinant_sign
        ):
            search, track = tracked
            return search, _with_sign(track, determinant_sign)
    search = search_leading_eigenvalues(matrix, count, policy)
    base = previous or SpectrumTrack(np.empty(0, dtype=complex))
    if not search.found:
        return search, SpectrumTrack(
            np.empty(0, dtype=complex), tracked=base.tracked, full_searches=base.full_searches + 1
        )
    track = SpectrumTrack(
        search.values,
        since_full=0,
        tracked=base.tracked,
        full_searches=base.full_searches + 1,
        determinant_sign=determinant_sign,
    )
    return search, track


def _with_sign(track: SpectrumTrack, sign: float | None) -> SpectrumTrack:
    return SpectrumTrack(
        track.values, track.shifts, track.radii, track.vectors, track.since_full,
        track.tracked, track.full_searches, sign,
    )


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
    if leading.shape[0] < count or not _confident(leading, found, previous.values, runs, scale):
        return None
    track = SpectrumTrack(
        leading,
        shifts=tuple(run[0] for run in runs),
        radii=tuple(run[1] for run in runs),
        vectors=tuple(run[3] for run in runs),
        since_full=previous.since_full + 1,
        tracked=previous.tracked + 1,
        full_searches=previous.full_searches,
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
    """(shift, trusted radius, values, start vector for next time) or None on failure."""
    n = matrix.shape[0]
    complex_shift = shift.imag != 0.0
    dtype = complex if complex_shift else float
    identity = sp.identity(n, format="csc", dtype=dtype)
    center = shift if complex_shift else shift.real
    try:
        lu = spla.splu((matrix.astype(dtype) - center * identity).tocsc())
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
    return complex(center), radius, values, combined


def _collect(runs, scale: float) -> Array:
    """All run values, conjugate pairs completed, each eigenvalue once (the nearest run's)."""
    kept: list = []
    tol = REAL_RTOL * scale
    for index, (_, _, values, _) in enumerate(runs):
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


def _confident(leading: Array, found: Array, before: Array, runs, scale: float) -> bool:
    """Rules 2-4 of the module docstring (``found``: every value inside the disks)."""
    for value in leading:
        if not any(_distance(value, run) < run[1] for run in runs):
            return False
    for value in before:
        covering = [run for run in runs if _distance(value, run) < run[1]]
        if not covering:
            return False
        moved = float(np.min(np.abs(found - value)))
        if moved > MOVE_FRACTION * max(run[1] for run in covering):
            return False
    return unstable_leading(leading, scale) == unstable_leading(before, scale)
