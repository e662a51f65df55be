"""Compiled models: f(x, p), its exact derivatives, and Python models.

Internally a parameter set is a 1-D float array ``p`` ordered as
``Model.parameters``; Python models' own functions receive a dict.

Expression models are parsed by the whitelisting parser of
:mod:`branchline.expressions`, differentiated exactly by sympy and compiled
with ``sympy.lambdify`` (common subexpressions shared) into plain Python
functions that return flat tuples; the hot-path callables (``rhs``,
``jacobian``, ``parameter_jacobian``, ``derivatives``) cost about a microsecond
per call for small models. The normal-form derivatives (``second``, ``third``,
``jacobian_parameter_derivative``) are compiled on first use.

Python models (``[model.python]``) import user code: **importing the named
module runs that module's code, by design** (it is the user's own model). Their
missing derivatives come from finite differences (:mod:`branchline.differences`).
"""

from __future__ import annotations

import importlib
import itertools
import math
import os
import sys
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.sparse
import sympy as sp

from branchline.differences import (
    central_jacobian,
    directional_derivative,
)
from branchline.errors import ExpressionError, ScanError
from branchline.expressions import parse_expression
from branchline.scan import ExpressionModelSpec, PythonModelSpec

Array = np.ndarray

# Above this many states a finite-difference Jacobian is returned as a
# scipy.sparse matrix (its exact zeros dropped), so that the linear algebra
# switches to sparse LU; below it dense LAPACK is faster.
DENSE_STATE_LIMIT = 200

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

# Failures of the fast pure-Python evaluation (math module, Python floats) that
# the numpy evaluation turns into inf/nan instead: log of a negative number,
# division by zero, overflow, a fractional power of a negative number (Python
# returns a complex number, which the float conversion refuses), and inputs
# that are not 1-D float arrays.
_FAST_PATH_FAILURES = (ArithmeticError, ValueError, TypeError, AttributeError)


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
    derivatives : callable (x, p) -> (ndarray (n, n), ndarray (n, m)) or None
        df/dx and df/dp from one compiled call (expression models only).
    jacobian_source : str or None
        ``"module:function"`` of a Python model's own Jacobian, if it has one.
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
    matrix = model.jacobian(x, p)
    if scipy.sparse.issparse(matrix):
        return matrix.toarray()
    return np.asarray(matrix, dtype=float)


# ---------------------------------------------------------------------------
# Expression models
# ---------------------------------------------------------------------------


def _build_expression_model(spec: ExpressionModelSpec, source: str) -> Model:
    states = tuple(spec.equations)
    parameters = tuple(spec.parameters)
    x = [sp.Symbol(f"_x{i}", real=True) for i in range(len(states))]
    p = [sp.Symbol(f"_p{k}", real=True) for k in range(len(parameters))]
    known: dict[str, sp.Expr] = dict(zip(states, x, strict=True))
    known.update(zip(parameters, p, strict=True))
    for name, text in spec.definitions.items():
        key = f"model.definitions.{name}"
        if name in known:
            raise ScanError(source, key, f"'{name}' is already a state, parameter or definition")
        known[name] = _translate(text, known, key, source)
    f = [
        _translate(text, known, f"model.equations.{name}", source)
        for name, text in spec.equations.items()
    ]
    observed = [
        _translate(text, known, f"model.observables.{name}", source)
        for name, text in spec.observables.items()
    ]
    calculus = _SymbolicDerivatives(f, x, p)
    return Model(
        states=states,
        parameters=parameters,
        defaults=np.array([float(v) for v in spec.parameters.values()], dtype=float),
        rhs=_real_function(f, [x, p], (len(x),)),
        jacobian=_real_function(calculus.jacobian_entries, [x, p], (len(x), len(x))),
        parameter_jacobian=_real_function(calculus.parameter_entries, [x, p], (len(x), len(p))),
        derivatives=_split_function(
            calculus.jacobian_entries + calculus.parameter_entries,
            [x, p],
            ((len(x), len(x)), (len(x), len(p))),
        ),
        second=_Lazy(calculus.compile_second),
        third=_Lazy(calculus.compile_third),
        jacobian_parameter_derivative=_Lazy(calculus.compile_parameter_derivative),
        observables=_observable_function(tuple(spec.observables), observed, [x, p]),
        observable_names=tuple(spec.observables),
        equations=dict(spec.equations),
        definitions=dict(spec.definitions),
        exact_derivatives=True,
    )


