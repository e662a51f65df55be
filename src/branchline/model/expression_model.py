"""Expression models (``[model.equations]``) compiled into a :class:`~branchline.model.build.Model`.

The model text is parsed by the whitelisting parser of
:mod:`branchline.scan.expressions`, differentiated exactly by sympy, only at
structural nonzeros and once per equation template
(:mod:`branchline.model.sparse_calculus`), and each block of entries is turned
into checked Python code (:mod:`branchline.model.codegen`). Blocks are kept in
the model cache (:mod:`branchline.model.cache`) under a hash of the model text:
a model built before is read back without any sympy work (sympy is not even
imported). f and df/dx are compiled at build; each column of df/dp, the second
and third derivative forms and d/dp (f_x v) on first use.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np

from branchline.errors import ExpressionError, ScanError
from branchline.model.cache import ModelCache, model_key
from branchline.model.codegen import (
    CodeRefused,
    CompiledBlock,
    DenseOrSparse,
    Lazy,
    SecondEntries,
    generate_block,
    mixed_contraction,
    symmetric_contraction,
)

if TYPE_CHECKING:
    from branchline.scan.loader import ExpressionModelSpec

Array = np.ndarray

# An expression model's Jacobian is returned as a scipy.sparse matrix (and the
# model continued with sparse LU) above the policy's size threshold when at most
# this fraction of its entries are structural nonzeros; denser ones stay dense
# (sparse LU fill-in would cost more than LAPACK).
SPARSE_DENSITY = 0.1


class ExpressionBlocks:
    """The compiled blocks of one expression model: from memory, the cache, or sympy.

    Block names: ``rhs``, ``jacobian``, ``parameter.<k>`` (one column of
    df/dp), ``parameters`` (all of them), ``second``,
    ``third``, ``mixed``, ``observables``. Symbolic work (parsing, sympy
    derivatives, code generation) happens only for a block the cache lacks.
    """

    def __init__(self, spec: ExpressionModelSpec, source: str, cache: ModelCache | None) -> None:
        self.spec, self.source, self.cache = spec, source, cache
        self.n, self.m = len(spec.equations), len(spec.parameters)
        self._symbolic: _Symbolic | None = None
        self._blocks: dict[str, CompiledBlock] = {}

    def _limits(self, name: str) -> tuple[int, ...]:
        n, m = self.n, self.m
        if name == "observables":
            return (len(self.spec.observables),)
        return {
            "rhs": (n,),
            "jacobian": (n, n),
            "second": (n, n, n),
            "third": (n, n, n, n),
            "mixed": (n, n, m),
            "parameters": (n, m),
        }.get(name, (n,))

    def symbolic(self) -> _Symbolic:
        if self._symbolic is None:
            self._symbolic = _Symbolic(self.spec, self.source)
        return self._symbolic

    def get(self, name: str) -> CompiledBlock:
        """The compiled block ``name``: cached, else generated (and then cached)."""
        block = self._blocks.get(name)
        if block is not None:
            return block
        limits = self._limits(name)
        record = None if self.cache is None else self.cache.load(name, len(limits), limits)
        if record is not None:
            try:
                block = CompiledBlock(record)
            except CodeRefused:  # a damaged or foreign entry: rebuild it
                block = None
        if block is None:
            symbolic = self.symbolic()
            record = generate_block(symbolic.entries(name), symbolic.arguments, len(limits))
            block = CompiledBlock(record)
            if self.cache is not None:
                self.cache.save(name, record)
        self._blocks[name] = block
        return block


class _Symbolic:
    """The parsed model in sympy and its sparse derivatives (made only when needed)."""

    def __init__(self, spec: ExpressionModelSpec, source: str) -> None:
        import sympy as sp

        from branchline.model.sparse_calculus import SparseCalculus

        states, parameters = tuple(spec.equations), tuple(spec.parameters)
        x = [sp.Symbol(f"_x{i}", real=True) for i in range(len(states))]
        p = [sp.Symbol(f"_p{k}", real=True) for k in range(len(parameters))]
        known: dict[str, Any] = dict(zip(states, x, strict=True))
        known.update(zip(parameters, p, strict=True))
        for name, text in spec.definitions.items():
            key = f"model.definitions.{name}"
            if name in known:
                raise ScanError(
                    source, key, f"'{name}' is already a state, parameter or definition"
                )
            known[name] = _translate(text, known, key, source)
        self.f = [
            _translate(text, known, f"model.equations.{name}", source)
            for name, text in spec.equations.items()
        ]
        self.observed = [
            _translate(text, known, f"model.observables.{name}", source)
            for name, text in spec.observables.items()
        ]
        self.arguments = [("x", x), ("p", p)]
        self.calculus = SparseCalculus(self.f, x, p)

    def entries(self, name: str) -> list:
        calculus = self.calculus
        if name == "rhs":
            return [((i,), fi) for i, fi in enumerate(self.f)]
        if name == "observables":
            return [((i,), value) for i, value in enumerate(self.observed)]
        if name == "jacobian":
            return calculus.jacobian()
        if name == "second":
            return calculus.higher(2)
        if name == "third":
            return calculus.higher(3)
        if name == "mixed":
            return calculus.mixed()
        if name == "parameters":
            return [
                ((i, k), value)
                for k in range(len(calculus.p))
                for (i,), value in calculus.parameter_column(k)
            ]
        return calculus.parameter_column(int(name.split(".")[1]))


def _translate(text: str, known: dict[str, Any], key: str, source: str) -> Any:
    """Parse one expression and replace every name by its state/parameter symbol or definition."""
    from branchline.scan.expressions import parse_expression

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


class ExpressionFunctions:
    """The model callables of :class:`~branchline.model.build.Model`, over the blocks.

    ``rhs`` and ``jacobian`` are compiled here; the rest on first use.
    """

    def __init__(self, blocks: ExpressionBlocks, sparse_above: int) -> None:
        self.blocks = blocks
        self.n, self.m = blocks.n, blocks.m
        self._rhs = blocks.get("rhs")
        self._jacobian = blocks.get("jacobian")
        self.assembly = DenseOrSparse(self._jacobian.indices, (self.n, self.n))
        nonzeros = self._jacobian.count
        self.sparse = self.n > sparse_above and nonzeros <= SPARSE_DENSITY * self.n * self.n
        self._columns: dict[int, tuple[CompiledBlock, Array]] = {}
        self.second = Lazy(lambda: self._form("second", 2))
        self.third = Lazy(lambda: self._form("third", 3))
        self.jacobian_parameter_derivative = Lazy(self._mixed)
        self._second_entries: SecondEntries | None = None

    def rhs(self, x: Array, p: Array) -> Array:
        """f(x, p), shape (n,) or (n, *trailing axes of x)."""
        return self._rhs.values(x, p)

    def jacobian(self, x: Array, p: Array) -> Any:
        """df/dx: dense (n, n[, ...]), or scipy.sparse CSC for sparse models at one point."""
        values = self._jacobian.values(x, p)
        if self.sparse and values.ndim == 1:
            return self.assembly.sparse(values)
        return self.assembly.dense(values)

    def _column(self, k: int) -> tuple[CompiledBlock, Array]:
        column = self._columns.get(k)
        if column is None:
            block = self.blocks.get(f"parameter.{k}")
            column = self._columns[k] = (block, block.indices[:, 0])
        return column

    def parameter_column(self, x: Array, p: Array, k: int) -> Array:
        """df/dp_k, shape (n,) or (n, *trailing)."""
        block, rows = self._column(k)
        values = block.values(x, p)
        out = np.zeros((self.n, *values.shape[1:]))
        out[rows] = values
        return out

    def parameter_jacobian(self, x: Array, p: Array) -> Array:
        """df/dp for every parameter, shape (n, m) or (n, m, *trailing) (one block)."""
        block = self.blocks.get("parameters")
        values = block.values(x, p)
        out = np.zeros((self.n, self.m, *values.shape[1:]))
        out[block.indices[:, 0], block.indices[:, 1]] = values
        return out

    def derivatives(self, x: Array, p: Array, parameter: int | None = None) -> tuple[Any, Array]:
        """(df/dx, df/dp): every column of df/dp, or only column ``parameter`` (shape (n,))."""
        if parameter is None:
            return self.jacobian(x, p), self.parameter_jacobian(x, p)
        return self.jacobian(x, p), self.parameter_column(x, p, parameter)

    def _form(self, name: str, order: int):
        block = self.blocks.get(name)
        contraction = symmetric_contraction(block.indices, self.n)

        def form(x: Array, p: Array, *vectors: Array) -> Array:
            if len(vectors) != order:
                raise TypeError(f"{name} takes x, p and {order} vectors")
            return contraction(block.values(np.asarray(x, dtype=float), p), vectors)

        return form

    def _mixed(self):
        block = self.blocks.get("mixed")
        contraction = mixed_contraction(block.indices, self.n, self.m)

        def mixed(x: Array, p: Array, v: Array) -> Array:
            values = contraction(block.values(np.asarray(x, dtype=float), p), (v,))
            return values.reshape((self.n, self.m, *values.shape[1:]))

        return mixed

    def second_entries(self) -> SecondEntries:
        """The nonzero entries of f_xx and d/dp f_x as one call (:class:`SecondEntries`),
        from the ``second`` and ``mixed`` blocks, built on the first call."""
        if self._second_entries is None:
            second, mixed = self.blocks.get("second"), self.blocks.get("mixed")

            def evaluate(x: Array, p: Array) -> Array:
                return np.concatenate([second.values(x, p), mixed.values(x, p)])

            empty = second.count + mixed.count == 0
            self._second_entries = SecondEntries.build(
                [tuple(row) for row in second.indices.tolist()],
                [tuple(row) for row in mixed.indices.tolist()],
                None if empty else evaluate,
                self.n,
                self.m,
            )
        return self._second_entries

    def observables(self, x: Array, p: Array) -> dict[str, Any]:
        """{name: value} of the observables (floats at one point, arrays over many)."""
        names = tuple(self.blocks.spec.observables)
        values = self.blocks.get("observables").values(x, p)
        if values.ndim == 1:
            return dict(zip(names, values.tolist(), strict=True))
        return dict(zip(names, values, strict=True))


def expression_functions(
    spec: ExpressionModelSpec, source: str, sparse_above: int, use_cache: bool = True
) -> ExpressionFunctions:
    """Compile (or read from the cache) an expression model's callables."""
    cache = ModelCache(model_key(spec)) if use_cache else None
    if cache is not None and cache.folder is None:
        cache = None
    blocks = ExpressionBlocks(spec, source, cache)
    functions = ExpressionFunctions(blocks, sparse_above)
    if spec.observables:
        blocks.get("observables")
    return functions


__all__ = ["SPARSE_DENSITY", "ExpressionBlocks", "ExpressionFunctions", "expression_functions"]
