"""Frozen records of the confirmations by simulation."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

Array = np.ndarray

CONFIRMED = "confirmed"
MISMATCH = "mismatch"  # the simulation contradicts the prediction
INCONCLUSIVE = "inconclusive"  # the simulation failed or could not decide
NOT_APPLICABLE = "not applicable"  # nothing to see: e.g. a fold with no stable side
STATUSES = (CONFIRMED, MISMATCH, INCONCLUSIVE, NOT_APPLICABLE)

# Roles of the curves in a confirmation's figure.
ROLE_STABLE = "stable branch"
ROLE_UNSTABLE = "unstable branch"
ROLE_SIMULATION = "simulation"
ROLE_PREDICTION = "prediction"
ROLE_MARK = "event"


@dataclass(frozen=True)
class Curve:
    """One line of a confirmation's figure: ``x`` against ``y`` in a role."""

    label: str
    x: Array
    y: Array
    role: str


@dataclass(frozen=True)
class Confirmation:
    """What a short simulation showed about one located event.

    Attributes
    ----------
    event : int
        Position of the event in the run's event list (0-based).
    trace, kind, vary : str
    value : float
        The event's parameter value.
    status : str
        One of :data:`STATUSES`.
    summary : str
        One plain sentence with the numbers (the report's line).
    numbers : dict
        Measured and predicted values (JSON-ready floats).
    curves : tuple of Curve
        The figure's lines; ``x_label``, ``y_label`` name its axes.
    seconds : float
        Wall time the simulation took.
    """

    event: int
    trace: str
    kind: str
    vary: str
    value: float
    status: str
    summary: str
    numbers: dict[str, float | str | None] = field(default_factory=dict)
    curves: tuple[Curve, ...] = ()
    x_label: str = ""
    y_label: str = ""
    seconds: float = 0.0

    def to_dict(self) -> dict:
        """JSON-ready summary (no curves): what run.json keeps."""
        return {
            "event": self.event + 1,
            "trace": self.trace,
            "kind": self.kind,
            "vary": self.vary,
            "value": float(self.value),
            "status": self.status,
            "summary": self.summary,
            "numbers": {
                k: (float(v) if isinstance(v, (float, np.floating)) and np.isfinite(v) else v)
                for k, v in self.numbers.items()
                if not (isinstance(v, float) and not np.isfinite(v))
            },
            "seconds": float(self.seconds),
        }