def _translate(text: str, known: dict[str, sp.Expr], key: str, source: str) -> sp.Expr:
    """Parse one expression and replace every name by its state/parameter symbol or definition."""
    try:
        expression = parse_expression(text, where=key)
    except ExpressionError as error:
        raise ScanError(source, key, str(error)) from None
    replacements = {}
    for symbol in expression.free_symbols:
        if symbol.name not in known:
            raise ScanError(
                source,
                key,
                f"unknown name '{symbol.name}': not a state, a parameter or an earlier definition",
            )
        replacements[symbol] = known[symbol.name]
    return expression.xreplace(replacements)


class _SymbolicDerivatives:
    """Exact derivatives of f in sympy; the higher ones built and compiled on demand.

    The second and third derivative tensors are built entry by entry over
    sorted index tuples only (they are symmetric), skipping every entry whose
    parent does not depend on the variable, so sparse models stay cheap. The
    forms B(v, w) and C(u, v, w) are then sums of those entries times
    products of vector-component symbols, compiled with shared subexpressions.
    """

    def __init__(self, f: list[sp.Expr], x: list[sp.Symbol], p: list[sp.Symbol]) -> None:
        self.f, self.x, self.p = f, x, p
        self.jacobian = [[_derivative(fi, xj) for xj in x] for fi in f]
        self.jacobian_entries = [entry for row in self.jacobian for entry in row]
        self.parameter_entries = [_derivative(fi, pk) for fi in f for pk in p]
        n = len(x)
        self.u = [sp.Symbol(f"_u{i}") for i in range(n)]
        self.v = [sp.Symbol(f"_v{i}") for i in range(n)]
        self.w = [sp.Symbol(f"_w{i}") for i in range(n)]
        self._hessian: list[dict[tuple[int, ...], sp.Expr]] | None = None

    def hessian(self) -> list[dict[tuple[int, ...], sp.Expr]]:
        """Per equation, {(j, k): d2f/dx_j dx_k} for j <= k, nonzero entries only."""
        if self._hessian is None:
            self._hessian = [
                _raise_order({(j,): entry for j, entry in enumerate(row) if entry != 0}, self.x)
                for row in self.jacobian
            ]
        return self._hessian

    def compile_second(self) -> Callable:
        second = [_contract(entries, (self.v, self.w)) for entries in self.hessian()]
        return _complex_function(second, [self.x, self.p, self.v, self.w])

    def compile_third(self) -> Callable:
        third = [
            _contract(_raise_order(entries, self.x), (self.u, self.v, self.w))
            for entries in self.hessian()
        ]
        return _complex_function(third, [self.x, self.p, self.u, self.v, self.w])

    def compile_parameter_derivative(self) -> Callable:
        entries = [
            sp.Add(*[_derivative(entry, pk) * vj for entry, vj in zip(row, self.v, strict=True)])
            for row in self.jacobian
            for pk in self.p
        ]
        shape = (len(self.x), len(self.p))
        return _complex_function(entries, [self.x, self.p, self.v], shape)


def _derivative(expression: sp.Expr, variable: sp.Symbol) -> sp.Expr:
    """d expression / d variable, skipping sympy entirely when it cannot depend on it."""
    if variable not in expression.free_symbols:
        return sp.S.Zero
    return sp.diff(expression, variable)


def _raise_order(
    entries: dict[tuple[int, ...], sp.Expr], x: list[sp.Symbol]
) -> dict[tuple[int, ...], sp.Expr]:
    """From {sorted index tuple: derivative} to the next order, sorted tuples only."""
    higher = {}
    for index, entry in entries.items():
        for k in range(index[-1], len(x)):
            derivative = _derivative(entry, x[k])
            if derivative != 0:
                higher[(*index, k)] = derivative
    return higher


