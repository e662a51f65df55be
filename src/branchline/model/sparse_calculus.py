"""Exact derivatives of an expression model, structural nonzeros only, by equation templates.

Models of many states repeat a few equations over and over (a chain of cells
has one equation per species for the inner cells and one for each end). Each
equation f_i is written as a *template*: its state symbols, in the order of the
state vector, are replaced by slot symbols s0, s1, ... . Equations with the
same template share every derivative: sympy differentiates each template once
per slot (or parameter) and the result is mapped back to each equation's own
states with ``xreplace``. A 1,000-state chain thus costs a handful of sympy
derivatives instead of thousands.

Only structural nonzeros are produced: an equation's derivative with respect
to a state it does not contain is never formed. Higher derivatives are kept
over sorted index tuples only (the tensors are symmetric).

Entries are lists of ``(index tuple, expression)``; the index tuple starts
with the equation i, then the states (and, for the mixed derivative, the
parameter k last).
"""

from __future__ import annotations

from itertools import combinations_with_replacement

import sympy as sp

# A variable of differentiation: (0, slot) for a template's slot, (1, k) for parameter k.
Variable = tuple[int, int]
Entry = tuple[tuple[int, ...], sp.Expr]


class _Template:
    """One equation shape in slot symbols, with its derivatives computed once each."""

    __slots__ = ("derivatives", "expression", "parameters")

    def __init__(self, expression: sp.Expr, parameters: list[sp.Symbol]) -> None:
        self.expression = expression
        self.parameters = parameters
        self.derivatives: dict[tuple[Variable, ...], sp.Expr] = {(): expression}

    def derivative(self, variables: tuple[Variable, ...], slots: list[sp.Symbol]) -> sp.Expr:
        """d^k expression / d variables (sorted), zero when structurally absent."""
        known = self.derivatives.get(variables)
        if known is not None:
            return known
        lower = self.derivative(variables[:-1], slots)
        kind, index = variables[-1]
        symbol = slots[index] if kind == 0 else self.parameters[index]
        value = sp.diff(lower, symbol) if symbol in lower.free_symbols else sp.S.Zero
        self.derivatives[variables] = value
        return value


class SparseCalculus:
    """The structurally nonzero derivatives of f(x, p), computed per equation template.

    Parameters
    ----------
    f : list of sympy expressions (n,)
        The right-hand sides in the state symbols ``x`` and parameter symbols ``p``.
    x, p : list of sympy.Symbol
    """

    def __init__(self, f: list[sp.Expr], x: list[sp.Symbol], p: list[sp.Symbol]) -> None:
        self.f, self.x, self.p = f, x, p
        position = {symbol: j for j, symbol in enumerate(x)}
        self._slots = [sp.Symbol(f"_s{t}", real=True) for t in range(len(x))]
        templates: dict[sp.Expr, _Template] = {}
        self._rows: list[tuple[_Template, tuple[int, ...], dict]] = []
        for expression in f:
            states = tuple(sorted(position[s] for s in expression.free_symbols if s in position))
            key = expression.xreplace({x[j]: self._slots[t] for t, j in enumerate(states)})
            template = templates.get(key)
            if template is None:
                template = templates[key] = _Template(key, p)
            back = {self._slots[t]: x[j] for t, j in enumerate(states)}
            self._rows.append((template, states, back))
        self.template_count = len(templates)

    def _entry(self, row: int, variables: tuple[Variable, ...]) -> sp.Expr:
        template, _, back = self._rows[row]
        value = template.derivative(variables, self._slots)
        return value if value == 0 else value.xreplace(back)

    def jacobian(self) -> list[Entry]:
        """((i, j), df_i/dx_j) for every structural nonzero, row by row."""
        entries = []
        for i, (_, states, _) in enumerate(self._rows):
            for t, j in enumerate(states):
                value = self._entry(i, ((0, t),))
                if value != 0:
                    entries.append(((i, j), value))
        return entries

    def parameter_column(self, k: int) -> list[Entry]:
        """((i,), df_i/dp_k) for the equations that contain parameter k."""
        entries = []
        for i in range(len(self._rows)):
            value = self._entry(i, ((1, k),))
            if value != 0:
                entries.append(((i,), value))
        return entries

    def higher(self, order: int) -> list[Entry]:
        """((i, j, k[, l]), d^order f_i / dx_j dx_k [dx_l]) over sorted j <= k [<= l]."""
        entries = []
        for i, (template, states, _) in enumerate(self._rows):
            for slots in combinations_with_replacement(range(len(states)), order):
                variables = tuple((0, t) for t in slots)
                if template.derivative(variables[:-1], self._slots) == 0:
                    continue
                value = self._entry(i, variables)
                if value != 0:
                    entries.append(((i, *(states[t] for t in slots)), value))
        return entries

    def mixed(self) -> list[Entry]:
        """((i, j, k), d2 f_i / dx_j dp_k) for every structural nonzero."""
        entries = []
        for i, (template, states, _) in enumerate(self._rows):
            for k, parameter in enumerate(self.p):
                if parameter not in template.expression.free_symbols:
                    continue
                for t, j in enumerate(states):
                    value = self._entry(i, ((0, t), (1, k)))
                    if value != 0:
                        entries.append(((i, j, k), value))
        return entries


__all__ = ["SparseCalculus"]
