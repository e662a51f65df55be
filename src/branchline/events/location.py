"""Location of one bracketed event, and its description as an :class:`Event`.

Each bracket of an equilibrium branch
(:func:`branchline.problems.equilibrium_branch.find_brackets`) is refined by
Newton's method on the event's defining system
(:mod:`branchline.events.defining_systems`), then described with its normal form
(:mod:`branchline.events.normal_forms`). Only when Newton fails, or converges outside
its bracket, is the event placed by bisection on the test function along the
branch (the event's ``note`` says so); if that fails too, the locator raises
:class:`LocationFailed` and :func:`unrefined_event` reports the event placed by
interpolation, with the reason in ``note``.

Models the linear-algebra policy calls large (``Model.linear_algebra``,
:mod:`branchline.numerics.policy`) are located with sparse linear algebra
(SuperLU, shift-invert Arnoldi); their branch points by bisection on the sparse bordered determinant (Moore's system needs a dense
Hessian).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from functools import partial
from typing import TYPE_CHECKING

import numpy as np
import scipy.sparse as sps
import scipy.sparse.linalg as spla

from branchline.events.brackets import Bracket, LocationFailed
from branchline.events.defining_systems import (
    branch_point_system,
    fold_system,
    hopf_system,
    newton,
    on_branch_system,
    with_value,
)
from branchline.events.detection import bordered_determinant
from branchline.events.normal_forms import (
    L1_ZERO_NOTE,
    branch_point_normal_form,
    branch_tangent,
    fold_normal_form,
    hopf_normal_form,
    leading_eigenvalues,
)
from branchline.numerics.eigen_tracking import SpectrumTrack, track_leading_eigenvalues
from branchline.numerics.eigenvalues import eigenvector_near, null_vectors
from branchline.numerics.linalg import dense
from branchline.numerics.newton import NewtonResult, failure
from branchline.results.records import Branch, Event
from branchline.vocabulary import EventKind

if TYPE_CHECKING:
    from branchline.model.build import Model

Array = np.ndarray
BranchTest = Callable[[Array, Array], float]

# A converged event must lie within this many bracket lengths of its bracket;
# further away, Newton has found some other point.
BRACKET_REACH = 2.0
# ... and project onto its chord within this fraction of the chord beyond either row.
BRACKET_CHORD_SLACK = 1e-3
# Roundoff slack on that reach (relative to the bracket's start), so that a
# zero-length bracket still accepts its own end point.
BRACKET_REACH_SLACK = 1e-12

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


# ----------------------------------------------------------------------------
# the branch as a curve u = (x, p)


def correct_on_branch(
    model: Model, params: Array, k: int, guess: Array, direction: Array
) -> NewtonResult:
    """The branch point u = (x, p) with f(u) = 0 and direction . (u - guess) = 0 (Newton)."""
    return newton(on_branch_system(model, params, k, guess, direction), guess)


def _curve_point(branch: Branch, row: int) -> Array:
    return np.append(branch.states[row], branch.parameter_values[row])


def _chord(branch: Branch, row: int) -> Array:
    return _curve_point(branch, row + 1) - _curve_point(branch, row)


def _arclength_at(branch: Branch, row: int, u: Array) -> float:
    ua, ub = _curve_point(branch, row), _curve_point(branch, row + 1)
    chord = ub - ua
    length = float(chord @ chord)
    theta = 0.0 if length == 0 else float(np.clip((u - ua) @ chord / length, 0.0, 1.0))
    sa, sb = branch.arclength[row], branch.arclength[row + 1]
    return float(sa + theta * (sb - sa))


def _within_bracket(branch: Branch, row: int, u: Array) -> bool:
    """u lies within the bracket: its projection on the chord falls between the rows
    (up to ``BRACKET_CHORD_SLACK``) and it is within ``BRACKET_REACH`` chord lengths.

    An arc that turns little within a step projects into its chord, so a point
    projecting outside belongs to a neighbouring step: in a cluster, Newton
    from one bracket may converge to the next event.
    """
    ua, ub = _curve_point(branch, row), _curve_point(branch, row + 1)
    chord = ub - ua
    length = float(np.linalg.norm(chord))
    slack = BRACKET_REACH_SLACK * (1.0 + float(np.linalg.norm(ua)))
    if float(np.linalg.norm(u - 0.5 * (ua + ub))) > BRACKET_REACH * length + slack:
        return False
    if length <= slack:
        return True
    theta = float((u - ua) @ chord) / (length * length)
    margin = BRACKET_CHORD_SLACK + slack / length
    return -margin <= theta <= 1.0 + margin


def _seed(branch: Branch, bracket: Bracket) -> Array:
    ua, ub = _curve_point(branch, bracket.row), _curve_point(branch, bracket.row + 1)
    return ua + bracket.fraction * (ub - ua)


def _bisect_on_branch(
    model: Model, branch: Branch, k: int, row: int, test: BranchTest
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


def _placed_by_newton(branch: Branch, bracket: Bracket, outcome: NewtonResult, u: Array) -> bool:
    """Newton converged, to a point u = (x, p) that belongs to this bracket."""
    return outcome.converged and _within_bracket(branch, bracket.row, u)


def _newton_failure(outcome: NewtonResult) -> str:
    return outcome.message or "left the bracket"


def _bisection_fallback(
    model: Model, branch: Branch, k: int, bracket: Bracket, outcome: NewtonResult, test: BranchTest
) -> Array:
    """The event placed by bisection on ``test`` after Newton (``outcome``) failed.

    Raises LocationFailed when bisection fails too.
    """
    point, _ = _bisect_on_branch(model, branch, k, bracket.row, test)
    if point is None:
        raise LocationFailed(f"Newton: {_newton_failure(outcome)}; bisection failed")
    return point


def _bisection_note(system: str, outcome: NewtonResult) -> str:
    reason = _newton_failure(outcome)
    return f"located by bisection (Newton on the {system} system failed: {reason})"


# ----------------------------------------------------------------------------
# event records


def _json_complex(values: Array) -> list[list[float]]:
    return [[float(v.real), float(v.imag)] for v in np.asarray(values, dtype=complex).ravel()]


def _format_value(value: float) -> str:
    return f"{value:.6g}"


def _bracket_details(branch: Branch, bracket: Bracket) -> dict:
    return {
        "bracket_rows": [int(bracket.row), int(bracket.row + 1)],
        "test_values": {
            "before": [float(v) for v in branch.test_values[bracket.row]],
            "after": [float(v) for v in branch.test_values[bracket.row + 1]],
            "order": [str(name) for name in branch.test_names],
        },
    }


def _base_details(
    branch: Branch, bracket: Bracket, a_matrix: Array, method: str, outcome: NewtonResult
) -> dict:
    return {
        "method": method,
        **_bracket_details(branch, bracket),
        "eigenvalues": _json_complex(_event_eigenvalues(branch, bracket, a_matrix)),
        "newton_residual_norms": [float(r) for r in outcome.residual_norms],
    }


def _event_eigenvalues(branch: Branch, bracket: Bracket, a_matrix: object) -> Array:
    """The leading eigenvalues at a located event: for a large sparse Jacobian tracked
    from its bracket's rows (the full search only when tracking is not confident)."""
    count = branch.eigenvalues.shape[1]
    if not sps.issparse(a_matrix) or a_matrix.shape[0] <= count + 2:
        return leading_eigenvalues(a_matrix)
    for row in (bracket.row, bracket.row + 1):
        values = branch.eigenvalues[row]
        if np.all(np.isfinite(values)):
            found, _ = track_leading_eigenvalues(a_matrix, SpectrumTrack(values), count)
            if found.found:
                return found.values
    return leading_eigenvalues(a_matrix)


