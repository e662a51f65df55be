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


# ---------------------------------------------------------------------------
# chains of identical cells coupled by diffusion (no-flux ends), sparse Jacobians:
# on a uniform state the Jacobian splits into one block per discrete cosine mode,
# J_cell - d mu_k, and the uniform mode (mu_0 = 0) is the single cell's linearization
# (tests/cell_chains.py). Invented for tests only.


def path_coupling(cells: int) -> scipy.sparse.csr_matrix:
    """z_(i-1) - 2 z_i + z_(i+1) with z_(-1) = z_0, z_m = z_(m-1), (cells, cells) sparse."""
    off = np.ones(cells - 1)
    main = -2.0 * np.ones(cells)
    main[[0, -1]] = -1.0
    return scipy.sparse.diags([off, main, off], [-1, 0, 1], format="csr")


_COUPLINGS: dict[int, scipy.sparse.csr_matrix] = {}


def _coupling(cells: int) -> scipy.sparse.csr_matrix:
    if cells not in _COUPLINGS:
        _COUPLINGS[cells] = path_coupling(cells)
    return _COUPLINGS[cells]


def cusp_cells_rhs(x, p):
    """x_i' = a + b x_i - x_i^3 + d (coupling x)_i (the cusp normal form in each cell)."""
    return p["a"] + p["b"] * x - x**3 + p["d"] * (_coupling(x.shape[0]) @ x)


def cusp_cells_jacobian(x, p):
    return (scipy.sparse.diags(p["b"] - 3.0 * x * x) + p["d"] * _coupling(x.shape[0])).tocsc()


def bautin_cells_rhs(x, p):
    """The Bautin normal form in each cell, z' = (beta1 + i) z + beta2 z |z|^2 - z |z|^4
    with z = x + i y (Kuznetsov, Elements of Applied Bifurcation Theory, section 8.3),
    states (x_0 .. x_(m-1), y_0 .. y_(m-1)), coupled by diffusion d."""
    cells = x.shape[0] // 2
    u, v = x[:cells], x[cells:]
    r2 = u * u + v * v
    radial = p["beta1"] + p["beta2"] * r2 - r2 * r2
    coupling = _coupling(cells)
    return np.concatenate(
        [radial * u - v + p["d"] * (coupling @ u), u + radial * v + p["d"] * (coupling @ v)]
    )


def bautin_cells_jacobian(x, p):
    cells = x.shape[0] // 2
    u, v = x[:cells], x[cells:]
    r2 = u * u + v * v
    radial = p["beta1"] + p["beta2"] * r2 - r2 * r2
    slope = 2.0 * p["beta2"] - 4.0 * r2  # d radial / d(r^2) times 2
    uu = radial + slope * u * u
    vv = radial + slope * v * v
    uv = slope * u * v
    coupling = p["d"] * _coupling(cells)
    return scipy.sparse.bmat(
        [
            [scipy.sparse.diags(uu) + coupling, scipy.sparse.diags(uv - 1.0)],
            [scipy.sparse.diags(uv + 1.0), scipy.sparse.diags(vv) + coupling],
        ],
        format="csc",
    )
