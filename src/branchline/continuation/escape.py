"""Equilibria that run off to infinity: the rule that stops a curve at a pole.

A branch such as x = 1/F (the equilibrium of x' = 1 - F x) grows without bound
as F -> 0. Followed by arclength it never reaches the interval edge; it spends
the whole point budget on ever larger states. The rule, applied to equilibrium
branches (problems that give ``escape_names``):

1. Watch once the state norm |x| is at least ``ESCAPE_GROWTH`` times
   (1 + |x| at the start) (states are in the user's units, so the 1 keeps a
   start near zero from counting as growth).
2. At each accepted point, extrapolate 1/|x| linearly in the parameter through
   the last two points; where it reaches 0 is the predicted pole p*, at a
   distance d = |p* - p|. For growth like 1/distance^k, d = distance/k.
3. Each time |x| has doubled since the last mark, compare d with d at the mark:
   if it shrank to ``POLE_SHRINK`` times or less, the state is growing like a
   power of 1/distance to a finite parameter value (a pole: d halves for
   1/distance, shrinks by 2**(-1/k) for 1/distance^k, k <= 4); the curve stops,
   status ``failed``. Otherwise (exponential or slower growth: d stays put) the
   mark moves on and nothing is said: a large but finite equilibrium is not an
   escape.
"""

from __future__ import annotations

import math

import numpy as np

ESCAPE_GROWTH = 10.0
POLE_SHRINK = 0.85


class EscapeWatch:
    """Remembers the last point and the mark of the rule above for one curve.

    ``states`` are the state names, ``parameter`` the varied parameter's name,
    ``x_start`` the start state (the curve's u is (x, p)).
    """

    def __init__(self, states, parameter: str, x_start: np.ndarray) -> None:
        self.states, self.parameter = tuple(states), str(parameter)
        self.x_start = np.abs(np.asarray(x_start, dtype=float))
        self.threshold = ESCAPE_GROWTH * (1.0 + float(np.linalg.norm(x_start)))
        self.previous: tuple[float, float] | None = None
        self.mark: tuple[float, float] | None = None

    def check(self, u: np.ndarray) -> str:
        """The empty string while all is well, else where and why the curve stops."""
        norm, p = float(np.linalg.norm(u[:-1])), float(u[-1])
        previous, self.previous = self.previous, (norm, p)
        if norm < self.threshold or previous is None or not math.isfinite(norm):
            self.mark = None
            return ""
        pole = _predicted_pole(previous, (norm, p))
        if pole is None:
            self.mark = None
            return ""
        distance = abs(pole - p)
        if self.mark is None:
            self.mark = (norm, distance)
            return ""
        if norm < 2.0 * self.mark[0]:
            return ""
        if distance <= POLE_SHRINK * self.mark[1]:
            return self._message(u, pole)
        self.mark = (norm, distance)
        return ""

    def _message(self, u: np.ndarray, pole: float) -> str:
        growth = np.abs(u[:-1]) / (1.0 + self.x_start)
        i = int(np.argmax(growth))
        name, value, p = self.states[i], float(u[i]), float(u[-1])
        return (
            f"the state {name} grows without bound: {name}={value:.6g} at "
            f"{self.parameter}={p:.10g}, growing like a power of 1/distance toward "
            f"{self.parameter} ~ {pole:.6g} (the equilibrium runs off to infinity there); "
            f"narrow the interval to end before {self.parameter}={pole:.6g}, or give "
            f"{name} a bound in the trace's limits"
        )


def _predicted_pole(before: tuple[float, float], now: tuple[float, float]) -> float | None:
    """The parameter where 1/|x|, extrapolated linearly through two points, reaches 0
    (None unless 1/|x| falls toward 0 while the parameter moves)."""
    (n0, p0), (n1, p1) = before, now
    if not n1 > n0 > 0.0 or p1 == p0:
        return None
    slope = (1.0 / n1 - 1.0 / n0) / (p1 - p0)
    return p1 - (1.0 / n1) / slope


def watch_for(problem, u_start: np.ndarray) -> EscapeWatch | None:
    """An :class:`EscapeWatch` for problems that name their states, else None."""
    names = getattr(problem, "escape_names", None)
    if names is None:
        return None
    states, parameter = names
    return EscapeWatch(states, parameter, u_start[:-1])
