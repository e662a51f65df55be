"""Records of the robust margin: the nearest fold or Hopf point in scaled parameters."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

Array = np.ndarray


@dataclass(frozen=True)
class NearestPoint:
    """The point of one fold or Hopf surface nearest to the nominal point, in scaled units.

    Attributes
    ----------
    trace, kind : str
        The equilibrium trace and the kind (``fold`` or ``hopf``) of the event it was
        started from.
    number : int
        Which event of that kind on that trace (from 1, in trace order).
    status : str
        ``done`` (located on the defining system with the normal-vector condition) or
        ``failed`` (``message`` says why; the numbers are then those of the start).
    distance : float
        sqrt(sum(((p_i - p0_i) / s_i)^2)) at the point: in units of the scales.
    direction : ndarray (k,)
        Unit vector from the nominal point to the point, in scaled parameters (the
        critical direction); the boundary's normal there.
    parameters : ndarray (m,)
        Every parameter at the point (the uncertain ones moved, the others nominal).
    state : ndarray (n,)
        The equilibrium at the point.
    frequency : float or None
        The Hopf frequency there (Hopf surfaces).
    residual_norms : list of float
        Newton's residual norm per iteration.
    same_as : str
        ``"<trace> <kind> <number>"`` of an earlier start that led to the same point.
    """

    trace: str
    kind: str
    number: int
    status: str
    distance: float
    direction: Array
    parameters: Array
    state: Array
    frequency: float | None = None
    message: str = ""
    residual_norms: list[float] = field(default_factory=list)
    same_as: str = ""

    @property
    def label(self) -> str:
        """``"<trace> <kind> <number>"``: the event it started from."""
        return f"{self.trace} {self.kind} {self.number}"


@dataclass(frozen=True)
class RobustMargin:
    """The robust margin of a run: nominal point, scales, nearest boundary points.

    Attributes
    ----------
    names : tuple of str
        The uncertain parameters, in the scan's order.
    scales : ndarray (k,)
        Their scales (standard deviations, tolerances: the user's unit of drift).
    nominal : ndarray (m,)
        Every parameter at the nominal point.
    points : tuple of NearestPoint
        One per fold or Hopf event that lies in the nominal point's parameter slice.
    skipped : tuple of str
        Why other events were not used (each a sentence).
    """

    names: tuple[str, ...]
    scales: Array
    nominal: Array
    points: tuple[NearestPoint, ...] = ()
    skipped: tuple[str, ...] = ()

    def nearest(self) -> NearestPoint | None:
        """The located point with the smallest distance (None when none was located)."""
        done = [p for p in self.points if p.status == "done"]
        return min(done, key=lambda p: p.distance) if done else None
