"""Stiff reaction-diffusion models as [model.python] modules (test helpers).

Brusselator (functions ``rhs``, ``jacobian``, ``second``, ``third``): the
Brusselator (Prigogine & Lefever, "Symmetry breaking instabilities in
dissipative systems II", J. Chem. Phys. 48 (1968) 1695) on N equally spaced
nodes of [0, 1] with no-flux ends (ghost-point rows, h = 1 / (N - 1)):

    u' = a - (b + 1) u + u^2 v + d1 (D u),   v' = b u - u^2 v + d2 (D v),

states ordered (u_0 .. u_{N-1}, v_0 .. v_{N-1}). With d1 / h^2 near 1e7 the
diffusion entries of the Jacobian are about 1e7 beside reaction terms of order
one: the stiff case of the large-model measurements. The uniform state
(a, b / a) is an exact equilibrium of the discrete model (D annihilates
constants), and the uniform mode's linearization is the single cell's, with a
Hopf point at b = 1 + a^2 and frequency a (Prigogine & Lefever 1968).

``second`` and ``third`` are the exact directional derivatives (the optional
``[model.python]`` functions of the same role): only u^2 v is nonlinear, so
B(v, w) and C(u, v, w) are its second and third derivatives, identical in the
u and v rows up to sign.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
import scipy.sparse as sp

from test_sparse_eigen import brusselator_jacobian, brusselator_rhs


@lru_cache(maxsize=8)
def second_difference(nodes: int) -> sp.csr_matrix:
    """The ghost-point Neumann second-difference matrix (entries 1, -2, 1; 2 at the ends)."""
    main = -2.0 * np.ones(nodes)
    off = np.ones(nodes - 1)
    lap = sp.diags([off, main, off], [-1, 0, 1], format="lil")
    lap[0, 1] = 2.0
    lap[nodes - 1, nodes - 2] = 2.0
    return lap.tocsr()


@lru_cache(maxsize=8)
def _profile(nodes: int) -> np.ndarray:
    return np.cos(np.pi * np.linspace(0.0, 1.0, nodes))


# The Brusselator's f and df/dx are those of the sparse-eigenvalue tests (same equations).
rhs = brusselator_rhs
jacobian = brusselator_jacobian


def second(x, p, v, w):
    """B(v, w) = d^2/ds dt f(x + s v + t w): of u^2 v only, 2 (v_u w_u v + u v_u w_v + u w_u v_v)."""
    nodes = x.shape[0] // 2
    u, vv = x[:nodes], x[nodes:]
    v1, v2, w1, w2 = v[:nodes], v[nodes:], w[:nodes], w[nodes:]
    term = 2.0 * (v1 * w1 * vv + u * v1 * w2 + u * w1 * v2)
    return np.concatenate([term, -term])


def third(x, p, u3, v, w):
    """C(u, v, w) of u^2 v: 2 (a1 b1 c2 + a1 c1 b2 + b1 c1 a2) for directions a, b, c."""
    nodes = x.shape[0] // 2
    a1, a2 = u3[:nodes], u3[nodes:]
    b1, b2 = v[:nodes], v[nodes:]
    c1, c2 = w[:nodes], w[nodes:]
    term = 2.0 * (a1 * b1 * c2 + a1 * c1 * b2 + b1 * c1 * a2)
    return np.concatenate([term, -term])


def uniform_state(nodes: int, a: float, b: float) -> np.ndarray:
    """The exact uniform equilibrium (u, v) = (a, b / a) on every node."""
    return np.concatenate([np.full(nodes, a), np.full(nodes, b / a)])


# ---------------------------------------------------------------------------
# A stiff bistable chain (functions chain_*)
#
# x_i' = k (D x)_i + x_i - x_i^3 + p w_i on N nodes with the same ghost-point
# Neumann second difference D (unscaled: k plays d / h^2), the cubic kinetics of
# a bistable medium (the Schloegl/Nagumo kinetics, our own parametrization) and
# a forcing profile w_i = 1 + ripple cos(pi s_i). With ripple = 0 the uniform state
# solves x - x^3 + p = 0, whose folds lie at x = +-1/sqrt(3), p = -+2 / (3 sqrt(3))
# (elementary). With ripple > 0 the equilibrium is not uniform, so the
# coupling terms k x_{i+-1} and -2 k x_i (about 1e7 each) no longer cancel
# exactly and f carries rounding of about eps k |x| in every row: the residual
# cannot go below about 1e-9 however exact the iterate.


def chain_rhs(x, p):
    nodes = x.shape[0]
    forcing = 1.0 + p.get("ripple", 0.0) * _profile(nodes)
    return p["k"] * (second_difference(nodes) @ x) + x - x**3 + p["p"] * forcing


def chain_jacobian(x, p):
    return (p["k"] * second_difference(x.shape[0]) + sp.diags(1.0 - 3.0 * x * x)).tocsr()


def chain_second(x, p, v, w):
    """B(v, w) of the chain: only -x^3 is nonlinear."""
    return -6.0 * x * v * w


def chain_third(x, p, u, v, w):
    """C(u, v, w) of the chain."""
    return -6.0 * u * v * w


def chain_start(p):
    """A start guess for the 50-node chain of the scan-file test (lower state)."""
    return np.full(50, -1.3)
