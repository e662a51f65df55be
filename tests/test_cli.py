"""Command line: exit codes, error messages, nothing written on bad input,
end-to-end runs of the demo scans, inspect, plot and report."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from branchline.cli import main
from branchline.present.report import CAUTION

ROOT = Path(__file__).resolve().parents[1]

GOOD = """
title = "logistic stock with constant-effort harvest"
[model.parameters]
r = 1.0
F = 0.2
[model.equations]
N = "r*N*(1 - N) - F*N"
[[trace]]
vary = "F"
interval = [0.0, 0.5]
start = { N = 0.8 }
"""

# (id, text replacing part of GOOD or a whole file, words the message must contain)
BAD_SCANS = [
    (
        "unknown-key",
        GOOD.replace("interval =", "intervall ="),
        ["trace[1]", "intervall", "interval"],
    ),
    ("missing-state", GOOD.replace("start = { N = 0.8 }", "start = { }"), ["trace[1].start", "N"]),
    ("extra-state", GOOD.replace("{ N = 0.8 }", "{ N = 0.8, P = 1.0 }"), ["trace[1].start", "P"]),
    ("unknown-name", GOOD.replace("- F*N", "- G*N"), ["model.equations.N", "G"]),
    (
        "definition-loop",
        GOOD.replace(
            "[model.equations]", '[model.definitions]\na = "b + 1"\nb = "2*a"\n[model.equations]'
        ),
        ["model.definitions", "a", "b"],
    ),
    ("non-numeric", GOOD.replace("r = 1.0", 'r = "fast"'), ["model.parameters.r"]),
    ("reversed-interval", GOOD.replace("[0.0, 0.5]", "[0.5, 0.0]"), ["trace[1].interval"]),
    ("start-outside", GOOD.replace("[0.0, 0.5]", "[0.3, 0.5]"), ["trace[1].interval"]),
    ("steps-order", GOOD + "[steps]\ninitial = 0.5\nlargest = 0.1\n", ["steps"]),
    ("steps-negative", GOOD + "[steps]\nsmallest = -1e-8\n", ["steps.smallest"]),
    (
        "code-in-expression",
        GOOD.replace('"r*N*(1 - N) - F*N"', "\"__import__('os').system('touch pwned')\""),
        ["model.equations.N"],
    ),
    (
        "attribute-access",
        GOOD.replace('"r*N*(1 - N) - F*N"', '"N.__class__"'),
        ["model.equations.N"],
    ),
    ("huge-power", GOOD.replace('"r*N*(1 - N) - F*N"', '"9**9**9**9"'), ["model.equations.N"]),
    ("not-toml", "this is = = not toml", ["bad.toml"]),
    ("vary-unknown", GOOD.replace('vary = "F"', 'vary = "Q"'), ["trace[1].vary", "Q"]),
]


@pytest.mark.parametrize("case", BAD_SCANS, ids=[c[0] for c in BAD_SCANS])
def test_bad_scan_exits_2_names_file_and_key_and_writes_nothing(
    tmp_path, capsys, monkeypatch, case
):
    _, text, words = case
    monkeypatch.chdir(tmp_path)
    scan = tmp_path / "bad.toml"
    scan.write_text(text)
    out = tmp_path / "out"
    code = main(["run", str(scan), "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 2
    assert "bad.toml" in err
    for word in words:
        assert word in err
    assert "Traceback" not in err
    assert not out.exists()
    assert not (tmp_path / "runs").exists()
    assert not (tmp_path / "pwned").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.toml"]


def test_missing_scan_file(tmp_path, capsys):
    code = main(["run", str(tmp_path / "nowhere.toml"), "--out", str(tmp_path / "out")])
    assert code == 2
    assert "nowhere.toml" in capsys.readouterr().err
    assert not (tmp_path / "out").exists()


def test_run_writes_contract_files_and_round_trips(tmp_path):
    scan = tmp_path / "stock.toml"
    scan.write_text(GOOD)
    out = tmp_path / "out"
    assert main(["run", str(scan), "--out", str(out), "--quiet"]) == 0
    for name in (
        "points.csv",
        "events.csv",
        "events.json",
        "report.md",
        "diagram.png",
        "diagram.svg",
        "run.json",
    ):
        assert (out / name).is_file(), name
    points = pd.read_csv(out / "points.csv")
    assert list(points.columns) == [
        "trace",
        "step",
        "arclength",
        "F",
        "N",
        "stable",
        "unstable_count",
        "leading_real",
        "leading_imag",
    ]
    # Logistic growth with harvest F: N* = 1 - F/r exactly (elementary algebra).
    assert (abs(points["N"] - (1.0 - points["F"])) < 1e-10).all()
    # Trace order: arclength increases, step counts from 0, edges hit exactly.
    assert (points["arclength"].diff().dropna() > 0).all()
    assert list(points["step"]) == list(range(len(points)))
    assert points["F"].iloc[0] == 0.0 and points["F"].iloc[-1] == 0.5
    assert set(points["stable"].astype(str).str.lower()) == {"true"}
    run = json.loads((out / "run.json").read_text())
    assert run["status"] == "done"
    assert run["steps"]["max_points"] == 2000


def test_python_module_run_via_subprocess(tmp_path):
    scan = tmp_path / "stock.toml"
    scan.write_text(GOOD)
    done = subprocess.run(
        [sys.executable, "-m", "branchline", "run", str(scan), "--out", str(tmp_path / "o")],
        capture_output=True,
        text=True,
        cwd=tmp_path,
        check=False,
    )
    assert done.returncode == 0, done.stderr
    assert CAUTION in done.stdout


def test_inspect_prints_type_and_hyperbolicity(tmp_path, capsys):
    scan = tmp_path / "stock.toml"
    scan.write_text(GOOD)
    assert main(["inspect", str(scan), "--set", "F=0.5"]) == 0
    out = capsys.readouterr().out
    # At F = 0.5, N* = 0.5 and df/dN = r - 2 r N - F = -0.5 (elementary calculus).
    assert "N = 0.5" in out
    assert "-0.5" in out
    assert "hyperbolic: yes" in out


def test_inspect_rejects_bad_set(tmp_path, capsys):
    scan = tmp_path / "stock.toml"
    scan.write_text(GOOD)
    assert main(["inspect", str(scan), "--set", "Z=1"]) == 2
    assert "Z=1" in capsys.readouterr().err


def test_plot_and_report_from_saved_folder(tmp_path, capsys):
    scan = tmp_path / "stock.toml"
    scan.write_text(GOOD)
    out = tmp_path / "out"
    assert main(["run", str(scan), "--out", str(out), "--quiet"]) == 0
    (out / "diagram.png").unlink()
    assert main(["plot", str(out)]) == 0
    assert (out / "diagram.png").stat().st_size > 10_000
    target = tmp_path / "custom.svg"
    assert main(["plot", str(out), "--y", "N", "--format", "svg", "--output", str(target)]) == 0
    assert target.read_text().lstrip().startswith("<?xml")
    assert main(["plot", str(out), "--y", "nothing"]) == 2
    capsys.readouterr()
    assert main(["report", str(out)]) == 0
    assert CAUTION in capsys.readouterr().out
    assert main(["report", str(tmp_path)]) == 2


PYTHON_SCAN = """
title = "three-state python model"
[model.parameters]
a = 1.2
b = 2.5
c = 0.3
[model.python]
rhs = "models_for_tests:rhs"
jacobian = "models_for_tests:{jacobian}"
size = 3
observables = "models_for_tests:observables"
[[trace]]
vary = "b"
interval = [2.0, 3.0]
start = "models_for_tests:start"
"""


@pytest.mark.parametrize("jacobian, warned", [("jacobian", False), ("wrong_jacobian", True)])
def test_python_model_notice_and_jacobian_check(tmp_path, capsys, jacobian, warned):
    scan = tmp_path / "py.toml"
    scan.write_text(PYTHON_SCAN.format(jacobian=jacobian))
    out = tmp_path / "out"
    main(["run", str(scan), "--out", str(out)])
    err = capsys.readouterr().err
    assert "imports models_for_tests" in err and "runs its code" in err
    assert ("disagrees with finite differences" in err) is warned
    points = pd.read_csv(out / "points.csv")
    assert {"total", "scaled", "x0", "x1", "x2"} <= set(points.columns)


def test_python_model_raising_stops_gracefully_and_keeps_points(tmp_path, capsys):
    scan = tmp_path / "py.toml"
    scan.write_text(
        PYTHON_SCAN.format(jacobian="jacobian").replace(
            'rhs = "models_for_tests:rhs"', 'rhs = "models_for_tests:rhs_failing_past"'
        )
    )
    out = tmp_path / "out"
    code = main(["run", str(scan), "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 1
    assert "Traceback" not in err
    assert "models_for_tests:rhs_failing_past" in err and "KeyError" in err
    points = pd.read_csv(out / "points.csv")
    # Points below b = 2.8 were computed and kept, including the lower edge.
    assert points["b"].min() == 2.0
    assert points["b"].max() <= 2.8
    assert "KeyError" in (out / "report.md").read_text()


def test_results_are_reproducible_across_processes(tmp_path):
    # Two processes with different string-hash seeds must write identical files:
    # the compiled arithmetic may not depend on hash order, nor the SVG's ids.
    import os

    scan = ROOT / "scans" / "enriched_pond.toml"
    for seed in ("1", "2"):
        subprocess.run(
            [
                sys.executable,
                "-m",
                "branchline",
                "run",
                str(scan),
                "--out",
                str(tmp_path / seed),
                "--quiet",
            ],
            check=True,
            cwd=tmp_path,
            env={**os.environ, "PYTHONHASHSEED": seed},
        )
    for name in ("points.csv", "events.csv", "events.json", "report.md", "diagram.svg"):
        assert (tmp_path / "1" / name).read_bytes() == (tmp_path / "2" / name).read_bytes(), name
