"""Scan files: a good scan parsed in full, and one test per class of bad input.

Every bad input must raise ScanError naming the file, the dotted key path and
the problem. The bioreactor model is the example scan of the interface
contract (interface.md); its values are invented for demonstration.
"""

from __future__ import annotations

import copy
from pathlib import Path

import pytest

from branchline.errors import ScanError
from branchline.numerics.tolerances import (
    DEFAULT_INITIAL_STEP,
    DEFAULT_LARGEST_STEP,
    DEFAULT_MAX_POINTS,
    DEFAULT_SMALLEST_STEP,
)
from branchline.scan.loader import (
    ExpressionModelSpec,
    PythonModelSpec,
    Scan,
    StepSettings,
    TraceSpec,
    load_scan,
    model_states,
    scan_from_dict,
)

BIOREACTOR_TOML = """\
title = "Continuous bioreactor with substrate inhibition"

[model.parameters]          # every parameter with its default value
D = 0.1
S_in = 4.0
mu_max = 0.5
K_s = 0.1
K_i = 0.5
Y = 0.5

[model.equations]           # one entry per state: its time derivative
S = "D*(S_in - S) - mu*X/Y"
X = "(mu - D)*X"

[model.definitions]         # optional named helper expressions, in order
mu = "mu_max*S/(K_s + S + S^2/K_i)"

[[trace]]                   # one equilibrium branch to follow; repeatable
name = "washout"            # optional; default trace1, trace2, ...
vary = "D"                  # the continuation parameter
interval = [0.0, 0.6]       # stop when the parameter leaves this window
start = { S = 0.5, X = 1.7 }  # guess at the parameter's default value
set = { S_in = 5.0 }        # optional overrides for this trace
direction = "both"          # "both" (default), "increasing", "decreasing"

[steps]                     # optional; per-trace [trace.steps] overrides
initial = 0.01
smallest = 1e-8
largest = 0.05
max_points = 2000
"""

SOURCE = "bioreactor.toml"


def bioreactor() -> dict:
    """The example scan as a dictionary (what tomllib gives for BIOREACTOR_TOML)."""
    return {
        "title": "Continuous bioreactor with substrate inhibition",
        "model": {
            "parameters": {
                "D": 0.1,
                "S_in": 4.0,
                "mu_max": 0.5,
                "K_s": 0.1,
                "K_i": 0.5,
                "Y": 0.5,
            },
            "equations": {"S": "D*(S_in - S) - mu*X/Y", "X": "(mu - D)*X"},
            "definitions": {"mu": "mu_max*S/(K_s + S + S^2/K_i)"},
        },
        "trace": [
            {
                "name": "washout",
                "vary": "D",
                "interval": [0.0, 0.6],
                "start": {"S": 0.5, "X": 1.7},
                "set": {"S_in": 5.0},
                "direction": "both",
            }
        ],
        "steps": {"initial": 0.01, "smallest": 1e-8, "largest": 0.05, "max_points": 2000},
    }


def python_scan() -> dict:
    return {
        "model": {
            "parameters": {"a": 1.0, "b": 2.0},
            "python": {"rhs": "mypackage.mymodule:rhs", "size": 3},
        },
        "trace": [{"vary": "a", "interval": [0, 2], "start": "mypackage.mymodule:guess"}],
    }


def refused(data: dict, key: str, *words: str) -> ScanError:
    """Assert that ``data`` is refused at ``key`` with all ``words`` in the message."""
    with pytest.raises(ScanError) as info:
        scan_from_dict(data, SOURCE)
    err = info.value
    text = str(err)
    assert err.source == SOURCE
    assert err.key == key, text
    assert text.startswith(f"{SOURCE}: {key}: "), text
    for word in words:
        assert word in text, text
    return err


# --------------------------------------------------------------------------- good scans