def _contract(entries: dict[tuple[int, ...], sp.Expr], vectors: tuple) -> sp.Expr:
    """sum over all index tuples of T[indices] * prod_r vectors[r][index_r], T symmetric."""
    terms = []
    for index, entry in entries.items():
        products = {
            tuple(index[a] for a in order) for order in itertools.permutations(range(len(index)))
        }
        weight = sp.Add(
            *[
                sp.Mul(*[vector[i] for vector, i in zip(vectors, order, strict=True)])
                for order in products
            ]
        )
        terms.append(entry * weight)
    return sp.Add(*terms)


class _Lazy:
    """A callable compiled on its first call (keeps start-up short)."""

    __slots__ = ("_build", "_function")

    def __init__(self, build: Callable[[], Callable]) -> None:
        self._build = build
        self._function: Callable | None = None

    def __call__(self, *args: Any) -> Any:
        if self._function is None:
            self._function = self._build()
        return self._function(*args)


def _zero(*_: object) -> sp.Expr:
    return sp.S.Zero


def _printer_settings() -> dict[str, Any]:
    # As lambdify's own defaults, but terms are printed in sympy's internal
    # order instead of being sorted (sorting dominates compile time).
    return {
        "fully_qualified_modules": False,
        "inline": True,
        "allow_unknown_functions": True,
        "order": "none",
    }


class _Compiled:
    """Entries compiled twice from one common-subexpression elimination.

    ``fast`` works on Python floats with the math module (None when some
    function has no math counterpart); ``safe`` is numpy code, which turns
    domain errors into nan/inf and broadcasts over arrays. ``safe`` is only
    generated when first needed.
    """

    def __init__(self, arguments: list, expressions: list[sp.Expr], fast: bool = True) -> None:
        # Kinks (abs, sign) differentiate to Dirac deltas; off the kink they are zero.
        expressions = [
            e.replace(sp.DiracDelta, _zero) if e.has(sp.DiracDelta) else e for e in expressions
        ]
        self.arguments = arguments
        self.cse = sp.cse(expressions, order="none")
        self._safe: Callable | None = None
        self.fast = self._lambdify_fast() if fast else None

    def _reuse(self, _: object) -> tuple:
        return self.cse

    def _lambdify_fast(self) -> Callable | None:
        from sympy.printing.pycode import PythonCodePrinter

        try:
            settings = _printer_settings() | {"strict": True, "allow_unknown_functions": False}
            printer = PythonCodePrinter(settings)
            return sp.lambdify(
                self.arguments,
                self.cse[1],
                # math.fabs, unlike abs, refuses a complex number (from a
                # fractional power of a negative number), so such values take
                # the numpy path and become nan there.
                modules=[{"abs": math.fabs}, "math"],
                cse=self._reuse,
                printer=printer,
                docstring_limit=0,
            )
        except Exception:  # the printer refuses a function: numpy code only
            return None

    @property
    def safe(self) -> Callable:
        if self._safe is None:
            from sympy.printing.numpy import NumPyPrinter

            printer = NumPyPrinter(_printer_settings())
            self._safe = sp.lambdify(
                self.arguments,
                self.cse[1],
                modules="numpy",
                cse=self._reuse,
                printer=printer,
                docstring_limit=0,
            )
        return self._safe


def _safe_values(safe: Callable, arrays: Sequence[Array], count: int, dtype: Any) -> Array:
    """Evaluate the numpy version; entries broadcast over trailing axes of the inputs."""
    trailing = np.broadcast_shapes(*(a.shape[1:] for a in arrays))
    out = np.empty((count, *trailing), dtype=dtype)
    with np.errstate(all="ignore"):
        values = safe(*arrays)
    for i, value in enumerate(values):
        out[i] = value
    return out


