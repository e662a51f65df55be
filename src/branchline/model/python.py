"""Python models (``[model.python]``): importing the user's functions and wrapping them.

**Importing the named module runs that module's code, by design** (it is the
user's own model). The user's functions take ``(x, params)`` with ``params`` a
dict; the wrappers here take the parameter vector ``p`` of
:class:`branchline.model.build.Model`, check the shapes of what comes back, and fill
in the derivatives the user does not give by central differences
(:mod:`branchline.numerics.differences`).
"""

from __future__ import annotations

import importlib
import os
import sys
import time
from collections.abc import Callable, Mapping
from typing import Any

import numpy as np
import scipy.sparse

from branchline.errors import ModelCodeError, ScanError
from branchline.model.jacobian_pattern import KEY as PATTERN_KEY
from branchline.model.jacobian_pattern import JacobianPattern, read_pattern
from branchline.numerics.differences import (
    central_jacobian,
    extrapolated_directional,
    grouped_central_jacobian,
)
from branchline.numerics.policy import DEFAULT
from branchline.scan.loader import PythonModelSpec

Array = np.ndarray

# Above DEFAULT.finite_differences_dense_up_to states a finite-difference
# Jacobian is returned as a scipy.sparse matrix (its exact zeros dropped), so that
# the linear algebra switches to sparse LU; below it dense LAPACK is faster.


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


def python_rhs(spec: PythonModelSpec, source: str) -> Callable[[Array, Array], Array]:
    """The user's rhs as (x, p) -> ndarray (n,), its shape checked on every call."""
    user_rhs = resolve_callable(spec.rhs, source, "model.python.rhs")
    user_rhs = _with_parameter_dict(user_rhs, tuple(spec.parameters), spec.rhs)
    return _wrap_rhs(_timed(user_rhs, spec.call_time_limit, spec.rhs), spec, source)


def python_pattern(spec: PythonModelSpec, source: str) -> JacobianPattern | None:
    """The model's Jacobian sparsity pattern (``model.python.jacobian_pattern``), or None."""
    if spec.jacobian_pattern is None:
        return None
    function = resolve_callable(spec.jacobian_pattern, source, PATTERN_KEY)
    return read_pattern(function, int(spec.size), spec.jacobian_pattern, source)


def python_jacobian(
    spec: PythonModelSpec,
    rhs: Callable,
    probe_point: Array,
    defaults: Array,
    source: str,
    pattern: JacobianPattern | None = None,
) -> tuple[Callable, bool, DifferenceDerivatives]:
    """df/dx of a Python model, whether it is sparse, and the source of its other derivatives.

    The user's Jacobian (wrapped; sparse if it returns scipy.sparse at the
    probe point) when the spec names one; else, with a ``pattern``, central
    differences by column groups (a scipy.sparse matrix, 2 rhs calls per group;
    sparse like a user's sparse Jacobian); else central differences column by
    column (sparse above ``DEFAULT.finite_differences_dense_up_to`` states).
    """
    n = int(spec.size)
    if spec.jacobian is None:
        derivatives = DifferenceDerivatives(rhs, None, *_user_forms(spec, source))
        if pattern is not None:
            return _grouped_jacobian(rhs, pattern), True, derivatives
        sparse = n > DEFAULT.finite_differences_dense_up_to
        return _difference_jacobian(rhs, sparse), sparse, derivatives
    user_jacobian = resolve_callable(spec.jacobian, source, "model.python.jacobian")
    user_jacobian = _with_parameter_dict(user_jacobian, tuple(spec.parameters), spec.jacobian)
    user_jacobian = _timed(user_jacobian, spec.call_time_limit, spec.jacobian)
    sample = probe(user_jacobian, probe_point, defaults)
    sparse = (
        scipy.sparse.issparse(sample)
        if sample is not None
        else n > DEFAULT.finite_differences_dense_up_to
    )
    jacobian = _wrap_jacobian(user_jacobian, spec, sparse, source)
    probe(jacobian, probe_point, defaults)
    return jacobian, sparse, DifferenceDerivatives(rhs, jacobian, *_user_forms(spec, source))


