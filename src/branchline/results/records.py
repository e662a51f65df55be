"""Result records: frozen dataclasses.

Everything numerical returns these records; writers and plots only read them.
Their pandas tables are built by :mod:`branchline.results.tables` (``RunResult.points_frame``
and ``events_frame`` delegate there).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from branchline.vocabulary import Status

if TYPE_CHECKING:
    import pandas as pd
    from matplotlib.figure import Figure

    from branchline.model.build import Model
    from branchline.results.robust_margin_records import RobustMargin
    from branchline.results.search_records import SearchRecord
    from branchline.scan.loader import Scan

Array = np.ndarray

# Points found on two-parameter boundaries (rows of events.csv whose trace is the boundary).
CODIMENSION_TWO_KINDS = ("cusp", "bogdanov_takens", "bautin", "zero_hopf", "double_hopf")

# Numerical status of a branch (a failure is a status, not an exception): the
# members of the one enumeration, under the names the result code has used.
STATUS_DONE = Status.DONE
STATUS_MAX_POINTS = Status.MAX_POINTS
STATUS_CLOSED = Status.CLOSED
STATUS_FAILED = Status.FAILED
STATUS_INTERRUPTED = Status.INTERRUPTED


@dataclass(frozen=True)
class Branch:
    """One traced equilibrium branch, rows in trace order.

    Attributes
    ----------
    name : str
        Trace name (``<parent>.<k>`` for branches started at a branch point).
    vary : str
        The continuation parameter's name.
    parameters : ndarray (m,)
        The trace's parameter vector (defaults with ``set`` applied); the
        ``vary`` entry holds the start value, per-row values are ``parameter_values``.
    parameter_values : ndarray (k,)
    states : ndarray (k, n)
    arclength : ndarray (k,)
        Signed pseudo-arclength from the start point (negative on the side traced
        with decreasing parameter first).
    tangents : ndarray (k, n + 1)
        Unit tangents (state components, then parameter), oriented in trace order.
    eigenvalues : ndarray (k, r), complex
        The r leading eigenvalues of df/dx (all of them for dense models), sorted
        by decreasing real part.
    unstable_count : ndarray (k,) int
        Eigenvalues with positive real part.
    test_values : ndarray (k, T)
        Test-function values, one column per name of ``test_names``.
    newton_iterations : ndarray (k,) int
    residual_norms : ndarray (k,)
    status, message : str
        How the trace ended; ``message`` says where and why on failure.
    counts : dict
        Work counters: rhs/jacobian evaluations, factorizations, rejected steps.
    parent : str or None
        The branch this one was started from at a branch point.
    interval : tuple (lo, hi)
    test_names : tuple of str
        The names of the ``test_values`` columns (the problem's test functions).
    """

    name: str
    vary: str
    parameters: Array
    parameter_values: Array
    states: Array
    arclength: Array
    tangents: Array
    eigenvalues: Array
    unstable_count: Array
    test_values: Array
    newton_iterations: Array
    residual_norms: Array
    status: str
    message: str
    interval: tuple[float, float]
    counts: dict[str, int] = field(default_factory=dict)
    parent: str | None = None
    test_names: tuple[str, ...] = ()

    def test(self, name: str) -> Array:
        """The values of the test function ``name`` per row, shape (k,)."""
        return self.test_values[:, self.test_names.index(name)]

    @property
    def stable(self) -> Array:
        """Bool per point (shape (points,)): no eigenvalue with positive real part."""
        return self.unstable_count == 0

    def __len__(self) -> int:
        return len(self.parameter_values)


@dataclass(frozen=True)
class Event:
    """A located stability change on a branch.

    ``state`` and ``value`` solve the event's defining system to near machine
    precision (``note`` says when a fallback was used instead).
    """

    trace: str
    kind: str  # an EventKind
    vary: str
    value: float  # the varied parameter at the event
    state: Array  # (n,)
    parameters: Array  # (m,) full parameter vector at the event
    arclength: float  # position along the branch (interpolated between rows)
    frequency: float | None = None  # Hopf: omega (rad per time unit)
    lyapunov: float | None = None  # Hopf: first Lyapunov coefficient l1
    criticality: str | None = None  # Hopf: "supercritical" / "subcritical"
    branching: str | None = None  # branch point: "transcritical" / "pitchfork"
    fold_coefficient: float | None = None  # fold: quadratic normal-form coefficient
    note: str = ""
    details: dict[str, Any] = field(default_factory=dict)  # JSON-ready detail

    @property
    def period(self) -> float | None:
        """2 pi / frequency (model time units) for a Hopf point, else None."""
        return None if not self.frequency else 2.0 * np.pi / self.frequency


@dataclass(frozen=True)
class CycleFamily:
    """One followed family of periodic orbits, rows in the order of travel from its start.

    Attributes
    ----------
    name : str
        The ``[[cycles]]`` name (``<name>.2`` for a family started at a period doubling).
    vary : str
    parameters : ndarray (m,)
        Parameter vector of the family (the ``vary`` entry: its start value).
    orbits : tuple of branchline.problems.cycles.OrbitPoint
        Period, parameter, mesh, mesh values, Floquet multipliers, extremes per orbit.
    arclength : ndarray (k,)
    degree : int
        Collocation points per mesh interval.
    status, message : str
        ``done``, ``max_points``, ``homoclinic`` (period growing without bound at a
        bounded orbit), ``failed``; ``message`` says where and why.
    interval : (lo, hi)
    counts : dict
    parent : str or None
        The family this one was started from at a period doubling.
    origin : str
        Where it started, in words (the Hopf point or the period doubling).
    test_values : ndarray (k, 3)
        Cycle fold, period doubling and torus test functions per orbit.
    """

    name: str
    vary: str
    parameters: Array
    orbits: tuple
    arclength: Array
    degree: int
    status: str
    message: str
    interval: tuple[float, float]
    counts: dict[str, int] = field(default_factory=dict)
    parent: str | None = None
    origin: str = ""
    test_values: Array = field(default_factory=lambda: np.empty((0, 3)))

    def __len__(self) -> int:
        return len(self.orbits)


@dataclass(frozen=True)
class Boundary:
    """A fold or Hopf curve followed in two parameters, rows in boundary order.

    Attributes
    ----------
    name, kind : str
        The boundary's name and ``"fold"`` or ``"hopf"``.
    first, second : str
        The starting trace's parameter and the second parameter.
    source : str
        ``"<trace> <kind> <index>"``: the event it was started from.
    parameters : ndarray (m,)
        The parameter vector of the starting event (other parameters stay fixed).
    first_values, second_values : ndarray (k,)
    states : ndarray (k, n)
    frequency : ndarray (k,)
        omega along a Hopf curve; NaN on a fold curve.
    arclength : ndarray (k,)
        Signed pseudo-arclength from the starting event (negative on the side traced first).
    unstable_count : ndarray (k,) int
        Eigenvalues with positive real part (the critical ones excluded: they are on the axis).
    status, message : str
        How the curve ended on each side (window edge, state limit, Bogdanov-Takens
        point, trouble).
    counts : dict
    window : dict
        {first: (lo, hi), second: (lo, hi)}: the window it was followed in.
    """

    name: str
    kind: str
    first: str
    second: str
    source: str
    parameters: Array
    first_values: Array
    second_values: Array
    states: Array
    frequency: Array
    arclength: Array
    unstable_count: Array
    status: str
    message: str
    counts: dict[str, int] = field(default_factory=dict)
    window: dict[str, tuple[float, float]] = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.first_values)


@dataclass(frozen=True)
class RunResult:
    """Everything one scan produced.

    ``status`` is ``"done"`` or ``"failed"``; on failure ``message`` says which
    trace stopped, where and why, and every point computed so far is kept.
    Tables and files are made from this record by :mod:`branchline.results.tables`
    and :mod:`branchline.results.writers`.
    """

    scan: Scan
    model: Model
    branches: tuple[Branch, ...]
    events: tuple[Event, ...]
    status: str
    message: str
    timings: dict[str, float] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    # Confirmation by simulation (branchline.simulation.confirm); the note says why
    # there are none when the run skipped them.
    confirmations: tuple[Any, ...] = ()
    confirmation_note: str = ""
    cycles: tuple[CycleFamily, ...] = ()
    searches: tuple[SearchRecord, ...] = ()  # equilibria found without a start guess
    boundaries: tuple[Boundary, ...] = ()
    robust_margin: RobustMargin | None = None  # with [robust_margin]
    stability_maps: tuple[Any, ...] = ()  # problems.stability_regions.StabilityMap, per plane

    def branch(self, name: str) -> Branch:
        """The branch called ``name``; KeyError listing the names if there is none."""
        for branch in self.branches:
            if branch.name == name:
                return branch
        raise KeyError(f"no trace named {name!r}; traces: {[b.name for b in self.branches]}")

    def points_frame(self) -> pd.DataFrame:
        """points.csv as a pandas DataFrame."""
        from branchline.results.tables import points_frame

        return points_frame(self)

    def events_frame(self) -> pd.DataFrame:
        """events.csv as a pandas DataFrame."""
        from branchline.results.tables import events_frame

        return events_frame(self)

    def cycles_frame(self) -> pd.DataFrame:
        """cycles.csv as a pandas DataFrame (no rows when the scan has no [[cycles]])."""
        from branchline.results.cycle_tables import cycles_frame
        from branchline.results.tables import varying_parameters

        return cycles_frame(self, varying_parameters(self))
    def boundaries_frame(self) -> pd.DataFrame:
        """boundaries.csv as a pandas DataFrame (two-parameter fold and Hopf curves)."""
        from branchline.results.boundary_tables import boundaries_frame

        return boundaries_frame(self)

    def robust_margin_frame(self) -> pd.DataFrame:
        """robust_margin.csv as a pandas DataFrame (no rows without [robust_margin])."""
        from branchline.results.robust_margin_tables import robust_margin_frame

        return robust_margin_frame(self)

    def stability_map_figures(self) -> list[Figure]:
        """The stability maps (one per plane of [[boundary]] curves) as Figures."""
        from branchline.present.stability_map import stability_map_figure

        info, events, frame = self.info(), self.event_records(), self.boundaries_frame()
        return [
            stability_map_figure(entry, frame, events, info)
            for entry in info.get("stability_maps") or []
        ]

    def info(self) -> dict[str, Any]:
        """run.json content: what was run, settings with defaults filled in, timings."""
        from branchline.results.tables import run_info

        return run_info(self)

    def event_records(self) -> list[dict[str, Any]]:
        """events.json entries (JSON-ready dicts with full detail)."""
        from branchline.results.tables import event_records

        return event_records(self)

    def report(self) -> str:
        """The stability-change report (markdown)."""
        from branchline.present.report import render_report

        cycles = self.cycles_frame() if self.cycles else None
        return render_report(self.points_frame(), self.event_records(), self.info(), cycles=cycles)

    def figure(self, x: str | None = None, y: str | None = None) -> Figure:
        """The bifurcation diagram as a matplotlib Figure."""
        from branchline.present.plotting import bifurcation_figure

        cycles = self.cycles_frame() if self.cycles else None
        return bifurcation_figure(
            self.points_frame(), self.event_records(), self.info(), x=x, y=y, cycles=cycles
        )