def _make_event(
    model: Model,
    branch: Branch,
    k: int,
    bracket: Bracket,
    u: Array,
    kind: str,
    details: dict,
    **fields,
) -> Event:
    x = np.array(u[:-1], dtype=float)
    full = with_value(branch.parameters, k, float(u[-1]))
    if "tangent" not in details:
        tangent = branch_tangent(model, x, full, k, _chord(branch, bracket.row))
        details["tangent"] = [float(t) for t in tangent]
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


def unrefined_event(model: Model, branch: Branch, k: int, bracket: Bracket, reason: str) -> Event:
    """An event whose location could not be refined: placed by linear interpolation
    between its two rows, and says so (a stability change is never dropped silently)."""
    u = _seed(branch, bracket)
    details = {
        "method": "linear interpolation between rows (not refined)",
        **_bracket_details(branch, bracket),
        "failure": reason,
        "tangent": [float(v) for v in branch.tangents[bracket.row]],
        "eigenvalues": _json_complex(branch.eigenvalues[bracket.row]),
    }
    omega = bracket.hint.get("omega") if bracket.kind == EventKind.HOPF else None
    return Event(
        trace=branch.name,
        kind=bracket.kind,
        vary=branch.vary,
        value=float(u[-1]),
        state=np.array(u[:-1]),
        parameters=with_value(branch.parameters, k, float(u[-1])),
        arclength=_arclength_at(branch, bracket.row, u),
        frequency=float(omega) if omega else None,
        note=(
            f"not refined ({reason}): placed by linear interpolation between "
            f"computed points {bracket.row} and {bracket.row + 1}"
        ),
        details=details,
    )


