"""Behaviour check for refactors: the same scans on two source trees, tables compared.

Run by hand (not collected by pytest)::

    git worktree add /tmp/base <commit before the change>
    python3 tests/benchmarks/compare_behaviour.py /tmp/base/src [src]

Runs ``python3 -m branchline run`` on the four demo scans and on the test models
below with each source tree first on PYTHONPATH, then compares ``points.csv``,
``events.csv`` and (for scans with periodic orbits) ``cycles.csv`` cell by cell: text cells must be equal, numbers must agree to
``RTOL`` relative to the larger of the two values and the column's largest
magnitude (a state that is zero up to roundoff is compared on the scale of its
column). It says which files are byte-identical and exits 1 on any difference.

The test models are the ones the test files use (named there with their sources):
spruce budworm (two folds), an isola, pitchforks with branch switching (toggle
switch, subcritical normal form, Lorenz), a chemostat stopped by a state limit,
the Brusselator (Hopf, with its periodic orbits) and a 400-state Python
Brusselator line with a sparse Jacobian (its Hopf point found by the
leading-eigenvalue search).
"""

from __future__ import annotations

import csv
import math
import os
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
RTOL = 1e-12

TEST_MODELS = {
    "budworm": """
[model.parameters]
r = 0.4
k = 20.0
[model.equations]
x = "r*x*(1 - x/k) - x^2/(1 + x^2)"
[[trace]]
vary = "r"
interval = [0.3, 0.7]
start = { x = 0.5 }
""",
    "isola": """
[model.parameters]
p = 0.0
[model.equations]
x = "1 - x^2 - p^2"
[[trace]]
vary = "p"
interval = [-2.0, 2.0]
start = { x = 1.0 }
""",
    "subcritical_pitchfork": """
[model.parameters]
p = -0.5
[model.equations]
x = "p*x + x^3 - x^5"
[[trace]]
vary = "p"
interval = [-0.5, 0.5]
start = { x = 0.0 }
""",
    "lorenz": """
[model.parameters]
sigma = 10.0
r = 0.5
b = 2.6666666666666665
[model.equations]
x = "sigma*(y - x)"
y = "r*x - y - x*z"
z = "x*y - b*z"
[[trace]]
vary = "r"
interval = [0.0, 30.0]
start = { x = 0.0, y = 0.0, z = 0.0 }
""",
    "chemostat_limit": """
[model.parameters]
D = 0.2
S_in = 4.0
mu_max = 0.5
K_s = 0.1
Y = 0.5
[model.definitions]
mu = "mu_max*S/(K_s + S)"
[model.equations]
S = "D*(S_in - S) - mu*X/Y"
X = "(mu - D)*X"
[[trace]]
vary = "D"
interval = [0.05, 0.49]
start = { S = 0.07, X = 1.95 }
limits = { X = [0.0, 100.0] }
""",
    "brusselator": """
[model.parameters]
a = 1.0
b = 1.0
[model.equations]
x = "a - (b + 1)*x + x^2*y"
y = "b*x - x^2*y"
[[trace]]
name = "rest"
vary = "b"
interval = [0.5, 3.0]
start = { x = 1.0, y = 1.0 }
[[cycles]]
from = "rest"
interval = [0.5, 3.0]
""",
    "sparse_brusselator": """
[model.parameters]
a = 1.0
b = 1.97
d1 = 0.001
d2 = 0.002
[model.python]
rhs = "brusselator_line:rhs"
jacobian = "brusselator_line:jacobian"
size = 400
[[trace]]
vary = "b"
interval = [1.97, 2.02]
direction = "increasing"
start = "brusselator_line:uniform_start"
steps = { initial = 0.02, largest = 0.5, max_points = 40 }
""",
}


# The Python model of the sparse case, written beside the scan files so that both
# trees import the same code (the model of tests/test_sparse_eigen.py: a Brusselator
# on a line with Neumann ends, 200 nodes, its uniform state as the start).
BRUSSELATOR_LINE = """
import numpy as np
import scipy.sparse as sp


def _laplacian(nodes):
    h = 1.0 / (nodes - 1)
    lap = sp.diags([np.ones(nodes - 1), -2.0 * np.ones(nodes), np.ones(nodes - 1)], [-1, 0, 1],
                   format="lil")
    lap[0, 1] = 2.0
    lap[nodes - 1, nodes - 2] = 2.0
    return (lap.tocsr() / h**2).tocsr()


def rhs(x, p):
    nodes = x.shape[0] // 2
    lap = _laplacian(nodes)
    u, v = x[:nodes], x[nodes:]
    return np.concatenate([
        p["a"] - (p["b"] + 1.0) * u + u * u * v + p["d1"] * (lap @ u),
        p["b"] * u - u * u * v + p["d2"] * (lap @ v),
    ])


def jacobian(x, p):
    nodes = x.shape[0] // 2
    lap = _laplacian(nodes)
    u, v = x[:nodes], x[nodes:]
    b = p["b"]
    return sp.bmat([
        [sp.diags(-(b + 1.0) + 2.0 * u * v) + p["d1"] * lap, sp.diags(u * u)],
        [sp.diags(b - 2.0 * u * v), sp.diags(-u * u) + p["d2"] * lap],
    ], format="csc")


def uniform_start(p):
    return np.concatenate([np.full(200, p["a"]), np.full(200, p["b"] / p["a"])])
"""


