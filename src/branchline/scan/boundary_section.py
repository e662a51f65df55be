"""The ``[[boundary]]`` section: two-parameter fold and Hopf curves to follow.

Keys (``interface.md``, extended here):

- ``from`` (required): the name of a ``[[trace]]`` whose located events start it,
  or of an earlier ``[[boundary]]``: then each Bogdanov-Takens and zero-Hopf
  point found on that boundary starts the other curve through it (``kind`` must
  be the other kind; ``index`` counts those points in boundary order; ``second``
  and ``window`` default to that boundary's);
- ``kind`` (required): ``"fold"`` or ``"hopf"``;
- ``second`` (required): the second parameter (not the trace's own ``vary``);
- ``window`` (required): ``{ <vary> = [lo, hi], <second> = [lo, hi] }``, both
  parameters and no others; each side of the curve ends exactly on its edge;
- ``index`` (optional): which event of that kind on the trace, counted from 1
  in trace order; default: each of them;
- ``name`` (optional): default ``boundary1``, ``boundary2``, ... (1-based over
  all boundaries); with ``index`` left out and more than one event, the
  curves are named ``<name>.1``, ``<name>.2``, ... in trace order;
- ``steps`` (optional): step settings over the trace's own.

Names must differ from every trace name (events found on a boundary carry its
name in the ``trace`` column) and contain no ``.``.
"""

from __future__ import annotations

from dataclasses import dataclass

from branchline.scan.checks import Checker, key_path, listed, shown, suggestion

BOUNDARY_KEYS = ("name", "from", "kind", "index", "second", "window", "steps")
BOUNDARY_KINDS = ("fold", "hopf")


@dataclass(frozen=True)
class BoundarySpec:
    """One ``[[boundary]]``: a fold or Hopf curve to follow in two parameters."""

    name: str
    source: str  # the trace whose events start it
    kind: str  # "fold" or "hopf"
    second: str
    window: dict[str, tuple[float, float]]  # both parameters
    index: int | None = None  # None: every event of that kind on the trace
    steps: object = None  # StepSettings; None: the trace's
    trace: str = ""  # the trace at the root (source itself unless from a boundary)
    from_boundary: bool = False  # started at codimension-two points of a boundary


def read_boundaries(check: Checker, value: object, traces, parameters, steps_reader) -> tuple:
    """Validate the ``[[boundary]]`` list against the traces and the model's parameters.

    ``steps_reader(check, table, path, base)`` reads a steps table over ``base``.
    """
    if value is None:
        return ()
    if isinstance(value, dict):
        check.fail("boundary", "write [[boundary]] with double brackets: boundaries are a list")
    if not isinstance(value, list):
        check.fail("boundary", f"must be a list of [[boundary]] tables, got {shown(value)}")
    by_name = {trace.name: trace for trace in traces}
    used = {name: "a trace" for name in by_name}
    specs = []
    for number, item in enumerate(value, start=1):
        path = f"boundary[{number}]"
        earlier = {spec.name: spec for spec in specs}
        spec = _boundary(check, item, path, number, by_name, parameters, steps_reader, earlier)
        if spec.name in used:
            check.fail(f"{path}.name", f"'{spec.name}' is already the name of {used[spec.name]}")
        used[spec.name] = path
        specs.append(spec)
    return tuple(specs)


def _boundary(check, item, path, number, traces, parameters, steps_reader, earlier) -> BoundarySpec:
    table = check.table(item, path)
    check.keys(table, path, BOUNDARY_KEYS)
    if "from" not in table:
        check.fail(key_path(path, "from"), f"missing: {_REQUIRED['from']}")
    source = check.text(table["from"], f"{path}.from")
    parent = earlier.get(source)
    if source not in traces and parent is None:
        names = [*traces, *earlier]
        check.fail(
            f"{path}.from",
            f"'{source}' is not a trace or an earlier boundary{suggestion(source, names)} "
            f"(traces: {listed(traces)}; boundaries before this one: {listed(earlier) or 'none'})",
        )
    needed = ("kind",) if parent else ("kind", "second", "window")
    for required in needed:
        if required not in table:
            check.fail(key_path(path, required), f"missing: {_REQUIRED[required]}")
    name = check.text(table.get("name", f"boundary{number}"), f"{path}.name")
    if not name.strip() or "." in name:
        check.fail(f"{path}.name", f"must be a non-empty name without '.', got {shown(name)}")
    trace = traces[parent.trace if parent else source]
    kind = table["kind"]
    if kind not in BOUNDARY_KINDS:
        check.fail(f"{path}.kind", f'must be "fold" or "hopf", got {shown(kind)}')
    if parent is not None and kind == parent.kind:
        other = "hopf" if kind == "fold" else "fold"
        check.fail(
            f"{path}.kind",
            f"boundary {source} is a {kind} curve: the curve started at its Bogdanov-Takens and "
            f'zero-Hopf points is the other one, kind = "{other}"',
        )
    second = _second(check, table, path, trace, kind, parameters, parent)
    index = None
    if "index" in table:
        index = check.count(table["index"], f"{path}.index")
    if "window" in table or parent is None:
        window = _window(check, table["window"], f"{path}.window", (trace.vary, second))
    else:
        window = dict(parent.window)
    steps = parent.steps if parent else trace.steps
    if "steps" in table:
        steps = steps_reader(check, table["steps"], f"{path}.steps", steps)
    return BoundarySpec(
        name, source, kind, second, window, index, steps, trace.name, parent is not None
    )


def _second(check, table, path, trace, kind, parameters, parent) -> str:
    if "second" not in table:
        return parent.second
    second = check.text(table["second"], f"{path}.second")
    if second not in parameters:
        check.fail(
            f"{path}.second",
            f"'{second}' is not a parameter{suggestion(second, parameters)} "
            f"(parameters: {listed(parameters)})",
        )
    if second == trace.vary:
        check.fail(
            f"{path}.second",
            f"'{second}' is the trace's own parameter; name another one to follow the "
            f"{kind} points in",
        )
    if parent is not None and second != parent.second:
        check.fail(
            f"{path}.second",
            f"a curve started on boundary {parent.name} lies in its plane: second must be "
            f"'{parent.second}' (or left out)",
        )
    return second


_REQUIRED = {
    "from": "name the trace whose fold or Hopf points start the boundary",
    "kind": 'say "fold" or "hopf"',
    "second": "name the second parameter",
    "window": "give both parameters' windows, e.g. { D = [0.0, 1.0], S_in = [1.0, 10.0] }",
}


def _window(check, value, path, names) -> dict[str, tuple[float, float]]:
    table = check.table(value, path, f"a table of two windows ({' and '.join(names)})")
    for key in table:
        if key not in names:
            check.fail(
                key_path(path, key),
                f"'{key}' is not one of the boundary's parameters ({', '.join(names)})",
            )
    window = {}
    for name in names:
        key = key_path(path, name)
        if name not in table:
            check.fail(key, f"missing: give {name}'s window as [low, high]")
        bounds = table[name]
        if not isinstance(bounds, list) or len(bounds) != 2:
            check.fail(key, f"must be two numbers [low, high], got {shown(bounds)}")
        low, high = check.number(bounds[0], f"{key}[1]"), check.number(bounds[1], f"{key}[2]")
        if not low < high:
            check.fail(key, f"needs low < high, got [{low:g}, {high:g}]")
        window[name] = (low, high)
    return window
