"""Scan files: TOML -> validated, frozen dataclasses.

Everything is validated here, before any computing; every problem raises
:class:`branchline.errors.ScanError` naming the file, the key path and the
problem.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from branchline.errors import ScanError

# Defaults of the [steps] table: arclength units of the (state, parameter) space.
DEFAULT_INITIAL_STEP = 0.01
DEFAULT_SMALLEST_STEP = 1e-8
DEFAULT_LARGEST_STEP = 0.05
DEFAULT_MAX_POINTS = 2000


@dataclass(frozen=True)
class StepSettings:
    """Step-length settings of a trace (pseudo-arclength units)."""

    initial: float = DEFAULT_INITIAL_STEP
    smallest: float = DEFAULT_SMALLEST_STEP
    largest: float = DEFAULT_LARGEST_STEP
    max_points: int = DEFAULT_MAX_POINTS


@dataclass(frozen=True)
class ExpressionModelSpec:
    """A model given as expressions (``[model.equations]`` etc.), still as text."""

    parameters: dict[str, float]
    equations: dict[str, str]
    definitions: dict[str, str] = field(default_factory=dict)
    observables: dict[str, str] = field(default_factory=dict)


@dataclass(frozen=True)
class PythonModelSpec:
    """A model given as Python functions (``[model.python]``).

    ``rhs``/``jacobian``/``observables`` are ``"module:function"`` strings;
    importing the module runs its code, by design.
    """

    parameters: dict[str, float]
    rhs: str
    size: int
    jacobian: str | None = None
    states: tuple[str, ...] | None = None
    observables: str | None = None


@dataclass(frozen=True)
class TraceSpec:
    """One ``[[trace]]``: an equilibrium branch to follow."""

    name: str
    vary: str
    interval: tuple[float, float]
    start: dict[str, float] | str  # state -> guess, or "module:function" (Python models)
    set: dict[str, float] = field(default_factory=dict)
    direction: str = "both"  # "both", "increasing", "decreasing"
    steps: StepSettings = field(default_factory=StepSettings)
    switch_branches: bool = True  # follow branches crossing at branch points


@dataclass(frozen=True)
class Scan:
    """A validated scan file."""

    source: str  # file path or "<dict>"
    title: str
    model: ExpressionModelSpec | PythonModelSpec
    traces: tuple[TraceSpec, ...]
    steps: StepSettings = field(default_factory=StepSettings)
    raw: dict[str, Any] = field(default_factory=dict, compare=False, repr=False)

    @property
    def stem(self) -> str:
        return Path(self.source).stem if self.source != "<dict>" else "scan"


def load_scan(path: str | Path) -> Scan:
    """Read and validate a scan file.

    Raises
    ------
    ScanError
        If the file is missing, not TOML, or any key is invalid.
    """
    raise NotImplementedError


def scan_from_dict(data: dict[str, Any], source: str = "<dict>") -> Scan:
    """Validate a scan given as a dictionary (same layout as the TOML file)."""
    raise NotImplementedError


__all__ = [
    "ExpressionModelSpec",
    "PythonModelSpec",
    "Scan",
    "ScanError",
    "StepSettings",
    "TraceSpec",
    "load_scan",
    "scan_from_dict",
]
