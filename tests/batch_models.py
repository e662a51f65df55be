"""A Python model for the batch tests (``[model.python]``): invented, plumbing only.

x' = a - x^2 + mu x, whose worker process dies on purpose (``os._exit``) when
its parameter ``doom`` is a positive token and the file naming that token
exists in the temporary folder: a deterministic stand-in for a killed worker.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import numpy as np


def doom_flag(token: int) -> Path:
    """The file whose existence makes members with ``doom = token`` kill their worker."""
    return Path(tempfile.gettempdir()) / f"branchline-test-doom-{token}"


def rhs(x, p):
    if p["doom"] > 0 and doom_flag(int(p["doom"])).exists():
        os._exit(3)  # the worker process dies without a word, as a killed one does
    return np.array([p["a"] - x[0] ** 2 + p["mu"] * x[0]])