def test_bioreactor_file_is_parsed_in_full(tmp_path):
    path = tmp_path / "bioreactor.toml"
    path.write_text(BIOREACTOR_TOML)
    scan = load_scan(path)

    assert isinstance(scan, Scan)
    assert scan.source == str(path)
    assert scan.stem == "bioreactor"
    assert scan.title == "Continuous bioreactor with substrate inhibition"
    model = scan.model
    assert isinstance(model, ExpressionModelSpec)
    assert model.parameters == {
        "D": 0.1,
        "S_in": 4.0,
        "mu_max": 0.5,
        "K_s": 0.1,
        "K_i": 0.5,
        "Y": 0.5,
    }
    assert list(model.parameters) == ["D", "S_in", "mu_max", "K_s", "K_i", "Y"]
    assert model.equations == {"S": "D*(S_in - S) - mu*X/Y", "X": "(mu - D)*X"}
    assert list(model.equations) == ["S", "X"]
    assert model.definitions == {"mu": "mu_max*S/(K_s + S + S^2/K_i)"}
    assert model.observables == {}
    assert model_states(model) == ("S", "X")

    steps = StepSettings(initial=0.01, smallest=1e-8, largest=0.05, max_points=2000)
    assert scan.steps == steps
    assert scan.traces == (
        TraceSpec(
            name="washout",
            vary="D",
            interval=(0.0, 0.6),
            start={"S": 0.5, "X": 1.7},
            set={"S_in": 5.0},
            direction="both",
            steps=steps,
            switch_branches=True,
        ),
    )
    assert scan.raw == bioreactor()
    assert all(isinstance(v, float) for v in scan.traces[0].interval)


def test_dictionary_gives_the_same_scan_as_the_file(tmp_path):
    path = tmp_path / "bioreactor.toml"
    path.write_text(BIOREACTOR_TOML)
    assert scan_from_dict(bioreactor(), str(path)) == load_scan(path)


def test_raw_is_a_copy():
    data = bioreactor()
    scan = scan_from_dict(data)
    data["model"]["parameters"]["D"] = 99.0
    assert scan.raw["model"]["parameters"]["D"] == 0.1


def test_defaults_are_filled_in():
    data = bioreactor()
    del data["steps"], data["title"]
    trace = data["trace"][0]
    for key in ("name", "set", "direction"):
        del trace[key]
    data["trace"].append(copy.deepcopy(trace))
    scan = scan_from_dict(data, "runs/my_reactor.toml")
    assert scan.title == "my_reactor"
    assert scan_from_dict(data).title == "scan"
    assert scan.steps == StepSettings(
        DEFAULT_INITIAL_STEP, DEFAULT_SMALLEST_STEP, DEFAULT_LARGEST_STEP, DEFAULT_MAX_POINTS
    )
    assert [t.name for t in scan.traces] == ["trace1", "trace2"]
    first = scan.traces[0]
    assert first.set == {}
    assert first.direction == "both"
    assert first.switch_branches is True
    assert first.steps == scan.steps


def test_trace_steps_override_global_steps_entry_by_entry():
    data = bioreactor()
    data["trace"][0]["steps"] = {"initial": 0.02, "max_points": 50}
    data["trace"].append({"vary": "S_in", "interval": [0, 10], "start": {"S": 1, "X": 1}})
    scan = scan_from_dict(data)
    assert scan.traces[0].steps == StepSettings(
        initial=0.02, smallest=1e-8, largest=0.05, max_points=50
    )
    assert scan.traces[1].steps == scan.steps


def test_definitions_are_stored_in_dependency_order():
    data = bioreactor()
    # rate uses mu, which is written later; growth uses nothing; mu uses half.
    data["model"]["definitions"] = {
        "rate": "mu*X/Y",
        "growth": "mu_max*S",
        "mu": "growth/(K_s + S + S^2/K_i) + half",
        "half": "0.5*K_s",
    }
    data["model"]["equations"]["S"] = "D*(S_in - S) - rate"
    scan = scan_from_dict(data)
    assert list(scan.model.definitions) == ["growth", "half", "mu", "rate"]
    assert scan.model.definitions["mu"] == "growth/(K_s + S + S^2/K_i) + half"


