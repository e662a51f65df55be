"""Finding every equilibrium without a start guess: deflation against plain multistart Newton.

Run by hand (not collected by pytest)::

    python3 tests/benchmarks/bench_search.py

For each reference case (known number of equilibria in the box) and each
number of starts, both methods get the same scrambled Sobol starts
(``sobol_starts``, same seed):

- deflation: :func:`branchline.problems.deflation.find_equilibria` (Newton on
  the deflated residual from each start again and again until it fails,
  every root polished by undeflated Newton; Farrell, Birkisson and Funke 2015);
- plain multistart: undeflated damped Newton
  (:func:`branchline.problems.equilibrium.solve_equilibrium`) once from each
  start, converged roots in the box merged with the same rule
  (``same_root``).

It prints, side by side, the count found by each (and the known count) and the
time of each (best of ``REPEATS`` runs, shared machine), and the time ratio
deflation / plain. Counting every root matters more than speed: a search that
misses the outbreak state is worse than a slow one.

Known counts: z^5 = 1, five roots (de Moivre); T_7(x) = 0, seven roots
cos((2k-1) pi/14) (Abramowitz and Stegun 22.16.4); x^2 + y^2 = 4, xy = 1, four
points (elementary); three weakly coupled cubics x_i^3 - x_i + 0.1 x_(i+1), 27
roots (each of the 3^3 simple roots of the uncoupled system persists for
small coupling, by the implicit function theorem); the isothermal
autocatalator (Gray and Scott, Chem. Eng. Sci. 1983) with k2 = 0.05, b0 = 0 at
tau = 20 and tau = 50, three steady states (b = 0 and the two roots of
tau (1 + k2 tau) b^2 - tau b + 1 + k2 tau); the SIS vaccination model of
Kribs-Zaleta and Velasco-Hernandez (2000) at beta = 1.5, three (disease-free
and two endemic states, roots of a quadratic; tests/test_search.py).
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "src"))
sys.path.insert(0, str(ROOT / "tests"))

from branchline.model.build import build_model  # noqa: E402
from branchline.problems.deflation import Box, find_equilibria, same_root, sobol_starts  # noqa: E402
from branchline.problems.equilibrium import solve_equilibrium  # noqa: E402
from branchline.scan.loader import ExpressionModelSpec  # noqa: E402
from test_search import AUTOCATALATOR, FIFTH_POWER, SIV, SIV_PARAMETERS  # noqa: E402

REPEATS = 3
START_COUNTS = (8, 32, 128)
SEED = 0

CASES = [
    ("z^5 = 1", FIFTH_POWER, {"c": 1.0}, {"x": (-2, 2), "y": (-2, 2)}, 5),
    ("T_7(x) = 0", {"x": "64*x^7 - 112*x^5 + 56*x^3 - 7*x - c"}, {"c": 0.0}, {"x": (-1.5, 1.5)}, 7),
    ("circle and hyperbola", {"x": "x^2 + y^2 - r", "y": "x*y - 1"}, {"r": 4.0},
     {"x": (-3, 3), "y": (-3, 3)}, 4),
    ("three coupled cubics",
     {"x": "x^3 - x + e*y", "y": "y^3 - y + e*z", "z": "z^3 - z + e*x"}, {"e": 0.1},
     {"x": (-2, 2), "y": (-2, 2), "z": (-2, 2)}, 27),
    ("autocatalator tau = 20", AUTOCATALATOR, {"tau": 20.0, "k2": 0.05, "b0": 0.0},
     {"a": (-0.5, 1.5), "b": (-0.5, 1.5)}, 3),
    ("autocatalator tau = 50", AUTOCATALATOR, {"tau": 50.0, "k2": 0.05, "b0": 0.0},
     {"a": (-0.5, 1.5), "b": (-0.5, 1.5)}, 3),
    ("SIS vaccination beta = 1.5", SIV, SIV_PARAMETERS,
     {"S": (-0.1, 1.1), "I": (-0.1, 1.1), "V": (-0.1, 1.1)}, 3),
]


def plain_multistart(model, p, box: Box, starts: np.ndarray) -> np.ndarray:
    """Undeflated damped Newton once from each start; distinct converged roots in the box."""
    roots: list[np.ndarray] = []
    scale = 1.0 / box.width
    for start in starts:
        solution = solve_equilibrium(model, start, p)
        if solution.converged and box.contains(solution.state):
            if not same_root(solution.state, roots, scale):
                roots.append(solution.state)
    return np.array(roots)


def _best_time(function, *args):
    best, value = float("inf"), None
    for _ in range(REPEATS):
        clock = time.perf_counter()
        value = function(*args)
        best = min(best, time.perf_counter() - clock)
    return best, value


def main() -> None:
    header = (
        f"{'case':28} {'known':>5} {'starts':>6} | {'deflation':>9} {'plain':>5} | "
        f"{'deflation s':>11} {'plain s':>8} {'ratio':>6}"
    )
    print(header)
    print("-" * len(header))
    totals = {"deflation": 0, "plain": 0, "known": 0}
    for name, equations, parameters, ranges, known in CASES:
        model = build_model(ExpressionModelSpec(parameters=parameters, equations=equations))
        box = Box(
            np.array([ranges[s][0] for s in model.states], dtype=float),
            np.array([ranges[s][1] for s in model.states], dtype=float),
        )
        for count in START_COUNTS:
            starts = sobol_starts(box, count, SEED)
            t_deflation, search = _best_time(find_equilibria, model, model.defaults, box, starts)
            t_plain, plain = _best_time(plain_multistart, model, model.defaults, box, starts)
            totals["deflation"] += len(search)
            totals["plain"] += len(plain)
            totals["known"] += known
            print(
                f"{name:28} {known:>5} {count:>6} | {len(search):>9} {len(plain):>5} | "
                f"{t_deflation:>11.4f} {t_plain:>8.4f} {t_deflation / t_plain:>6.1f}"
            )
    print("-" * len(header))
    print(
        f"roots found over all rows: deflation {totals['deflation']}, plain {totals['plain']}, "
        f"known {totals['known']}"
    )


if __name__ == "__main__":
    main()
