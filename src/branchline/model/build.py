"""Compiled models: f(x, p), its exact derivatives, and Python models.

Internally a parameter set is a 1-D float array ``p`` ordered as
``Model.parameters``; Python models' own functions receive a dict.

Expression models are parsed by the whitelisting parser of
:mod:`branchline.scan.expressions`, differentiated exactly by sympy at the
structural nonzeros only and compiled into checked Python code
(:mod:`branchline.model.expression_model`); the code is kept in the model
cache (:mod:`branchline.model.cache`), so a model built before needs no sympy
work. The hot-path callables (``rhs``, ``jacobian``, ``derivatives``) cost a
few microseconds per call for small models. Each column of df/dp and the
normal-form derivatives (``second``, ``third``,
``jacobian_parameter_derivative``) are compiled on first use.

Python models (``[model.python]``) import user code through
:mod:`branchline.model.python`: **importing the named module runs that
module's code, by design** (it is the user's own model). Their missing
derivatives come from finite differences (:mod:`branchline.numerics.differences`).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from branchline.errors import ScanError
from branchline.model.jacobian_pattern import JacobianPattern
from branchline.model.python import (
    probe,
    python_jacobian,
    python_observables,
    python_pattern,
    python_rhs,
    resolve_callable,
)
from branchline.numerics.differences import central_jacobian, directional_derivative
from branchline.numerics.policy import DEFAULT, LinearAlgebraPolicy
from branchline.scan.model_section import ExpressionModelSpec, PythonModelSpec

if TYPE_CHECKING:
    from branchline.model.codegen import SecondEntries

Array = np.ndarray

# Relative disagreement between a user Jacobian and central differences above
# which check_jacobian reports a mismatch. Central differences are accurate to
# about eps**(2/3) ~ 4e-11 on well-scaled models; 1e-4 leaves room for badly
# scaled ones while any real error in a formula is of order one.
JACOBIAN_CHECK_TOLERANCE = 1e-4
# Entries smaller than this fraction of their row's largest entry are compared
# against that floor instead of themselves: differences cannot resolve them.
JACOBIAN_CHECK_FLOOR = 1e-4
# Random directions probed by check_jacobian for models too large for a full
# column-by-column comparison (each costs two rhs calls).
JACOBIAN_CHECK_DIRECTIONS = 8


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
    derivatives : callable (x, p, parameter=None) -> (df/dx, ndarray (n, m) or (n,)) or None
        df/dx (as ``jacobian`` returns it) with df/dp: every column, or only
        column ``parameter`` (expression models only; what a trace calls).
    jacobian_source : str or None
        ``"module:function"`` of a Python model's own Jacobian, if it has one.
    second_entries : callable () -> SecondEntries, or None
        The nonzero entries of f_xx and d/dp f_x as one fast compiled call,
        compiled on the first call (expression models only; boundary curves
        contract them at every Newton iterate).
    jacobian_pattern : JacobianPattern or None
        A Python model's sparsity pattern of df/dx (``model.python.jacobian_pattern``):
        without a Jacobian of its own, its Jacobian is differences by column groups.
    linear_algebra : LinearAlgebraPolicy
        Where dense linear algebra ends and sparse begins for this model (tests
        give :data:`branchline.numerics.policy.DENSE` or ``SPARSE`` to run a case
        both ways).
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
    derivatives: Callable[[Array, Array], tuple[Array, Array]] | None = None
    jacobian_source: str | None = None
    linear_algebra: LinearAlgebraPolicy = DEFAULT
    second_entries: Callable[[], SecondEntries] | None = None
    jacobian_pattern: JacobianPattern | None = None

    @property
    def size(self) -> int:
        """Number of states n."""
        return len(self.states)

    def state_jacobian(self, x: Array, p: Array) -> object:
        """df/dx for location and normal forms: dense, or scipy.sparse CSC when the
        model's policy says sparse for its size."""
        import scipy.sparse

        matrix = self.jacobian(x, p)
        if self.linear_algebra.sparse_location(x.shape[0]):
            return scipy.sparse.csc_matrix(matrix)
        return matrix.toarray() if scipy.sparse.issparse(matrix) else np.asarray(matrix)

    def parameter_index(self, name: str) -> int:
        """Position of parameter ``name`` in the parameter vector p."""
        return self.parameters.index(name)

    def parameter_vector(self, overrides: dict[str, float] | None = None) -> Array:
        """Defaults with ``overrides`` applied, shape (m,)."""
        p = np.array(self.defaults, dtype=float)
        for name, value in (overrides or {}).items():
            p[self.parameters.index(name)] = float(value)
        return p