def test_observables_and_other_options():
    data = bioreactor()
    data["model"]["observables"] = {"biomass_rate": "D*X", "yield_loss": "S_in - S"}
    data["trace"][0].update(direction="increasing", switch_branches=False)
    data["model"]["equations"]["X"] = 0  # a number is a constant expression
    scan = scan_from_dict(data)
    assert scan.model.observables == {"biomass_rate": "D*X", "yield_loss": "S_in - S"}
    assert scan.model.equations["X"] == "0.0"
    assert scan.traces[0].direction == "increasing"
    assert scan.traces[0].switch_branches is False


def test_start_value_may_come_from_set_and_sit_on_the_edge():
    data = bioreactor()
    data["trace"][0]["set"] = {"D": 0.6}
    assert scan_from_dict(data).traces[0].set == {"D": 0.6}


def test_python_model():
    scan = scan_from_dict(python_scan(), "pde.toml")
    model = scan.model
    assert model == PythonModelSpec(
        parameters={"a": 1.0, "b": 2.0}, rhs="mypackage.mymodule:rhs", size=3
    )
    assert model_states(model) == ("x0", "x1", "x2")
    assert scan.traces[0].start == "mypackage.mymodule:guess"
    assert scan.traces[0].interval == (0.0, 2.0)


def test_python_model_with_named_states_and_options():
    data = python_scan()
    data["model"]["python"].update(
        jacobian="mypackage.mymodule:jac",
        states=["u", "v", "w"],
        observables="mypackage.mymodule:outputs",
    )
    data["trace"][0]["start"] = {"u": 1.0, "v": 0.0, "w": -1}
    scan = scan_from_dict(data)
    assert scan.model.states == ("u", "v", "w")
    assert scan.model.jacobian == "mypackage.mymodule:jac"
    assert scan.model.observables == "mypackage.mymodule:outputs"
    assert scan.traces[0].start == {"u": 1.0, "v": 0.0, "w": -1.0}


# --------------------------------------------------------------------------- the file


def test_missing_file(tmp_path):
    path = tmp_path / "absent.toml"
    with pytest.raises(ScanError, match="no such file") as info:
        load_scan(path)
    assert str(path) in str(info.value)


def test_directory_instead_of_file(tmp_path):
    with pytest.raises(ScanError, match="directory"):
        load_scan(tmp_path)


def test_unreadable_file(tmp_path, monkeypatch):
    path = tmp_path / "locked.toml"
    path.write_text(BIOREACTOR_TOML)

    def denied(self):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(Path, "read_bytes", denied)
    with pytest.raises(ScanError, match="cannot be read \\(Permission denied\\)") as info:
        load_scan(path)
    assert "locked.toml" in str(info.value)