# ----------------------------------------------------------------------------
# fold


def locate_fold(model: Model, branch: Branch, k: int, bracket: Bracket) -> Event | None:
    """Refine a fold bracket on the minimally augmented fold system."""
    u0 = _seed(branch, bracket)
    full0 = with_value(branch.parameters, k, u0[-1])
    left, right = null_vectors(model.state_jacobian(u0[:-1], full0))
    system = fold_system(model, branch.parameters, k, left.real, right.real)
    outcome = newton(system, u0)
    note = ""
    method = "Newton on the minimally augmented fold system (Govaerts)"
    u = outcome.solution
    if not _placed_by_newton(branch, bracket, outcome, u):
        test = partial(_fold_test, model, branch, k)
        u = _bisection_fallback(model, branch, k, bracket, outcome, test)
        method = "bisection on the tangent's parameter component"
        note = _bisection_note("fold", outcome)
    x, full = u[:-1], with_value(branch.parameters, k, u[-1])
    a_matrix = model.state_jacobian(x, full)
    form = fold_normal_form(model, x, full, k)
    details = _base_details(branch, bracket, a_matrix, method, outcome)
    details["eigenvectors"] = {
        "right": [float(v) for v in form.right_vector],
        "left": [float(v) for v in form.left_vector],
    }
    details["normal_form"] = {
        "coefficient": form.coefficient,
        "parameter_sensitivity": form.parameter_sensitivity,
        "degenerate": form.degenerate or "",
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
        model,
        branch,
        k,
        bracket,
        u,
        EventKind.FOLD,
        details,
        fold_coefficient=form.coefficient,
        note=note,
    )


def _fold_test(model: Model, branch: Branch, k: int, u: Array, chord: Array) -> float:
    full = with_value(branch.parameters, k, u[-1])
    return float(branch_tangent(model, u[:-1], full, k, chord)[-1])


# ----------------------------------------------------------------------------
# Hopf