@dataclass(frozen=True)
class JacobianCheck:
    """Outcome of comparing a model's Jacobian with central differences of its rhs.

    Attributes
    ----------
    max_relative_error : float
        Largest entry-wise relative disagreement (see :func:`check_jacobian`).
    ok : bool
        ``max_relative_error <= JACOBIAN_CHECK_TOLERANCE``.
    message : str
        One line for a person: what was compared and, on mismatch, the worst entry.
    """

    max_relative_error: float
    ok: bool
    message: str


def build_model(spec: ExpressionModelSpec | PythonModelSpec, source: str = "<dict>") -> Model:
    """Compile an ExpressionModelSpec or PythonModelSpec into a :class:`Model`.

    Parameters
    ----------
    spec : ExpressionModelSpec or PythonModelSpec
    source : str
        The scan file name, used in error messages.

    Raises
    ------
    ScanError
        An expression the parser refuses, an unknown name, or a Python
        function that cannot be imported or returns the wrong shape.

    Examples
    --------
    >>> spec = ExpressionModelSpec(parameters={"a": 2.0}, equations={"x": "a - x^2"})
    >>> model = build_model(spec)
    >>> model.jacobian(np.array([1.5]), model.defaults)
    array([[-3.]])
    """
    if isinstance(spec, PythonModelSpec):
        return _build_python_model(spec, source)
    return _build_expression_model(spec, source)


def jacobian_dense(model: Model, x: Array, p: Array) -> Array:
    """df/dx as a dense (n, n) array, whatever the model's Jacobian returns."""
    import scipy.sparse

    matrix = model.jacobian(x, p)
    if scipy.sparse.issparse(matrix):
        return matrix.toarray()
    return np.asarray(matrix, dtype=float)


def _defaults(spec: ExpressionModelSpec | PythonModelSpec) -> Array:
    """The parameters' default values, shape (m,), in the order of the scan file."""
    return np.array([float(v) for v in spec.parameters.values()], dtype=float)


def _no_observables(x: Array, p: Array) -> dict[str, float]:
    return {}


# ---------------------------------------------------------------------------
# Expression models
# ---------------------------------------------------------------------------


def _build_expression_model(spec: ExpressionModelSpec, source: str) -> Model:
    from branchline.model.expression_model import expression_functions

    functions = expression_functions(spec, source, DEFAULT.expression_sparse_above)
    return Model(
        states=tuple(spec.equations),
        parameters=tuple(spec.parameters),
        defaults=_defaults(spec),
        rhs=functions.rhs,
        jacobian=functions.jacobian,
        parameter_jacobian=functions.parameter_jacobian,
        derivatives=functions.derivatives,
        second=functions.second,
        third=functions.third,
        jacobian_parameter_derivative=functions.jacobian_parameter_derivative,
        second_entries=functions.second_entries,
        observables=functions.observables if spec.observables else _no_observables,
        observable_names=tuple(spec.observables),
        sparse=functions.sparse,
        equations=dict(spec.equations),
        definitions=dict(spec.definitions),
        exact_derivatives=True,
    )


# ---------------------------------------------------------------------------
# Python models
# ---------------------------------------------------------------------------


