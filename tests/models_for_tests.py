"""Small Python models used by tests/test_model.py (``[model.python]`` references).

Invented models, for plumbing checks in tests only (not data about any real system).
The references they are checked against are independent of branchline: ``EXPRESSIONS``
states the same three-state model as expression text, so that finite differences on
the Python version are checked against exact sympy derivatives of the expression
version; the chain's hand-written sparse Jacobian is checked against finite
differences and against its elementary second derivative -2 r v w.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse

from branchline.model.build import Model

# The three-state model, as scan-file expressions (parameters a, b, c).
EXPRESSIONS = {
    "x0": "a - (b + 1)*x0 + x0^2*x1 + c*sin(x2)",
    "x1": "b*x0 - x0^2*x1 + 0.1*exp(-x2^2)",
    "x2": "-x2 + a*tanh(x0)*x1 - c*x2^3",
}
PARAMETERS = {"a": 1.2, "b": 2.5, "c": 0.3}


def rhs(x, p):
    x0, x1, x2 = x
    a, b, c = p["a"], p["b"], p["c"]
    return np.array(
        [
            a - (b + 1.0) * x0 + x0**2 * x1 + c * np.sin(x2),
            b * x0 - x0**2 * x1 + 0.1 * np.exp(-(x2**2)),
            -x2 + a * np.tanh(x0) * x1 - c * x2**3,
        ]
    )


def jacobian(x, p):
    x0, x1, x2 = x
    a, b, c = p["a"], p["b"], p["c"]
    sech2 = 1.0 / np.cosh(x0) ** 2
    return np.array(
        [
            [-(b + 1.0) + 2.0 * x0 * x1, x0**2, c * np.cos(x2)],
            [b - 2.0 * x0 * x1, -(x0**2), -0.2 * x2 * np.exp(-(x2**2))],
            [a * sech2 * x1, a * np.tanh(x0), -1.0 - 3.0 * c * x2**2],
        ]
    )


def wrong_jacobian(x, p):
    """The Jacobian with a sign slip in d f1 / d x0 (a deliberate mistake)."""
    matrix = jacobian(x, p)
    matrix[1, 0] = -matrix[1, 0]
    return matrix


def observables(x, p):
    return {"total": float(x[0] + x[1]), "scaled": float(p["a"] * x[2])}


def start(p):
    return np.array([p["a"], p["b"] / p["a"], 0.0])


def short_rhs(x, p):
    """Returns one value too few (a mistake the model builder must catch)."""
    return rhs(x, p)[:-1]


def wrong_shape_jacobian(x, p):
    return jacobian(x, p)[:2]


NOT_A_FUNCTION = 3.0

# A chain of 300 cells with logistic growth and exchange between neighbours
# (a discretized reaction-diffusion line with closed ends).
CHAIN_SIZE = 300
CHAIN_PARAMETERS = {"d": 0.7, "r": 1.3}


def chain_rhs(x, p):
    exchange = np.empty_like(x)
    exchange[1:-1] = x[:-2] - 2.0 * x[1:-1] + x[2:]
    exchange[0] = x[1] - x[0]
    exchange[-1] = x[-2] - x[-1]
    return p["d"] * exchange + p["r"] * x * (1.0 - x)


def chain_jacobian(x, p):
    n = x.shape[0]
    main = -2.0 * p["d"] * np.ones(n)
    main[0] = main[-1] = -p["d"]
    main += p["r"] * (1.0 - 2.0 * x)
    off = p["d"] * np.ones(n - 1)
    return scipy.sparse.diags([off, main, off], [-1, 0, 1], format="csr")


def wrong_chain_jacobian(x, p):
    """The chain Jacobian with one exchange entry missing (a deliberate mistake)."""
    matrix = chain_jacobian(x, p).tolil()
    matrix[150, 151] = 0.0
    return matrix.tocsr()


def rhs_failing_past(x, p):
    """``rhs`` whose code breaks (a KeyError) once b exceeds 2.8: a user's bug."""
    if p["b"] > 2.8:
        return {}["missing"]
    return rhs(x, p)


def hand_model(rhs, jacobian, parameter_jacobian, states, parameters, defaults, **extra):
    """A Model from hand-written numpy functions, no higher derivatives (engine tests)."""
    return Model(
        states=tuple(states),
        parameters=tuple(parameters),
        defaults=np.array(defaults, dtype=float),
        rhs=rhs,
        jacobian=jacobian,
        parameter_jacobian=parameter_jacobian,
        second=None,
        third=None,
        jacobian_parameter_derivative=None,
        observables=lambda x, p: {},
        **extra,
    )