def locate_hopf(model: Model, branch: Branch, k: int, bracket: Bracket) -> Event | None:
    """Refine a Hopf bracket on the extended Hopf system; None for a neutral saddle."""
    placed = _place_hopf(model, branch, k, bracket)
    if placed is None:
        return None
    u, omega, q, outcome, method, note = placed
    x, full = u[:-1], with_value(branch.parameters, k, u[-1])
    a_matrix = model.state_jacobian(x, full)
    details = _base_details(branch, bracket, a_matrix, method, outcome)
    lyapunov, criticality, notes = None, None, []
    if _has_zero_eigenvalue(a_matrix, omega):
        notes.append(
            "a zero eigenvalue at the same point (zero-Hopf): "
            "the first Lyapunov coefficient is not defined here"
        )
    else:
        form = hopf_normal_form(model, x, full, omega, q, k=k)
        lyapunov, criticality = form.lyapunov, form.criticality or None
        details.update(_hopf_form_details(form))
        notes.append(_hopf_side_note(form, branch.vary, float(u[-1])))
    notes.append(note)
    return _make_event(
        model,
        branch,
        k,
        bracket,
        u,
        EventKind.HOPF,
        details,
        frequency=omega,
        lyapunov=lyapunov,
        criticality=criticality,
        note="; ".join(n for n in notes if n),
    )


def _place_hopf(model: Model, branch: Branch, k: int, bracket: Bracket):
    """(u, omega > 0, q or None, outcome, method, note) of a Hopf bracket, or None.

    Newton on the extended Hopf system from the eigenvector nearest the bracket's
    frequency; bisection on the crossing pair's real part when Newton fails or
    leaves the bracket. None when the point is no Hopf point: the nearest
    eigenvalue is real (a neutral saddle), the frequency vanishes
    (Bogdanov-Takens-like), or a bracket inferred from counts is not confirmed.
    """
    u0 = _seed(branch, bracket)
    n = u0.shape[0] - 1
    omega_guess = float(bracket.hint.get("omega", 0.0))
    a0 = model.state_jacobian(u0[:-1], with_value(branch.parameters, k, u0[-1]))
    value, q0 = eigenvector_near(a0, 1j * omega_guess)
    if abs(value.imag) <= 0.0:
        return None  # the nearest eigenvalue is real: a neutral saddle, not a Hopf point
    if value.imag < 0:
        q0 = q0.conj()
    z0 = np.concatenate([u0, [abs(value.imag)], q0.real, q0.imag])
    outcome = newton(hopf_system(model, branch.parameters, k, q0), z0)
    z = outcome.solution
    u, omega = z[: n + 1], float(z[n + 1])
    method = "Newton on the extended Hopf system (A q = i omega q, <c, q> = 1)"
    # The system's eigenvector serves the normal form only with a positive frequency.
    q, note = (z[n + 2 : 2 * n + 2] + 1j * z[2 * n + 2 :]) if omega > 0 else None, ""
    scale = max(abs(value), abs(omega_guess), 1e-300)
    if not _placed_by_newton(branch, bracket, outcome, u):
        test = partial(_hopf_pair_real, model, branch, k, omega_guess)
        try:
            u = _bisection_fallback(model, branch, k, bracket, outcome, test)
        except LocationFailed:
            if bracket.hint.get("tentative"):
                return None  # inferred from counts only, and not confirmed: no Hopf point
            raise
        full = with_value(branch.parameters, k, u[-1])
        omega, q = _crossing_eigenvalue(model, u, full, omega_guess).imag, None
        method = "bisection on the real part of the crossing pair"
        note = _bisection_note("Hopf", outcome)
    if abs(omega) <= SMALLEST_RELATIVE_FREQUENCY * scale:
        return None  # degenerate (Bogdanov-Takens-like) or a neutral saddle: not a Hopf point
    return u, abs(omega), q, outcome, method, note


def _hopf_form_details(form) -> dict:
    """The eigenvectors and normal-form terms of a Hopf point for the event's details."""
    return {
        "eigenvectors": {
            "right": _json_complex(form.right_vector),
            "left": _json_complex(form.left_vector),
            "normalization": "A q = i omega q, A^T p = -i omega p, <p, q> = 1, <q, q> = 1/2",
        },
        "normal_form": {
            "c1": [form.c1.real, form.c1.imag],
            "terms": [[t.real, t.imag] for t in form.terms],
            "growth_rate": form.growth_rate,
            "amplitude_coefficient": form.amplitude_coefficient,
        },
    }


