"""A chain of Brusselator cells coupled by diffusion, as a sparse Python model (test model).

Cells i = 0 .. c-1 on a path with no-flux ends (the coupling of
:mod:`cell_chains`), states (u0, v0, u1, v1, ...):

    u_i' = a_i - (b + 1) u_i + u_i^2 v_i + d (u_(i-1) - 2 u_i + u_(i+1)),
    v_i' = b u_i - u_i^2 v_i + d (v_(i-1) - 2 v_i + v_(i+1)),

with a_i = a (1 + ramp (i / (c - 1) - 1/2)) (Prigogine and Lefever, "Symmetry
breaking instabilities in dissipative systems II", J. Chem. Phys. 48, 1968, for
the cell). With ramp = 0 the uniform state (a, b / a) and the single cell's
orbits are solutions of the chain (the uniform subspace is invariant); with
ramp > 0 the orbit differs from cell to cell.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
import scipy.sparse as sp

from branchline.model.build import build_model
from branchline.scan.loader import PythonModelSpec
from cell_chains import _coupled  # the discrete Neumann Laplacian of one species


def _feeds(cells: int, p) -> np.ndarray:
    if cells == 1:
        return np.array([p["a"]])
    return p["a"] * (1.0 + p["ramp"] * (np.arange(cells) / (cells - 1) - 0.5))


def chain_rhs(x, p):
    u, v = x[0::2], x[1::2]
    b, d = p["b"], p["d"]
    f = np.empty_like(x)
    f[0::2] = _feeds(u.shape[0], p) - (b + 1.0) * u + u * u * v + d * _coupled(u)
    f[1::2] = b * u - u * u * v + d * _coupled(v)
    return f


@lru_cache(maxsize=8)
def _coupling(cells: int, d: float) -> sp.csr_matrix:
    """d times the path coupling acting on both species, (2 c, 2 c)."""
    main = -2.0 * np.ones(cells)
    main[0] = main[-1] = -1.0
    path = sp.diags([np.ones(cells - 1), main, np.ones(cells - 1)], [-1, 0, 1])
    return (d * sp.kron(path, sp.identity(2))).tocsr()


def chain_jacobian(x, p):
    u, v = x[0::2], x[1::2]
    b = p["b"]
    diagonal = np.empty_like(x)
    diagonal[0::2] = -(b + 1.0) + 2.0 * u * v
    diagonal[1::2] = -u * u
    upper = np.zeros(x.shape[0] - 1)
    upper[0::2] = u * u
    lower = np.zeros(x.shape[0] - 1)
    lower[0::2] = b - 2.0 * u * v
    cell = sp.diags([lower, diagonal, upper], [-1, 0, 1], format="csr")
    return (cell + _coupling(u.shape[0], float(p["d"]))).tocsc()


def chain_model(cells: int, b: float, d: float, ramp: float, policy=None):
    """The chain of ``cells`` cells (2 cells states) with a = 1."""
    model = build_model(
        PythonModelSpec(
            parameters={"a": 1.0, "b": b, "d": d, "ramp": ramp},
            rhs="sparse_chain:chain_rhs",
            jacobian="sparse_chain:chain_jacobian",
            size=2 * cells,
        )
    )
    if policy is not None:
        from dataclasses import replace

        model = replace(model, linear_algebra=policy)
    return model


def uniform_hopf(model, cells: int):
    """The Hopf point of the uniform chain (ramp = 0, a = 1) in closed form, as an Event.

    The uniform mode is the single cell's linearization: Hopf at b = 1 + a^2 with
    frequency a and eigenvector (a^2, -a^2 + i a) in every cell (Prigogine and
    Lefever 1968; trace b - 1 - a^2 and determinant a^2 of the cell's Jacobian).
    """
    from branchline.results.records import Event

    a = 1.0
    b = 1.0 + a * a
    state = np.empty(2 * cells)
    state[0::2], state[1::2] = a, b / a
    cell = np.array([a * a, -a * a + 1j * a])
    vector = np.tile(cell, cells)
    parameters = model.defaults.copy()
    parameters[model.parameter_index("b")] = b
    return Event(
        trace="rest",
        kind="hopf",
        vary="b",
        value=b,
        state=state,
        parameters=parameters,
        arclength=0.0,
        frequency=a,
        details={"eigenvectors": {"right": [[z.real, z.imag] for z in vector]}},
    )
