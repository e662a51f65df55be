"""The checks behind scan validation, and the messages they give.

:class:`Checker` raises :class:`branchline.errors.ScanError` for one source
file: unknown keys (with the nearest valid key suggested), numbers, counts,
text, ``"module:function"`` references and the names of states, parameters,
definitions and observables. Also here: refusing a name used twice, and
ordering definitions so that each follows those it uses (refusing a loop).
What the keys of a scan are, and what each section means, is
:mod:`branchline.scan.loader`'s business (and :mod:`branchline.scan.model_section`'s).
"""

from __future__ import annotations

import difflib
import heapq
import json
import keyword
import math
import re
import unicodedata
from collections.abc import Iterable
from typing import NoReturn

from branchline.errors import ScanError
from branchline.scan.expressions import CONSTANTS, RESERVED

# The key path used for problems with the file as a whole.
FILE_KEY = "(file)"

# Keys of later capabilities, refused with a plain statement rather than "unknown key".
NOT_YET_AVAILABLE: dict[str, str] = {}

# Column names of the result tables; a state, parameter or observable of the same
# name would make a table ambiguous.
RESERVED_COLUMNS = frozenset(
    {
        "trace",
        "step",
        "arclength",
        "stable",
        "unstable_count",
        "leading_real",
        "leading_imag",
        "kind",
        "frequency",
        "lyapunov",
        "criticality",
        "branching",
        "note",
        "norm",
        "period",
        "multiplier",
        "boundary",
        "cycles",
        "member",
        "scan",
        "status",
        "seconds",
        "error",
        "search",  # search.csv
        "found_by_search",
        "in_box",
    }
)

_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
_IMPORT_PATH = re.compile(
    r"[A-Za-z_][A-Za-z0-9_]*(\.[A-Za-z_][A-Za-z0-9_]*)*:[A-Za-z_][A-Za-z0-9_]*\Z"
)
# How many names a message lists before it abbreviates.
_NAMES_SHOWN = 12
# How many characters of a bad value a message shows: one line stays readable.
_VALUE_SHOWN = 60
# Longest name (state, parameter, trace, ...) and title accepted: names become
# table columns, legend entries and file text; far longer ones are mistakes
# (and a 10^5-character name once took minutes to lay out in a figure).
MAX_NAME_LENGTH = 80
MAX_TITLE_LENGTH = 200
# Unicode categories refused in names and titles: control and format characters
# (newlines, escapes, bidirectional overrides) would be written raw to the
# terminal, the CSV tables and the markdown report.
_CONTROL_CATEGORIES = ("Cc", "Cf", "Zl", "Zp")


def key_path(parent: str, child: object) -> str:
    """Dotted key path ``parent.child``, quoting a child that is not a plain name."""
    text = str(child)
    if not _NAME.match(text) or len(text) > _VALUE_SHOWN:
        if len(text) > _VALUE_SHOWN:
            text = text[: _VALUE_SHOWN - 3] + "..."
        text = "".join(
            f"\\u{ord(c):04x}" if unicodedata.category(c) in _CONTROL_CATEGORIES else c
            for c in json.dumps(text, ensure_ascii=False)
        )
    return f"{parent}.{text}" if parent else text


def shown(value: object) -> str:
    """A value as a message shows it: its repr, shortened past ``_VALUE_SHOWN`` characters."""
    text = repr(value)
    return text if len(text) <= _VALUE_SHOWN else text[: _VALUE_SHOWN - 3] + "..."


def listed(names: Iterable[str]) -> str:
    """Names joined by commas for a message, abbreviated past ``_NAMES_SHOWN``."""
    names = list(names)
    if not names:
        return "(none)"
    if len(names) > _NAMES_SHOWN:
        return ", ".join(names[:_NAMES_SHOWN]) + f", ... ({len(names)} in all)"
    return ", ".join(names)


