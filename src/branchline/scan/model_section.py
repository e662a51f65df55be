"""The ``[model]`` section of a scan: validated into an expression or Python model spec.

An expression model (``[model.equations]``, ``[model.definitions]``,
``[model.observables]``) is kept as text, but every expression has been
parsed once by the whitelisting parser and uses only known names; its
definitions are stored in dependency order. A Python model
(``[model.python]``) is kept as ``"module:function"`` references, checked for
their shape only: importing them is :mod:`branchline.model.python`' job.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from branchline.errors import ExpressionError
from branchline.scan.checks import (
    Checker,
    check_clashes,
    dependency_order,
    key_path,
    shown,
    unknown_name,
)
from branchline.scan.expressions import expression_names, parse_expression
from branchline.user_cache import remember_names, remembered_names

MODEL_KEYS = ("parameters", "equations", "definitions", "observables", "python")
PYTHON_KEYS = (
    "rhs",
    "size",
    "jacobian",
    "jacobian_pattern",
    "states",
    "observables",
    "second_derivative",
    "third_derivative",
    "call_time_limit",
)
# Seconds one call of a user's Python function may take (model.python.call_time_limit):
# far above any sane right-hand side (a 10^5-state model takes milliseconds), low
# enough that a function waiting on a lock or a network share is noticed.
DEFAULT_CALL_TIME_LIMIT = 60.0


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
    # Optional "module:function" giving df/dx's sparsity structure for the model's size (README).
    jacobian_pattern: str | None = None
    states: tuple[str, ...] | None = None
    observables: str | None = None
    # Optional exact directional derivatives B(v, w) and C(u, v, w) (README).
    second_derivative: str | None = None
    third_derivative: str | None = None
    call_time_limit: float = DEFAULT_CALL_TIME_LIMIT  # seconds per call of a user function


def read_model(
    check: Checker, value: object, remember: bool = False
) -> ExpressionModelSpec | PythonModelSpec:
    """The validated ``[model]`` section: an expression model or a Python model spec.

    With ``remember``, expression texts accepted before (recorded in the user
    cache, :mod:`branchline.user_cache`) are not parsed again, and newly
    accepted ones are recorded.
    """
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
    return _expression_model(check, model, parameters, remember)


def _parameters(check: Checker, value: object, expression_model: bool) -> dict[str, float]:
    table = check.table(value, "model.parameters")
    if not table:
        check.fail("model.parameters", "empty: a scan needs at least one parameter to vary")
    parameters: dict[str, float] = {}
    for name, default in table.items():
        key = key_path("model.parameters", name)
        check.name(name, key, "parameter", expression_model)
        parameters[name] = check.number(default, key)
    return parameters


def _expression_texts(
    check: Checker, value: object, path: str, what: str, noun: str
) -> dict[str, str]:
    """name -> expression text for [model.equations]/[model.definitions]/[model.observables]."""
    table = check.table(value, path, f'a table of {what} (name = "expression")')
    texts: dict[str, str] = {}
    for name, text in table.items():
        key = key_path(path, name)
        check.name(name, key, noun, expression_model=True)
        if isinstance(text, (int, float)) and not isinstance(text, bool):
            text = repr(check.number(text, key))
        texts[name] = check.text(text, key)
    return texts


def _expression_model(
    check: Checker, model: dict, parameters: dict[str, float], remember: bool
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
    check_clashes(
        check,
        [
            ("model.parameters", "parameter", parameters),
            ("model.equations", "state", equations),
            ("model.definitions", "definition", definitions),
            ("model.observables", "observable", observables),
        ],
    )
    known = set(parameters) | set(equations) | set(definitions)
    every_text = [*equations.values(), *definitions.values(), *observables.values()]
    # A model text accepted before: the names each expression uses, without parsing
    # again (so without sympy); see branchline.user_cache.
    remembered = remembered_names(every_text) if remember else None
    seen: dict[str, list[str]] = {}

    def names_in(path: str, texts: dict[str, str]) -> dict[str, set[str]]:
        used = {}
        for name, text in texts.items():
            key = key_path(path, name)
            if remembered is not None:
                names = set(remembered[text])
            else:
                try:
                    expr = parse_expression(text)
                except ExpressionError as err:
                    check.fail(key, str(err))
                names = expression_names(expr)
            for unknown in sorted(names - known):
                check.fail(key, unknown_name(unknown, parameters, equations, definitions))
            used[name] = names
            seen[text] = sorted(names)
        return used

    names_in("model.equations", equations)
    definition_names = names_in("model.definitions", definitions)
    names_in("model.observables", observables)
    order = dependency_order(check, definition_names)
    if remember and remembered is None:
        remember_names(every_text, seen)
    return ExpressionModelSpec(
        parameters=parameters,
        equations=equations,
        definitions={name: definitions[name] for name in order},
        observables=observables,
    )


def _python_model(check: Checker, model: dict, parameters: dict[str, float]) -> PythonModelSpec:
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
    pattern = None
    if "jacobian_pattern" in python:
        pattern = check.import_path(python["jacobian_pattern"], "model.python.jacobian_pattern")
    observables = None
    if "observables" in python:
        observables = check.import_path(python["observables"], "model.python.observables")
    forms = {
        key: check.import_path(python[key], f"model.python.{key}")
        for key in ("second_derivative", "third_derivative")
        if key in python
    }
    states = None
    if "states" in python:
        states = _python_states(check, python["states"], size)
    limit = DEFAULT_CALL_TIME_LIMIT
    if "call_time_limit" in python:
        limit = check.number(python["call_time_limit"], "model.python.call_time_limit")
        if not limit > 0:
            check.fail(
                "model.python.call_time_limit",
                f"must be a positive number of seconds, got {shown(limit)}",
            )
    state_names = states or tuple(f"x{i}" for i in range(size))
    for name in parameters:
        if name in state_names:
            check.fail(
                key_path("model.parameters", name),
                f"'{name}' is also the name of a state; each name may be used once",
            )
    return PythonModelSpec(
        parameters=parameters,
        rhs=rhs,
        size=size,
        jacobian=jacobian,
        jacobian_pattern=pattern,
        states=states,
        observables=observables,
        **forms,
        call_time_limit=limit,
    )


def _python_states(check: Checker, value: object, size: int) -> tuple[str, ...]:
    key = "model.python.states"
    if not isinstance(value, list):
        check.fail(key, f"must be a list of state names, got {shown(value)}")
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


__all__ = [
    "MODEL_KEYS",
    "PYTHON_KEYS",
    "ExpressionModelSpec",
    "PythonModelSpec",
    "model_states",
    "read_model",
]
