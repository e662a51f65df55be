"""Code generation for expression models: sparse entries -> checked Python source -> values.

A *block* is a list of derivative entries (the structural nonzeros of f, of
df/dx, of one column of df/dp, of the second or third derivative tensor, or of
d/dp (df/dx)) with their index tuples. :func:`generate_block` turns its sympy
expressions, after one common-subexpression elimination (``sympy.cse``), into
the source text of two functions ``(x, p) -> tuple of values``: a fast one on
Python floats and the math module (about a microsecond per entry-free call
for small models) and a numpy one that turns domain errors into nan/inf and
broadcasts over trailing axes of its inputs. The source is generated only from
the sympy objects branchline built itself from the parsed model, never from
raw text, and is compiled only after :func:`branchline.model.safe_code.compile_checked`
has checked it (so a cached copy is held to the same rule).

:class:`CompiledBlock` evaluates a block; :func:`dense_or_sparse`,
:class:`SymmetricForm` and :class:`MixedForm` assemble its values from the
index arrays into dense arrays, scipy.sparse CSC matrices, B(v, w),
C(u, v, w) and d/dp (f_x v). Nothing here imports sympy at module level: a
model read from the cache never loads it.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from itertools import permutations
from typing import Any

import numpy as np

from branchline.model.safe_code import (
    FUNCTION_NAME,
    CodeRefused,
    compile_checked,
    math_namespace,
    numpy_namespace,
)

Array = np.ndarray

# Failures of the fast pure-Python evaluation (math module, Python floats) that
# the numpy evaluation turns into inf/nan instead: log of a negative number,
# division by zero, overflow, a fractional power of a negative number (Python
# returns a complex number, which the float conversion refuses), and inputs
# that are not 1-D float arrays.
_FAST_PATH_FAILURES = (ArithmeticError, ValueError, TypeError, AttributeError)


@dataclass(frozen=True)
class BlockRecord:
    """Generated code of one block: what the model cache stores.

    Attributes
    ----------
    indices : ndarray (count, r) int
        The index tuple of each entry (equation first).
    fast : str or None
        Source of the math-module function; None when some function has no
        math counterpart.
    safe : str
        Source of the numpy function.
    """

    indices: Array
    fast: str | None
    safe: str

    @property
    def count(self) -> int:
        return int(self.indices.shape[0])


def generate_block(
    entries: Sequence[tuple[tuple[int, ...], Any]], arguments: list[tuple[str, list]], width: int
) -> BlockRecord:
    """Source code for the entries' values, from their sympy expressions.

    Parameters
    ----------
    entries : sequence of (index tuple, sympy expression)
    arguments : list of (argument name, its symbols)
        E.g. ``[("x", state symbols), ("p", parameter symbols)]``.
    width : int
        Length of every index tuple (to shape an empty block).
    """
    import sympy as sp

    # Kinks (abs, sign) differentiate to Dirac deltas; off the kink they are zero.
    expressions = [
        e.replace(sp.DiracDelta, _zero) if e.has(sp.DiracDelta) else e for _, e in entries
    ]
    # Canonical order: the same model compiles to the same arithmetic in every
    # process (order="none" follows hash order, which changes the last digits).
    shared, reduced = sp.cse(expressions, symbols=sp.numbered_symbols("_c"), order="canonical")
    indices = np.array([index for index, _ in entries], dtype=np.int64).reshape(-1, width)
    return BlockRecord(
        indices=indices,
        fast=_source(shared, reduced, arguments, "math"),
        safe=_source(shared, reduced, arguments, "numpy"),
    )


def _zero(*_: object) -> Any:
    import sympy as sp

    return sp.S.Zero


def _printer(flavour: str):
    # As lambdify's defaults, but terms are printed in sympy's internal order
    # instead of being sorted (sorting dominates the time of printing).
    settings = {"fully_qualified_modules": False, "inline": True, "order": "none"}
    if flavour == "math":
        from sympy.printing.pycode import PythonCodePrinter

        return PythonCodePrinter(settings | {"strict": True, "allow_unknown_functions": False})
    from sympy.printing.numpy import NumPyPrinter

    return NumPyPrinter(settings | {"allow_unknown_functions": False})


def _source(shared: list, reduced: list, arguments: list[tuple[str, list]], flavour: str):
    """``def generated(x, p): ...`` computing the reduced expressions; None if unprintable."""
    printer = _printer(flavour)
    lines = [f"def {FUNCTION_NAME}({', '.join(name for name, _ in arguments)}):"]
    for name, symbols in arguments:
        if symbols:
            lines.append(f"    [{', '.join(str(s) for s in symbols)}] = {name}")
    try:
        for symbol, expression in shared:
            lines.append(f"    {symbol} = {printer.doprint(expression)}")
        values = [printer.doprint(expression) for expression in reduced]
    except Exception:  # the printer refuses a function (math flavour): numpy code only
        if flavour == "math":
            return None
        raise
    lines.append(f"    return ({''.join(value + ', ' for value in values)})")
    return "\n".join(lines) + "\n"


class CompiledBlock:
    """A block's values at (x, p): flat array (count, *trailing axes of x).

    The fast source (or, without one, the numpy source) is checked and compiled
    when the block is made: a cached block that fails the check raises
    :class:`CodeRefused` and is rebuilt. The numpy source of a block with a fast
    one is checked and compiled on first need (points with trailing axes, or a
    domain error); should it fail the check then, its values are nan.
    """

    def __init__(self, record: BlockRecord) -> None:
        self.record = record
        self.indices = record.indices
        self.count = record.count
        fast = record.fast
        self._fast = None if fast is None else compile_checked(fast, math_namespace(), self.count)
        self._safe = None if fast is not None else self._compile_safe()

    def _compile_safe(self) -> Callable:
        return compile_checked(self.record.safe, numpy_namespace(), self.count)

    def _safe_function(self) -> Callable:
        if self._safe is None:
            try:
                self._safe = self._compile_safe()
            except CodeRefused:
                count = self.count
                self._safe = lambda *_: (float("nan"),) * count
        return self._safe

    def values(self, x: Array, p: Array) -> Array:
        """The entries' values, float array (count,) or (count, *trailing)."""
        fast = self._fast
        if fast is not None:
            try:
                if x.ndim == 1:
                    return np.array(fast(x.tolist(), p.tolist()), dtype=float)
            except _FAST_PATH_FAILURES:
                pass
        return self.safe_values(x, p)

    def safe_values(self, x: Array, p: Array) -> Array:
        arrays = (np.asarray(x, dtype=float), np.asarray(p, dtype=float))
        trailing = np.broadcast_shapes(*(a.shape[1:] for a in arrays))
        out = np.empty((self.count, *trailing))
        with np.errstate(all="ignore"):
            results = self._safe_function()(*arrays)
        for i, value in enumerate(results):
            out[i] = value
        return out


