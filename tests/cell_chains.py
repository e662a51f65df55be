"""Chains of identical cells coupled by diffusion, with closed-form events (test models).

Cells i = 0 .. m-1 on a path with no-flux ends: the coupling term of cell i is
d (z_{i-1} - 2 z_i + z_{i+1}) with z_{-1} = z_0 and z_m = z_{m-1}. Its matrix has
the eigenvalues -mu_k, mu_k = 4 sin^2(k pi / (2 m)), k = 0 .. m-1 (the discrete
cosine modes; Strang, "The discrete cosine transform", SIAM Review 41 (1999),
section 2, from memory; checked numerically in the tests). On a uniform state the
Jacobian splits into one block per mode, J_k = J_cell - d mu_k I, so every event
of the chain is an event of one block, in closed form:

- Brusselator cells (Prigogine & Lefever, "Symmetry breaking instabilities in
  dissipative systems II", J. Chem. Phys. 48 (1968) 1695; equal diffusion of both
  species): u' = a - (b + 1) u + u^2 v, v' = b u - u^2 v, uniform state (a, b/a).
  Mode k has trace b - 1 - a^2 - 2 d mu_k, so a Hopf point at
  b_k = 1 + a^2 + 2 d mu_k with frequency omega_k^2 = a^2 - d^2 mu_k^2.
- Cubic bistable cells (the Schloegl model, Schloegl, "Chemical reaction models
  for non-equilibrium phase transitions", Z. Physik 253 (1972) 147, in the normal
  form x' = p + x - x^3 an affine change of variables gives it): the uniform
  branch p = x^3 - x has its folds where 1 - 3 x^2 = 0 and mode k crosses zero
  where 1 - 3 x^2 = d mu_k (a branch point of the chain, beside the fold).
"""

from __future__ import annotations

import math

import numpy as np

BRUSSELATOR_CELLS = 20  # the Python model below: 40 states


def mode_rates(cells: int) -> list[float]:
    """mu_k = 4 sin^2(k pi / (2 m)), k = 0 .. m - 1."""
    return [4.0 * math.sin(k * math.pi / (2 * cells)) ** 2 for k in range(cells)]


def _coupling(name: str, i: int, cells: int) -> str:
    left, right = f"{name}{max(i - 1, 0)}", f"{name}{min(i + 1, cells - 1)}"
    return f"({left} - 2*{name}{i} + {right})"


def brusselator_equations(cells: int) -> dict[str, str]:
    equations = {}
    for i in range(cells):
        equations[f"u{i}"] = f"a - (b + 1)*u{i} + u{i}^2*v{i} + d*{_coupling('u', i, cells)}"
        equations[f"v{i}"] = f"b*u{i} - u{i}^2*v{i} + d*{_coupling('v', i, cells)}"
    return equations


def cubic_equations(cells: int) -> dict[str, str]:
    return {f"x{i}": f"p + x{i} - x{i}^3 + d*{_coupling('x', i, cells)}" for i in range(cells)}


def _coupled(z: np.ndarray) -> np.ndarray:
    out = np.empty_like(z)
    out[1:-1] = z[:-2] - 2.0 * z[1:-1] + z[2:]
    out[0] = z[1] - z[0]
    out[-1] = z[-2] - z[-1]
    return out


def brusselator_rhs(x: np.ndarray, p: dict) -> np.ndarray:
    """The Brusselator chain as a Python model: states (u0, v0, u1, v1, ...)."""
    u, v = x[0::2], x[1::2]
    a, b, d = p["a"], p["b"], p["d"]
    f = np.empty_like(x)
    f[0::2] = a - (b + 1.0) * u + u * u * v + d * _coupled(u)
    f[1::2] = b * u - u * u * v + d * _coupled(v)
    return f


def coupling_matrix(cells: int) -> np.ndarray:
    """The coupling of a path of cells with no-flux ends, (cells, cells) dense."""
    coupling = np.zeros((cells, cells))
    for i in range(cells):
        coupling[i, max(i - 1, 0)] += 1.0
        coupling[i, min(i + 1, cells - 1)] += 1.0
        coupling[i, i] -= 2.0
    return coupling


def brusselator_jacobian(x: np.ndarray, p: dict, coupling: np.ndarray | None = None) -> np.ndarray:
    """Exact df/dx of :func:`brusselator_rhs` (dense); ``coupling`` may be given precomputed."""
    u, v = x[0::2], x[1::2]
    b, d = p["b"], p["d"]
    size = x.shape[0]
    if coupling is None:
        coupling = coupling_matrix(size // 2)
    jac = np.zeros((size, size))
    jac[0::2, 0::2] = d * coupling + np.diag(-(b + 1.0) + 2.0 * u * v)
    jac[0::2, 1::2] = np.diag(u * u)
    jac[1::2, 0::2] = np.diag(b - 2.0 * u * v)
    jac[1::2, 1::2] = d * coupling + np.diag(-u * u)
    return jac


def brusselator_start(p: dict) -> np.ndarray:
    """The uniform state (a, b/a) in every cell."""
    x = np.empty(2 * BRUSSELATOR_CELLS)
    x[0::2] = p["a"]
    x[1::2] = p["b"] / p["a"]
    return x