def _real_function(expressions: list[sp.Expr], arguments: list, shape: tuple[int, ...]):
    """Compile real-valued entries into (x, p) -> ndarray of ``shape``."""
    compiled = _Compiled(arguments, expressions)
    fast = compiled.fast
    count = len(expressions)

    def evaluate_safe(x: Array, p: Array) -> Array:
        arrays = (np.asarray(x, dtype=float), np.asarray(p, dtype=float))
        values = _safe_values(compiled.safe, arrays, count, float)
        return values.reshape(shape + values.shape[1:])

    if fast is None:
        return evaluate_safe

    def evaluate(x: Array, p: Array) -> Array:
        try:
            if x.ndim == 1:
                return np.array(fast(x.tolist(), p.tolist()), dtype=float).reshape(shape)
        except _FAST_PATH_FAILURES:
            pass
        return evaluate_safe(x, p)

    return evaluate


def _split_function(expressions: list[sp.Expr], arguments: list, shapes: tuple):
    """Compile the entries of two blocks at once into (x, p) -> (block1, block2)."""
    first_shape, second_shape = shapes
    cut = first_shape[0] * first_shape[1]
    compiled = _Compiled(arguments, expressions)
    fast = compiled.fast
    count = len(expressions)

    def evaluate_safe(x: Array, p: Array) -> tuple[Array, Array]:
        arrays = (np.asarray(x, dtype=float), np.asarray(p, dtype=float))
        flat = _safe_values(compiled.safe, arrays, count, float)
        trailing = flat.shape[1:]
        return (
            flat[:cut].reshape(first_shape + trailing),
            flat[cut:].reshape(second_shape + trailing),
        )

    if fast is None:
        return evaluate_safe

    def evaluate(x: Array, p: Array) -> tuple[Array, Array]:
        try:
            if x.ndim == 1:
                flat = np.array(fast(x.tolist(), p.tolist()), dtype=float)
                return flat[:cut].reshape(first_shape), flat[cut:].reshape(second_shape)
        except _FAST_PATH_FAILURES:
            pass
        return evaluate_safe(x, p)

    return evaluate


def _complex_function(expressions: list[sp.Expr], arguments: list, shape: tuple | None = None):
    """Compile entries that may be complex (vector arguments) into numpy code."""
    compiled = _Compiled(arguments, expressions, fast=False)
    count = len(expressions)
    shape = shape or (count,)

    def evaluate(*inputs: Array) -> Array:
        arrays = [np.asarray(a) for a in inputs]
        dtype = np.result_type(float, *arrays)
        values = _safe_values(compiled.safe, arrays, count, dtype)
        return values.reshape(shape + values.shape[1:])

    return evaluate


def _observable_function(names: tuple[str, ...], expressions: list[sp.Expr], arguments: list):
    """Compile observables into (x, p) -> {name: value}."""
    if not names:
        return _no_observables
    values = _real_function(expressions, arguments, (len(names),))

    def evaluate(x: Array, p: Array) -> dict[str, Any]:
        result = values(x, p)
        if result.ndim == 1:
            return dict(zip(names, result.tolist(), strict=True))
        return dict(zip(names, result, strict=True))

    return evaluate


# ---------------------------------------------------------------------------
# Python models
# ---------------------------------------------------------------------------


def resolve_callable(reference: str, source: str, key: str) -> Callable:
    """Import ``"module:function"`` and return the function.

    Importing the module runs its code, by design: it is the user's own model.
    When ``source`` is a scan file, its folder is searched first, so a model
    module can sit next to the scan file.

    Raises
    ------
    ScanError
        Malformed reference, module not found or failing to import, attribute
        missing, or not callable.
    """
    if not isinstance(reference, str) or reference.count(":") != 1:
        raise ScanError(source, key, f"expected 'module:function', got {reference!r}")
    module_name, attribute_path = (part.strip() for part in reference.split(":"))
    if not module_name or not attribute_path:
        raise ScanError(source, key, f"expected 'module:function', got {reference!r}")
    module = _import_module(module_name, source, key)
    target: Any = module
    for attribute in attribute_path.split("."):
        if not hasattr(target, attribute):
            raise ScanError(
                source, key, f"module '{module_name}' has no attribute '{attribute_path}'"
            )
        target = getattr(target, attribute)
    if not callable(target):
        raise ScanError(
            source, key, f"'{reference}' is not a function (it is {type(target).__name__})"
        )
    return target