def _hopf_side_note(form, vary: str, value: float) -> str:
    """Where the small cycles are, or that l1 vanishes ("" when the side is unknown)."""
    if form.near_bautin:
        return L1_ZERO_NOTE
    if not form.cycle_side:
        return ""
    relation = "<" if form.cycle_side == "below" else ">"
    stability = "stable" if form.criticality == "supercritical" else "unstable"
    return f"small {stability} cycles for {vary} {relation} {_format_value(value)}"


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


def _crossing_eigenvalue(model: Model, u: Array, full: Array, omega_guess: float) -> complex:
    """The upper-half-plane eigenvalue nearest i * omega_guess at u (NaN if none)."""
    a_matrix = model.state_jacobian(u[:-1], full)
    if sps.issparse(a_matrix):
        value, _ = eigenvector_near(a_matrix, 1j * omega_guess)
        return complex(value.real, abs(value.imag)) if value.imag != 0 else complex(math.nan)
    values = np.linalg.eigvals(a_matrix)
    upper = values[values.imag > 0]
    if upper.shape[0] == 0:
        return complex(math.nan, 0.0)
    return complex(upper[int(np.argmin(np.abs(upper - 1j * omega_guess)))])


def _hopf_pair_real(
    model: Model, branch: Branch, k: int, omega_guess: float, u: Array, chord: Array
) -> float:
    """Re of the crossing pair at u (``chord`` is unused: the signature of a branch test)."""
    full = with_value(branch.parameters, k, u[-1])
    return _crossing_eigenvalue(model, u, full, omega_guess).real


# ----------------------------------------------------------------------------
# branch point


def locate_branch_point(model: Model, branch: Branch, k: int, bracket: Bracket) -> Event | None:
    """Refine a branch-point bracket on Moore's extended system (bisection for large models)."""
    u0 = _seed(branch, bracket)
    n = u0.shape[0] - 1
    full0 = with_value(branch.parameters, k, u0[-1])
    chord = _chord(branch, bracket.row)
    large = model.linear_algebra.sparse_location(n)
    if large:
        # Moore's system needs the dense (n+1)^2 Hessian of psi^T f: too costly
        outcome = failure(u0, "not used for large models")
    else:
        g_u = np.column_stack(
            [dense(model.jacobian(u0[:-1], full0)), model.parameter_jacobian(u0[:-1], full0)[:, k]]
        )
        psi0 = np.linalg.svd(g_u)[0][:, -1]
        z0 = np.concatenate([u0, psi0, [0.0]])
        outcome = newton(branch_point_system(model, branch.parameters, k), z0)
    z = outcome.solution
    u, psi = z[: n + 1], (None if large else z[n + 1 : 2 * n + 1])
    method = "Newton on Moore's extended branch-point system"
    note = ""
    if not _placed_by_newton(branch, bracket, outcome, u):
        test = partial(_branch_point_test, model, branch, k)
        u = _bisection_fallback(model, branch, k, bracket, outcome, test)
        psi = None
        method = "bisection on the bordered determinant"
        if not large:
            note = _bisection_note("branch-point", outcome)
    x, full = u[:-1], with_value(branch.parameters, k, u[-1])
    traced_guess = branch.tangents[bracket.row] + branch.tangents[bracket.row + 1]
    form = branch_point_normal_form(model, x, full, k, psi, traced_tangent=traced_guess)
    overlap = np.abs(form.tangents @ chord)
    traced = int(np.argmax(overlap))
    details = _base_details(branch, bracket, model.state_jacobian(x, full), method, outcome)
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
        EventKind.BRANCH_POINT,
        details,
        branching=form.branching or None,
        note=note,
    )


def _branch_point_test(model: Model, branch: Branch, k: int, u: Array, chord: Array) -> float:
    full = with_value(branch.parameters, k, u[-1])
    a_matrix = model.state_jacobian(u[:-1], full)
    fp = model.parameter_jacobian(u[:-1], full)[:, k]
    t = branch_tangent(model, u[:-1], full, k, chord)
    return bordered_determinant(a_matrix, fp, t, model.linear_algebra)