class DenseOrSparse:
    """Assembles a block of (i, j) entries into an (rows, columns) matrix.

    Dense: the values are scattered into a fresh zero array through the flat
    positions i * columns + j (trailing axes of x kept). Sparse (1-D x only):
    a scipy.sparse CSC matrix from the entries' precomputed column order.
    """

    def __init__(self, indices: Array, shape: tuple[int, int]) -> None:
        self.shape = shape
        rows, columns = indices[:, 0], indices[:, -1]
        self.flat = rows * shape[1] + columns
        order = np.lexsort((rows, columns))
        self.order = order
        self.row_indices = rows[order].astype(np.int32)
        counts = np.bincount(columns, minlength=shape[1])
        self.pointers = np.concatenate([[0], np.cumsum(counts)]).astype(np.int32)

    def dense(self, values: Array) -> Array:
        trailing = values.shape[1:]
        out = np.zeros((self.shape[0] * self.shape[1], *trailing))
        out[self.flat] = values
        return out.reshape(self.shape + trailing)

    def sparse(self, values: Array) -> Any:
        import scipy.sparse

        return scipy.sparse.csc_matrix(
            (values[self.order], self.row_indices, self.pointers), shape=self.shape
        )


def _scatter_plan(rows: Array) -> tuple[Array, Array, Array]:
    """Sort order, distinct rows and their starts, for sums by row with ``np.add.reduceat``."""
    order = np.argsort(rows, kind="stable")
    sorted_rows = rows[order]
    starts = np.flatnonzero(np.r_[True, sorted_rows[1:] != sorted_rows[:-1]]) if rows.size else rows
    return order, sorted_rows[starts] if rows.size else rows, starts


class _Contraction:
    """sum over entries of value[source] * prod_r vectors[r][slot_r], summed into rows."""

    def __init__(self, source: Array, rows: Array, slots: Array, size: int) -> None:
        order, self.targets, self.starts = _scatter_plan(rows)
        self.source = source[order]
        self.slots = slots[order]
        self.size = size

    def __call__(self, values: Array, vectors: Sequence[Any]) -> Array:
        vectors = [np.asarray(v) for v in vectors]
        dtype = np.result_type(float, values.dtype, *vectors)
        extra = max((v.ndim - 1 for v in vectors), default=0)
        trailing = np.broadcast_shapes(*(v.shape[1:] for v in vectors))
        out = np.zeros((self.size, *trailing), dtype=dtype)
        if self.source.size == 0:
            return out
        terms = values[self.source].reshape((-1,) + (1,) * extra)
        for r, vector in enumerate(vectors):
            # Each vector's own trailing axes, aligned to the right (numpy broadcasting).
            gathered = vector[self.slots[:, r]]
            padding = (1,) * (extra - (vector.ndim - 1))
            terms = terms * gathered.reshape((gathered.shape[0], *padding, *vector.shape[1:]))
        terms = np.broadcast_to(terms, (terms.shape[0], *trailing))
        out[self.targets] = np.add.reduceat(terms, self.starts, axis=0)
        return out