def _build_python_model(spec: PythonModelSpec, source: str) -> Model:
    n = int(spec.size)
    states = tuple(spec.states) if spec.states else tuple(f"x{i}" for i in range(n))
    if len(states) != n:
        raise ScanError(source, "model.python.states", f"lists {len(states)} names but size is {n}")
    defaults = _defaults(spec)
    rhs = python_rhs(spec, source)
    probe_point = np.ones(n)
    probe(rhs, probe_point, defaults)
    pattern = python_pattern(spec, source)
    jacobian, sparse, derivatives = python_jacobian(
        spec, rhs, probe_point, defaults, source, pattern
    )
    observables, names = _no_observables, ()
    if spec.observables:
        observables, names = python_observables(spec, probe_point, defaults, source)
    return Model(
        states=states,
        parameters=tuple(spec.parameters),
        defaults=defaults,
        rhs=rhs,
        jacobian=jacobian,
        parameter_jacobian=derivatives.parameter_jacobian,
        second=derivatives.second,
        third=derivatives.third,
        jacobian_parameter_derivative=derivatives.jacobian_parameter_derivative,
        observables=observables,
        observable_names=names,
        sparse=sparse,
        equations={},
        definitions={},
        python_source=spec.rhs,
        exact_derivatives=False,
        jacobian_source=spec.jacobian,
        jacobian_pattern=pattern,
    )


# ---------------------------------------------------------------------------
# Checking a Jacobian
# ---------------------------------------------------------------------------


def check_jacobian(model: Model, x: Array, p: Array) -> JacobianCheck:
    """Compare the model's Jacobian at (x, p) with central differences of its rhs.

    For up to ``model.linear_algebra.finite_differences_dense_up_to`` states every
    entry is compared; above, the
    products with ``JACOBIAN_CHECK_DIRECTIONS`` seeded random directions (a
    wrong entry shows in almost every random product, at two rhs calls each).
    The error of an entry is |J - D| / (max(|J|, |D|) + floor), the floor being
    ``JACOBIAN_CHECK_FLOOR`` times the largest entry of its row.

    Returns
    -------
    JacobianCheck
    """
    x = np.asarray(x, dtype=float)
    p = np.asarray(p, dtype=float)
    n = x.shape[0]
    if n <= model.linear_algebra.finite_differences_dense_up_to:
        given = jacobian_dense(model, x, p)
        differences = central_jacobian(lambda z: model.rhs(z, p), x)
        what = "every entry"
    else:
        rng = np.random.default_rng(0)
        directions = rng.standard_normal((n, JACOBIAN_CHECK_DIRECTIONS))
        matrix = model.jacobian(x, p)
        given = np.asarray(matrix @ directions)
        differences = np.column_stack(
            [directional_derivative(lambda z: model.rhs(z, p), x, d, 1) for d in directions.T]
        )
        what = f"products with {JACOBIAN_CHECK_DIRECTIONS} random directions"
    return _compare(given, differences, model, what)


def _compare(given: Array, differences: Array, model: Model, what: str) -> JacobianCheck:
    magnitude = np.maximum(np.abs(given), np.abs(differences))
    floor = JACOBIAN_CHECK_FLOOR * np.max(magnitude, axis=1, keepdims=True) + np.finfo(float).tiny
    with np.errstate(invalid="ignore"):
        errors = np.abs(given - differences) / (magnitude + floor)
    if not np.all(np.isfinite(errors)):
        return JacobianCheck(
            float("nan"), False, "the Jacobian or the rhs is not finite at the check point"
        )
    worst = float(np.max(errors)) if errors.size else 0.0
    source = model.jacobian_source or "the compiled Jacobian"
    if worst <= JACOBIAN_CHECK_TOLERANCE:
        return JacobianCheck(
            worst,
            True,
            f"{source} agrees with finite differences ({what}; worst relative error {worst:.1e})",
        )
    i, j = np.unravel_index(int(np.argmax(errors)), errors.shape)
    if what == "every entry":
        place = f"d f[{model.states[i]}] / d {model.states[j]}"
    else:
        place = f"row {model.states[i]} of the product with random direction {j + 1}"
    return JacobianCheck(
        worst,
        False,
        f"{source} disagrees with finite differences of the rhs: {place} is "
        f"{given[i, j]:.6g} but differences give {differences[i, j]:.6g} "
        f"(relative error {worst:.1e}); check the Jacobian function",
    )


__all__ = [
    "JacobianCheck",
    "Model",
    "build_model",
    "check_jacobian",
    "jacobian_dense",
    "resolve_callable",
]