def _import_module(module_name: str, source: str, key: str):
    folder = os.path.dirname(os.path.abspath(source)) if os.path.isfile(source) else None
    added = folder is not None and folder not in sys.path
    if added:
        sys.path.insert(0, folder)
    try:
        return importlib.import_module(module_name)
    except ModuleNotFoundError as error:
        raise ScanError(source, key, f"cannot import module '{module_name}': {error}") from None
    except Exception as error:  # the user's module itself failed while importing
        raise ScanError(
            source,
            key,
            f"importing module '{module_name}' failed: {type(error).__name__}: {error}",
        ) from None
    finally:
        if added:
            sys.path.remove(folder)


def _build_python_model(spec: PythonModelSpec, source: str) -> Model:
    n = int(spec.size)
    states = tuple(spec.states) if spec.states else tuple(f"x{i}" for i in range(n))
    if len(states) != n:
        raise ScanError(source, "model.python.states", f"lists {len(states)} names but size is {n}")
    parameters = tuple(spec.parameters)
    defaults = np.array([float(v) for v in spec.parameters.values()], dtype=float)
    user_rhs = resolve_callable(spec.rhs, source, "model.python.rhs")
    rhs = _wrap_python_rhs(user_rhs, parameters, n, spec.rhs, source)
    probe = np.ones(n)
    _probe(rhs, probe, defaults)
    if spec.jacobian is not None:
        jacobian, sparse = _user_jacobian(spec, parameters, probe, defaults, source)
        derivatives = _DifferenceDerivatives(rhs, jacobian, levels=0)
    else:
        sparse = n > DENSE_STATE_LIMIT
        jacobian = _difference_jacobian(rhs, sparse)
        derivatives = _DifferenceDerivatives(rhs, None, levels=1)
    observables, names = _user_observables(spec, parameters, probe, defaults, source)
    return Model(
        states=states,
        parameters=parameters,
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
    )


def _user_jacobian(
    spec: PythonModelSpec, parameters: tuple, probe: Array, defaults: Array, source: str
) -> tuple[Callable, bool]:
    """The user's Jacobian, wrapped; sparse if it returns scipy.sparse at the probe point."""
    n = int(spec.size)
    user_jacobian = resolve_callable(spec.jacobian, source, "model.python.jacobian")
    sample = _probe(
        lambda x, p: user_jacobian(x, dict(zip(parameters, p.tolist(), strict=True))),
        probe,
        defaults,
    )
    sparse = scipy.sparse.issparse(sample) if sample is not None else n > DENSE_STATE_LIMIT
    jacobian = _wrap_python_jacobian(user_jacobian, parameters, n, sparse, spec.jacobian, source)
    _probe(jacobian, probe, defaults)
    return jacobian, sparse


def _user_observables(
    spec: PythonModelSpec, parameters: tuple, probe: Array, defaults: Array, source: str
) -> tuple[Callable, tuple[str, ...]]:
    """The user's observables function, wrapped, and its names (read at the probe point)."""
    if not spec.observables:
        return _no_observables, ()
    user_observables = resolve_callable(spec.observables, source, "model.python.observables")
    observables = _wrap_python_observables(user_observables, parameters)
    sample = _probe(observables, probe, defaults)
    return observables, tuple(sample) if sample else ()


def _no_observables(x: Array, p: Array) -> dict[str, float]:
    return {}


def _probe(function: Callable, x: Array, p: Array) -> Any:
    """Call a user function once at build time; shape errors surface, other failures wait.

    The probe point (all states 1, default parameters) is arbitrary, so an
    exception there is not held against the model; a ScanError (wrong shape) is.
    """
    try:
        with np.errstate(all="ignore"):
            return function(x, p)
    except ScanError:
        raise
    except Exception:
        return None


def _wrap_python_rhs(user_rhs: Callable, parameters: tuple, n: int, reference: str, source: str):
    expected = (n,)

    def rhs(x: Array, p: Array) -> Array:
        values = np.asarray(
            user_rhs(x, dict(zip(parameters, p.tolist(), strict=True))), dtype=float
        )
        if values.shape != expected:
            raise ScanError(
                source,
                "model.python.rhs",
                f"'{reference}' returned an array of shape {values.shape}; expected ({n},), "
                f"one derivative per state (size = {n})",
            )
        return values

    return rhs