def test_invalid_toml_reports_the_line(tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text('title = "x"\n[model.parameters]\nD = = 0.1\n')
    with pytest.raises(ScanError) as info:
        load_scan(path)
    text = str(info.value)
    assert "broken.toml" in text
    assert "not valid TOML" in text
    assert "line 3" in text


def test_file_not_utf8(tmp_path):
    path = tmp_path / "latin.toml"
    path.write_bytes(b'title = "ok"\ntitle2 = "\xe9"\n')
    with pytest.raises(ScanError, match="not UTF-8 text \\(line 2\\)"):
        load_scan(path)


def test_errors_in_a_file_name_the_file(tmp_path):
    path = tmp_path / "typo.toml"
    path.write_text(BIOREACTOR_TOML.replace("interval =", "intervall ="))
    with pytest.raises(ScanError) as info:
        load_scan(path)
    assert str(info.value).startswith(f"{path}: trace[1].intervall: unknown key")


def test_scan_must_be_a_table():
    with pytest.raises(ScanError, match="table"):
        scan_from_dict([1, 2], SOURCE)  # type: ignore[arg-type]


# --------------------------------------------------------------------------- unknown keys


@pytest.mark.parametrize(
    ("where", "typo", "key", "suggestion"),
    [
        ((), "step", "step", "steps"),
        (("model",), "equation", "model.equation", "equations"),
        (("model",), "defintions", "model.defintions", "definitions"),
        (("trace", 0), "intervall", "trace[1].intervall", "interval"),
        (("trace", 0), "switch_branch", "trace[1].switch_branch", "switch_branches"),
        (("steps",), "inital", "steps.inital", "initial"),
    ],
)
def test_unknown_keys_suggest_the_nearest(where, typo, key, suggestion):
    data = bioreactor()
    table = data
    for part in where:
        table = table[part]
    table[typo] = 1
    refused(data, key, f"unknown key '{typo}'", f"did you mean '{suggestion}'?")


def test_unknown_key_without_a_near_one_lists_the_valid_keys():
    data = bioreactor()
    data["trace"][0]["zzz"] = 1
    refused(data, "trace[1].zzz", "unknown key 'zzz'", "valid keys here: name, vary, interval")


def test_unknown_key_in_trace_steps_and_python_table():
    data = bioreactor()
    data["trace"][0]["steps"] = {"largst": 0.1}
    refused(data, "trace[1].steps.largst", "did you mean 'largest'?")
    data = python_scan()
    data["model"]["python"]["jacobain"] = "m:j"
    refused(data, "model.python.jacobain", "did you mean 'jacobian'?")


# --------------------------------------------------------------------------- missing keys


@pytest.mark.parametrize(
    ("path", "key", "words"),
    [
        (("model",), "model", ("missing",)),
        (("model", "parameters"), "model.parameters", ("missing", "default value")),
        (("model", "equations"), "model.equations", ("missing", "[model.python]")),
        (("trace",), "trace", ("missing", "[[trace]]")),
        (("trace", 0, "vary"), "trace[1].vary", ("missing",)),
        (("trace", 0, "interval"), "trace[1].interval", ("missing", "[low, high]")),
        (("trace", 0, "start"), "trace[1].start", ("missing",)),
    ],
)
def test_missing_required_keys(path, key, words):
    data = bioreactor()
    table = data
    for part in path[:-1]:
        table = table[part]
    del table[path[-1]]
    refused(data, key, *words)


def test_missing_python_keys():
    for required in ("rhs", "size"):
        data = python_scan()
        del data["model"]["python"][required]
        refused(data, f"model.python.{required}", "missing")


def test_empty_tables_and_trace_lists():
    data = bioreactor()
    data["trace"] = []
    refused(data, "trace", "at least one")
    data = bioreactor()
    data["trace"] = data["trace"][0]  # [trace] instead of [[trace]]
    refused(data, "trace", "[[trace]]", "double brackets")
    data = bioreactor()
    data["model"]["equations"] = {}
    refused(data, "model.equations", "empty")
    data = bioreactor()
    data["model"]["parameters"] = {}
    refused(data, "model.parameters", "empty")


def test_equations_and_python_together():
    data = bioreactor()
    data["model"]["python"] = {"rhs": "m:f", "size": 2}
    refused(data, "model", "either [model.equations] or [model.python], not both")


def test_tables_of_the_wrong_type():
    data = bioreactor()
    data["model"]["parameters"] = [1, 2]
    refused(data, "model.parameters", "must be a table")
    data = bioreactor()
    data["trace"][0] = "washout"
    refused(data, "trace[1]", "must be a table")
    data = bioreactor()
    data["title"] = 3
    refused(data, "title", "must be text")


# --------------------------------------------------------------------------- values


def test_vary_must_be_a_parameter():
    data = bioreactor()
    data["trace"][0]["vary"] = "d"
    refused(data, "trace[1].vary", "'d' is not a parameter", "did you mean 'D'?")
    data["trace"][0]["vary"] = "S"  # a state, not a parameter
    refused(data, "trace[1].vary", "'S' is not a parameter", "parameters: D, S_in")


def test_start_missing_and_extra_states():
    data = bioreactor()
    data["trace"][0]["start"] = {"S": 0.5}
    refused(data, "trace[1].start", "missing start values for X")
    data["trace"][0]["start"] = {"S": 0.5, "X": 1.7, "Xx": 1.0}
    refused(data, "trace[1].start.Xx", "'Xx' is not a state", "did you mean 'X'?")
    data["trace"][0]["start"] = [0.5, 1.7]
    refused(data, "trace[1].start", "must be a table of state values")


@pytest.mark.parametrize(
    ("path", "value", "key"),
    [
        (("model", "parameters", "D"), "0.1", "model.parameters.D"),
        (("model", "parameters", "D"), True, "model.parameters.D"),
        (("model", "parameters", "Y"), float("nan"), "model.parameters.Y"),
        (("model", "parameters", "Y"), float("inf"), "model.parameters.Y"),
        (("trace", 0, "start", "X"), False, "trace[1].start.X"),
        (("trace", 0, "start", "S"), "high", "trace[1].start.S"),
        (("trace", 0, "start", "S"), float("-inf"), "trace[1].start.S"),
        (("trace", 0, "set", "S_in"), "5", "trace[1].set.S_in"),
        (("trace", 0, "interval", 1), "0.6", "trace[1].interval[2]"),
        (("trace", 0, "interval", 0), float("nan"), "trace[1].interval[1]"),
        (("steps", "initial"), "big", "steps.initial"),
        (("steps", "largest"), True, "steps.largest"),
    ],
)
def test_non_numeric_values(path, value, key):
    data = bioreactor()
    table = data
    for part in path[:-1]:
        table = table[part]
    table[path[-1]] = value
    refused(data, key, "must be a", "number")


@pytest.mark.parametrize(
    ("table", "text", "key", "words"),
    [
        ("equations", "D*(S_in - S) - mu*Z/Y", "model.equations.S", "unknown name 'Z'"),
        ("equations", "D*(Sin - S)", "model.equations.S", "did you mean 'S_in'?"),
        ("definitions", "mu_max*S/(K_s + S + S^2/Ki)", "model.definitions.mu", "'Ki'"),
        ("observables", "D*XX", "model.observables.out", "unknown name 'XX'"),
    ],
)
def test_unknown_names_in_expressions(table, text, key, words):
    data = bioreactor()
    name = key.rsplit(".", 1)[1]
    data["model"].setdefault(table, {})[name] = text
    refused(data, key, words, "states: S, X", "parameters: D, S_in")


def test_observables_cannot_use_each_other():
    data = bioreactor()
    data["model"]["observables"] = {"a": "S", "b": "2*a"}
    refused(data, "model.observables.b", "unknown name 'a'")


def test_expression_errors_name_the_key():
    data = bioreactor()
    data["model"]["equations"]["X"] = "(mu - D)*X.real"
    err = refused(data, "model.equations.X", "attribute access is not allowed")
    assert "^" in str(err)
    data = bioreactor()
    data["model"]["definitions"]["mu"] = "__import__('os').system('echo hi')"
    refused(data, "model.definitions.mu", "not allowed")
    data = bioreactor()
    data["model"]["observables"] = {"big": "9^9^9^9"}
    refused(data, "model.observables.big", "exponent")
    data = bioreactor()
    data["model"]["equations"]["X"] = ["not", "text"]
    refused(data, "model.equations.X", "must be text")


@pytest.mark.parametrize(
    ("table", "name", "key", "words"),
    [
        ("parameters", "2x", 'model.parameters."2x"', "not a valid parameter name"),
        ("parameters", "my-rate", 'model.parameters."my-rate"', "not a valid parameter name"),
        ("parameters", "lambda", "model.parameters.lambda", "Python keyword"),
        ("parameters", "__x", "model.parameters.__x", "'__'"),
        ("parameters", "exp", "model.parameters.exp", "name of a function"),
        ("parameters", "pi", "model.parameters.pi", "name of a constant"),
        ("parameters", "step", "model.parameters.step", "column of the result tables"),
        ("parameters", "μ", 'model.parameters."μ"', "not a valid parameter name"),
        ("definitions", "sqrt", "model.definitions.sqrt", "name of a function"),
        ("equations", "stable", "model.equations.stable", "column of the result tables"),
        ("observables", "log", "model.observables.log", "name of a function"),
    ],
)
def test_invalid_and_reserved_names(table, name, key, words):
    data = bioreactor()
    data["model"].setdefault(table, {})[name] = "1" if table != "parameters" else 1.0
    refused(data, key, words)


@pytest.mark.parametrize(
    ("table", "name", "key", "owner"),
    [
        ("equations", "D", "model.equations.D", "parameter"),
        ("definitions", "S", "model.definitions.S", "state"),
        ("definitions", "K_s", "model.definitions.K_s", "parameter"),
        ("observables", "mu", "model.observables.mu", "definition"),
        ("observables", "X", "model.observables.X", "state"),
    ],
)
def test_names_that_clash(table, name, key, owner):
    data = bioreactor()
    data["model"].setdefault(table, {})[name] = "1"
    refused(data, key, f"'{name}' is already used as a {owner}")


def test_definition_loops_are_reported_as_a_cycle():
    data = bioreactor()
    data["model"]["definitions"] = {
        "mu": "mu_max*S/(K_s + S + S^2/K_i) + a",
        "a": "b + 1",
        "b": "2*a",
    }
    refused(data, "model.definitions.a", "loop", "a -> b -> a")
    data["model"]["definitions"] = {"mu": "mu + 1"}
    refused(data, "model.definitions.mu", "mu -> mu")
    data["model"]["definitions"] = {"mu": "c", "c": "d", "d": "e", "e": "c*2"}
    refused(data, "model.definitions.c", "c -> d -> e -> c")


@pytest.mark.parametrize(
    ("interval", "key", "words"),
    [
        (0.6, "trace[1].interval", "two numbers"),
        ([0.0, 0.3, 0.6], "trace[1].interval", "two numbers"),
        ([0.6, 0.0], "trace[1].interval", "reversed"),
        ([0.2, 0.2], "trace[1].interval", "empty"),
        ([0.2, 0.6], "trace[1].interval", "does not contain the start value D = 0.1"),
    ],
)
def test_bad_intervals(interval, key, words):
    data = bioreactor()
    data["trace"][0]["interval"] = interval
    refused(data, key, words)


def test_interval_must_contain_the_set_start_value():
    data = bioreactor()
    data["trace"][0]["set"]["D"] = 0.7
    refused(data, "trace[1].interval", "does not contain the start value D = 0.7", "set.D")


def test_bad_direction():
    data = bioreactor()
    data["trace"][0]["direction"] = "up"
    refused(data, "trace[1].direction", "both, increasing, decreasing")


def test_set_names_unknown_parameters():
    data = bioreactor()
    data["trace"][0]["set"] = {"Sin": 5.0}
    refused(data, "trace[1].set.Sin", "'Sin' is not a parameter", "did you mean 'S_in'?")
    data["trace"][0]["set"] = {"S": 1.0}
    refused(data, "trace[1].set.S", "'S' is not a parameter")


@pytest.mark.parametrize(
    ("steps", "key", "words"),
    [
        ({"initial": 0.0}, "steps.initial", "must be positive"),
        ({"smallest": -1e-8}, "steps.smallest", "must be positive"),
        ({"initial": 0.1}, "steps", "smallest <= initial <= largest"),
        ({"smallest": 0.02}, "steps", "smallest <= initial <= largest"),
        ({"max_points": 0}, "steps.max_points", "positive whole number"),
        ({"max_points": 2.5}, "steps.max_points", "positive whole number"),
        ({"max_points": True}, "steps.max_points", "positive whole number"),
        ({"max_points": "many"}, "steps.max_points", "positive whole number"),
    ],
)
def test_bad_global_steps(steps, key, words):
    data = bioreactor()
    data["steps"].update(steps)
    refused(data, key, words)


def test_max_points_may_be_an_integral_float():
    data = bioreactor()
    data["steps"]["max_points"] = 3e3
    assert scan_from_dict(data).steps.max_points == 3000


def test_bad_trace_steps_after_merging():
    data = bioreactor()
    data["trace"][0]["steps"] = {"initial": 0.01, "largest": 0.005}
    refused(
        data,
        "trace[1].steps",
        "smallest <= initial <= largest",
        "after merging over [steps]",
        "largest = 0.005",
    )
    # a largest step alone below the first step lowers the (unset) first step
    data["trace"][0]["steps"] = {"largest": 0.005}
    assert scan_from_dict(data).traces[0].steps.initial == 0.005
    data["trace"][0]["steps"] = {"initial": -1}
    refused(data, "trace[1].steps.initial", "must be positive")
    data["trace"][0]["steps"] = 0.1
    refused(data, "trace[1].steps", "must be a table")


def test_trace_names():
    data = bioreactor()
    data["trace"].append(copy.deepcopy(data["trace"][0]))
    refused(data, "trace[2].name", "'washout' is already used by trace[1]")
    data["trace"][1]["name"] = "washout.1"
    refused(data, "trace[2].name", "contains '.'")
    data["trace"][1]["name"] = " "
    refused(data, "trace[2].name", "must not be empty")
    data["trace"][1]["name"] = 2
    refused(data, "trace[2].name", "must be text")
    # A given name may collide with a default one.
    data["trace"][0]["name"] = "trace2"
    del data["trace"][1]["name"]
    refused(data, "trace[2].name", "'trace2' is already used by trace[1]")


def test_switch_branches_must_be_a_boolean():
    data = bioreactor()
    data["trace"][0]["switch_branches"] = "no"
    refused(data, "trace[1].switch_branches", "true or false")


# --------------------------------------------------------------------------- Python models


@pytest.mark.parametrize(
    ("key", "value", "words"),
    [
        ("rhs", "mymodule.rhs", "module:function"),
        ("rhs", "my module:rhs", "module:function"),
        ("rhs", "os:system; rm", "module:function"),
        ("rhs", 5, "must be text"),
        ("jacobian", "pkg:", "module:function"),
        ("observables", ":f", "module:function"),
        ("size", 0, "positive whole number"),
        ("size", -3, "positive whole number"),
        ("size", "3", "positive whole number"),
        ("states", "u v w", "list of state names"),
        ("states", ["u", "v"], "lists 2 names but size = 3"),
        ("states", ["u", "v", "u"], "listed twice"),
    ],
)
def test_bad_python_model_entries(key, value, words):
    data = python_scan()
    data["model"]["python"][key] = value
    expected_key = f"model.python.{key}"
    if key == "states" and isinstance(value, list) and len(value) == 3:
        expected_key = "model.python.states[3]"
    refused(data, expected_key, words)


def test_python_state_names_are_checked():
    data = python_scan()
    data["model"]["python"]["states"] = ["u", "2v", "w"]
    refused(data, "model.python.states[2]", "not a valid state name")
    data["model"]["python"]["states"] = ["u", "v", "a"]
    refused(data, "model.parameters.a", "also the name of a state")
    data = python_scan()
    data["model"]["parameters"]["x1"] = 0.0
    refused(data, "model.parameters.x1", "also the name of a state")


def test_python_model_refuses_expression_tables():
    data = python_scan()
    data["model"]["observables"] = {"y": "x0"}
    refused(data, "model.observables", 'observables = "module:function"')
    data = python_scan()
    data["model"]["definitions"] = {"y": "x0"}
    refused(data, "model.definitions", "only for models given as expressions")
    data = python_scan()
    del data["model"]["parameters"]
    refused(data, "model.parameters", "missing")


def test_start_function_only_for_python_models():
    data = bioreactor()
    data["trace"][0]["start"] = "mypackage.mymodule:guess"
    refused(data, "trace[1].start", "only for Python models")
    data = python_scan()
    data["trace"][0]["start"] = "guess"
    refused(data, "trace[1].start", "module:function")
    data["trace"][0]["start"] = {"x0": 1.0, "x1": 2.0}
    refused(data, "trace[1].start", "missing start values for x2")
