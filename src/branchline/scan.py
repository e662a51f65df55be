"""Scan files: TOML -> validated, frozen dataclasses.

Everything is validated here, before any computing; every problem raises
:class:`branchline.errors.ScanError` naming the file, the dotted key path
(``model.equations.S``, ``trace[2].interval``; arrays count from 1) and the
problem, with the nearest valid key or name suggested for a typo.

Rules beyond the layout in ``interface.md``:

- Names of states, parameters, definitions and observables are ASCII
  identifiers (letters, digits, ``_``; not a Python keyword, not starting
  with ``__``), used once across all four groups, and not a column of the
  result tables (:data:`RESERVED_COLUMNS`). In expression models they may not
  be a function or constant of the expressions
  (:data:`branchline.expressions.RESERVED`).
- Definitions may use each other in any order, but not in a loop; they are
  stored in dependency order (file order where free). Expressions may use the
  states, parameters and definitions; observables may not use each other.
- A trace's ``[trace.steps]`` replaces the entries of the global ``[steps]``
  it names; the merged settings need ``0 < smallest <= initial <= largest``.
- Traces are named ``trace1``, ``trace2``, ... (1-based over all traces)
  unless named; names are unique and contain no ``.`` (kept for branches
  started at branch points: ``<trace>.1``, ...).
- ``switch_branches = false`` in a trace turns off following the crossing
  branches at its branch points (default true).
- The ``interval`` must contain the start value: ``set.<vary>`` if given,
  else the parameter's default.
- ``[model.python]`` functions are only checked for the ``"module:function"``
  shape here; importing them is :mod:`branchline.model`'s job.
- ``[[boundary]]``, ``[[cycles]]`` and ``[ensemble]`` are refused as not
  available in this version.
"""

from __future__ import annotations

import copy
import difflib
import heapq
import json
import keyword
import math
import re
from collections.abc import Iterable
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, NoReturn

from branchline.errors import ExpressionError, ScanError
from branchline.expressions import CONSTANTS, RESERVED, expression_names, parse_expression

try:
    import tomllib
except ModuleNotFoundError:  # Python < 3.11
    import tomli as tomllib

# Defaults of the [steps] table: arclength units of the (state, parameter) space.
DEFAULT_INITIAL_STEP = 0.01
DEFAULT_SMALLEST_STEP = 1e-8
DEFAULT_LARGEST_STEP = 0.05
DEFAULT_MAX_POINTS = 2000


@dataclass(frozen=True)
class StepSettings:
    """Step-length settings of a trace (pseudo-arclength units)."""

    initial: float = DEFAULT_INITIAL_STEP
    smallest: float = DEFAULT_SMALLEST_STEP
    largest: float = DEFAULT_LARGEST_STEP
    max_points: int = DEFAULT_MAX_POINTS


@dataclass(frozen=True)
class ExpressionModelSpec:
    """A model given as expressions (``[model.equations]`` etc.), still as text."""

    parameters: dict[str, float]
    equations: dict[str, str]
    definitions: dict[str, str] = field(default_factory=dict)
    observables: dict[str, str] = field(default_factory=dict)


@dataclass(frozen=True)
class PythonModelSpec:
    """A model given as Python functions (``[model.python]``).

    ``rhs``/``jacobian``/``observables`` are ``"module:function"`` strings;
    importing the module runs its code, by design.
    """

    parameters: dict[str, float]
    rhs: str
    size: int
    jacobian: str | None = None
    states: tuple[str, ...] | None = None
    observables: str | None = None


@dataclass(frozen=True)
class TraceSpec:
    """One ``[[trace]]``: an equilibrium branch to follow."""

    name: str
    vary: str
    interval: tuple[float, float]
    start: dict[str, float] | str  # state -> guess, or "module:function" (Python models)
    set: dict[str, float] = field(default_factory=dict)
    direction: str = "both"  # "both", "increasing", "decreasing"
    steps: StepSettings = field(default_factory=StepSettings)
    switch_branches: bool = True  # follow branches crossing at branch points


@dataclass(frozen=True)
class Scan:
    """A validated scan file."""

    source: str  # file path or "<dict>"
    title: str
    model: ExpressionModelSpec | PythonModelSpec
    traces: tuple[TraceSpec, ...]
    steps: StepSettings = field(default_factory=StepSettings)
    raw: dict[str, Any] = field(default_factory=dict, compare=False, repr=False)

    @property
    def stem(self) -> str:
        return Path(self.source).stem if self.source != "<dict>" else "scan"


