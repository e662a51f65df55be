"""Re-checking a user's Jacobian during a trace, where the corrector struggles.

A Python model's own Jacobian is compared with finite differences at the start
of a trace only. A Jacobian wrong elsewhere, or wrong by a factor (Newton then
converges linearly, the corrector fails at the normal step, the step shrinks and
the points are spent on a short stretch), shows as a corrector that needs many
evaluations point after point. :class:`JacobianWatch` counts the evaluations
behind each accepted point (rejected attempts included); after
``STRUGGLE_REPEATS`` struggling points in a row it compares the Jacobian with
central differences there (:func:`branchline.model.build.check_jacobian`), and
a failed comparison ends the trace at once, with a message naming the Jacobian
function, instead of after ``steps.max_points``.
"""

from __future__ import annotations

import numpy as np

from branchline.model.build import check_jacobian
from branchline.numerics.tolerances import MAX_CORRECTOR_ITERATIONS

Array = np.ndarray

# A healthy point takes two to four evaluations (measured on tests/faulty_models.py:
# Newton converges quadratically from the predictor); a point behind which the
# corrector evaluated the model as often as its iteration cap struggled (a doubled
# Jacobian takes seven at every point: Newton's error only halves per iteration).
STRUGGLE_EVALUATIONS = MAX_CORRECTOR_ITERATIONS
# Struggling points in a row before the Jacobian is checked (one can be a sharp
# turn of the branch; several in a row are not).
STRUGGLE_REPEATS = 3


class JacobianWatch:
    """Counts the corrector's model evaluations per accepted point and checks the
    model's Jacobian where the corrector struggles again and again.

    Parameters
    ----------
    model : branchline.model.build.Model
        A model with its own Jacobian (``model.jacobian_source`` set).
    """

    def __init__(self, model) -> None:
        self.model = model
        self.evaluations = 0  # since the last accepted point
        self.struggles = 0  # struggling points in a row
        self.checks = 0

    def verdict(self, x: Array, p: Array) -> str:
        """At an accepted point (x, p): "" to go on, or why the trace must stop."""
        used, self.evaluations = self.evaluations, 0
        if used < STRUGGLE_EVALUATIONS:
            self.struggles = 0
            return ""
        self.struggles += 1
        if self.struggles < STRUGGLE_REPEATS:
            return ""
        self.struggles = 0
        self.checks += 1
        with np.errstate(all="ignore"):
            check = check_jacobian(self.model, x, p)
        if check.ok or not np.isfinite(check.max_relative_error):
            return ""
        return (
            f"the corrector struggled at {STRUGGLE_REPEATS} points in a row (at least "
            f"{STRUGGLE_EVALUATIONS} model evaluations each) and the Jacobian check there "
            f"failed: {check.message}"
        )


def watch_for(model) -> JacobianWatch | None:
    """A watch for models with their own Jacobian function, else None."""
    return JacobianWatch(model) if getattr(model, "jacobian_source", None) else None
