"""The one set of convergence tolerances and step settings every Newton loop and curve uses.

The continuation correctors, the equilibrium solve and the scan's ``[steps]``
table all read these; nothing else defines them again.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# Residual norm (Euclidean) accepted as zero. Tests demand 1e-10 residuals on
# O(1) models; models whose terms are much larger than 1 reach the roundoff
# floor first and are accepted by the update test (STAGNATION_RTOL) instead.
RESIDUAL_TOL = 1e-10
# A Newton update this small relative to 1 + |u| is roundoff: the iteration has
# reached it and further steps cannot reduce the residual.
STAGNATION_RTOL = 16 * np.finfo(float).eps

# Defaults of the [steps] table: arclength units of the (state, parameter) space.
DEFAULT_INITIAL_STEP = 0.01
DEFAULT_SMALLEST_STEP = 1e-8
DEFAULT_LARGEST_STEP = 0.05
DEFAULT_MAX_POINTS = 2000


@dataclass(frozen=True)
class StepSettings:
    """Step lengths of one curve (pseudo-arclength units) and its point budget.

    ``max_points`` counts the start point; for a trace followed to both sides it
    applies to each side separately.
    """

    initial: float = DEFAULT_INITIAL_STEP
    smallest: float = DEFAULT_SMALLEST_STEP
    largest: float = DEFAULT_LARGEST_STEP
    max_points: int = DEFAULT_MAX_POINTS