def load_scan(path: str | Path) -> Scan:
    """Read and validate a scan file.

    Parameters
    ----------
    path : str or Path
        A TOML scan file (layout: docs in ``interface.md``).

    Returns
    -------
    Scan

    Raises
    ------
    ScanError
        If the file is missing, unreadable, not TOML, or any key is invalid.
        The message names the file, the dotted key path and the problem.
    """
    path = Path(path)
    source = str(path)
    try:
        content = path.read_bytes()
    except FileNotFoundError:
        raise ScanError(source, FILE_KEY, "no such file") from None
    except IsADirectoryError:
        raise ScanError(source, FILE_KEY, "this is a directory, not a scan file") from None
    except OSError as err:
        raise ScanError(source, FILE_KEY, f"cannot be read ({err.strerror or err})") from None
    try:
        text = content.decode("utf-8")
    except UnicodeDecodeError as err:
        line = content[: err.start].count(b"\n") + 1
        raise ScanError(source, FILE_KEY, f"not UTF-8 text (line {line})") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise ScanError(source, FILE_KEY, f"not valid TOML: {err}") from None
    return scan_from_dict(data, source)


def scan_from_dict(data: dict[str, Any], source: str = "<dict>") -> Scan:
    """Validate a scan given as a dictionary (same layout as the TOML file).

    Parameters
    ----------
    data : dict
        The parsed TOML (or an equivalent hand-built dictionary).
    source : str
        The file name used in messages and for the default title.

    Returns
    -------
    Scan
        Frozen; ``raw`` holds a copy of ``data``.

    Raises
    ------
    ScanError
        For the first problem found, naming ``source``, the key path and the problem.

    Notes
    -----
    A trace's ``[trace.steps]`` entries override the matching entries of the
    global ``[steps]`` table one by one; entries it leaves out come from
    ``[steps]``, then from the defaults. The merged settings must satisfy
    ``0 < smallest <= initial <= largest``.
    """
    check = _Checker(str(source))
    if not isinstance(data, dict):
        check.fail(FILE_KEY, "the scan must be a table of keys")
    check.keys(data, "", TOP_KEYS)
    title = data.get("title", Path(source).stem if source != "<dict>" else "scan")
    if not isinstance(title, str):
        check.fail("title", f"must be text, got {_shown(title)}")
    if "model" not in data:
        check.fail("model", "missing: the scan needs a [model] with its parameters and equations")
    model = _model(check, data["model"])
    steps = _steps(check, data.get("steps", {}), "steps", StepSettings())
    traces = _traces(check, data.get("trace"), model, steps)
    return Scan(
        source=str(source),
        title=title,
        model=model,
        traces=traces,
        steps=steps,
        raw=copy.deepcopy(data),
    )


# --------------------------------------------------------------------------- keys

# The key path used for problems with the file as a whole.
FILE_KEY = "(file)"

TOP_KEYS = ("title", "model", "trace", "steps")
MODEL_KEYS = ("parameters", "equations", "definitions", "observables", "python")
PYTHON_KEYS = ("rhs", "size", "jacobian", "states", "observables")
TRACE_KEYS = ("name", "vary", "interval", "start", "set", "direction", "steps", "switch_branches")
STEP_KEYS = ("initial", "smallest", "largest", "max_points")
DIRECTIONS = ("both", "increasing", "decreasing")

# Keys of later capabilities, refused with a plain statement rather than "unknown key".
NOT_YET_AVAILABLE = {
    "boundary": "two-parameter boundaries ([[boundary]])",
    "cycles": "periodic orbits ([[cycles]])",
    "ensemble": "ensembles ([ensemble])",
}

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
    }
)

_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
_IMPORT_PATH = re.compile(
    r"[A-Za-z_][A-Za-z0-9_]*(\.[A-Za-z_][A-Za-z0-9_]*)*:[A-Za-z_][A-Za-z0-9_]*\Z"
)
# How many names a message lists before it abbreviates.
_NAMES_SHOWN = 12


def _key(parent: str, child: object) -> str:
    text = str(child)
    if not _NAME.match(text):
        text = json.dumps(text, ensure_ascii=False)
    return f"{parent}.{text}" if parent else text


