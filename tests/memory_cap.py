"""Run code in a subprocess whose address space is capped, so that one dense n x n array
would fail (the pattern of the sparse-path memory tests).

``setup`` runs first, uncapped (imports and model building); then the address space is
capped at its size plus ``headroom`` bytes, the cap is shown to refuse one dense
``size`` x ``size`` array (first line printed: "dense refused" or "dense fits"), and
``body`` runs. Both see numpy as ``np`` and src/ and tests/ on the path.
"""

from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

TESTS = Path(__file__).resolve().parent

_PROGRAM = """
import resource, sys
sys.path[:0] = [{src!r}, {tests!r}]
import numpy as np
{setup}
size_kb = next(int(line.split()[1]) for line in open("/proc/self/status")
               if line.startswith("VmSize:"))
cap = size_kb * 1024 + {headroom}
resource.setrlimit(resource.RLIMIT_AS, (cap, cap))
try:  # the cap is tight enough: one dense n x n array does not fit
    np.eye({size})
    print("dense fits")
except MemoryError:
    print("dense refused")
{body}
"""


def run_under_memory_cap(setup: str, body: str, size: int, headroom: int) -> list[str]:
    """The lines the capped run printed; fails the calling test if the run failed."""
    code = _PROGRAM.format(
        src=str(TESTS.parent / "src"),
        tests=str(TESTS),
        setup=textwrap.dedent(setup),
        body=textwrap.dedent(body),
        size=int(size),
        headroom=int(headroom),
    )
    done = subprocess.run(
        [sys.executable, "-c", code],
        capture_output=True,
        text=True,
        timeout=600,
        env={"OPENBLAS_NUM_THREADS": "1", "PATH": "/usr/bin:/bin"},
    )
    assert done.returncode == 0, done.stderr[-2000:]
    return done.stdout.splitlines()
