"""Build a phase portrait from a scan: the one entry point, :func:`compute_portrait`.

The portrait's parameter values are the model's defaults, the first trace's
``set`` and then the user's settings (as ``branchline inspect``). Every trace of
the scan is run with those values for the parameters it does not vary, and
the equilibria its branches pass at the portrait's value of the parameter it
varies are the first candidates; a Newton search over the plane adds the rest.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from branchline.errors import ScanError
from branchline.model.build import build_model
from branchline.portrait.compute import (
    Portrait,
    describe,
    field_grids,
    find_equilibria,
    local_comparison,
    saddle_manifolds,
    search_window,
    trajectories,
    window_around,
)
from branchline.portrait.plane import Plane, eigenvector_plane, planar, state_plane
from branchline.runner import run_scan, start_vector
from branchline.scan.loader import Scan
from branchline.scan.search_section import SEARCH_START
from branchline.simulation.branches import traced_at


def _traced_guesses(scan: Scan, model, settings: dict[str, float]):
    """(state, source) of the equilibria the scan's traces pass at the portrait's values,
    and every state the traces met (the region where the search looks for more)."""
    traces = []
    for spec in scan.traces:
        fixed = {name: value for name, value in settings.items() if name != spec.vary}
        traces.append(replace(spec, set={**spec.set, **fixed}))
    # only the equilibrium branches matter here: no orbits, boundaries or confirmations,
    # and the model already compiled
    plain = replace(scan, traces=tuple(traces), cycles=(), boundaries=())
    result = run_scan(plain, model=model, confirm=False)
    guesses = []
    met = [b.states for b in result.branches if len(b)]
    for spec in scan.traces:
        value = settings.get(spec.vary, model.defaults[model.parameter_index(spec.vary)])
        own = [
            b
            for b in result.branches
            if b.name == spec.name or b.name.startswith((f"{spec.name}.", f"{spec.name}#"))
        ]
        for name, state, _ in traced_at(own, spec.vary, value):
            guesses.append((state, f"trace {name}"))
    return guesses, (np.vstack(met) if met else np.empty((0, model.size)))


def _plane(scan: Scan, model, parameters, origin, names, eigen: bool) -> Plane:
    if eigen:
        return eigenvector_plane(np.asarray(model.jacobian(origin, parameters)), origin)
    if names:
        for name in names:
            if name not in model.states:
                raise ScanError(
                    scan.source,
                    f"--plane {' '.join(names)}",
                    f"{name!r} is not a state; states: {', '.join(model.states)}",
                )
        if names[0] == names[1]:
            raise ScanError(scan.source, f"--plane {' '.join(names)}", "name two different states")
        return state_plane(model, origin, names[0], names[1])
    if model.size == 2:
        return planar(model)
    raise ScanError(
        scan.source,
        "--plane",
        f"the model has {model.size} states: name two of "
        "them with --plane X Y, or use --eigenvector-plane",
    )


def _default_focus(equilibria) -> int:
    """The equilibrium the local panel shows: an undecided one, else a saddle, else the first."""
    for i, eq in enumerate(equilibria):
        if not eq.decided:
            return i
    for i, eq in enumerate(equilibria):
        if eq.kind == "saddle":
            return i
    return 0


def compute_portrait(
    scan: Scan,
    settings: dict[str, float] | None = None,
    *,
    plane: tuple[str, str] | None = None,
    eigenvector_plane: bool = False,
    focus: int | None = None,
) -> Portrait:
    """Compute a phase portrait of the scan's model at the given parameter values.

    Parameters
    ----------
    scan : Scan
    settings : dict, optional
        Parameter values (name -> value) over the defaults and the first trace's ``set``.
    plane : (str, str), optional
        Two states spanning the plane (required for models with more than two states,
        unless ``eigenvector_plane``); the other states are held at the equilibrium's values.
    eigenvector_plane : bool
        Use the plane of the two leading eigenvectors at the first equilibrium instead.
    focus : int, optional
        Index (0-based, in the portrait's order) of the equilibrium the local panel
        compares with its linearization; default an undecided one, else a saddle.

    Returns
    -------
    Portrait
        Raises ScanError for bad names; numerical trouble shows as notes.
    """
    model = build_model(scan.model, source=scan.source)
    settings = {**scan.traces[0].set, **(settings or {})}
    parameters = model.parameter_vector(settings)
    spec = scan.traces[0]
    guesses, met = _traced_guesses(scan, model, settings)
    if spec.start != SEARCH_START:
        guesses.append((start_vector(model, spec, parameters, scan.source), "start guess"))
    if not guesses:
        raise ScanError(
            scan.source,
            "trace",
            "no equilibrium was traced at these values to "
            "start the portrait from; give the first trace a start guess",
        )
    origin = guesses[0][0]
    frame = _plane(scan, model, parameters, origin, plane, eigenvector_plane)
    region = np.vstack([met, *(x[None, :] for x, _ in guesses)])
    found = find_equilibria(
        model, parameters, frame, guesses, search_window(frame.to_plane(region))
    )
    notes = []
    if not found:
        notes.append("no equilibrium was found at these parameter values")
    else:
        origin = found[0][0]
        frame = _plane(scan, model, parameters, origin, plane, eigenvector_plane)
        window = window_around(np.array([frame.to_plane(x) for x, _ in found]))
    equilibria = tuple(describe(model, x, parameters, frame, source) for x, source in found)
    manifolds = []
    for i, eq in enumerate(equilibria):
        if eq.kind in ("saddle", "saddle_focus"):
            manifolds += saddle_manifolds(model, parameters, frame, window, equilibria, i)
    rates = [abs(v) for eq in equilibria for v in eq.eigenvalues if abs(v) > 0]
    rate = float(np.median(rates)) if rates else 1.0
    paths = trajectories(model, parameters, frame, window, rate)
    arrows, nullclines = field_grids(model, parameters, frame, window)
    local = None
    if equilibria:
        index = _default_focus(equilibria) if focus is None else focus
        if not 0 <= index < len(equilibria):
            raise ScanError(
                scan.source,
                "--at",
                f"there are {len(equilibria)} equilibria; choose 1 to {len(equilibria)}",
            )
        local = local_comparison(model, parameters, frame, window, equilibria, index)
    if not frame.exact:
        notes.append(_slice_note(frame, model))
    return Portrait(
        title=scan.title,
        states=tuple(model.states),
        highlight=tuple(
            name
            for name in model.parameters
            if name in settings or any(spec.vary == name for spec in scan.traces)
        ),
        parameters=dict(zip(model.parameters, map(float, parameters))),
        plane=frame,
        window=window,
        equilibria=equilibria,
        manifolds=tuple(manifolds),
        trajectories=tuple(paths),
        arrows=arrows,
        nullclines=nullclines,
        local=local,
        notes=tuple(notes),
    )


def _slice_note(frame: Plane, model) -> str:
    if frame.kind == "eigenvectors":
        where = "the plane of the two leading eigenvectors through the first equilibrium"
    else:
        where = (
            f"a slice through the first equilibrium; the other {model.size - 2} states "
            "are held at its values for the arrows and nullclines"
        )
    return (
        f"{where}. Trajectories and manifolds are of the full model, projected onto the "
        "plane; equilibria are those of the full model, projected."
    )
