"""`branchline inspect`: one equilibrium, its linearization, in readable text."""

from __future__ import annotations

import numpy as np

from branchline.model.build import build_model
from branchline.problems.equilibrium import (
    HYPERBOLIC_RTOL,
    Linearization,
    linearize,
    solve_equilibrium,
)
from branchline.problems.start_guess import start_distance
from branchline.problems.window_search import search_start
from branchline.runner import start_vector
from branchline.scan.loader import Scan

# Print the full Jacobian only for models small enough to read it.
MAX_PRINTED_JACOBIAN = 12


def _matrix_text(matrix: np.ndarray, names: tuple[str, ...]) -> str:
    width = max(12, *(len(n) for n in names)) + 2
    lines = [" " * width + "".join(f"{('d/d' + n):>{width}}" for n in names)]
    for name, row in zip(names, matrix):
        lines.append(f"{('f_' + name):>{width}}" + "".join(f"{v:>{width}.6g}" for v in row))
    return "\n".join(lines)


def _eigen_text(eigenvalues: np.ndarray) -> str:
    lines = []
    for lam in eigenvalues:
        if abs(lam.imag) > 0:
            lines.append(f"  {lam.real:+.10g} {lam.imag:+.10g}i")
        else:
            lines.append(f"  {lam.real:+.10g}")
    return "\n".join(lines)


def hyperbolicity_lines(lin: Linearization) -> list[str]:
    """The verdict and the one rule that decided it (the same rule decides the type)."""
    rule = (
        f"rule: an eigenvalue lies on the imaginary axis when |Re| <= {HYPERBOLIC_RTOL:g} |J| "
        f"= {lin.axis_tolerance:.3g} (|J| = {lin.jacobian_norm:.6g}: the Frobenius norm of "
        "df/dx, or of df/dp diag(p) / |x| when larger; rounding blurs eigenvalues by about 1e-16 |J|, and a point within rounding "
        "of a fold has an eigenvalue of about 1e-8 |J|)"
    )
    if lin.hyperbolic:
        verdict = (
            "hyperbolic: yes - no eigenvalue on the imaginary axis, so the linearization "
            "decides the local behaviour (Hartman-Grobman theorem)"
        )
    else:
        nearest = lin.eigenvalues[int(np.argmin(np.abs(lin.eigenvalues.real)))]
        verdict = (
            f"hyperbolic: no - the eigenvalue {_eigen_text([nearest]).strip()} lies on the "
            "imaginary axis, so the linearization does not decide the local behaviour; "
            "nonlinear terms do"
        )
    return [verdict, rule]


def describe_equilibrium(scan: Scan, overrides: dict[str, float]) -> tuple[str, bool]:
    """Solve for the equilibrium at the first trace's start guess and describe it.

    Parameters are the model defaults with the first trace's ``set`` and then
    ``overrides`` applied. Returns the text and whether Newton converged.
    """
    model = build_model(scan.model, source=scan.source)
    spec = scan.traces[0]
    settings = {**spec.set, **overrides}
    p = model.parameter_vector(settings)
    searched = None
    if spec.search is not None and spec.start == "search":
        x0, searched = search_start(model, spec, p)  # the first equilibrium a search finds
    else:
        x0 = start_vector(model, spec, p, scan.source)
    solution = solve_equilibrium(model, x0, p)
    lines = [f"{scan.title}", ""]
    lines.append("parameters: " + ", ".join(f"{n} = {v:.10g}" for n, v in zip(model.parameters, p)))
    if searched is not None:
        lines.append(
            f'start = "search": {searched} distinct equilibria found in the search box; the '
            "first one found is described (run the scan to trace them all)"
        )
    if not solution.converged:
        lines.append(
            f"no equilibrium found from the start guess of trace {spec.name}: {solution.message}"
        )
        return "\n".join(lines), False
    lines.append(
        f"equilibrium (Newton: {solution.iterations} iterations, "
        f"residual {solution.residual_norm:.2e}):"
    )
    found = start_distance(tuple(model.states), x0, solution.state)
    lines.append(f"  {'warning: ' if found.far else ''}{found.text}")
    if model.size <= 40:
        lines += [f"  {name} = {value:.15g}" for name, value in zip(model.states, solution.state)]
    else:
        lines.append(f"  {model.size} states, norm {np.linalg.norm(solution.state):.15g}")
    lin = linearize(model, solution.state, p)
    if model.size <= MAX_PRINTED_JACOBIAN:
        lines += ["", "Jacobian df/dx:", _matrix_text(np.asarray(lin.jacobian), model.states)]
    lines += ["", "eigenvalues (by decreasing real part):", _eigen_text(lin.eigenvalues)]
    lines += ["", f"type: {lin.kind.replace('_', ' ')}"]
    lines += hyperbolicity_lines(lin)
    if getattr(lin, "description", ""):
        lines += ["", lin.description]
    return "\n".join(lines), True
