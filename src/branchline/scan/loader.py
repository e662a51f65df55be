"""Scan files: TOML -> validated, frozen dataclasses.

Everything is validated here, before any computing; every problem raises
:class:`branchline.errors.ScanError` naming the file, the dotted key path
(``model.equations.S``, ``trace[2].interval``; arrays count from 1) and the
problem, with the nearest valid key or name suggested for a typo. This module
holds what a scan is (the dataclasses), the two entry points and the
``[steps]`` and ``[[trace]]`` sections; the ``[model]`` section is read by
:mod:`branchline.scan.model_section`, and the checks and messages shared by all
sections are in :mod:`branchline.scan.checks`.

Rules beyond the layout in ``interface.md``:

- Names of states, parameters, definitions and observables are ASCII
  identifiers (letters, digits, ``_``; not a Python keyword, not starting
  with ``__``), used once across all four groups, and not a column of the
  result tables (:data:`RESERVED_COLUMNS`). In expression models they may not
  be a function or constant of the expressions
  (:data:`branchline.scan.expressions.RESERVED`).
- Definitions may use each other in any order, but not in a loop; they are
  stored in dependency order (file order where free). Expressions may use the
  states, parameters and definitions; observables may not use each other.
- A trace's ``[trace.steps]`` replaces the entries of the global ``[steps]``
  it names; the merged settings need ``0 < smallest <= initial <= largest``.
  An ``initial`` the table does not set is clipped into [smallest, largest]
  (``largest = 0.005`` alone lowers the first step to 0.005).
- Traces are named ``trace1``, ``trace2``, ... (1-based over all traces)
  unless named; names are unique and contain no ``.`` (kept for branches
  started at branch points: ``<trace>.1``, ...).
- ``switch_branches = false`` in a trace turns off following the crossing
  branches at its branch points (default true).
- ``limits = { X = [0.0, 100.0] }`` in a trace gives states a window [lo, hi]
  (two numbers, lo < hi; a very large number stands for "no bound" on that
  side): a side of the trace stops when a state leaves its window, its last
  point exactly on the limit. The start guess of each limited state must lie in
  its window (checked here for a start table; a start function's result is
  checked when the trace starts). Branches started at branch points inherit
  the limits.
- The ``interval`` must contain the start value: ``set.<vary>`` if given,
  else the parameter's default.
- ``[model.python]`` functions are only checked for the ``"module:function"``
  shape here; importing them is :mod:`branchline.model.python`' job.
- ``[ensemble]`` (run the scan for many parameter sets with ``branchline
  batch``) is read by :mod:`branchline.scan.ensemble_section`.
- ``[[cycles]]`` is read by :mod:`branchline.scan.cycles_section`.
- ``start = "search"`` and the ``search_*`` keys: see
  :mod:`branchline.scan.search_section`. Trace names contain no ``#`` (kept
  for branches found by a search: ``<trace>#1``, ...).
- ``[[boundary]]`` is read by :mod:`branchline.scan.boundary_section`.
- ``[robust_margin]`` is read by :mod:`branchline.scan.margin_section`.
"""

from __future__ import annotations

import copy
import math
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from branchline.errors import ScanError
from branchline.numerics.tolerances import StepSettings
from branchline.scan.boundary_section import BoundarySpec, read_boundaries
from branchline.scan.checks import (
    FILE_KEY,
    MAX_NAME_LENGTH,
    MAX_TITLE_LENGTH,
    RESERVED_COLUMNS,
    Checker,
    key_path,
    listed,
    shown,
    suggestion,
)
from branchline.scan.cycles_section import CycleSpec, read_cycles
from branchline.scan.ensemble_section import EnsembleSpec, read_ensemble
from branchline.scan.margin_section import RobustMarginSpec, read_robust_margin
from branchline.scan.model_section import (
    ExpressionModelSpec,
    PythonModelSpec,
    model_states,
    read_model,
)
from branchline.scan.search_section import SEARCH_KEYS, SEARCH_START, SearchSpec, read_search

try:
    import tomllib
