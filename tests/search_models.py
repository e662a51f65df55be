"""Python models for tests/test_search.py (``[model.python]`` references).

z^5 = c written as two real equations in z = x0 + i x1: for c = 1 its roots
are the five fifth roots of unity (de Moivre's formula), checked against
numpy.roots. The Jacobian is the Cauchy-Riemann matrix of 5 z^4, given dense
and as a scipy.sparse matrix.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse


def rhs(x, p):
    w = complex(x[0], x[1]) ** 5 - p["c"]
    return np.array([w.real, w.imag])


def jacobian(x, p):
    d = 5.0 * complex(x[0], x[1]) ** 4
    return np.array([[d.real, -d.imag], [d.imag, d.real]])


def sparse_jacobian(x, p):
    return scipy.sparse.csr_matrix(jacobian(x, p))
