"""Property-based fuzzing (hypothesis) of everything that reads outside input.

- the expression parser: any text parses or is refused with ExpressionError;
- the scan loader: any mutated scan (dict or TOML text) loads or is refused
  with a ScanError naming a key;
- the readers behind `report` and `plot`: any damaged results folder (truncated
  CSV, edited or hostile JSON, missing files, dropped columns) is used or
  refused with exit 2, never a traceback.

Nothing may execute code or touch files while parsing: an audit hook records
forbidden events (exec, file opens, processes) during the parser and loader
checks. A watchdog (SIGALRM) turns a hang into a failure.

CI runs a bounded number of examples (derandomized, about a minute in all);
set BRANCHLINE_FUZZ_EXAMPLES to run more by hand, e.g. 2000.
"""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import signal
import sys
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from branchline.cli import main
from branchline.errors import ExpressionError, ScanError
from branchline.scan.expressions import parse_expression
from branchline.scan.loader import load_scan, scan_from_dict
from test_cli import GOOD

SCALE = int(os.environ.get("BRANCHLINE_FUZZ_EXAMPLES", "0"))
# A hang guard, not a speed check: no single input may take this long.
WATCHDOG_SECONDS = 30


def _settings(examples: int):
    return settings(
        max_examples=max(examples, SCALE),
        deadline=None,
        derandomize=not SCALE,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture],
        database=None,
    )


@contextlib.contextmanager
def watchdog():
    def expired(signum, frame):
        raise AssertionError(f"an input took more than {WATCHDOG_SECONDS} s")

    previous = signal.signal(signal.SIGALRM, expired)
    signal.alarm(WATCHDOG_SECONDS)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)


FORBIDDEN_EVENTS = (
    "exec",
    "open",
    "os.system",
    "subprocess.Popen",
    "os.exec",
    "os.posix_spawn",
    "os.remove",
    "os.rmdir",
    "shutil.rmtree",
    "socket.connect",
)
_guard = {"active": False, "seen": []}


# Importing installed code (sympy loads parts of itself lazily) opens and runs
# files under these folders; that is not the input doing anything.
INSTALLED = tuple(
    str(Path(folder).resolve())
    for folder in {sys.prefix, sys.base_prefix, *sys.path}
    if folder and Path(folder).is_dir()
)


def _installed(args) -> bool:
    first = args[0] if args else None
    name = getattr(first, "co_filename", first)
    if isinstance(name, bytes | os.PathLike):
        name = os.fsdecode(name)
    return isinstance(name, str) and str(Path(name).resolve()).startswith(INSTALLED)


def _audit(event: str, args) -> None:
    if _guard["active"] and event.startswith(FORBIDDEN_EVENTS) and not _installed(args):
        _guard["seen"].append((event, repr(args)[:120]))


sys.addaudithook(_audit)


@contextlib.contextmanager
def no_side_effects():
    """Fail if the block executes code, opens files or starts processes."""
    _guard["active"], _guard["seen"] = True, []
    try:
        yield
    finally:
        _guard["active"] = False
    assert not _guard["seen"], _guard["seen"]


# --------------------------------------------------------------------------- expressions

PIECES = [
    "x",
    "y",
    "mu",
    "2",
    "0.5",
    "1e308",
    "9",
    "+",
    "-",
    "*",
    "/",
    "**",
    "^",
    "(",
    ")",
    ",",
    " ",
    "exp(",
    "log(",
    "sqrt(",
    "sin(",
    "atan2(",
    "abs(",
    "pi",
    "__import__",
    "'os'",
    ".",
    "__class__",
    "[",
    "]",
    "lambda",
    ":",
    "open(",
    "eval(",
    "\\n",
    ";",
    "if",
    "else",
    "1j",
    "%",
    "@",
    "{",
    "}",
    "=",
    "==",
    "not",
    "~",
    ">>",
]


@_settings(150)
@given(
    st.one_of(
        st.lists(st.sampled_from(PIECES), max_size=40).map("".join),
        st.text(max_size=200),
    )
)
def test_expression_parser_parses_or_refuses(text):
    with watchdog(), no_side_effects():
        try:
            expr = parse_expression(text, "model.equations.x")
        except ExpressionError as err:
            assert str(err)
            return
    assert expr is not None


# --------------------------------------------------------------------------- scan loader