# The optional directional derivatives of [model.python]: B(v, w), then C(u, v, w).
USER_FORMS = ("second_derivative", "third_derivative")


def _user_forms(spec: PythonModelSpec, source: str) -> tuple[Callable | None, Callable | None]:
    """The user's B(v, w) and C(u, v, w) (wrapped and shape-checked), or None where not given."""
    forms = []
    for key in USER_FORMS:
        reference = getattr(spec, key, None)
        if reference is None:
            forms.append(None)
            continue
        user = resolve_callable(reference, source, f"model.python.{key}")
        forms.append(_wrap_form(user, tuple(spec.parameters), reference, spec, source, key))
    return forms[0], forms[1]


def _wrap_form(user, parameters, reference: str, spec: PythonModelSpec, source: str, key: str):
    n = int(spec.size)

    def form(x: Array, p: Array, *directions: Array) -> Array:
        try:
            values = user(x, dict(zip(parameters, p.tolist(), strict=True)), *directions)
        except (ArithmeticError, ValueError):
            raise
        except Exception as error:
            raise ModelCodeError(f"'{reference}' raised {type(error).__name__}: {error}") from None
        values = as_real_array(values, reference, source, f"model.python.{key}")
        if values.shape != (n,):
            raise ModelOutputError(
                source,
                f"model.python.{key}",
                f"'{reference}' returned an array of shape {values.shape}; expected ({n},)",
            )
        return values

    return form


def python_observables(
    spec: PythonModelSpec, probe_point: Array, defaults: Array, source: str
) -> tuple[Callable, tuple[str, ...]]:
    """The user's observables function, wrapped, and its names (read at the probe point)."""
    user_observables = resolve_callable(spec.observables, source, "model.python.observables")
    user_observables = _with_parameter_dict(
        user_observables, tuple(spec.parameters), spec.observables
    )

    def observables(x: Array, p: Array) -> dict[str, float]:
        values = user_observables(x, p)
        key = "model.python.observables"
        if not isinstance(values, Mapping):
            raise ModelOutputError(
                source,
                key,
                f"'{spec.observables}' returned {type(values).__name__}; expected a dict "
                "of names to numbers",
            )
        try:
            return {str(name): float(value) for name, value in values.items()}
        except (TypeError, ValueError) as error:
            raise ModelOutputError(
                source, key, f"'{spec.observables}' returned a value that is not a number: {error}"
            ) from None

    sample = probe(observables, probe_point, defaults)
    return observables, tuple(sample) if sample else ()


def probe(function: Callable, x: Array, p: Array) -> Any:
    """Call a user function once at build time; shape errors surface, other failures wait.

    The probe point (all states 1, default parameters) is arbitrary, so an
    exception there is not held against the model; a wrong shape or type is
    (a ScanError naming the key). Later in a run the same fault is numerical
    trouble at a point (ModelCodeError): the trace stops there, keeping its points.
    """
    try:
        with np.errstate(all="ignore"):
            return function(x, p)
    except ModelOutputError as error:
        raise ScanError(error.source, error.key, str(error)) from None
    except ScanError:
        raise
    except Exception:
        return None


class ModelOutputError(ModelCodeError):
    """A user function returned the wrong shape or type (key and source kept for probes)."""

    def __init__(self, source: str, key: str, problem: str) -> None:
        super().__init__(problem)
        self.source, self.key = source, key


