"""Python models with a fault injected past F = 0.3 (tests/test_faults.py).

The healthy model: x0' = x0 (1 - x0) - F x0, x1' = -x1, so x0 = 1 - F along
the traced branch for F in [0, 1). Each fault switches on once F > FAULT_AT,
part-way along a trace that starts at F = 0.
"""

from __future__ import annotations

import sys
import time

import numpy as np
import scipy.sparse

FAULT_AT = 0.3


def healthy(x, p):
    return np.array([x[0] * (1.0 - x[0]) - p["F"] * x[0], -x[1]])


def healthy_jacobian(x, p):
    return np.array([[1.0 - 2.0 * x[0] - p["F"], 0.0], [0.0, -1.0]])


def _past(p):
    return p["F"] > FAULT_AT


def nan_past(x, p):
    return np.array([np.nan, np.nan]) if _past(p) else healthy(x, p)


def inf_past(x, p):
    return np.array([np.inf, 0.0]) if _past(p) else healthy(x, p)


def raise_past(x, p):
    if _past(p):
        raise RuntimeError("the sensor table ends here")
    return healthy(x, p)


def exit_past(x, p):
    if _past(p):
        sys.exit(3)
    return healthy(x, p)


def wrong_shape_past(x, p):
    return np.zeros(3) if _past(p) else healthy(x, p)


def dict_past(x, p):
    return {"x0": 0.0} if _past(p) else healthy(x, p)


def object_array_past(x, p):
    return np.array([object(), 1.0], dtype=object) if _past(p) else healthy(x, p)


def jacobian_wrong_shape_past(x, p):
    return np.zeros((3, 3)) if _past(p) else healthy_jacobian(x, p)


def sparse_jacobian_wrong_shape_past(x, p):
    size = 3 if _past(p) else 2
    if size == 2:
        return scipy.sparse.csr_matrix(healthy_jacobian(x, p))
    return scipy.sparse.identity(size, format="csr")


def singular_jacobian_past(x, p):
    # A Jacobian that turns singular (here: all zeros) part-way along a regular branch.
    return np.zeros((2, 2)) if _past(p) else healthy_jacobian(x, p)


def complex_rhs(x, p):
    return healthy(x, p) + 1e-3j


def raises_at_start(x, p):
    raise KeyError("calibration 'K7' missing")


def observables_list(x, p):
    return [x[0], x[1]]


def observables_raise_past(x, p):
    if _past(p):
        raise ZeroDivisionError("flow is zero")
    return {"biomass": float(x[0])}


def coupled(x, p):
    # x1 feeds x0 with strength F: zero at the start F = 0, so a transposed
    # Jacobian agrees with the true one there and nowhere else.
    return np.array([x[0] * (1.0 - x[0]) - p["F"] * x[0] + p["F"] * x[1], -x[1]])


def coupled_jacobian_transposed(x, p):
    return np.array([[1.0 - 2.0 * x[0] - p["F"], p["F"]], [0.0, -1.0]]).T


def healthy_jacobian_doubled(x, p):
    return 2.0 * healthy_jacobian(x, p)


def sleepy_past(x, p):
    # past the fault each call takes 0.2 s: over a call_time_limit of 0.05 s
    if _past(p):
        time.sleep(0.2)
    return healthy(x, p)


def hangs_past(x, p):
    # past the fault a call would take 60 s: the run's time_limit cuts it off
    if _past(p):
        time.sleep(60.0)
    return healthy(x, p)