BASE = {
    "title": "harvested stock",
    "model": {
        "parameters": {"r": 1.0, "F": 0.2},
        "equations": {"N": "r*N*(1 - N) - F*N"},
        "definitions": {"g": "r*N"},
    },
    "trace": [
        {
            "name": "main",
            "vary": "F",
            "interval": [0.0, 0.5],
            "start": {"N": 0.8},
            "direction": "both",
            "limits": {"N": [0.0, 2.0]},
            "steps": {"largest": 0.05},
        }
    ],
    "steps": {"initial": 0.01, "smallest": 1e-8, "largest": 0.05, "max_points": 100},
}

JUNK = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(min_value=-(10**30), max_value=10**30),
    st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=30),
    st.lists(st.one_of(st.floats(), st.text(max_size=5), st.integers()), max_size=4),
    st.dictionaries(st.text(max_size=8), st.one_of(st.floats(), st.text(max_size=8)), max_size=3),
)


def _paths(data, prefix=()):
    yield prefix
    if isinstance(data, dict):
        for key, value in data.items():
            yield from _paths(value, (*prefix, key))
    elif isinstance(data, list):
        for index, value in enumerate(data):
            yield from _paths(value, (*prefix, index))


ALL_PATHS = [p for p in _paths(BASE) if p]


def _mutated(data, path, action, junk):
    """A copy of ``data`` with ``junk`` put at, removed from or added beside ``path``."""
    data = json.loads(json.dumps(data))
    *head, last = path
    holder = data
    for key in head:
        holder = holder[key]
    if action == "replace":
        holder[last] = junk
    elif action == "delete":
        del holder[last]
    elif isinstance(holder, dict):
        holder[f"{last}_extra"] = junk
    else:
        holder.append(junk)
    return data


@_settings(200)
@given(
    st.lists(
        st.tuples(st.sampled_from(ALL_PATHS), st.sampled_from(["replace", "delete", "add"]), JUNK),
        min_size=1,
        max_size=3,
    )
)
def test_scan_dict_loads_or_is_refused_naming_a_key(mutations):
    data = BASE
    for path, action, junk in mutations:
        try:
            data = _mutated(data, path, action, junk)
        except (KeyError, IndexError, TypeError, AttributeError):
            continue  # an earlier mutation removed or replaced this path
    with watchdog(), no_side_effects():
        try:
            scan = scan_from_dict(data, "fuzz.toml")
        except ScanError as err:
            assert err.key and err.problem and err.source == "fuzz.toml"
            assert len(str(err)) < 2000  # names are shortened, not echoed in full
            return
    assert scan.traces


SCAN_TEXT = """title = "harvested stock"
[model.parameters]
r = 1.0
F = 0.2
[model.equations]
N = "r*N*(1 - N) - F*N"
[[trace]]
vary = "F"
interval = [0.0, 0.5]
start = { N = 0.8 }
limits = { N = [0.0, 2.0] }
[steps]
max_points = 100
"""


@_settings(150)
@given(
    st.lists(
        st.tuples(
            st.integers(min_value=0, max_value=len(SCAN_TEXT)),
            st.integers(min_value=0, max_value=8),
            st.text(alphabet="[]{}=\"',.:-+*^()$\\ \n\t0123456789eNFrxinfa", max_size=6),
        ),
        min_size=1,
        max_size=4,
    )
)
def test_scan_text_loads_or_is_refused_naming_a_key(tmp_path_factory, edits):
    text = SCAN_TEXT
    for position, removed, inserted in edits:
        position = min(position, len(text))
        text = text[:position] + inserted + text[position + removed :]
    path = tmp_path_factory.mktemp("scan") / "fuzz.toml"
    path.write_text(text)
    with watchdog():
        try:
            scan = load_scan(path)
        except ScanError as err:
            assert err.key and err.problem
            return
    assert scan.traces


# --------------------------------------------------------------------------- readers



@pytest.fixture(scope="module")
def saved_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("saved")
    scan = folder / "small.toml"
    scan.write_text(GOOD)
    assert main(["run", str(scan), "--out", str(folder / "run"), "--quiet"]) == 0
    return folder / "run"


HOSTILE_JSON = [
    "null",
    "[]",
    "[1, 2]",
    '"text"',
    "{}",
    '{"events": null}',
    '{"events": [1, 2]}',
    '{"events": [{"kind": "hopf"}]}',
    '{"traces": "none"}',
    '{"traces": [{"name": 1, "vary": []}]}',
    '{"traces": [{"name": "x", "vary": "F", "status": {"a": 1}}]}',
    "[" * 20000 + "]" * 20000,
    '{"title": "' + "$\\\\frac{" * 50 + '"}',
    '{"events": [], "x": 1e999}',
    "\u0000\u0001",
]


