"""Normal-form coefficients of a Hopf point up to fifth order: l1 and l2.

The centre-manifold and normal-form coefficients are computed together by
solving the homological equation order by order (Kuznetsov, Elements of
Applied Bifurcation Theory, 3rd ed., sections 3.5, 8.3 and 8.7; the method,
not a recalled formula): with x = x0 + H(z, zbar),
H = sum h_jk z^j zbar^k / (j! k!), h_10 = q, h_01 = conj(q), and the normal
form z' = i omega z + g_21 z^2 zbar / 2 + g_32 z^3 zbar^2 / 12, the coefficient
of z^j zbar^k of A H + F(H) = H_z z' + H_zbar zbar' gives

    (i (j - k) omega - A) h_jk / (j! k!) = N_jk - (lower normal-form terms) - [j - k = 1] q g_jk / (j! k!)

where N_jk collects the multilinear forms of f (B, C, D, E) on the lower h's.
Resonant orders (j - k = 1) give g_jk = j! k! <p, right side> (p^H (i omega - A) = 0,
<p, q> = 1) and h_jk with <p, h_jk> = 0. Then c1 = g_21 / 2, c2 = g_32 / 12,
l1 = Re(c1) / omega and l2 = Re(c2) / omega (l2 is meaningful where l1 = 0,
a Bautin point), with the interface contract's scaling <q, q> = 1/2, under which
z' = i z + s z |z|^4 in the plane gives l2 = s.

The fourth and fifth derivatives come from the model when it has them
(``model.fourth``, ``model.fifth``: exact, expression models), otherwise from
central differences of its third derivative. Large sparse models
(``Model.state_jacobian`` sparse) solve with sparse LU and find q and p by
shift-invert Arnoldi: no n x n dense array.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from math import factorial

import numpy as np
import scipy.sparse as sps

from branchline.events.normal_forms import _orient
from branchline.numerics.eigenvalues import eigenvector_near
from branchline.numerics.linalg import solve

Array = np.ndarray

# Relative steps of the differences of C that stand in for D and E without exact
# forms: eps**(1/3) for a first central difference, eps**(1/4) for the mixed
# second one (truncation h^2 against rounding eps/h or eps/h^2; Nocedal & Wright,
# Numerical Optimization, 2nd ed., section 8.1).
FOURTH_STEP = float(np.finfo(float).eps) ** (1.0 / 3.0)
FIFTH_STEP = float(np.finfo(float).eps) ** (1.0 / 4.0)


@dataclass(frozen=True)
class HopfCoefficients:
    """l1, l2 and the complex coefficients c1, c2 of z' = i omega z + c1 z|z|^2 + c2 z|z|^4."""

    frequency: float
    c1: complex
    c2: complex
    lyapunov: float
    second_lyapunov: float


def _forms(model, x: Array, params: Array) -> dict:
    """The multilinear forms of order 2..5 at (x, params), as callables on vectors."""
    third = model.third

    def fourth(a, b, c, d):
        exact = getattr(model, "fourth", None)
        if exact is not None:
            return exact(x, params, a, b, c, d)
        return _along(lambda y: third(y, params, a, b, c), x, d, FOURTH_STEP)

    def fifth(a, b, c, d, e):
        exact = getattr(model, "fifth", None)
        if exact is not None:
            return exact(x, params, a, b, c, d, e)
        return _along(
            lambda y: _along(lambda w: third(w, params, a, b, c), y, e, FIFTH_STEP),
            x,
            d,
            FIFTH_STEP,
        )

    return {
        2: lambda a, b: model.second(x, params, a, b),
        3: lambda a, b, c: third(x, params, a, b, c),
        4: fourth,
        5: fifth,
    }


def _along(function, x: Array, direction: Array, relative: float) -> Array:
    """Central difference of ``function`` at x along a (possibly complex) direction."""
    if np.iscomplexobj(direction):
        real = _along(function, x, direction.real, relative)
        return real + 1j * _along(function, x, direction.imag, relative)
    size = float(np.linalg.norm(direction))
    if size == 0.0:
        return 0.0 * np.asarray(function(x))
    h = relative * max(1.0, float(np.linalg.norm(x))) / size
    return (np.asarray(function(x + h * direction)) - np.asarray(function(x - h * direction))) / (
        2.0 * h
    )


