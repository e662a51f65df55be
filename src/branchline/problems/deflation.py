"""Every equilibrium in a box at one parameter value: Newton's method with deflation.

Deflation (Farrell, Birkisson and Funke, "Deflation techniques for finding
distinct solutions of nonlinear partial differential equations", SIAM J. Sci.
Comput. 37(4), 2015) turns f(x) = 0 with known roots r_1 .. r_k into

    g(x) = M(x) f(x),   M(x) = prod_i ( 1 / |x - r_i|^POWER + SHIFT ),

which has the same roots except r_1 .. r_k (g stays away from zero there, as
M blows up), so Newton's method on g cannot return to a root already found.
The shifted operator (SHIFT > 0) keeps g close to f far from the known roots.
Distances are measured in box units (each state divided by the width of its
search range), so the operator does not depend on the units of the states.

The Newton step for g needs no new linear solve: with the undeflated step
d = -f_x^{-1} f and the gradient of log M, grad = sum_i grad m_i / m_i, the
deflated step is d / (1 - grad . d) (Farrell, Birkisson and Funke, section 3,
by the Sherman-Morrison formula). It therefore works unchanged for dense and
sparse Jacobians: one factorization of f_x per iteration, as plain Newton.

The search (:func:`find_equilibria`): starts come from a scrambled Sobol
sample of the box (scipy.stats.qmc, low discrepancy: the box is covered
evenly at any sample size) and any extra starts given; from each start,
deflated Newton is run again and again, each root found is deflated, until
the iteration fails from that start. Every root is polished by undeflated
Newton (:func:`branchline.problems.equilibrium.solve_equilibrium`) to full
precision. A search can never prove that no equilibrium was missed.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from branchline.numerics import linalg
from branchline.problems.equilibrium import solve_equilibrium

if TYPE_CHECKING:
    from branchline.model.build import Model

Array = np.ndarray

# The deflation operator's power and shift: the values Farrell, Birkisson and
# Funke use in their examples (POWER 2 makes the deflated residual blow up
# like 1/|x - r|, so Newton cannot converge to r; SHIFT 1 keeps g ~ f far away).
POWER = 2.0
SHIFT = 1.0
# A deflated Newton run that has not converged after this many steps is given
# up (converging runs take 5 to 20: deflation slows the approach at first).
MAX_DEFLATED_ITERATIONS = 60
# The deflated run hands over to undeflated polishing once the Newton update
# (in box units) is this small: the iterate is then in the root's quadratic basin.
HANDOVER_STEP = 1e-7
# Backtracking on |f| (Armijo's constant, common practice). Past 2^-8 the full
# step is taken instead (see deflated_newton): finer halvings found no more
# roots on the benchmark cases (tests/benchmarks/bench_search.py) and cost more.
SUFFICIENT_DECREASE = 1e-4
SMALLEST_DAMPING = 2.0**-8
# An iterate this many box widths away from the box centre has escaped: the
# run is given up (the root it heads for, if any, is far outside the box).
ESCAPE_WIDTHS = 20.0
# Two polished roots closer than this (in box units, relative to 1 + |x|) are
# the same equilibrium. Simple roots polish to about 1e-15; a double root (a
# fold exactly at the searched value) only to about sqrt(eps) ~ 1e-8, so 1e-6
# merges its copies while keeping roots that are really apart.
SAME_ROOT_RTOL = 1e-6
# A root this far outside the box (in box widths) still counts as inside:
# roots on the box's faces are found from either side.
BOX_SLACK = 1e-9
# At most this many roots per search: a guard against a continuum of
# equilibria (a line of them, say), where every root found is a new one.
MAX_ROOTS = 200
# A deflated step denominator 1 - grad . d this close to zero (or below it)
# would send the iterate to infinity: the run is given up.
DENOMINATOR_FLOOR = 1e-12


@dataclass(frozen=True)
class RootSearch:
    """The equilibria found in a box at one parameter vector.

    Attributes
    ----------
    roots : ndarray (k, n)
        Distinct equilibria inside the box, polished by undeflated Newton, in
        the order they were found.
    residuals : ndarray (k,)
        |f| at each root after polishing.
    outside : ndarray (j, n)
        Roots that Newton reached outside the box (deflated as well, so not
        met twice, but not part of the box's count).
    starts : int
        Start points used (sample plus extra starts).
    newton_iterations : int
        Deflated and polishing Newton iterations, in all.
    runs : int
        Deflated Newton runs (one per root found plus one failing run per start).
    returned : int
        Runs whose polished root was one already known (deflation makes this rare).
    seconds : float
        Wall-clock time of the search.
    complete : bool
        False when the search stopped at ``MAX_ROOTS``.
    """

    roots: Array
    residuals: Array
    outside: Array
    starts: int
    newton_iterations: int
    runs: int
    returned: int
    seconds: float
    complete: bool = True

    def __len__(self) -> int:
        return int(self.roots.shape[0])


@dataclass(frozen=True)
class Box:
    """A search box: ``low`` and ``high`` (n,), every ``low < high``."""

    low: Array
    high: Array

    @property
    def centre(self) -> Array:
        """The box's centre, shape (n,)."""
        return 0.5 * (self.low + self.high)

    @property
    def width(self) -> Array:
        """Width of each state's range, shape (n,)."""
        return self.high - self.low

    def contains(self, x: Array) -> bool:
        """True when x (n,) lies in the box (up to ``BOX_SLACK`` widths)."""
        slack = BOX_SLACK * self.width
        return bool(np.all(x >= self.low - slack) and np.all(x <= self.high + slack))

    def escaped(self, x: Array) -> bool:
        """True when x lies more than ``ESCAPE_WIDTHS`` box widths from the centre."""
        return bool(np.max(np.abs(x - self.centre) / self.width) > ESCAPE_WIDTHS)


def sobol_starts(box: Box, count: int, seed: int) -> Array:
    """``count`` start points spread evenly over the box, shape (count, n).

    A scrambled Sobol sequence (scipy.stats.qmc.Sobol; Owen scrambling with
    ``seed``): the first 2^m points of a Sobol sequence are balanced in every
    dyadic sub-box, so counts that are powers of two cover the box best.
    """
    from scipy.stats import qmc

    n = box.low.shape[0]
    sampler = qmc.Sobol(d=n, scramble=True, seed=seed)
    # Sobol warns for counts that are not powers of two; draw the next power and cut.
    power = max(0, math.ceil(math.log2(max(count, 1))))
    unit = sampler.random_base2(power)[:count]
    return qmc.scale(unit, box.low, box.high) if n else unit


def _residual(model: Model, x: Array, p: Array) -> Array | None:
    try:
        value = np.asarray(model.rhs(x, p), dtype=float)
    except (ArithmeticError, ValueError):
        return None
    return value if np.all(np.isfinite(value)) else None


def _newton_step(model: Model, x: Array, p: Array, f: Array) -> Array | None:
    """The undeflated Newton update -f_x^{-1} f (dense or sparse), or None if singular."""
    try:
        jac = model.jacobian(x, p)
        if not linalg.is_sparse(jac):
            jac = np.asarray(jac, dtype=float)
        step = -linalg.solve_square(jac, f)
    except (ArithmeticError, ValueError, linalg.SingularMatrixError):
        return None
    return step if np.all(np.isfinite(step)) else None


class Deflation:
    """The deflation operator M(x) for a set of known roots, in box units.

    Parameters
    ----------
    width : ndarray (n,)
        Box widths: distances are |(x - r) / width|.
    """

    def __init__(self, width: Array) -> None:
        self.scale = 1.0 / np.asarray(width, dtype=float)
        self.roots: list[Array] = []

    def add(self, root: Array) -> None:
        """Deflate ``root`` (n,) from now on."""
        self.roots.append(np.array(root, dtype=float))

    def factor(self, x: Array) -> float:
        """M(x) (>= 1 with SHIFT = 1; infinite at a known root)."""
        value = 1.0
        for root in self.roots:
            distance = linalg.norm((x - root) * self.scale)
            if distance == 0.0:
                return math.inf
            value *= distance**-POWER + SHIFT
        return value

    def log_gradient(self, x: Array) -> Array | None:
        """grad log M(x), shape (n,): sum_i grad m_i / m_i (None at a known root)."""
        gradient = np.zeros_like(x)
        for root in self.roots:
            scaled = (x - root) * self.scale
            distance = linalg.norm(scaled)
            if distance == 0.0:
                return None
            term = distance**-POWER
            # grad m_i = -POWER |s|^(-POWER-2) s * scale, with s the scaled difference.
            gradient -= (POWER * term / distance**2 / (term + SHIFT)) * scaled * self.scale
        return gradient


def deflated_newton(
    model: Model, x0: Array, p: Array, deflation: Deflation, box: Box
) -> tuple[Array | None, int]:
    """Newton's method on the deflated residual M(x) f(x) from ``x0``.

    Each step is the deflated Newton step, shortened by halving until |f|
    (the undeflated residual) decreases sufficiently (Armijo); when no
    shortened step decreases |f| the full step is taken. Deflation must be
    free to climb out of the basin of a root already found, where any step
    away raises |f| for a while: a line search on |M f| instead stalls in the
    shallow minima M f has far from every root.

    Returns
    -------
    (x, iterations)
        ``x`` (n,) close enough to a root to hand over to undeflated polishing
        (or None when the run failed: singular Jacobian, a deflated step of
        unbounded length, escape from the box, too many iterations).
    """
    x = np.array(x0, dtype=float)
    f = _residual(model, x, p)
    if f is None or not math.isfinite(deflation.factor(x)):
        return None, 0  # no residual here, or started on a deflated root
    for iteration in range(1, MAX_DEFLATED_ITERATIONS + 1):
        plain = _newton_step(model, x, p, f)
        gradient = deflation.log_gradient(x)
        if plain is None or gradient is None:
            return None, iteration
        denominator = 1.0 - float(gradient @ plain)
        if not abs(denominator) > DENOMINATOR_FLOOR:
            return None, iteration
        step = plain / denominator
        x, f, damping = _damped(model, x, p, f, step)
        if f is None or box.escaped(x):
            return None, iteration
        if linalg.norm(damping * step * deflation.scale) <= HANDOVER_STEP * (
            1.0 + linalg.norm(x * deflation.scale)
        ):
            return x, iteration
    return None, MAX_DEFLATED_ITERATIONS


def _damped(model: Model, x: Array, p: Array, f: Array, step: Array):
    """(x + damping step, f there, damping): the longest halving of ``step`` that decreases
    |f| sufficiently, else the full step (f None when it is not finite)."""
    residual = linalg.norm(f)
    damping = 1.0
    while damping >= SMALLEST_DAMPING:
        trial = x + damping * step
        f_trial = _residual(model, trial, p)
        if (
            f_trial is not None
            and linalg.norm(f_trial) <= (1.0 - SUFFICIENT_DECREASE * damping) * residual
        ):
            return trial, f_trial, damping
        damping *= 0.5
    return x + step, _residual(model, x + step, p), 1.0


def same_root(x: Array, roots: list[Array], scale: Array) -> bool:
    """True when ``x`` is within ``SAME_ROOT_RTOL`` (box units) of one of ``roots``."""
    for root in roots:
        gap = linalg.norm((x - root) * scale)
        if gap <= SAME_ROOT_RTOL * (1.0 + linalg.norm(root * scale)):
            return True
    return False


def find_equilibria(
    model: Model,
    p: Array,
    box: Box,
    starts: Array,
    known: Array | None = None,
) -> RootSearch:
    """All equilibria in ``box`` reachable from ``starts`` by deflated Newton.

    Parameters
    ----------
    model : branchline.model.build.Model
        ``rhs`` and ``jacobian`` (dense or scipy.sparse) are used.
    p : ndarray (m,)
        The parameter vector.
    box : Box
    starts : ndarray (s, n)
        Start points (a Sobol sample of the box, say, plus any others).
    known : ndarray (k, n), optional
        Equilibria already known (on traced branches): deflated from the
        start, never returned.

    Returns
    -------
    RootSearch
        The new roots in the box, in the order found. Never raises for
        numerical trouble: a start from which Newton fails is simply done.

    Examples
    --------
    >>> import numpy as np
    >>> from types import SimpleNamespace
    >>> m = SimpleNamespace(rhs=lambda x, p: x**3 - x,
    ...                     jacobian=lambda x, p: np.diag(3 * x**2 - 1), states=("x",))
    >>> box = Box(np.array([-2.0]), np.array([2.0]))
    >>> found = find_equilibria(m, np.zeros(0), box, sobol_starts(box, 4, seed=1))
    >>> sorted(np.round(found.roots[:, 0], 12).tolist())
    [-1.0, 0.0, 1.0]
    """
    started = time.perf_counter()
    p = np.asarray(p, dtype=float)
    deflation = Deflation(box.width)
    known_roots = [np.asarray(r, dtype=float) for r in (known if known is not None else [])]
    for root in known_roots:
        deflation.add(root)
    found: list[Array] = []
    residuals: list[float] = []
    outside: list[Array] = []
    iterations = runs = returned = 0
    complete = True
    with np.errstate(all="ignore"):
        for start in np.asarray(starts, dtype=float):
            while True:
                if len(found) + len(outside) >= MAX_ROOTS:
                    complete = False
                    break
                runs += 1
                near, used = deflated_newton(model, start, p, deflation, box)
                iterations += used
                if near is None:
                    break
                polished = solve_equilibrium(model, near, p)
                iterations += polished.iterations
                if not polished.converged:
                    break
                root = polished.state
                if same_root(root, known_roots + found + outside, deflation.scale):
                    returned += 1
                    break
                deflation.add(root)
                if box.contains(root):
                    found.append(root)
                    residuals.append(polished.residual_norm)
                else:
                    outside.append(root)
            if not complete:
                break
    n = box.low.shape[0]
    return RootSearch(
        roots=np.array(found).reshape(-1, n),
        residuals=np.array(residuals),
        outside=np.array(outside).reshape(-1, n),
        starts=int(np.asarray(starts).shape[0]),
        newton_iterations=iterations,
        runs=runs,
        returned=returned,
        seconds=time.perf_counter() - started,
        complete=complete,
    )


__all__ = [
    "Box",
    "Deflation",
    "RootSearch",
    "deflated_newton",
    "find_equilibria",
    "same_root",
    "sobol_starts",
]