def _damage(folder: Path, action: str, file: str, cut: float, junk: str, column: int) -> None:
    path = folder / file
    if action == "delete":
        path.unlink(missing_ok=True)
    elif action == "truncate" and path.exists():
        data = path.read_bytes()
        path.write_bytes(data[: int(len(data) * cut)])
    elif action == "replace":
        path.write_text(junk)
    elif action == "drop_column" and file == "points.csv" and path.exists():
        lines = path.read_text().splitlines()
        cells = [line.split(",") for line in lines]
        path.write_text("\n".join(",".join(c[:column] + c[column + 1 :]) for c in cells) + "\n")
    elif action == "edit_json" and file.endswith(".json") and path.exists():
        try:
            data = json.loads(path.read_text())
        except ValueError:
            return
        if isinstance(data, dict) and data:
            key = sorted(data)[column % len(data)]
            try:
                data[key] = json.loads(junk)
            except ValueError:
                data[key] = junk
            path.write_text(json.dumps(data))


DAMAGE = st.tuples(
    st.sampled_from(["delete", "truncate", "replace", "drop_column", "edit_json"]),
    st.sampled_from(["points.csv", "events.json", "run.json", "events.csv"]),
    st.floats(min_value=0.0, max_value=1.0),
    st.one_of(st.sampled_from(HOSTILE_JSON[:-4]), st.text(max_size=40)),
    st.integers(min_value=0, max_value=12),
)


def _fresh_copy(saved_run: Path, tmp_path_factory) -> Path:
    copy = tmp_path_factory.mktemp("damaged") / "run"
    shutil.copytree(saved_run, copy)
    return copy


@_settings(60)
@given(st.lists(DAMAGE, min_size=1, max_size=3))
def test_report_on_a_damaged_folder_reports_or_refuses(saved_run, tmp_path_factory, damages):
    folder = _fresh_copy(saved_run, tmp_path_factory)
    for damage in damages:
        _damage(folder, *damage)
    with watchdog():
        code = main(["report", str(folder)])
    assert code in (0, 2)


@_settings(15)
@given(st.lists(DAMAGE, min_size=1, max_size=2), st.sampled_from([None, "N", "F", "nope"]))
def test_plot_on_a_damaged_folder_draws_or_refuses(saved_run, tmp_path_factory, damages, axis):
    folder = _fresh_copy(saved_run, tmp_path_factory)
    for damage in damages:
        _damage(folder, *damage)
    args = ["plot", str(folder), "--output", str(folder.parent / "d.png")]
    if axis:
        args += ["--y", axis]
    with watchdog():
        code = main(args)
    assert code in (0, 2)


@pytest.mark.parametrize("text", HOSTILE_JSON, ids=range(len(HOSTILE_JSON)))
@pytest.mark.parametrize("file", ["run.json", "events.json"])
def test_hostile_json_is_refused_or_used(saved_run, tmp_path_factory, capsys, text, file):
    folder = _fresh_copy(saved_run, tmp_path_factory)
    (folder / file).write_text(text)
    assert main(["report", str(folder)]) in (0, 2)
    err = capsys.readouterr().err
    assert "Traceback" not in err
    assert len(err) < 2000


def test_plot_output_into_a_missing_folder_is_refused(saved_run, tmp_path, capsys):
    code = main(["plot", str(saved_run), "--output", str(tmp_path / "nowhere" / "d.png")])
    assert code == 2
    assert "does not exist" in capsys.readouterr().err


NAME_OR_JUNK = st.one_of(st.sampled_from(["r", "F", "N", "x", "", "=", "r=1"]), st.text(max_size=8))
VALUE_OR_JUNK = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.sampled_from(["", "1e400", "-0", "nan", "0x10", "1_000", "2*3", "__import__('os')"]),
    st.text(max_size=8),
)
OPTION = st.tuples(st.sampled_from(["--set", "--start", "--trace"]), NAME_OR_JUNK, VALUE_OR_JUNK)


@pytest.fixture(scope="module")
def good_scan(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("inspect") / "stock.toml"
    path.write_text(GOOD)
    return path


@_settings(60)
@given(st.lists(OPTION, max_size=4))
def test_inspect_with_fuzzed_options_answers_or_refuses(good_scan, capsys, options):
    args = ["inspect", str(good_scan)]
    for flag, name, value in options:
        args += [flag, name if flag == "--trace" else f"{name}={value}"]
    with watchdog():
        try:
            code = main(args)
        except SystemExit as exit_:  # argparse refuses a malformed option line itself
            code = exit_.code
    err = capsys.readouterr().err
    assert code in (0, 2), err
    assert "Traceback" not in err and len(err) < 2000
