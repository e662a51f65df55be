"""Code generation for expression models: sympy expressions -> fast numeric functions.

The exact derivatives of f are taken in sympy (:class:`SymbolicDerivatives`),
then each group of entries is compiled with ``sympy.lambdify`` after one
common-subexpression elimination (``sympy.cse``) into plain Python functions
that return flat tuples. Two versions come from the same elimination: a fast
one on Python floats and the math module (about a microsecond per call for
small models) and a numpy one that turns domain errors into nan/inf and
broadcasts over arrays (generated on first need). The normal-form derivatives
(B, C, d/dp (f_x v)) are built and compiled only on first use (:class:`Lazy`).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import sympy as sp

Array = np.ndarray

# Failures of the fast pure-Python evaluation (math module, Python floats) that
# the numpy evaluation turns into inf/nan instead: log of a negative number,
# division by zero, overflow, a fractional power of a negative number (Python
# returns a complex number, which the float conversion refuses), and inputs
# that are not 1-D float arrays.
_FAST_PATH_FAILURES = (ArithmeticError, ValueError, TypeError, AttributeError)


class SymbolicDerivatives:
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
        """(x, p, v, w) -> B(v, w) (n,), complex-capable: the second derivative of f along v, w."""
        second = [_contract(entries, (self.v, self.w)) for entries in self.hessian()]
        return _complex_function(second, [self.x, self.p, self.v, self.w])

    def compile_third(self) -> Callable:
        """(x, p, u, v, w) -> C(u, v, w) (n,), complex-capable: the third derivative of f."""
        third = [
            _contract(_raise_order(entries, self.x), (self.u, self.v, self.w))
            for entries in self.hessian()
        ]
        return _complex_function(third, [self.x, self.p, self.u, self.v, self.w])

    def compile_parameter_derivative(self) -> Callable:
        """(x, p, v) -> d/dp (f_x v), shape (n, m): one column per parameter."""
        entries = [
            sp.Add(*[_derivative(entry, pk) * vj for entry, vj in zip(row, self.v, strict=True)])
            for row in self.jacobian
            for pk in self.p
        ]
        shape = (len(self.x), len(self.p))
        return _complex_function(entries, [self.x, self.p, self.v], shape)

    def compile_second_entries(self) -> Callable:
        """(x, p) -> :class:`SecondEntries`: the nonzero entries of f_xx and d/dp f_x.

        One fast compiled call (Python floats, like ``rhs``) instead of two
        broadcast numpy evaluations of B(v, .) and d/dp (f_x v): along a
        two-parameter boundary these are contracted with a few vectors at every
        Newton iterate (:meth:`SecondEntries.contract`).
        """
        hessian_keys, expressions = [], []
        for i, entries in enumerate(self.hessian()):
            for (j, k), entry in entries.items():
                hessian_keys.append((i, j, k))
                expressions.append(entry)
        mixed_keys = []
        for i, row in enumerate(self.jacobian):
            for j, entry in enumerate(row):
                for k, pk in enumerate(self.p):
                    derivative = _derivative(entry, pk) if entry != 0 else sp.S.Zero
                    if derivative != 0:
                        mixed_keys.append((i, j, k))
                        expressions.append(derivative)
        values = (
            real_function(expressions, [self.x, self.p], (len(expressions),))
            if expressions
            else None
        )
        return SecondEntries.build(hessian_keys, mixed_keys, values, len(self.x), len(self.p))


class SecondEntries:
    """The nonzero entries of the second derivatives of f, and their contractions.

    Holds (i, j, k) of every nonzero d2f_i/dx_j dx_k (both orders of each pair
    j != k) and of every nonzero d2f_i/dx_j dp_k, and one fast compiled call
    for their values at (x, p). Built by
    :meth:`SymbolicDerivatives.compile_second_entries`. Small models contract
    dense (n * n, n) and (n * n, m) arrays (a few array operations); larger
    ones contract the entries themselves.
    """

    DENSE_UP_TO = 24  # states; the dense tensor has n^3 entries

    __slots__ = (
        "_dense_positions",
        "_dense_sources",
        "_evaluate",
        "_split",
        "count",
        "dense",
        "hessian_index",
        "hessian_source",
        "mixed_index",
        "size",
    )

    @classmethod
    def build(cls, hessian_keys, mixed_keys, evaluate, size: int, count: int) -> SecondEntries:
        entries = cls()
        mirrored = [(i, k, j, s) for s, (i, j, k) in enumerate(hessian_keys) if j != k]
        keys = [(i, j, k, s) for s, (i, j, k) in enumerate(hessian_keys)] + mirrored
        table = np.array(keys, dtype=np.intp).reshape(-1, 4)
        entries.hessian_index = (table[:, 0], table[:, 1], table[:, 2])
        entries.hessian_source = table[:, 3]
        mixed = np.array(mixed_keys, dtype=np.intp).reshape(-1, 3)
        entries.mixed_index = (mixed[:, 0], mixed[:, 1], mixed[:, 2])
        entries._split = len(hessian_keys)
        entries._evaluate = evaluate
        entries.size, entries.count = size, count
        entries.dense = size <= cls.DENSE_UP_TO
        # Row-major positions in the (n + m, n * n) table: row k (a state) or n + k (a
        # parameter), column i * n + j; sources index the compiled call's values.
        square = size * size
        entries._dense_positions = np.concatenate(
            [
                table[:, 2] * square + table[:, 0] * size + table[:, 1],
                (size + mixed[:, 2]) * square + mixed[:, 0] * size + mixed[:, 1],
            ]
        )
        entries._dense_sources = np.concatenate(
            [table[:, 3], len(hessian_keys) + np.arange(len(mixed))]
        )
        return entries

    def __call__(self, x: Array, p: Array) -> tuple[Array, Array]:
        """(values of the hessian entries (both orders), values of the mixed entries)."""
        if self._evaluate is None:
            return np.empty(0), np.empty(0)
        flat = self._evaluate(x, p)
        return flat[: self._split][self.hessian_source], flat[self._split :]

    def bilinear(self, x: Array, p: Array) -> Callable[[Array, Array], Array] | None:
        """(a, b) -> B(a, b) (n,) at this (x, p), from the dense Hessian (None for models
        too large for a dense tensor); a, b may be complex."""
        if not self.dense:
            return None
        n = self.size
        square = n * n
        table = np.zeros(square * n)
        if self._evaluate is not None:
            chosen = self._dense_positions < square * n
            values = self._evaluate(x, p)[self._dense_sources[chosen]]
            positions = self._dense_positions[chosen]  # row k, column i * n + j
            k, rest = np.divmod(positions, square)
            i, j = np.divmod(rest, n)
            table[i * square + j * n + k] = values
        hessian = table.reshape(n, square)  # row i, column j * n + k

        def form(a: Array, b: Array) -> Array:
            return hessian @ (np.asarray(a)[:, None] * np.asarray(b)[None, :]).ravel()

        return form

    def contract(self, x: Array, p: Array, terms) -> tuple[Array, Array]:
        """The gradient in x and in p of sum_t left_t^T f_x right_t, column by column.

        ``terms`` is a sequence of (left, right) pairs of shape (n, r); returns
        (sum_t sum_ij left_ic f_i,x_j x_k right_jc over k, shape (n, r);
        the same with d/dp_k in place of d/dx_k, shape (m, r)): the exact
        derivatives of bordered test functions (Govaerts, chapter 4).
        """
        n, m = self.size, self.count
        r = terms[0][0].shape[1]
        if self.dense:  # one (n + m, n * n) matrix of both tensors, times left (x) right
            table = np.zeros((n + m) * n * n)
            if self._evaluate is not None:
                table[self._dense_positions] = self._evaluate(x, p)[self._dense_sources]
            outer = sum(left[:, None, :] * right[None, :, :] for left, right in terms)
            both = table.reshape(n + m, n * n) @ outer.reshape(n * n, r)
            return both[:n], both[n:]
        hessian, mixed = self(x, p)
        shift = np.arange(r)
        i, j, k = self.hessian_index
        weights = (hessian[:, None] * sum(left[i] * right[j] for left, right in terms)).ravel()
        d_x = np.bincount((k[:, None] * r + shift).ravel(), weights, n * r)
        i, j, k = self.mixed_index
        weights = (mixed[:, None] * sum(left[i] * right[j] for left, right in terms)).ravel()
        d_p = np.bincount((k[:, None] * r + shift).ravel(), weights, m * r)
        return d_x.reshape(n, r), d_p.reshape(m, r)


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


class Lazy:
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
        # Canonical order: the same model compiles to the same arithmetic in every
        # process (order="none" follows hash order, which changes the last digits).
        self.cse = sp.cse(expressions, order="canonical")
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


def real_function(
    expressions: list[sp.Expr], arguments: list, shape: tuple[int, ...]
) -> Callable[[Array, Array], Array]:
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


def split_function(
    expressions: list[sp.Expr], arguments: list, shapes: tuple
) -> Callable[[Array, Array], tuple[Array, Array]]:
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


def observable_function(
    names: tuple[str, ...], expressions: list[sp.Expr], arguments: list
) -> Callable[[Array, Array], dict[str, Any]]:
    """Compile observables into (x, p) -> {name: value}."""
    values = real_function(expressions, arguments, (len(names),))

    def evaluate(x: Array, p: Array) -> dict[str, Any]:
        result = values(x, p)
        if result.ndim == 1:
            return dict(zip(names, result.tolist(), strict=True))
        return dict(zip(names, result, strict=True))

    return evaluate


__all__ = [
    "Lazy",
    "SecondEntries",
    "SymbolicDerivatives",
    "observable_function",
    "real_function",
    "split_function",
]