except ModuleNotFoundError:  # Python < 3.11
    import tomli as tomllib


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
    # state -> (lo, hi): the trace stops on a limit (inherited by switched branches)
    limits: dict[str, tuple[float, float]] = field(default_factory=dict)
    # equilibria found without a start guess (start = "search" or a search_box)
    search: SearchSpec | None = None
    # names of the branches switched onto, in the order they are started (one per branch point)
    branch_names: tuple[str, ...] = ()


@dataclass(frozen=True)
class Scan:
    """A validated scan file."""

    source: str  # file path or "<dict>"
    title: str
    model: ExpressionModelSpec | PythonModelSpec
    traces: tuple[TraceSpec, ...]
    steps: StepSettings = field(default_factory=StepSettings)
    raw: dict[str, Any] = field(default_factory=dict, compare=False, repr=False)
    ensemble: EnsembleSpec | None = None  # [ensemble]: run with `branchline batch`
    cycles: tuple[CycleSpec, ...] = ()
    boundaries: tuple[BoundarySpec, ...] = ()
    robust_margin: RobustMarginSpec | None = None
    time_limit: float = 3600.0  # seconds for the whole run (DEFAULT_TIME_LIMIT)

    @property
    def stem(self) -> str:
        """The scan file's name without suffix (\"scan\" for a scan given as a dict)."""
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
    return scan_from_dict(data, source, remember=True)