def as_real_array(values: Any, reference: str, source: str, key: str) -> Array:
    """A user function's result as a float array; ModelOutputError for non-numbers or complex."""
    if isinstance(values, Mapping | str | bytes):
        raise ModelOutputError(
            source, key, f"'{reference}' returned {type(values).__name__}; expected an array"
        )
    try:
        array = np.asarray(values)
        if np.iscomplexobj(array):
            if np.any(array.imag != 0):
                raise ModelOutputError(
                    source, key, f"'{reference}' returned complex values; the model must be real"
                )
            array = array.real
        return np.asarray(array, dtype=float)
    except (TypeError, ValueError) as error:
        if isinstance(error, ModelOutputError):
            raise
        raise ModelOutputError(
            source,
            key,
            f"'{reference}' returned {type(values).__name__} that is not an array of numbers "
            f"({error})",
        ) from None


def _with_parameter_dict(
    user_function: Callable, parameters: tuple[str, ...], reference: str
) -> Callable:
    """(x, params dict) -> value as (x, p) -> value, ``p`` ordered as ``parameters``.

    Arithmetic trouble (ArithmeticError, ValueError) passes through as it is;
    any other exception from the user's code becomes a ModelCodeError naming
    ``reference``, so that a run stops gracefully instead of with a traceback.
    """

    def call(x: Array, p: Array) -> Any:
        try:
            return user_function(x, dict(zip(parameters, p.tolist(), strict=True)))
        except (ArithmeticError, ValueError):
            raise
        except SystemExit as error:  # user code must not end branchline's process
            raise ModelCodeError(f"'{reference}' called sys.exit({error.code!r})") from None
        except Exception as error:
            raise ModelCodeError(f"'{reference}' raised {type(error).__name__}: {error}") from None

    return call


def _timed(function: Callable, limit: float, reference: str) -> Callable:
    """``function`` with a wall-clock limit per call (``model.python.call_time_limit``).

    Checked when the call returns: a call over the limit raises ModelCodeError,
    so the trace stops there with its points kept. A call that never returns is
    not seen here; the run's ``time_limit`` cuts it off (see branchline.stopping).
    """

    def call(x: Array, p: Array) -> Any:
        started = time.perf_counter()
        value = function(x, p)
        spent = time.perf_counter() - started
        if spent > limit:
            raise ModelCodeError(
                f"'{reference}' took {spent:.3g} s for one call, over the limit of {limit:g} s "
                "(model.python.call_time_limit)"
            )
        return value

    return call


def _wrap_rhs(user_rhs: Callable, spec: PythonModelSpec, source: str) -> Callable:
    n = int(spec.size)
    expected = (n,)

    def rhs(x: Array, p: Array) -> Array:
        values = as_real_array(user_rhs(x, p), spec.rhs, source, "model.python.rhs")
        if values.shape != expected:
            raise ModelOutputError(
                source,
                "model.python.rhs",
                f"'{spec.rhs}' returned an array of shape {values.shape}; expected ({n},), "
                f"one derivative per state (size = {n})",
            )
        return values

    return rhs


def _wrap_jacobian(
    user_jacobian: Callable, spec: PythonModelSpec, sparse: bool, source: str
) -> Callable:
    n = int(spec.size)
    expected = (n, n)

    def jacobian(x: Array, p: Array):
        matrix = user_jacobian(x, p)
        if scipy.sparse.issparse(matrix):
            matrix = matrix.tocsr() if sparse else matrix.toarray()
        else:
            matrix = as_real_array(matrix, spec.jacobian, source, "model.python.jacobian")
            if sparse:
                matrix = scipy.sparse.csr_matrix(matrix)
        if matrix.shape != expected:
            raise ModelOutputError(
                source,
                "model.python.jacobian",
                f"'{spec.jacobian}' returned a matrix of shape {matrix.shape}; expected {expected}",
            )
        return matrix

    return jacobian


def _difference_jacobian(rhs: Callable, sparse: bool):
    """df/dx by central differences: 2 n rhs calls (noted in the docs for large n)."""

    def jacobian(x: Array, p: Array):
        matrix = central_jacobian(lambda z: rhs(z, p), x)
        return scipy.sparse.csr_matrix(matrix) if sparse else matrix

    return jacobian


