"""Compiled models: f(x, p), its exact derivatives, and Python models.

Internally a parameter set is a 1-D float array ``p`` ordered as
``Model.parameters``; Python models' own functions receive a dict.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

Array = np.ndarray


@dataclass(frozen=True)
class Model:
    """A compiled ODE model x' = f(x, p).

    Attributes
    ----------
    states, parameters : tuple of str
        Names, in the order of the state vector x (n,) and parameter vector p (m,).
    defaults : ndarray, shape (m,)
        Default parameter values from the scan file.
    rhs : callable (x, p) -> ndarray (n,)
    jacobian : callable (x, p) -> ndarray (n, n) or scipy.sparse matrix
        df/dx.
    parameter_jacobian : callable (x, p) -> ndarray (n, m)
        df/dp, every parameter.
    second : callable (x, p, v, w) -> ndarray (n,)
        The bilinear form B(v, w)_i = sum_jk d2f_i/dx_j dx_k v_j w_k; v, w may be complex.
    third : callable (x, p, u, v, w) -> ndarray (n,)
        The trilinear form C(u, v, w); arguments may be complex.
    jacobian_parameter_derivative : callable (x, p, v) -> ndarray (n, m)
        d/dp_k (df/dx v) for every parameter k; v may be complex.
    observables : callable (x, p) -> dict[str, float]
    observable_names : tuple of str
    sparse : bool
        True if ``jacobian`` returns scipy.sparse matrices.
    equations : dict[str, str]
        Human-readable right-hand sides (for reports); empty for Python models.
    definitions : dict[str, str]
    python_source : str or None
        ``"module:function"`` of a Python model's rhs (its module was imported).
    exact_derivatives : bool
        True when derivatives are exact (sympy), False when finite differences.
    """

    states: tuple[str, ...]
    parameters: tuple[str, ...]
    defaults: Array
    rhs: Callable[[Array, Array], Array]
    jacobian: Callable[[Array, Array], object]
    parameter_jacobian: Callable[[Array, Array], Array]
    second: Callable[[Array, Array, Array, Array], Array]
    third: Callable[[Array, Array, Array, Array, Array], Array]
    jacobian_parameter_derivative: Callable[[Array, Array, Array], Array]
    observables: Callable[[Array, Array], dict[str, float]]
    observable_names: tuple[str, ...] = ()
    sparse: bool = False
    equations: dict[str, str] | None = None
    definitions: dict[str, str] | None = None
    python_source: str | None = None
    exact_derivatives: bool = True

    @property
    def size(self) -> int:
        return len(self.states)

    def parameter_index(self, name: str) -> int:
        return self.parameters.index(name)

    def parameter_vector(self, overrides: dict[str, float] | None = None) -> Array:
        """Defaults with ``overrides`` applied, shape (m,)."""
        p = np.array(self.defaults, dtype=float)
        for name, value in (overrides or {}).items():
            p[self.parameters.index(name)] = float(value)
        return p


def build_model(spec) -> Model:
    """Compile an ExpressionModelSpec or PythonModelSpec into a :class:`Model`."""
    raise NotImplementedError
