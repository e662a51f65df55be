"""Per-point tracing cost of this source tree against another (e.g. the parent commit).

Run by hand (not collected by pytest)::

    git worktree add /tmp/base <commit>
    python3 tests/benchmarks/bench_against.py /tmp/base/src [src]

Times ``trace_branch`` on the models of ``bench_trace.py`` (stirred tank, long
branch, fine steps, three-tank cascade; full Newton and chord) in separate
processes, one per source tree, alternating ``ROUNDS`` times, and prints the
CPU seconds per accepted point of each tree (best over all runs: the machine is
shared, and the best run is the least disturbed) and their ratio
(before / after: above 1 means this tree is faster). Both trees trace the same
branches: the point counts must agree.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROUNDS = 3

# Runs inside a child process with one tree first on sys.path.
CHILD = r"""
import json, math, sys, time
sys.path.insert(0, sys.argv[2])
sys.path.insert(0, sys.argv[1])
import numpy as np
# branchline is imported from the tree under test first; bench_trace's own path
# insertion then finds it already loaded.
from branchline.problems.equilibrium_branch import trace_branch
from branchline.scan.loader import StepSettings
from bench_trace import CASCADE, TANK, build
import branchline
assert branchline.__file__.startswith(sys.argv[1]), branchline.__file__

CASES = [
    ("stirred tank", TANK, (0.0, 0.5), StepSettings(largest=0.01, max_points=100_000)),
    ("long branch", TANK, (0.0, 50.0), StepSettings(largest=0.05, max_points=100_000)),
    ("fine steps", TANK, (0.0, 0.5),
     StepSettings(initial=0.001, largest=0.002, max_points=100_000)),
    ("three-tank cascade", CASCADE, (0.0, 0.5), StepSettings(largest=0.01, max_points=100_000)),
]
models = {}
out = {}
for title, definition, interval, steps in CASES:
    model = models.setdefault(id(definition), build(definition))
    for newton in ("full", "chord"):
        best, points = math.inf, 0
        for _ in range(3):
            start = time.process_time()
            branch = trace_branch(model, "bench", "Da", model.defaults, np.zeros(model.size),
                                  interval, "increasing", steps, newton=newton)
            best = min(best, time.process_time() - start)
            points = len(branch)
        out[f"{title}, {newton}"] = (best / points, points)
print(json.dumps(out))
"""


def measure(source: Path) -> dict[str, tuple[float, int]]:
    env = dict(os.environ)
    env.pop("PYTHONPATH", None)
    done = subprocess.run(
        [sys.executable, "-c", CHILD, str(source), str(HERE)],
        env=env,
        capture_output=True,
        text=True,
        check=True,
    )
    return json.loads(done.stdout.strip().splitlines()[-1])


def main(argv: list[str]) -> None:
    before = Path(argv[1]).resolve()
    after = Path(argv[2] if len(argv) > 2 else HERE.parents[1] / "src").resolve()
    best: dict[str, dict[str, tuple[float, int]]] = {"before": {}, "after": {}}
    for _ in range(ROUNDS):
        for side, source in (("before", before), ("after", after)):
            for case, (seconds, points) in measure(source).items():
                old = best[side].get(case)
                if old is None or seconds < old[0]:
                    best[side][case] = (seconds, points)
    print(f"before: {before}\nafter:  {after}\n")
    print(f"{'case':32} {'points':>7} {'us/point before':>16} {'after':>10} {'ratio':>7}")
    for case, (seconds_after, points_after) in best["after"].items():
        seconds_before, points_before = best["before"][case]
        points = f"{points_after}" if points_after == points_before else "differ!"
        print(
            f"{case:32} {points:>7} {1e6 * seconds_before:16.1f} {1e6 * seconds_after:10.1f} "
            f"{seconds_before / seconds_after:7.2f}"
        )


if __name__ == "__main__":
    main(sys.argv)
