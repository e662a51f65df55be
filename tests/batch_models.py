"""A Python model for the batch tests (``[model.python]``): invented, plumbing only.

x' = a - x^2 + mu x, whose worker process dies on purpose (``os._exit``) when
its parameter ``doom`` is a positive token and the file naming that token
exists in the temporary folder: a deterministic stand-in for a killed worker.
"""

from __future__ import annotations

import os
import tempfile
import time
from pathlib import Path

import numpy as np


def doom_flag(token: int) -> Path:
    """The file whose existence makes members with ``doom = token`` kill their worker."""
    return Path(tempfile.gettempdir()) / f"branchline-test-doom-{token}"


def rhs(x, p):
    if p["doom"] > 0 and doom_flag(int(p["doom"])).exists():
        os._exit(3)  # the worker process dies without a word, as a killed one does
    return np.array([p["a"] - x[0] ** 2 + p["mu"] * x[0]])


def stall_flag(token: int) -> Path:
    """While this file exists, members with ``stall = token`` wait in their rhs."""
    return Path(tempfile.gettempdir()) / f"branchline-test-stall-{token}"


def running_marker(token: int, pid: int) -> Path:
    """Written by a worker process whose member waits (its pid in the name)."""
    return Path(tempfile.gettempdir()) / f"branchline-test-running-{token}-{pid}"


# Longest wait of a stalled member (seconds): the test removes the flag well before.
STALL_SECONDS = 60.0


def stalling_rhs(x, p):
    """x' = a - x^2 + mu x; while the stall flag exists, a member with ``stall``
    set announces its worker's pid and waits (so the test can kill that worker
    in the middle of the member)."""
    token = int(p["stall"])
    if token > 0 and stall_flag(token).exists():
        running_marker(token, os.getpid()).touch()
        waited = 0.0
        while stall_flag(token).exists() and waited < STALL_SECONDS:
            time.sleep(0.05)
            waited += 0.05
    return np.array([p["a"] - x[0] ** 2 + p["mu"] * x[0]])