def _grouped_jacobian(rhs: Callable, pattern: JacobianPattern):
    """df/dx by central differences, one per column group of the pattern (CSC)."""

    def jacobian(x: Array, p: Array):
        return grouped_central_jacobian(
            lambda z: rhs(z, p), x, pattern.entries, pattern.groups
        )

    return jacobian


class DifferenceDerivatives:
    """df/dp, B, C and d/dp (f_x v) of a Python model.

    B and C come from the user's ``second_derivative`` and ``third_derivative``
    when the spec names them (called with real directions only: complex ones are
    split into real and imaginary parts by multilinearity); otherwise, like
    d/dp (f_x v), by nested derivatives of the Jacobian action (J v with the
    user's Jacobian, else a derivative of f along v), each level a central
    difference extrapolated to step zero with its step chosen by its own error
    estimate (:func:`branchline.numerics.differences.extrapolated_directional`,
    Ridders' method). df/dp is one central difference per parameter.
    """

    def __init__(
        self,
        rhs: Callable,
        jacobian: Callable | None,
        second: Callable | None = None,
        third: Callable | None = None,
    ) -> None:
        self.rhs, self.user_jacobian = rhs, jacobian
        self.user_second, self.user_third = second, third

    def _action(self, x: Array, p: Array, v: Array) -> Array:
        if self.user_jacobian is not None:
            return self.user_jacobian(x, p) @ v
        return extrapolated_directional(lambda z: self.rhs(z, p), x, v)

    def parameter_jacobian(self, x: Array, p: Array) -> Array:
        """df/dp, shape (n, m), by central differences."""
        return central_jacobian(lambda q: self.rhs(x, q), p)

    def second(self, x: Array, p: Array, v: Array, w: Array) -> Array:
        """B(v, w), shape (n,): the user's, or the derivative of J v along w."""
        if self.user_second is not None:
            return _multilinear(lambda *d: self.user_second(x, p, *d), (v, w))
        return extrapolated_directional(lambda z: self._action(z, p, v), x, w)

    def third(self, x: Array, p: Array, u: Array, v: Array, w: Array) -> Array:
        """C(u, v, w), shape (n,): the user's, or the derivative of B(u, v) along w."""
        if self.user_third is not None:
            return _multilinear(lambda *d: self.user_third(x, p, *d), (u, v, w))
        return extrapolated_directional(lambda z: self.second(z, p, u, v), x, w)

    def jacobian_parameter_derivative(self, x: Array, p: Array, v: Array) -> Array:
        """d/dp (f_x v), shape (n, m), extrapolated in each parameter."""
        p = np.asarray(p, dtype=float)
        columns = []
        for k in range(p.shape[0]):
            direction = np.zeros_like(p)
            direction[k] = 1.0
            columns.append(
                extrapolated_directional(lambda q: self._action(x, q, v), p, direction)
            )
        if not columns:
            return np.zeros((np.asarray(x).shape[0], 0))
        return np.column_stack(columns)


def _multilinear(form: Callable[..., Array], directions: tuple[Array, ...]) -> Array:
    """A real multilinear form at possibly complex directions, calling it with real ones.

    Each complex direction a + i b is split: form(..., a + i b, ...) =
    form(..., a, ...) + i form(..., b, ...).
    """
    for index, direction in enumerate(directions):
        direction = np.asarray(direction)
        if np.iscomplexobj(direction):
            head, tail = directions[:index], directions[index + 1 :]
            real = _multilinear(form, (*head, direction.real, *tail))
            imag = _multilinear(form, (*head, direction.imag, *tail))
            return real + 1j * imag
    return form(*(np.asarray(d, dtype=float) for d in directions))


__all__ = [
    "DifferenceDerivatives",
    "probe",
    "python_jacobian",
    "python_observables",
    "python_pattern",
    "python_rhs",
    "resolve_callable",
]