def scan_files(folder: Path) -> list[Path]:
    """The demo scans and the test models written as scan files into ``folder``."""
    (folder / "brusselator_line.py").write_text(BRUSSELATOR_LINE)
    paths = sorted((ROOT / "scans").glob("*.toml"))
    for name, text in TEST_MODELS.items():
        path = folder / f"{name}.toml"
        path.write_text(f'title = "{name}"\n{text}')
        paths.append(path)
    return paths


def run(source: Path, scan: Path, out: Path) -> int:
    env = dict(os.environ, MPLBACKEND="Agg")
    env["PYTHONPATH"] = os.pathsep.join([str(source), str(scan.parent)])
    command = [sys.executable, "-m", "branchline", "run", str(scan), "--out", str(out), "--quiet"]
    done = subprocess.run(command, env=env, capture_output=True, text=True, check=False)
    return done.returncode


def _number(text: str) -> float | None:
    try:
        return float(text)
    except ValueError:
        return None


def compare_tables(before: Path, after: Path) -> tuple[str, float]:
    """('identical' | 'within' | a reason, largest relative difference)."""
    if before.read_bytes() == after.read_bytes():
        return "identical", 0.0
    with before.open() as a, after.open() as b:
        rows_a, rows_b = list(csv.reader(a)), list(csv.reader(b))
    if rows_a[0] != rows_b[0]:
        return f"columns differ: {rows_a[0]} / {rows_b[0]}", math.inf
    if len(rows_a) != len(rows_b):
        return f"{len(rows_a) - 1} rows before, {len(rows_b) - 1} after", math.inf
    scales = []
    for column in range(len(rows_a[0])):
        values = [_number(row[column]) for row in rows_a[1:] + rows_b[1:]]
        finite = [abs(v) for v in values if v is not None and math.isfinite(v)]
        scales.append(max(finite, default=0.0))
    worst = 0.0
    for index, (row_a, row_b) in enumerate(zip(rows_a[1:], rows_b[1:]), start=1):
        for column, (cell_a, cell_b) in enumerate(zip(row_a, row_b)):
            if cell_a == cell_b:
                continue
            x, y = _number(cell_a), _number(cell_b)
            if x is None or y is None:
                return f"row {index}, {rows_a[0][column]}: {cell_a!r} / {cell_b!r}", math.inf
            scale = max(abs(x), abs(y), scales[column])
            worst = max(worst, abs(x - y) / scale if scale else 0.0)
    return ("within" if worst <= RTOL else f"differs by {worst:.2e}"), worst


def main(argv: list[str]) -> int:
    base = Path(argv[1]).resolve()
    new = Path(argv[2] if len(argv) > 2 else ROOT / "src").resolve()
    print(f"before: {base}\nafter:  {new}\ntolerance: {RTOL:g} relative\n")
    print(f"{'scan':24} {'exit':>9}  {'points.csv':28} {'events.csv':28} {'cycles.csv':28}")
    bad = 0
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for scan in scan_files(folder):
            codes = [run(src, scan, folder / side / scan.stem) for side, src in
                     (("before", base), ("after", new))]
            cells = []
            for table in ("points.csv", "events.csv", "cycles.csv"):
                a, b = (folder / side / scan.stem / table for side in ("before", "after"))
                if table == "cycles.csv" and not (a.exists() or b.exists()):
                    cells.append("none")  # no [[cycles]] in this scan
                    continue
                if not (a.exists() and b.exists()):
                    verdict, worst = f"missing ({a.exists()}, {b.exists()})", math.inf
                else:
                    verdict, worst = compare_tables(a, b)
                if verdict not in ("identical", "within"):
                    bad += 1
                cells.append(verdict if verdict != "within" else f"within ({worst:.1e})")
            if codes[0] != codes[1]:
                bad += 1
            print(
                f"{scan.stem:24} {codes[0]:>4}/{codes[1]:<4}  {cells[0]:28} {cells[1]:28} "
                f"{cells[2]:28}"
            )
    print("\nall tables agree" if not bad else f"\n{bad} difference(s)")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