def _shown(value: object) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _listed(names: Iterable[str]) -> str:
    names = list(names)
    if not names:
        return "(none)"
    if len(names) > _NAMES_SHOWN:
        return ", ".join(names[:_NAMES_SHOWN]) + f", ... ({len(names)} in all)"
    return ", ".join(names)


def _suggestion(word: str, candidates: Iterable[str]) -> str:
    """A "did you mean" hint naming the nearest candidate (case first, then spelling), or ""."""
    candidates = list(candidates)
    same_letters = [c for c in candidates if c.lower() == word.lower()]
    close = same_letters or difflib.get_close_matches(word, candidates, n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else ""


class _Checker:
    """Raises ScanError for one source; small helpers for the common checks."""

    def __init__(self, source: str) -> None:
        self.source = source

    def fail(self, key: str, problem: str) -> NoReturn:
        raise ScanError(self.source, key, problem)

    def keys(self, table: dict, path: str, allowed: tuple[str, ...]) -> None:
        for key in table:
            if key in allowed:
                continue
            where = _key(path, key)
            if not path and key in NOT_YET_AVAILABLE:
                self.fail(where, f"{NOT_YET_AVAILABLE[key]} are not available in this version")
            hint = _suggestion(str(key), allowed) or f"; valid keys here: {', '.join(allowed)}"
            self.fail(where, f"unknown key '{key}'{hint}")

    def table(self, value: object, key: str, what: str = "a table (name = value entries)") -> dict:
        if not isinstance(value, dict):
            self.fail(key, f"must be {what}, got {_shown(value)}")
        return value

    def number(self, value: object, key: str) -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            self.fail(key, f"must be a number, got {_shown(value)}")
        try:
            number = float(value)
        except OverflowError:
            number = math.inf
        if not math.isfinite(number):
            self.fail(key, f"must be a finite number, got {_shown(value)}")
        return number

    def count(self, value: object, key: str) -> int:
        """A positive whole number (an integral float such as 2e3 is accepted)."""
        if isinstance(value, float) and math.isfinite(value) and value.is_integer():
            value = int(value)
        if isinstance(value, bool) or not isinstance(value, int) or value <= 0:
            self.fail(key, f"must be a positive whole number, got {_shown(value)}")
        return value

    def text(self, value: object, key: str) -> str:
        if not isinstance(value, str):
            self.fail(key, f"must be text, got {_shown(value)}")
        return value

    def import_path(self, value: object, key: str) -> str:
        text = self.text(value, key).strip()
        if not _IMPORT_PATH.match(text):
            self.fail(
                key,
                f'must name a Python function as "module:function" '
                f'(e.g. "mypackage.model:rhs"), got {_shown(value)}',
            )
        return text

    def name(self, name: object, key: str, what: str, expression_model: bool) -> str:
        """A state/parameter/definition/observable name: a plain identifier, not reserved."""
        text = str(name)
        if not _NAME.match(text) or keyword.iskeyword(text):
            self.fail(
                key,
                f"'{text}' is not a valid {what} name: use letters, digits and '_', "
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


# --------------------------------------------------------------------------- model


def _model(check: _Checker, value: object) -> ExpressionModelSpec | PythonModelSpec:
    model = check.table(value, "model", "a table ([model.parameters], [model.equations], ...)")
    check.keys(model, "model", MODEL_KEYS)
    if "python" in model and "equations" in model:
        check.fail(
            "model",
            "give either [model.equations] or [model.python], not both",
        )
    if "python" not in model and "equations" not in model:
        check.fail(
            "model.equations",
            "missing: give one equation per state (or [model.python] for a model written "
            "in Python)",
        )
    if "parameters" not in model:
        check.fail("model.parameters", "missing: list every parameter with its default value")
    is_python = "python" in model
    parameters = _parameters(check, model["parameters"], expression_model=not is_python)
    if is_python:
        return _python_model(check, model, parameters)
    return _expression_model(check, model, parameters)


def _parameters(check: _Checker, value: object, expression_model: bool) -> dict[str, float]:
    table = check.table(value, "model.parameters")
    if not table:
        check.fail("model.parameters", "empty: a scan needs at least one parameter to vary")
    parameters: dict[str, float] = {}
    for name, default in table.items():
        key = _key("model.parameters", name)
        check.name(name, key, "parameter", expression_model)
        parameters[name] = check.number(default, key)
    return parameters


def _expression_texts(
    check: _Checker, value: object, path: str, what: str, noun: str
) -> dict[str, str]:
    """name -> expression text for [model.equations]/[model.definitions]/[model.observables]."""
    table = check.table(value, path, f'a table of {what} (name = "expression")')
    texts: dict[str, str] = {}
    for name, text in table.items():
        key = _key(path, name)
        check.name(name, key, noun, expression_model=True)
        if isinstance(text, (int, float)) and not isinstance(text, bool):
            text = repr(check.number(text, key))
        texts[name] = check.text(text, key)
    return texts


def _expression_model(
    check: _Checker, model: dict, parameters: dict[str, float]
) -> ExpressionModelSpec:
    equations = _expression_texts(
        check, model["equations"], "model.equations", "equations", "state"
    )
    if not equations:
        check.fail("model.equations", "empty: give one equation per state")
    definitions = _expression_texts(
        check, model.get("definitions", {}), "model.definitions", "definitions", "definition"
    )
    observables = _expression_texts(
        check, model.get("observables", {}), "model.observables", "observables", "observable"
    )
    _check_clashes(
        check,
        [
            ("model.parameters", "parameter", parameters),
            ("model.equations", "state", equations),
            ("model.definitions", "definition", definitions),
            ("model.observables", "observable", observables),
        ],
    )
    known = set(parameters) | set(equations) | set(definitions)

    def names_in(path: str, texts: dict[str, str]) -> dict[str, set[str]]:
        used = {}
        for name, text in texts.items():
            key = _key(path, name)
            try:
                expr = parse_expression(text)
            except ExpressionError as err:
                check.fail(key, str(err))
            names = expression_names(expr)
            for unknown in sorted(names - known):
                check.fail(key, _unknown_name(unknown, parameters, equations, definitions))
            used[name] = names
        return used

    names_in("model.equations", equations)
    definition_names = names_in("model.definitions", definitions)
    names_in("model.observables", observables)
    order = _dependency_order(check, definition_names)
    return ExpressionModelSpec(
        parameters=parameters,
        equations=equations,
        definitions={name: definitions[name] for name in order},
        observables=observables,
    )


def _check_clashes(check: _Checker, groups: list[tuple[str, str, dict]]) -> None:
    """Refuse a name used twice across parameters, states, definitions, observables."""
    owner: dict[str, str] = {}
    for path, what, names in groups:
        for name in names:
            if name in owner:
                check.fail(
                    _key(path, name),
                    f"'{name}' is already used as a {owner[name]}; each name may be used once",
                )
            owner[name] = what


def _unknown_name(name: str, parameters: dict, states: dict, definitions: dict) -> str:
    known = [*states, *parameters, *definitions]
    hint = _suggestion(name, known)
    parts = [f"states: {_listed(states)}", f"parameters: {_listed(parameters)}"]
    if definitions:
        parts.append(f"definitions: {_listed(definitions)}")
    return f"unknown name '{name}' in the expression{hint} (known {'; '.join(parts)})"


def _dependency_order(check: _Checker, uses: dict[str, set[str]]) -> list[str]:
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
            _key("model.definitions", cycle[0]),
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


def _python_model(check: _Checker, model: dict, parameters: dict[str, float]) -> PythonModelSpec:
    for key in ("definitions", "observables"):
        if key in model:
            fix = (
                'for a Python model, give observables = "module:function" in [model.python]'
                if key == "observables"
                else "compute such helpers inside the Python function"
            )
            check.fail(f"model.{key}", f"only for models given as expressions; {fix}")
    python = check.table(model["python"], "model.python")
    check.keys(python, "model.python", PYTHON_KEYS)
    for required in ("rhs", "size"):
        if required not in python:
            what = (
                'the right-hand side as "module:function"'
                if required == "rhs"
                else ("the number of states")
            )
            check.fail(f"model.python.{required}", f"missing: give {what}")
    rhs = check.import_path(python["rhs"], "model.python.rhs")
    size = check.count(python["size"], "model.python.size")
    jacobian = None
    if "jacobian" in python:
        jacobian = check.import_path(python["jacobian"], "model.python.jacobian")
    observables = None
    if "observables" in python:
        observables = check.import_path(python["observables"], "model.python.observables")
    states = None
    if "states" in python:
        states = _python_states(check, python["states"], size)
    state_names = states or tuple(f"x{i}" for i in range(size))
    for name in parameters:
        if name in state_names:
            check.fail(
                _key("model.parameters", name),
                f"'{name}' is also the name of a state; each name may be used once",
            )
    return PythonModelSpec(
        parameters=parameters,
        rhs=rhs,
        size=size,
        jacobian=jacobian,
        states=states,
        observables=observables,
    )


def _python_states(check: _Checker, value: object, size: int) -> tuple[str, ...]:
    key = "model.python.states"
    if not isinstance(value, list):
        check.fail(key, f"must be a list of state names, got {_shown(value)}")
    if len(value) != size:
        check.fail(key, f"lists {len(value)} names but size = {size}")
    seen: set[str] = set()
    for index, name in enumerate(value, start=1):
        item_key = f"{key}[{index}]"
        check.text(name, item_key)
        check.name(name, item_key, "state", expression_model=False)
        if name in seen:
            check.fail(item_key, f"'{name}' is listed twice")
        seen.add(name)
    return tuple(value)


def model_states(model: ExpressionModelSpec | PythonModelSpec) -> tuple[str, ...]:
    """State names in state-vector order (equation order, or x0, x1, ... for Python models)."""
    if isinstance(model, ExpressionModelSpec):
        return tuple(model.equations)
    return model.states or tuple(f"x{i}" for i in range(model.size))


# --------------------------------------------------------------------------- steps


def _steps(check: _Checker, value: object, path: str, base: StepSettings) -> StepSettings:
    """``base`` with the entries of the table ``value`` replacing its own, validated."""
    table = check.table(value, path)
    check.keys(table, path, STEP_KEYS)
    lengths = {}
    for name in ("initial", "smallest", "largest"):
        if name in table:
            key = _key(path, name)
            length = check.number(table[name], key)
            if length <= 0:
                check.fail(key, f"must be positive, got {_shown(table[name])}")
            lengths[name] = length
    settings = replace(base, **lengths)
    if "max_points" in table:
        settings = replace(
            settings, max_points=check.count(table["max_points"], f"{path}.max_points")
        )
    if not settings.smallest <= settings.initial <= settings.largest:
        merged = " (after merging over [steps] and the defaults)" if path != "steps" else ""
        check.fail(
            path,
            f"needs smallest <= initial <= largest{merged}; got smallest = {settings.smallest:g}, "
            f"initial = {settings.initial:g}, largest = {settings.largest:g}",
        )
    return settings


# --------------------------------------------------------------------------- traces


def _traces(
    check: _Checker,
    value: object,
    model: ExpressionModelSpec | PythonModelSpec,
    steps: StepSettings,
) -> tuple[TraceSpec, ...]:
    if value is None:
        check.fail("trace", "missing: add at least one [[trace]] naming the parameter to vary")
    if isinstance(value, dict):
        check.fail("trace", "write [[trace]] with double brackets: traces are a list of tables")
    if not isinstance(value, list) or not value:
        check.fail("trace", "needs at least one [[trace]] table")
    traces: list[TraceSpec] = []
    first_use: dict[str, str] = {}
    for index, item in enumerate(value, start=1):
        path = f"trace[{index}]"
        trace = _trace(check, item, path, index, model, steps)
        if trace.name in first_use:
            check.fail(
                f"{path}.name",
                f"the trace name '{trace.name}' is already used by {first_use[trace.name]}",
            )
        first_use[trace.name] = path
        traces.append(trace)
    return tuple(traces)


def _trace(
    check: _Checker,
    value: object,
    path: str,
    index: int,
    model: ExpressionModelSpec | PythonModelSpec,
    steps: StepSettings,
) -> TraceSpec:
    table = check.table(value, path)
    check.keys(table, path, TRACE_KEYS)
    name = _trace_name(check, table.get("name", f"trace{index}"), f"{path}.name")
    for required in ("vary", "interval", "start"):
        if required not in table:
            check.fail(f"{path}.{required}", f"missing: {_TRACE_REQUIRED[required]}")
    parameters = model.parameters
    vary = check.text(table["vary"], f"{path}.vary")
    if vary not in parameters:
        check.fail(
            f"{path}.vary",
            f"'{vary}' is not a parameter{_suggestion(vary, parameters)} "
            f"(parameters: {_listed(parameters)})",
        )
    overrides = _overrides(check, table.get("set", {}), f"{path}.set", parameters)
    start_value = overrides.get(vary, parameters[vary])
    interval = _interval(
        check, table["interval"], f"{path}.interval", vary, start_value, from_set=vary in overrides
    )
    start = _start(check, table["start"], f"{path}.start", model)
    direction = table.get("direction", "both")
    if direction not in DIRECTIONS:
        check.fail(
            f"{path}.direction",
            f"must be one of {', '.join(DIRECTIONS)}, got {_shown(direction)}",
        )
    trace_steps = steps
    if "steps" in table:
        trace_steps = _steps(check, table["steps"], f"{path}.steps", steps)
    switch = table.get("switch_branches", True)
    if not isinstance(switch, bool):
        check.fail(f"{path}.switch_branches", f"must be true or false, got {_shown(switch)}")
    return TraceSpec(
        name=name,
        vary=vary,
        interval=interval,
        start=start,
        set=overrides,
        direction=direction,
        steps=trace_steps,
        switch_branches=switch,
    )


_TRACE_REQUIRED = {
    "vary": "name the parameter to vary",
    "interval": "give the parameter window as [low, high]",
    "start": "give a guess of the equilibrium's states, e.g. { x = 1.0, y = 0.5 }",
}


def _trace_name(check: _Checker, value: object, key: str) -> str:
    name = check.text(value, key)
    if not name.strip():
        check.fail(key, "must not be empty")
    if "." in name:
        check.fail(
            key,
            f"'{name}' contains '.', which is kept for branches started at branch points "
            "(<trace>.1, <trace>.2, ...)",
        )
    return name


def _overrides(
    check: _Checker, value: object, path: str, parameters: dict[str, float]
) -> dict[str, float]:
    table = check.table(value, path)
    overrides: dict[str, float] = {}
    for name, number in table.items():
        key = _key(path, name)
        if name not in parameters:
            check.fail(
                key,
                f"'{name}' is not a parameter{_suggestion(str(name), parameters)} "
                f"(parameters: {_listed(parameters)})",
            )
        overrides[name] = check.number(number, key)
    return overrides


def _interval(
    check: _Checker, value: object, key: str, vary: str, start: float, from_set: bool
) -> tuple[float, float]:
    if not isinstance(value, list) or len(value) != 2:
        check.fail(key, f"must be two numbers [low, high], got {_shown(value)}")
    low = check.number(value[0], f"{key}[1]")
    high = check.number(value[1], f"{key}[2]")
    if low > high:
        check.fail(key, f"is reversed: write [{high:g}, {low:g}] (low first)")
    if low == high:
        check.fail(key, f"is empty: both ends are {low:g}")
    if not low <= start <= high:
        origin = f"set.{vary}" if from_set else "its default value"
        check.fail(
            key,
            f"[{low:g}, {high:g}] does not contain the start value {vary} = {start:g} ({origin})",
        )
    return (low, high)


def _start(
    check: _Checker, value: object, path: str, model: ExpressionModelSpec | PythonModelSpec
) -> dict[str, float] | str:
    if isinstance(value, str):
        if isinstance(model, ExpressionModelSpec):
            check.fail(
                path,
                "a start function is only for Python models; give the states as a table, "
                "e.g. { S = 0.5, X = 1.7 }",
            )
        return check.import_path(value, path)
    table = check.table(value, path, "a table of state values")
    states = model_states(model)
    state_set = set(states)
    for name in table:
        if name not in state_set:
            check.fail(
                _key(path, name),
                f"'{name}' is not a state{_suggestion(str(name), states)} "
                f"(states: {_listed(states)})",
            )
    missing = [name for name in states if name not in table]
    if missing:
        check.fail(path, f"missing start values for {_listed(missing)}")
    return {name: check.number(table[name], _key(path, name)) for name in states}


__all__ = [
    "DIRECTIONS",
    "RESERVED_COLUMNS",
    "ExpressionModelSpec",
    "PythonModelSpec",
    "Scan",
    "ScanError",
    "StepSettings",
    "TraceSpec",
    "load_scan",
    "model_states",
    "scan_from_dict",
]