def _orders(j: int, k: int):
    """The monomials (a, b) needed below (j, k), in order of degree."""
    return sorted(
        ((a, b) for a in range(j + 1) for b in range(k + 1) if 1 <= a + b and (a, b) != (j, k)),
        key=lambda ab: (ab[0] + ab[1], ab),
    )


def _nonlinear(forms, h: dict, j: int, k: int) -> Array:
    """Coefficient of z^j zbar^k in sum_m F^(m)(W, ..., W) / m!, W = sum h_ab z^a zbar^b/(a! b!)."""
    total = 0.0
    pieces = [ab for ab in h if ab[0] <= j and ab[1] <= k]
    for m in range(2, min(j + k, 5) + 1):
        for combination in itertools.combinations_with_replacement(pieces, m):
            if (sum(a for a, _ in combination), sum(b for _, b in combination)) != (j, k):
                continue
            orderings = len(set(itertools.permutations(combination)))
            weight = orderings / factorial(m)
            for a, b in combination:
                weight /= factorial(a) * factorial(b)
            total = total + weight * np.asarray(forms[m](*[h[ab] for ab in combination]))
    return total


def _normal_form_terms(h: dict, g: dict, omega: float, j: int, k: int) -> Array:
    """Coefficient of z^j zbar^k in H_z z' + H_zbar zbar' from the nonlinear normal-form terms
    already known (g_21 with the lower h's; the q g_jk term is handled by the caller)."""
    total = 0.0
    for (c, d), value in g.items():
        scale = value / (factorial(c) * factorial(d))
        for (a, b), vector in h.items():
            base = vector / (factorial(a) * factorial(b))
            if (a - 1 + c, b + d) == (j, k) and a > 0 and (a, b) != (1, 0):
                total = total + a * base * scale
            if (a + d, b - 1 + c) == (j, k) and b > 0 and (a, b) != (0, 1):
                total = total + b * base * np.conj(scale)
    return total


def hopf_coefficients(model, x: Array, params: Array, omega: float) -> HopfCoefficients:
    """c1, c2, l1, l2 of the Hopf point (x, params) with frequency omega > 0.

    Parameters
    ----------
    model : branchline.model.build.Model
    x : ndarray (n,)
    params : ndarray (m,)
    omega : float
        The imaginary part of the critical pair.
    """
    a_matrix = model.state_jacobian(x, params)
    n = a_matrix.shape[0]
    sparse = sps.issparse(a_matrix)
    eye = sps.identity(n, format="csc") if sparse else np.eye(n)
    _, q = eigenvector_near(a_matrix, 1j * omega)
    _, p = eigenvector_near(sps.csc_matrix(a_matrix.T) if sparse else a_matrix.T, -1j * omega)
    q = _orient(np.asarray(q, dtype=complex))
    q = q / np.sqrt(2.0 * np.vdot(q, q).real)
    p = p / np.conj(np.vdot(p, q))
    forms = _forms(model, x, params)
    h = {(1, 0): q, (0, 1): q.conj()}
    g: dict = {}
    for j, k in [(2, 0), (1, 1), (3, 0), (2, 1), (3, 1), (2, 2), (3, 2)]:
        known = {ab: h[ab] for ab in _orders(j, k) if ab in h}
        scale = factorial(j) * factorial(k)
        right = _nonlinear(forms, known, j, k) - _normal_form_terms(known, g, omega, j, k)
        if j - k == 1:
            g[(j, k)] = scale * np.vdot(p, right)
            right = right - q * g[(j, k)] / scale
            shifted = 1j * omega * eye - a_matrix
            if sparse:
                bordered = sps.bmat(
                    [[shifted, sps.csc_matrix(q[:, None])], [sps.csr_matrix(p.conj()[None, :]), None]],
                    format="csc",
                )
            else:
                bordered = np.block([[shifted, q[:, None]], [p.conj()[None, :], np.zeros((1, 1))]])
            h[(j, k)] = scale * solve(bordered, np.append(right, 0.0))[:n]
        else:
            shifted = 1j * (j - k) * omega * eye - a_matrix
            h[(j, k)] = scale * solve(sps.csc_matrix(shifted) if sparse else shifted, right)
        h[(k, j)] = np.conj(h[(j, k)])
    c1, c2 = g[(2, 1)] / 2.0, g[(3, 2)] / 12.0
    return HopfCoefficients(omega, c1, c2, c1.real / omega, c2.real / omega)