def _wrap_python_jacobian(
    user_jacobian: Callable, parameters: tuple, n: int, sparse: bool, reference: str, source: str
):
    expected = (n, n)

    def jacobian(x: Array, p: Array):
        matrix = user_jacobian(x, dict(zip(parameters, p.tolist(), strict=True)))
        if scipy.sparse.issparse(matrix):
            matrix = matrix.tocsr() if sparse else matrix.toarray()
        else:
            matrix = np.asarray(matrix, dtype=float)
            if sparse:
                matrix = scipy.sparse.csr_matrix(matrix)
        if matrix.shape != expected:
            raise ScanError(
                source,
                "model.python.jacobian",
                f"'{reference}' returned a matrix of shape {matrix.shape}; expected {expected}",
            )
        return matrix

    return jacobian


def _difference_jacobian(rhs: Callable, sparse: bool):
    """df/dx by central differences: 2 n rhs calls (noted in the docs for large n)."""

    def jacobian(x: Array, p: Array):
        matrix = central_jacobian(lambda z: rhs(z, p), x)
        return scipy.sparse.csr_matrix(matrix) if sparse else matrix

    return jacobian


def _wrap_python_observables(user_observables: Callable, parameters: tuple):
    def observables(x: Array, p: Array) -> dict[str, float]:
        values = user_observables(x, dict(zip(parameters, p.tolist(), strict=True)))
        return {str(name): float(value) for name, value in dict(values).items()}

    return observables


class _DifferenceDerivatives:
    """df/dp, B, C and d/dp (f_x v) of a Python model by nested central differences.

    ``levels`` is the number of differences already inside a Jacobian action:
    0 with an exact user Jacobian (action = J @ v), 1 without (a directional
    difference of f). Each further derivative adds one level, and all levels
    of one formula share the step of :func:`branchline.differences.central_step`.
    """

    def __init__(self, rhs: Callable, jacobian: Callable | None, levels: int) -> None:
        self.rhs, self.user_jacobian, self.levels = rhs, jacobian, levels

    def _action(self, x: Array, p: Array, v: Array, levels: int) -> Array:
        if self.user_jacobian is not None:
            return self.user_jacobian(x, p) @ v
        return directional_derivative(lambda z: self.rhs(z, p), x, v, levels)

    def parameter_jacobian(self, x: Array, p: Array) -> Array:
        return central_jacobian(lambda q: self.rhs(x, q), p)

    def second(self, x: Array, p: Array, v: Array, w: Array) -> Array:
        return self._second(x, p, v, w, self.levels + 1)

    def _second(self, x: Array, p: Array, v: Array, w: Array, levels: int) -> Array:
        return directional_derivative(lambda z: self._action(z, p, v, levels), x, w, levels)

    def third(self, x: Array, p: Array, u: Array, v: Array, w: Array) -> Array:
        levels = self.levels + 2
        return directional_derivative(lambda z: self._second(z, p, u, v, levels), x, w, levels)

    def jacobian_parameter_derivative(self, x: Array, p: Array, v: Array) -> Array:
        levels = self.levels + 1
        p = np.asarray(p, dtype=float)
        columns = []
        for k in range(p.shape[0]):
            direction = np.zeros_like(p)
            direction[k] = 1.0
            columns.append(
                directional_derivative(
                    lambda q: self._action(x, q, v, levels), p, direction, levels
                )
            )
        if not columns:
            return np.zeros((np.asarray(x).shape[0], 0))
        return np.column_stack(columns)


# ---------------------------------------------------------------------------
# Checking a Jacobian
# ---------------------------------------------------------------------------


def check_jacobian(model: Model, x: Array, p: Array) -> JacobianCheck:
    """Compare the model's Jacobian at (x, p) with central differences of its rhs.

    For up to ``DENSE_STATE_LIMIT`` states every entry is compared; above, the
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
    if n <= DENSE_STATE_LIMIT:
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
    "DENSE_STATE_LIMIT",
    "JacobianCheck",
    "Model",
    "build_model",
    "check_jacobian",
    "jacobian_dense",
    "resolve_callable",
]