def suggestion(word: str, candidates: Iterable[str]) -> str:
    """A "did you mean" hint naming the nearest candidate (case first, then spelling), or ""."""
    candidates = list(candidates)
    same_letters = [c for c in candidates if c.lower() == word.lower()]
    close = same_letters or difflib.get_close_matches(word, candidates, n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else ""


class Checker:
    """Raises ScanError for one source; small helpers for the common checks."""

    def __init__(self, source: str) -> None:
        self.source = source

    def fail(self, key: str, problem: str) -> NoReturn:
        """Raise :class:`ScanError` for this source at ``key``."""
        raise ScanError(self.source, key, problem)

    def keys(self, table: dict, path: str, allowed: tuple[str, ...]) -> None:
        """Refuse any key of ``table`` not in ``allowed``, suggesting the nearest one."""
        for key in table:
            if key in allowed:
                continue
            where = key_path(path, key)
            if not path and key in NOT_YET_AVAILABLE:
                self.fail(where, f"{NOT_YET_AVAILABLE[key]} are not available in this version")
            hint = suggestion(str(key), allowed) or f"; valid keys here: {', '.join(allowed)}"
            self.fail(where, f"unknown key {shown(str(key))}{hint}")

    def table(self, value: object, key: str, what: str = "a table (name = value entries)") -> dict:
        """``value`` if it is a table (dict), else refuse it as not ``what``."""
        if not isinstance(value, dict):
            self.fail(key, f"must be {what}, got {shown(value)}")
        return value

    def number(self, value: object, key: str) -> float:
        """``value`` as a finite float (booleans and text refused)."""
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            self.fail(key, f"must be a number, got {shown(value)}")
        try:
            number = float(value)
        except OverflowError:
            number = math.inf
        if not math.isfinite(number):
            self.fail(key, f"must be a finite number, got {shown(value)}")
        return number

    def count(self, value: object, key: str) -> int:
        """A positive whole number (an integral float such as 2e3 is accepted)."""
        if isinstance(value, float) and math.isfinite(value) and value.is_integer():
            value = int(value)
        if isinstance(value, bool) or not isinstance(value, int) or value <= 0:
            self.fail(key, f"must be a positive whole number, got {shown(value)}")
        return value

    def text(self, value: object, key: str) -> str:
        """``value`` if it is a string."""
        if not isinstance(value, str):
            self.fail(key, f"must be text, got {shown(value)}")
        return value

    def import_path(self, value: object, key: str) -> str:
        """``value`` stripped, if shaped ``\"module:function\"`` (nothing is imported)."""
        text = self.text(value, key).strip()
        if not _IMPORT_PATH.match(text):
            self.fail(
                key,
                f'must name a Python function as "module:function" '
                f'(e.g. "mypackage.model:rhs"), got {shown(value)}',
            )
        return text

    def plain_text(self, value: object, key: str, limit: int) -> str:
        """Text of at most ``limit`` characters with no control characters (names, titles)."""
        text = self.text(value, key)
        if len(text) > limit:
            self.fail(key, f"is {len(text)} characters long; at most {limit} are allowed")
        bad = sorted({c for c in text if unicodedata.category(c) in _CONTROL_CATEGORIES})
        if bad:
            codes = ", ".join(f"U+{ord(c):04X}" for c in bad[:5])
            self.fail(key, f"contains control characters ({codes}); use plain text")
        return text

    def name(self, name: object, key: str, what: str, expression_model: bool) -> str:
        """A state/parameter/definition/observable name: a plain identifier, not reserved."""
        text = str(name)
        if len(text) > MAX_NAME_LENGTH:
            self.fail(
                key, f"a {what} name of {len(text)} characters; at most {MAX_NAME_LENGTH}"
            )
        if not _NAME.match(text) or keyword.iskeyword(text):
            self.fail(
                key,
                f"{shown(text)} is not a valid {what} name: use letters, digits and '_', "
                "not starting with a digit, and not a Python keyword",
            )
        if text.startswith("__"):
            self.fail(key, f"'{text}' is not a valid {what} name: it may not start with '__'")
        if expression_model and text in RESERVED:
            kind = "constant" if text in CONSTANTS else "function"
            self.fail(key, f"'{text}' is the name of a {kind} in expressions; rename the {what}")
        if text in RESERVED_COLUMNS:
            self.fail(key, f"'{text}' is a column of the result tables; rename the {what}")
        return text


def check_clashes(check: Checker, groups: list[tuple[str, str, dict]]) -> None:
    """Refuse a name used twice across parameters, states, definitions, observables."""
    owner: dict[str, str] = {}
    for path, what, names in groups:
        for name in names:
            if name in owner:
                check.fail(
                    key_path(path, name),
                    f"'{name}' is already used as a {owner[name]}; each name may be used once",
                )
            owner[name] = what


def unknown_name(name: str, parameters: dict, states: dict, definitions: dict) -> str:
    """The problem text for an unknown name in an expression, listing the known ones."""
    known = [*states, *parameters, *definitions]
    hint = suggestion(name, known)
    parts = [f"states: {listed(states)}", f"parameters: {listed(parameters)}"]
    if definitions:
        parts.append(f"definitions: {listed(definitions)}")
    return f"unknown name '{name}' in the expression{hint} (known {'; '.join(parts)})"


def dependency_order(check: Checker, uses: dict[str, set[str]]) -> list[str]:
    """Definitions ordered so each comes after those it uses (file order where free).

    Kahn's topological sort, taking the earliest-written ready definition each time.
    Raises on a loop, naming it as ``a -> b -> a``.
    """
    names = list(uses)
    position = {name: index for index, name in enumerate(names)}
    needs = {name: uses[name] & set(names) for name in names}
    users: dict[str, list[str]] = {name: [] for name in names}
    for name in names:
        for needed in needs[name]:
            users[needed].append(name)
    waiting = {name: len(needs[name]) for name in names}
    ready = [position[name] for name in names if waiting[name] == 0]
    heapq.heapify(ready)
    order: list[str] = []
    while ready:
        name = names[heapq.heappop(ready)]
        order.append(name)
        for user in users[name]:
            waiting[user] -= 1
            if waiting[user] == 0:
                heapq.heappush(ready, position[user])
    if len(order) < len(names):
        placed = set(order)
        cycle = _find_cycle([n for n in names if n not in placed], needs)
        check.fail(
            key_path("model.definitions", cycle[0]),
            f"definitions refer to each other in a loop: {' -> '.join(cycle)}",
        )
    return order


def _find_cycle(remaining: list[str], needs: dict[str, set[str]]) -> list[str]:
    """A loop among definitions that could not be ordered, e.g. ['a', 'b', 'a']."""
    left = set(remaining)
    path = [remaining[0]]
    seen = {remaining[0]: 0}
    while True:
        # Every unplaced definition needs at least one other unplaced one.
        following = min((n for n in needs[path[-1]] if n in left), key=remaining.index)
        if following in seen:
            return [*path[seen[following] :], following]
        seen[following] = len(path)
        path.append(following)


__all__ = [
    "FILE_KEY",
    "NOT_YET_AVAILABLE",
    "RESERVED_COLUMNS",
    "Checker",
    "check_clashes",
    "dependency_order",
    "key_path",
    "listed",
    "shown",
    "suggestion",
    "unknown_name",
]
