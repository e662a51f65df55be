"""Python models for the two-parameter boundary tests (``[model.python]`` references).

A long chain driven by the cusp normal form: x0' = a + b x0 - x0^3 and
x_i' = r_i (x_(i-1) - x_i) with distinct rates r_i, so that every equilibrium has
x_i = x0 and the fold curve
in (a, b) is the cusp's, 27 a^2 = 4 b^3 (Kuznetsov, Elements of Applied
Bifurcation Theory, section 8.2), whatever the chain's length. Its Jacobian is
sparse (lower bidiagonal). Invented for tests only.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse

CHAIN_SIZE = 320
RATES = np.arange(1.0, CHAIN_SIZE)  # well separated: shift-invert Arnoldi converges fast


def cusp_fold_scan(a=0.05, x=1.2, b_low=-0.5, largest_step=None):
    """Scan of the cusp normal form x' = a + b x - x^3 traced in a, with its fold curve in (a, b).

    The fold curve is 27 a^2 = 4 b^3 with the cusp at a = b = 0 (Kuznetsov, Elements of
    Applied Bifurcation Theory, section 8.2). The arguments are the starting a and x, the lower
    edge of the window in b and, optionally, the boundary's largest step.
    """
    boundary = {
        "name": "folds",
        "from": "line",
        "kind": "fold",
        "index": 1,
        "second": "b",
        "window": {"a": [-1.0, 1.0], "b": [b_low, 2.0]},
    }
    if largest_step is not None:
        boundary["steps"] = {"largest": largest_step}
    return {
        "model": {"parameters": {"a": a, "b": 1.0}, "equations": {"x": "a + b*x - x^3"}},
        "trace": [{"name": "line", "vary": "a", "interval": [-1.0, 1.0], "start": {"x": x}}],
        "boundary": [boundary],
    }


def chain_rhs(x, p):
    out = np.empty_like(x)
    out[0] = p["a"] + p["b"] * x[0] - x[0] ** 3
    out[1:] = RATES * (x[:-1] - x[1:])
    return out


def chain_jacobian(x, p):
    diagonal = np.concatenate([[p["b"] - 3.0 * x[0] ** 2], -RATES])
    return scipy.sparse.diags([diagonal, RATES], [0, -1], format="csc")


def chain_start(p):
    return np.full(CHAIN_SIZE, 1.2)