def scan_from_dict(data: dict[str, Any], source: str = "<dict>", *, remember: bool = False) -> Scan:
    """Validate a scan given as a dictionary (same layout as the TOML file).

    Parameters
    ----------
    data : dict
        The parsed TOML (or an equivalent hand-built dictionary).
    source : str
        The file name used in messages and for the default title.
    remember : bool
        Use (and add to) the user cache's record of model texts accepted
        before, so that such a model is not parsed again (:func:`load_scan`
        does); by default no file is read or written.

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
    check = Checker(str(source))
    if not isinstance(data, dict):
        check.fail(FILE_KEY, "the scan must be a table of keys")
    check.keys(data, "", TOP_KEYS)
    title = data.get("title", Path(source).stem if source != "<dict>" else "scan")
    title = check.plain_text(title, "title", MAX_TITLE_LENGTH)
    if "model" not in data:
        check.fail("model", "missing: the scan needs a [model] with its parameters and equations")
    model = read_model(check, data["model"], remember)
    steps = _steps(check, data.get("steps", {}), "steps", StepSettings())
    traces = _traces(check, data.get("trace"), model, steps)
    ensemble = None
    if "ensemble" in data:
        ensemble = read_ensemble(check, data["ensemble"], model.parameters, _fixed(traces))
    cycles = read_cycles(check, data.get("cycles"), traces, steps, _steps, _window)
    boundaries = read_boundaries(check, data.get("boundary"), traces, model.parameters, _steps)
    margin = read_robust_margin(check, data.get("robust_margin"), model.parameters)
    time_limit = DEFAULT_TIME_LIMIT
    if "time_limit" in data:
        time_limit = check.number(data["time_limit"], "time_limit")
        if not time_limit > 0:
            check.fail("time_limit", f"must be positive (seconds), got {shown(time_limit)}")
    return Scan(
        source=str(source),
        title=title,
        model=model,
        traces=traces,
        steps=steps,
        raw=copy.deepcopy(data),
        ensemble=ensemble,
        cycles=cycles,
        boundaries=boundaries,
        robust_margin=margin,
        time_limit=time_limit,
    )


def _fixed(traces: tuple[TraceSpec, ...]) -> dict[str, str]:
    """Parameter -> the trace key that varies or sets it (not an ensemble parameter)."""
    fixed: dict[str, str] = {}
    for index, trace in enumerate(traces, start=1):
        fixed.setdefault(trace.vary, f"trace[{index}].vary")
        for name in trace.set:
            fixed.setdefault(name, f"trace[{index}].set")
    return fixed


TOP_KEYS = (
    "title",
    "time_limit",
    "model",
    "trace",
    "steps",
    "ensemble",
    "cycles",
    "boundary",
    "robust_margin",
)
# Seconds of wall-clock time a run may take (top-level time_limit), counted from the
# start of the run: generous for any scan that finishes (the demos take seconds,
# large sparse models minutes), yet every run ends, with its points written.
DEFAULT_TIME_LIMIT = 3600.0
TRACE_KEYS = (
    "name",
    "vary",
    "interval",
    "start",
    "set",
    "direction",
    "steps",
    "switch_branches",
    "branch_names",
    "limits",
    *SEARCH_KEYS,
)
STEP_KEYS = ("initial", "smallest", "largest", "max_points")
DIRECTIONS = ("both", "increasing", "decreasing")


# --------------------------------------------------------------------------- steps


def _steps(check: Checker, value: object, path: str, base: StepSettings) -> StepSettings:
    """``base`` with the entries of the table ``value`` replacing its own, validated."""
    table = check.table(value, path)
    check.keys(table, path, STEP_KEYS)
    lengths = {}
    for name in ("initial", "smallest", "largest"):
        if name in table:
            key = key_path(path, name)
            length = check.number(table[name], key)
            if length <= 0:
                check.fail(key, f"must be positive, got {shown(table[name])}")
            lengths[name] = length
    settings = replace(base, **lengths)
    if "initial" not in table:
        # An unset first step follows the bounds the table sets (largest below it lowers it).
        settings = replace(
            settings, initial=min(max(settings.initial, settings.smallest), settings.largest)
        )
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
    check: Checker,
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
    check: Checker,
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
            f"'{vary}' is not a parameter{suggestion(vary, parameters)} "
            f"(parameters: {listed(parameters)})",
        )
    overrides = _overrides(check, table.get("set", {}), f"{path}.set", parameters)
    start_value = overrides.get(vary, parameters[vary])
    interval = _interval(
        check, table["interval"], f"{path}.interval", vary, start_value, from_set=vary in overrides
    )
    start = _start(check, table["start"], f"{path}.start", model)
    limits = _limits(check, table.get("limits", {}), f"{path}.limits", model, start)
    search = read_search(
        check, table, path, model_states(model), interval, wanted=start == SEARCH_START
    )
    direction = table.get("direction", "both")
    if direction not in DIRECTIONS:
        check.fail(
            f"{path}.direction",
            f"must be one of {', '.join(DIRECTIONS)}, got {shown(direction)}",
        )
    trace_steps = steps
    if "steps" in table:
        trace_steps = _steps(check, table["steps"], f"{path}.steps", steps)
    switch = table.get("switch_branches", True)
    if not isinstance(switch, bool):
        check.fail(f"{path}.switch_branches", f"must be true or false, got {shown(switch)}")
    branch_names = _branch_names(check, table, path, name, switch)
    return TraceSpec(
        name=name,
        vary=vary,
        interval=interval,
        start=start,
        set=overrides,
        direction=direction,
        steps=trace_steps,
        switch_branches=switch,
        limits=limits,
        search=search,
        branch_names=branch_names,
    )


_TRACE_REQUIRED = {
    "vary": "name the parameter to vary",
    "interval": "give the parameter window as [low, high]",
    "start": "give a guess of the equilibrium's states, e.g. { x = 1.0, y = 0.5 }, "
    'or start = "search" with a search_box to find every equilibrium',
}


def _trace_name(check: Checker, value: object, key: str) -> str:
    name = check.plain_text(value, key, MAX_NAME_LENGTH)
    if not name.strip():
        check.fail(key, "must not be empty")
    if "." in name:
        check.fail(
            key,
            f"'{name}' contains '.', which is kept for branches started at branch points "
            "(<trace>.1, <trace>.2, ...)",
        )
    if "#" in name:
        check.fail(
            key,
            f"'{name}' contains '#', which is kept for branches found by a search "
            "(<trace>#1, <trace>#2, ...)",
        )
    return name


def _branch_names(
    check: Checker, table: dict, path: str, trace: str, switch: bool
) -> tuple[str, ...]:
    """``branch_names``: plain names for the branches switched onto, unique, not dotted."""
    key = f"{path}.branch_names"
    if "branch_names" not in table:
        return ()
    value = table["branch_names"]
    if not switch:
        check.fail(key, "names switched branches, but switch_branches = false follows none")
    if not isinstance(value, list) or not value:
        check.fail(key, f"must be a list of names, e.g. [\"high\"], got {shown(value)}")
    names = tuple(_trace_name(check, item, f"{key}[{i}]") for i, item in enumerate(value, 1))
    for i, name in enumerate(names, 1):
        if names.index(name) != i - 1 or name == trace:
            check.fail(f"{key}[{i}]", f"the name '{name}' is used twice in trace '{trace}'")
    return names


def _overrides(
    check: Checker, value: object, path: str, parameters: dict[str, float]
) -> dict[str, float]:
    table = check.table(value, path)
    overrides: dict[str, float] = {}
    for name, number in table.items():
        key = key_path(path, name)
        if name not in parameters:
            check.fail(
                key,
                f"'{name}' is not a parameter{suggestion(str(name), parameters)} "
                f"(parameters: {listed(parameters)})",
            )
        overrides[name] = check.number(number, key)
    return overrides


def _window(
    check: Checker, value: object, key: str, hint: str, open_ends: bool = False
) -> tuple[float, float]:
    """Two numbers [low, high] with low < high, or a ScanError naming ``key``.

    With ``open_ends``, low may be -inf and high +inf (TOML's ``-inf`` / ``inf``): no bound.
    """
    if not isinstance(value, list) or len(value) != 2:
        check.fail(key, f"must be two numbers [low, high]{hint}, got {shown(value)}")
    low, high = (
        end
        if open_ends and isinstance(end, float) and end == bound
        else check.number(end, f"{key}[{i + 1}]")
        for i, (end, bound) in enumerate(zip(value, (-math.inf, math.inf)))
    )
    if low > high:
        check.fail(key, f"is reversed: write [{high:g}, {low:g}] (low first)")
    if low == high:
        check.fail(key, f"is empty: both ends are {low:g}")
    return low, high


def _interval(
    check: Checker, value: object, key: str, vary: str, start: float, from_set: bool
) -> tuple[float, float]:
    low, high = _window(check, value, key, "")
    if not low <= start <= high:
        origin = f"set.{vary}" if from_set else "its default value"
        check.fail(
            key,
            f"[{low:g}, {high:g}] does not contain the start value {vary} = {start:g} ({origin})",
        )
    return (low, high)


def _start(
    check: Checker, value: object, path: str, model: ExpressionModelSpec | PythonModelSpec
) -> dict[str, float] | str:
    if value == SEARCH_START:
        return SEARCH_START
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
                key_path(path, name),
                f"'{name}' is not a state{suggestion(str(name), states)} "
                f"(states: {listed(states)})",
            )
    missing = [name for name in states if name not in table]
    if missing:
        check.fail(path, f"missing start values for {listed(missing)}")
    return {name: check.number(table[name], key_path(path, name)) for name in states}


def _limits(
    check: Checker,
    value: object,
    path: str,
    model: ExpressionModelSpec | PythonModelSpec,
    start: dict[str, float] | str,
) -> dict[str, tuple[float, float]]:
    """The trace's state limits {state: (lo, hi)}, validated (start guess inside them)."""
    table = check.table(value, path, "a table of state windows, e.g. { X = [0.0, 100.0] }")
    states = model_states(model)
    state_set = set(states)
    limits: dict[str, tuple[float, float]] = {}
    for name, bounds in table.items():
        key = key_path(path, name)
        if name not in state_set:
            if name in model.parameters:
                check.fail(key, f"'{name}' is a parameter: its window is the trace's interval")
            check.fail(
                key,
                f"'{name}' is not a state{suggestion(str(name), states)} "
                f"(states: {listed(states)})",
            )
        low, high = _window(check, bounds, key, " (-inf or inf for no bound)", open_ends=True)
        if isinstance(start, dict) and not low <= start[name] <= high:
            check.fail(
                key,
                f"[{low:g}, {high:g}] does not contain the start guess {name} = {start[name]:g} "
                f"(trace start)",
            )
        limits[name] = (low, high)
    return limits


__all__ = [
    "DIRECTIONS",
    "RESERVED_COLUMNS",
    "BoundarySpec",
    "CycleSpec",
    "ExpressionModelSpec",
    "PythonModelSpec",
    "Scan",
    "ScanError",
    "SearchSpec",
    "StepSettings",
    "TraceSpec",
    "load_scan",
    "model_states",
    "scan_from_dict",
]