def symmetric_contraction(indices: Array, size: int) -> _Contraction:
    """T(v1, ..., vk)_i from entries (i, j1 <= ... <= jk) of a symmetric tensor.

    Each sorted entry stands for all its distinct orderings, expanded once here.
    """
    source, rows, slots = [], [], []
    for entry, index in enumerate(indices.tolist()):
        for ordering in set(permutations(index[1:])):
            source.append(entry)
            rows.append(index[0])
            slots.append(ordering)
    width = indices.shape[1] - 1
    return _Contraction(
        np.array(source, dtype=np.int64),
        np.array(rows, dtype=np.int64),
        np.array(slots, dtype=np.int64).reshape(-1, width),
        size,
    )


def mixed_contraction(indices: Array, size: int, parameters: int) -> _Contraction:
    """d/dp_k (f_x v) as rows i * m + k from entries (i, j, k)."""
    count = indices.shape[0]
    return _Contraction(
        np.arange(count, dtype=np.int64),
        indices[:, 0] * parameters + indices[:, 2],
        indices[:, 1:2],
        size * parameters,
    )


class Lazy:
    """A callable made on its first call (keeps start-up short)."""

    __slots__ = ("_build", "_function")

    def __init__(self, build: Callable[[], Callable]) -> None:
        self._build = build
        self._function: Callable | None = None

    def __call__(self, *args: Any) -> Any:
        if self._function is None:
            self._function = self._build()
        return self._function(*args)


__all__ = [
    "BlockRecord",
    "CodeRefused",
    "CompiledBlock",
    "DenseOrSparse",
    "Lazy",
    "generate_block",
    "mixed_contraction",
    "symmetric_contraction",
]


class SecondEntries:
    """The nonzero entries of the second derivatives of f, and their contractions.

    Holds (i, j, k) of every nonzero d2f_i/dx_j dx_k (both orders of each pair
    j != k) and of every nonzero d2f_i/dx_j dp_k, and one fast compiled call
    for their values at (x, p). Built by
    :meth:`~branchline.model.expression_model.ExpressionFunctions.second_entries`. Small models contract
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

    def table(self, x: Array, p: Array) -> Array:
        """Both tensors as one dense (n + m, n * n) matrix (models with ``dense`` only):
        row k is d2f_i/dx_j dx_k, row n + k is d2f_i/dx_j dp_k, column i * n + j.
        Contracting it with left (x) right gives the exact gradient of left^T f_x right."""
        n, m = self.size, self.count
        table = np.zeros((n + m) * n * n)
        if self._evaluate is not None:
            table[self._dense_positions] = self._evaluate(x, p)[self._dense_sources]
        return table.reshape(n + m, n * n)

    def contract(self, x: Array, p: Array, terms) -> tuple[Array, Array]:
        """The gradient in x and in p of sum_t left_t^T f_x right_t, column by column.

        ``terms`` is a sequence of (left, right) pairs of shape (n, r); returns
        (sum_t sum_ij left_ic f_i,x_j x_k right_jc over k, shape (n, r);
        the same with d/dp_k in place of d/dx_k, shape (m, r)): the exact
        derivatives of bordered test functions (Govaerts, chapter 4).
        """
        n = self.size
        r = terms[0][0].shape[1]
        if self.dense:  # one (n + m, n * n) matrix of both tensors, times left (x) right
            outer = sum(left[:, None, :] * right[None, :, :] for left, right in terms)
            both = self.table(x, p) @ outer.reshape(n * n, r)
            return both[:n], both[n:]
        m = self.count
        hessian, mixed = self(x, p)
        shift = np.arange(r)
        i, j, k = self.hessian_index
        weights = (hessian[:, None] * sum(left[i] * right[j] for left, right in terms)).ravel()
        d_x = np.bincount((k[:, None] * r + shift).ravel(), weights, n * r)
        i, j, k = self.mixed_index
        weights = (mixed[:, None] * sum(left[i] * right[j] for left, right in terms)).ravel()
        d_p = np.bincount((k[:, None] * r + shift).ravel(), weights, m * r)
        return d_x.reshape(n, r), d_p.reshape(m, r)
