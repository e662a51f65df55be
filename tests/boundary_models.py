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


def _cells(x, *directions):
    """Per-cell (u, v) pairs of the state and of each direction, and s(a, b) = u_a u_b + v_a v_b."""
    cells = x.shape[0] // 2
    pairs = [(d[:cells], d[cells:]) for d in (x, *directions)]

    def s(a, b):
        return a[0] * b[0] + a[1] * b[1]

    return pairs, s


def bautin_cells_second(x, p, a, b):
    """B(a, b) of :func:`bautin_cells_rhs` (the coupling is linear): with R = |z|^2 per cell
    and rho(R) = beta1 + beta2 R - R^2, d^2 (rho z)[a, b] = rho'' (2 s_za)(2 s_zb) z
    + 2 rho' (s_ab z + s_za b + s_zb a)."""
    (z, a, b), s = _cells(x, a, b)
    slope = p["beta2"] - 2.0 * s(z, z)  # rho'(R); rho'' = -2
    sza, szb, sab = s(z, a), s(z, b), s(a, b)
    out = [
        -8.0 * sza * szb * z[k] + 2.0 * slope * (sab * z[k] + sza * b[k] + szb * a[k])
        for k in (0, 1)
    ]
    return np.concatenate(out)


def bautin_cells_third(x, p, a, b, c):
    """C(a, b, c) of :func:`bautin_cells_rhs`: the derivative of B(a, b) along c."""
    (z, a, b, c), s = _cells(x, a, b, c)
    slope = p["beta2"] - 2.0 * s(z, z)
    sza, szb, szc = s(z, a), s(z, b), s(z, c)
    sab, sac, sbc = s(a, b), s(a, c), s(b, c)
    out = [
        -8.0 * (sbc * sza + szb * sac + szc * sab) * z[k]
        - 8.0 * (sza * szb * c[k] + szc * sza * b[k] + szc * szb * a[k])
        + 2.0 * slope * (sab * c[k] + sac * b[k] + sbc * a[k])
        for k in (0, 1)
    ]
    return np.concatenate(out)


def takens_cells_rhs(x, p):
    """The Bogdanov-Takens normal form in each cell, x' = y, y' = b1 + b2 x + x^2 - x y
    (Kuznetsov, Elements of Applied Bifurcation Theory, section 8.4), states
    (x_0 .. x_(m-1), y_0 .. y_(m-1)), coupled by diffusion d."""
    cells = x.shape[0] // 2
    u, v = x[:cells], x[cells:]
    coupling = _coupling(cells)
    return np.concatenate(
        [
            v + p["d"] * (coupling @ u),
            p["b1"] + p["b2"] * u + u * u - u * v + p["d"] * (coupling @ v),
        ]
    )


def takens_cells_jacobian(x, p):
    cells = x.shape[0] // 2
    u, v = x[:cells], x[cells:]
    coupling = p["d"] * _coupling(cells)
    return scipy.sparse.bmat(
        [
            [coupling, scipy.sparse.identity(cells)],
            [scipy.sparse.diags(p["b2"] + 2.0 * u - v), scipy.sparse.diags(-u) + coupling],
        ],
        format="csc",
    )
